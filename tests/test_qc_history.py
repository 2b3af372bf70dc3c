"""The QC history cannot be rewritten unseen: late days, date corrections, one-transaction date order,
imports under the entry rules, frozen events, crossovers and settings (issue 15 items 16-19; issue 13,
"Missing for the real job" item 2).

Invented scenario: "Darkroom B" of Harrow Bank Infirmary from 5 October 2026.
"""

from __future__ import annotations

import datetime as dt
import json
import sqlite3
import threading
from pathlib import Path

import pytest

from stripscan.archive import Archive, OutOfOrderError
from stripscan.cli.main import main
from stripscan.core.qc.records import QCValues
from stripscan.services.qc_log import load_processor_log
from stripscan.services.qc_recording import add_day

P = "Darkroom B"


def day(n: int) -> str:
    return (dt.date(2026, 10, 5) + dt.timedelta(days=n)).isoformat()


#: day(3) with its month typed wrong: a plausible past date that stops the days after day(3).
WRONG_MONTH = "2026-11-08"


def ok(capsys, *argv: object) -> str:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    assert code == 0, err
    return out


def refused(capsys, *argv: object) -> str:
    """The one line of a refusal: ``stripscan: error: ...`` on stderr and exit status 1."""
    code = main([str(a) for a in argv])
    _, err = capsys.readouterr()
    lines = err.strip().splitlines()
    assert code == 1 and len(lines) == 1 and lines[0].startswith("stripscan: error: "), err
    return lines[0]


def add(capsys, archive: Path, n: int, *extra: object, md: float = 1.20) -> str:
    return ok(capsys, "qc", "add", "--archive", archive, "--processor", P, "--date", day(n), "--base-fog", 0.18,
              "--mid-density", md, "--density-difference", 1.80, *extra)


def status(capsys, archive: Path) -> dict:
    return json.loads(ok(capsys, "qc", "status", "--archive", archive, "--processor", P, "--json"))


@pytest.fixture
def archive(tmp_path: Path) -> Path:
    return tmp_path / "harrow-bank.sqlite3"


def test_a_missed_day_is_entered_late_marked_and_the_levels_take_the_days_in_date_order(capsys, archive):
    """Issue 13, missing item 2 (backfilling): a missed earlier day is accepted with --late, marked as
    entered late with its entry time, and the operating levels are the mean of the first five days by date."""
    mids = {0: 1.20, 1: 1.22, 3: 1.18, 4: 1.21, 5: 1.30}
    add(capsys, archive, 0, "--new-processor", md=mids[0])
    for n in (1, 3, 4, 5):
        add(capsys, archive, n, md=mids[n])
    # Day 2 was missed.  Without --late it is refused: a year typed wrong must not slip in.
    line = refused(capsys, "qc", "add", "--archive", archive, "--processor", P, "--date", day(2), "--base-fog",
                   "0.18", "--mid-density", "1.10", "--density-difference", "1.80")
    assert "dates out of order" in line and "--late" in line and "nothing was stored" in line
    before = status(capsys, archive)
    # Five days 0, 1, 3, 4, 5 set the levels before the missed day is known.
    assert before["operating_levels"]["mid_density"] == pytest.approx(
        sum(mids.values()) / 5, abs=1e-4)  # common practice: mean of the first five days
    out = add(capsys, archive, 2, "--late", md=1.10)
    assert "entered late" in out and "judged again" in out
    after = status(capsys, archive)
    # common practice: the operating level is the mean of the first five days, taken in date order
    assert after["operating_levels"]["mid_density"] == pytest.approx((1.20 + 1.22 + 1.10 + 1.18 + 1.21) / 5,
                                                                     abs=1e-4)
    with Archive.open(archive) as opened:
        late = [e for e in opened.list_qc_entries(P) if e.entered_late]
    assert [e.date for e in late] == [day(2)] and late[0].recorded_at is not None
    listing = ok(capsys, "qc", "list", "--archive", archive, "--processor", P)
    row = next(line for line in listing.splitlines() if day(2) in line)
    assert f"entered late on {late[0].recorded_at[:10]}" in row


def test_a_year_typed_wrong_is_fixed_by_a_correction_of_the_date(capsys, archive):
    """Issue 15 item 17: 2062 typed for 2026 blocked the log for good; a correction can now fix the date
    (a new entry naming the one it corrects), and the following days go in.  A date in the future is now
    refused at entry (item 13), so the wrong date that still gets in is a plausible one: a month typed wrong."""
    add(capsys, archive, 0, "--new-processor")
    for n in (1, 2):
        add(capsys, archive, n)
    assert "lies outside" in refused(capsys, "qc", "add", "--archive", archive, "--processor", P, "--date",
                                     "2062-10-08", "--base-fog", "0.18", "--mid-density", "1.20",
                                     "--density-difference", "1.80")
    ok(capsys, "qc", "add", "--archive", archive, "--processor", P, "--date", WRONG_MONTH, "--base-fog", "0.18",
       "--mid-density", "1.20", "--density-difference", "1.80")
    assert "dates out of order" in refused(capsys, "qc", "add", "--archive", archive, "--processor", P,
                                           "--date", day(4), "--base-fog", "0.18", "--mid-density", "1.2",
                                           "--density-difference", "1.8")
    with Archive.open(archive) as opened:
        wrong = next(e for e in opened.list_qc_entries(P) if e.date == WRONG_MONTH)
    out = ok(capsys, "qc", "correct", wrong.id, "--archive", archive, "--date", day(3),
             "--reason", "month typed 11 for 10")
    assert f"correction of entry {wrong.id}" in out and f"date '{day(3)}'" in out
    add(capsys, archive, 4)  # the log goes on
    with Archive.open(archive) as opened:
        entries = opened.list_qc_entries(P)
        plog = load_processor_log(opened, P)
    fixed = next(e for e in entries if e.corrects == wrong.id)
    assert fixed.date == day(3) and not fixed.entered_late and fixed.reason == "month typed 11 for 10"
    assert next(e for e in entries if e.id == wrong.id).date == WRONG_MONTH  # kept as it was
    assert [d.date.isoformat() for d in plog.log.entries] == [day(n) for n in range(5)]


def test_a_date_corrected_back_into_the_log_is_marked_late_and_a_taken_day_is_refused(capsys, archive):
    """Issue 15 item 17: a date moved before the latest day is marked entered late; onto a day that has an
    entry it is refused, and nothing is stored."""
    for n in (0, 1, 3):
        add(capsys, archive, n, *(() if n else ("--new-processor",)))
    ok(capsys, "qc", "add", "--archive", archive, "--processor", P, "--date", day(4), "--base-fog", "0.18",
       "--mid-density", "1.2", "--density-difference", "1.8")
    with Archive.open(archive) as opened:
        last = opened.list_qc_entries(P)[-1]
    line = refused(capsys, "qc", "correct", last.id, "--archive", archive, "--date", day(1), "--reason", "wrong day")
    assert f"already has a QC entry for {day(1)}" in line
    ok(capsys, "qc", "correct", last.id, "--archive", archive, "--date", day(2), "--reason", "strip of the 7th")
    with Archive.open(archive) as opened:
        moved = opened.list_qc_entries(P, since=day(2), until=day(2))
    assert [(e.corrects, e.entered_late) for e in moved] == [(last.id, True)]


def test_two_writers_at_once_cannot_both_pass_the_date_order_rule(tmp_path):
    """Issue 15 item 18: the date-order check ran outside the write transaction, so two `qc add` at once
    stored a day before a later one unmarked.  Each trial races an earlier and a later day."""
    path = tmp_path / "race.sqlite3"
    with Archive.open(path) as opened:
        add_day(opened, P, dt.date(2026, 10, 5), values=QCValues(0.18, 1.2, 1.8), new_processor=True)
    refused_count = 0
    for trial in range(12):
        start = dt.date(2026, 10, 6) + dt.timedelta(days=3 * trial)
        barrier = threading.Barrier(2)
        results: list[object] = []

        def write(day: dt.date) -> None:
            with Archive.open(path, busy_timeout_ms=20000) as mine:
                plog_ready = load_processor_log(mine, P)  # the read that used to decide, before the write
                assert plog_ready is not None
                barrier.wait()
                try:
                    results.append(add_day(mine, P, day, values=QCValues(0.18, 1.2, 1.8)).entry)
                except OutOfOrderError as exc:
                    results.append(exc)

        threads = [threading.Thread(target=write, args=(start + dt.timedelta(days=1),)),
                   threading.Thread(target=write, args=(start,))]
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join()
        refused_count += sum(isinstance(r, OutOfOrderError) for r in results)
    with Archive.open(path) as opened:
        entries = sorted(opened.list_qc_entries(P), key=lambda e: e.id)
    # Stored in id order, no entry that is not marked late is dated before an earlier-stored one.
    latest = ""
    for entry in entries:
        assert entry.entered_late or entry.date >= latest, (entry, latest)
        latest = max(latest, entry.date)
    assert len(entries) + refused_count == 1 + 24


def _export(capsys, archive: Path, out: Path) -> dict:
    ok(capsys, "archive", "export", "--archive", archive, "--format", "json", "-o", out)
    return json.loads(out.read_text(encoding="utf-8"))


def test_an_edited_export_adding_a_back_dated_entry_is_imported_marked_late(capsys, archive, tmp_path):
    """Issue 15 item 16: an edited export that adds a back-dated QC entry was accepted silently and re-judged
    every past day; it now goes in marked as entered late and the import says so."""
    for n in range(0, 7):
        if n != 2:
            add(capsys, archive, n, *(() if n else ("--new-processor",)))
    data = _export(capsys, archive, tmp_path / "export.json")
    forged = dict(data["qc_entries"][-1], id=99, date=day(2), mid_density=1.9, recorded_at="2026-10-12T08:00:00Z")
    data["qc_entries"].append(forged)
    edited = tmp_path / "edited.json"
    edited.write_text(json.dumps(data), encoding="utf-8")
    fresh = tmp_path / "other.sqlite3"
    out = ok(capsys, "archive", "import", "--archive", fresh, edited)
    assert "entered late" in out and "99" in out
    with Archive.open(fresh) as opened:
        entry = opened.get_qc_entry(99)
        assert entry.entered_late and entry.date == day(2)
        assert not any(e.entered_late for e in opened.list_qc_entries(P) if e.id != 99)
    listing = ok(capsys, "qc", "list", "--archive", fresh, "--processor", P)
    assert "entered late" in next(line for line in listing.splitlines() if line.startswith("99 "))


def test_an_import_adding_a_back_dated_event_is_refused_whole(capsys, archive, tmp_path):
    """Issue 15 item 16: an event dated before days already in the log would re-judge them."""
    for n in range(0, 5):
        add(capsys, archive, n, *(() if n else ("--new-processor",)))
    data = _export(capsys, archive, tmp_path / "export.json")
    data["qc_events"] = [{"id": 1, "processor": P, "date": day(1), "kind": "service", "note": "edited in"}]
    data["qc_entries"] = data["qc_entries"][:0]
    edited = tmp_path / "edited.json"
    edited.write_text(json.dumps(data), encoding="utf-8")
    line = refused(capsys, "archive", "import", "--archive", archive, edited)
    assert "QC event 1" in line and "before" in line and "nothing was imported" in line
    with Archive.open(archive) as opened:
        assert opened.list_qc_events(P) == []


def test_events_crossovers_and_settings_rows_cannot_be_changed_with_plain_sql(capsys, archive):
    """Issue 15 item 19: events, crossovers and QC settings were open to UPDATE and DELETE."""
    add(capsys, archive, 0, "--new-processor")
    ok(capsys, "qc", "event", "--archive", archive, "--processor", P, "--date", day(1), "--kind", "service")
    with Archive.open(archive) as opened:
        opened.add_crossover(P, day(1), {"result": {"note": "invented"}})
    conn = sqlite3.connect(archive, isolation_level=None)
    try:
        for table in ("qc_events", "crossovers", "qc_settings"):
            with pytest.raises(sqlite3.IntegrityError, match="never changed"):
                conn.execute(f"UPDATE {table} SET processor = processor")
            with pytest.raises(sqlite3.IntegrityError, match="never deleted"):
                conn.execute(f"DELETE FROM {table}")
            with pytest.raises(sqlite3.IntegrityError, match="never replaced"):
                conn.execute(f"INSERT OR REPLACE INTO {table} SELECT * FROM {table}")
    finally:
        conn.close()


def test_qc_limits_keeps_the_settings_before_with_their_time_and_reason(capsys, archive):
    """Issue 15 item 19: `qc limits` replaced the settings without keeping the old ones."""
    add(capsys, archive, 0, "--new-processor")
    ok(capsys, "qc", "limits", "--archive", archive, "--processor", P, "--warning", "0.08",
       "--reason", "site programme asks for a tighter warning tier")
    out = ok(capsys, "qc", "limits", "--archive", archive, "--processor", P, "--md-dd", "0.12")
    assert "the settings before are kept" in out
    with Archive.open(archive) as opened:
        rows = opened.qc_settings_history(P)
        assert opened.get_qc_settings(P) == rows[-1]
    assert len(rows) == 3  # the log's start, then two changes
    assert rows[0].settings["limits"]["md_dd_warning"] == pytest.approx(0.10)  # common practice: ±0.10 tier
    assert rows[1].reason == "site programme asks for a tighter warning tier"
    assert rows[2].reason == "changed: md_dd_action 0.12"
    assert rows[2].settings["limits"]["md_dd_action"] == pytest.approx(0.12)
    shown = ok(capsys, "qc", "limits", "--archive", archive, "--processor", P, "--history")
    assert "site programme asks for a tighter warning tier" in shown and "changed: md_dd_action 0.12" in shown


def test_late_days_date_corrections_and_settings_history_survive_export_and_import(capsys, archive, tmp_path):
    """Export format 3 carries what schema 4 added; importing it into an empty archive gives the same log."""
    add(capsys, archive, 0, "--new-processor")
    add(capsys, archive, 2)
    ok(capsys, "qc", "add", "--archive", archive, "--processor", P, "--date", WRONG_MONTH, "--base-fog", "0.18",
       "--mid-density", "1.2", "--density-difference", "1.8")
    with Archive.open(archive) as opened:
        wrong = opened.list_qc_entries(P)[-1].id
    ok(capsys, "qc", "correct", wrong, "--archive", archive, "--date", day(3), "--reason", "year typed wrong")
    add(capsys, archive, 1, "--late")
    add(capsys, archive, 4)
    ok(capsys, "qc", "limits", "--archive", archive, "--processor", P, "--md-dd", "0.12", "--reason", "local rule")
    data = _export(capsys, archive, tmp_path / "all.json")
    assert data["format_version"] == 3 and len(data["qc_settings"]) == 2
    copy = tmp_path / "copy.sqlite3"
    out = ok(capsys, "archive", "import", "--archive", copy, tmp_path / "all.json")
    assert "entered late" not in out  # the late day was marked in the file already
    with Archive.open(archive) as original, Archive.open(copy) as imported:
        assert imported.list_qc_entries() == original.list_qc_entries()
        assert imported.qc_settings_history() == original.qc_settings_history()
        assert imported.verify().ok
    again = ok(capsys, "archive", "import", "--archive", copy, tmp_path / "all.json")
    assert "nothing new" in again
