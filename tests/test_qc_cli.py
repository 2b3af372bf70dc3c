"""``stripscan qc``: typed and scanned days, status JSON, chart PNG, events, limits, demo month, one-line errors.

Invented scenario: "Darkroom B" of Harrow Bank Infirmary from 5 October
2026, and the bundled demo's "Processor 1" in November 2026.
"""

from __future__ import annotations

import datetime
import json
from pathlib import Path

import imageio.v3 as iio
import numpy as np
import pytest

from stripscan import CAUTION
from stripscan.archive import Archive, Processor
from stripscan.cli.main import main
from stripscan.sim.objects import StripSpec
from stripscan.sim.simulate import simulate_scan, write_tiff
from stripscan.sim.demo_data import daily_film, demo_files, scanner_for
from stripscan.services.qc_log import load_processor_log

P = "Darkroom B"


def day(n: int) -> str:
    return (datetime.date(2026, 10, 5) + datetime.timedelta(days=n)).isoformat()


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def ok(capsys, *argv: str) -> str:
    code, out, err = run(capsys, *argv)
    assert code == 0, err
    return out


def refused(capsys, *argv: str) -> str:
    """The one line of a refusal: ``stripscan: error: ...`` on stderr and exit status 1."""
    code, out, err = run(capsys, *argv)
    lines = err.strip().splitlines()
    assert code == 1 and len(lines) == 1 and lines[0].startswith("stripscan: error: "), err
    return lines[0]


def add(capsys, archive: Path, n: int, bf=0.18, md=1.20, dd=1.80, *extra: str) -> str:
    return ok(capsys, "qc", "add", "--archive", archive, "--processor", P, "--date", day(n), "--base-fog", bf,
              "--mid-density", md, "--density-difference", dd, *extra)


def status(capsys, archive: Path, processor: str = P) -> dict:
    return json.loads(ok(capsys, "qc", "status", "--archive", archive, "--processor", processor, "--json"))


def stored_days(archive: Path) -> list[str]:
    with Archive.open(archive, read_only=True) as opened:
        return [e.date for e in opened.list_qc_entries(P)]


@pytest.fixture
def archive(tmp_path: Path) -> Path:
    return tmp_path / "harrow-bank.sqlite3"


@pytest.fixture
def baseline(capsys, archive: Path) -> Path:
    add(capsys, archive, 0, 0.18, 1.20, 1.80, "--new-processor")
    for n in range(1, 5):
        add(capsys, archive, n)
    return archive


# --------------------------------------------------------------------------
# Typed days and the limits through the command line


def test_limits_at_and_just_past_the_boundaries(capsys, baseline):
    out = ok(capsys, "qc", "limits", "--archive", baseline, "--processor", P, "--no-warning")
    assert "control limit ±0.150 OD, warning tier none" in out
    add(capsys, baseline, 5, 0.18, 1.35, 1.80)
    # 21 CFR 900.12(e)(1): mid-density within ±0.15 of its level; exactly 0.15 off is within.
    assert status(capsys, baseline)["latest"]["verdict"] == "ok"
    out = add(capsys, baseline, 6, 0.18, 1.36, 1.80)
    assert "ACT" in out and "repeat the strip" in out and CAUTION in out
    data = status(capsys, baseline)
    assert data["latest"]["verdict"] == "action"  # 21 CFR 900.12(e)(1): 0.16 is past ±0.15
    assert data["latest"]["deviations"]["mid_density"] == pytest.approx(0.16)
    add(capsys, baseline, 7, 0.18, 1.20, 1.65)
    assert status(capsys, baseline)["latest"]["verdict"] == "ok"  # density difference -0.15: within (same rule)
    add(capsys, baseline, 8, 0.21, 1.20, 1.80)
    assert status(capsys, baseline)["latest"]["verdict"] == "ok"  # base+fog +0.03: within (21 CFR 900.12(e)(1))
    add(capsys, baseline, 9, 0.22, 1.20, 1.80)
    assert status(capsys, baseline)["latest"]["verdict"] == "action"  # base+fog +0.04: past +0.03


def test_warning_tier_and_status_json(capsys, baseline):
    add(capsys, baseline, 5, 0.18, 1.31, 1.80, "--note", "fresh box", "--action", "none needed")
    data = status(capsys, baseline)
    assert data["processor"] == P
    assert data["operating_levels"]["mid_density"] == pytest.approx(1.20)  # mean of 5 days, FDA guidance for MQSA
    assert {"base_fog", "mid_density", "density_difference"} <= set(data["operating_levels"])
    latest = data["latest"]
    assert {"date", "values", "deviations", "verdict", "rules"} <= set(latest)
    assert latest["date"] == day(5) and latest["values"]["mid_density"] == pytest.approx(1.31)
    assert latest["verdict"] == "warning"  # +0.11 past the ±0.10 warning tier: common practice, from memory
    assert data["caution"] == CAUTION and latest["advice"].endswith(CAUTION)
    earlier = json.loads(ok(capsys, "qc", "status", "--archive", baseline, "--processor", P, "--json", "--on", day(4)))
    assert earlier["latest"]["date"] == day(4) and earlier["latest"]["verdict"] == "ok"
    out = ok(capsys, "qc", "list", "--archive", baseline, "--processor", P)
    assert "fresh box; action: none needed" in out and "+0.110" in out and "6 day(s), 0 event(s)" in out


def test_status_of_every_processor(capsys, baseline):
    ok(capsys, "qc", "add", "--archive", baseline, "--processor", "Darkroom C", "--new-processor", "--date", day(0),
       "--base-fog", 0.2, "--mid-density", 1.1, "--density-difference", 1.7)
    data = json.loads(ok(capsys, "qc", "status", "--archive", baseline, "--json"))
    assert [d["processor"] for d in data] == [P, "Darkroom C"]
    assert data[0]["latest"]["verdict"] == "ok"
    assert data[1]["baseline"] == {"in_progress": True, "days": 1, "needed": 5, "set_by": None} and data[1]["operating_levels"] is None
    out = ok(capsys, "qc", "status", "--archive", baseline)
    assert f"{P}: WITHIN LIMITS" in out and "Darkroom C: BASELINE IN PROGRESS" in out


def test_an_event_restarts_the_baseline_and_limits_show(capsys, baseline):
    out = ok(capsys, "qc", "event", "--archive", baseline, "--processor", P, "--date", day(5), "--kind",
             "new_chemistry", "--note", "tanks refilled")
    assert "new chemistry on 2026-10-10 (tanks refilled)" in out and "mean of the first 5 strips" in out
    add(capsys, baseline, 5, 0.18, 1.50, 1.80)
    data = status(capsys, baseline)
    # Common practice: operating levels are re-established after new chemistry; +0.30 is not judged yet.
    assert data["operating_levels"] is None and data["latest"]["verdict"] == "warning"
    assert data["baseline"]["days"] == 1
    out = ok(capsys, "qc", "limits", "--archive", baseline, "--processor", P, "--baseline-days", "3")
    assert "mean of the first 3 strips" in out and "judged again" in out
    add(capsys, baseline, 6, 0.18, 1.52, 1.80)
    add(capsys, baseline, 7, 0.18, 1.54, 1.80)
    assert status(capsys, baseline)["operating_levels"]["mid_density"] == pytest.approx(1.52)


def test_qc_list_gives_the_verdict_qc_add_and_qc_status_gave(capsys, baseline):
    """Issue 13, wrong output 5: ``qc list`` and ``qc status`` share one verdict, trend rules included."""
    said = {}
    # Density difference falls 0.01 a strip from its level 1.80: each strip alone is within ±0.10, but
    # five strips in a row, each lower, fire the drift rule (drift of 5, common practice, from memory).
    for n, dd in zip(range(5, 10), (1.79, 1.78, 1.77, 1.76, 1.75)):
        out = add(capsys, baseline, n, 0.18, 1.20, dd)
        said[day(n)] = out.splitlines()[1].split(": ")[1].split(" (")[0]
        on = json.loads(ok(capsys, "qc", "status", "--archive", baseline, "--processor", P, "--json", "--on", day(n)))
        assert {"ok": "WITHIN LIMITS", "warning": "WARNING"}[on["latest"]["verdict"]] == said[day(n)]
    assert said == {day(5): "WITHIN LIMITS", day(6): "WITHIN LIMITS", day(7): "WITHIN LIMITS",
                    day(8): "WARNING", day(9): "WARNING"}
    listed = {}
    for line in ok(capsys, "qc", "list", "--archive", baseline, "--processor", P).splitlines():
        cells = line.split()
        if len(cells) > 2 and cells[1] in said:
            listed[cells[1]] = "WARNING" if "WARNING" in line else "WITHIN LIMITS" if "WITHIN LIMITS" in line else "?"
    assert listed == said


def test_status_words_with_no_strip_and_after_a_complete_baseline(capsys, baseline):
    """Issue 13, wrong output 8: "(no strip yet)", not "(latest strip no strip yet)"; and the status JSON's
    baseline counts the strips that set the levels once it is complete, not 0."""
    data = status(capsys, baseline)
    # FDA guidance for MQSA: operating levels from the first 5 days.
    assert data["baseline"] == {"in_progress": False, "days": 5, "needed": 5, "set_by": "baseline"}
    ok(capsys, "qc", "event", "--archive", baseline, "--processor", "Darkroom C", "--new-processor",
       "--date", day(0), "--kind", "service")
    out = ok(capsys, "qc", "status", "--archive", baseline, "--processor", "Darkroom C")
    assert out.startswith("Darkroom C: BASELINE IN PROGRESS (no strip yet)")
    assert "latest strip no strip" not in out
    assert status(capsys, baseline, "Darkroom C")["baseline"] == {"in_progress": True, "days": 0, "needed": 5,
                                                                  "set_by": None}


def test_a_missing_archive_says_how_one_is_made(capsys, tmp_path):
    """Issue 13, wrong output 8: ``qc add`` on a missing archive file says more than "X does not exist": that
    --new-processor starts one, or how else an archive is made."""
    missing = tmp_path / "typo.sqlite3"
    line = refused(capsys, "qc", "add", "--archive", missing, "--processor", P, "--date", day(0), "--base-fog", 0.18,
                   "--mid-density", 1.20, "--density-difference", 1.80)
    assert f"{missing} does not exist" in line and "--new-processor" in line and "archive add" in line
    assert not missing.exists()  # nothing is made without --new-processor


# --------------------------------------------------------------------------
# Repeat strips and corrections


def test_a_repeat_strip_is_kept_beside_the_first_and_judged_instead(capsys, baseline):
    out = add(capsys, baseline, 5, 0.18, 1.36, 1.80)
    assert "ACT" in out and "stripscan qc add --repeat" in out  # 21 CFR 900.12(e)(1): +0.16 is past ±0.15
    line = refused(capsys, "qc", "add", "--archive", baseline, "--processor", P, "--date", day(5), "--base-fog",
                   "0.18", "--mid-density", "1.22", "--density-difference", "1.80")
    assert str(baseline) in line and "already has a QC entry for 2026-10-10" in line and "duplicate day" in line
    assert "(give --repeat)" in line
    out = add(capsys, baseline, 5, 0.18, 1.22, 1.80, "--repeat", "--note", "after fresh replenisher")
    assert "stored entry 7: 'Darkroom B' 2026-10-10 (manual, repeat of entry 6)" in out
    assert "entry 6 (ACT): repeated by entry 7, not used" in out
    assert "entry 7 (WITHIN LIMITS): repeat of entry 6; counts for the day" in out
    data = status(capsys, baseline)
    # Common practice: the repeat confirms or clears the first result; here it clears it.
    assert data["latest"]["verdict"] == "ok" and data["latest"]["values"]["mid_density"] == pytest.approx(1.22)
    assert [(e["entry"], e["in_use"], e["verdict"]) for e in data["latest"]["entries"]] == [
        (6, False, "action"), (7, True, "ok")]
    assert stored_days(baseline) == [day(n) for n in range(5)] + [day(5)] * 2
    out = ok(capsys, "qc", "list", "--archive", baseline, "--processor", P)
    assert "6 day(s), 0 event(s); 7 entries kept, 1 repeat strip(s), 0 correction(s)" in out
    first = next(line for line in out.splitlines() if line.startswith("6 "))
    assert "+0.160" in first and " ACT " in first and " no " in first and "repeated by entry 7, not used" in first
    line = refused(capsys, "qc", "add", "--archive", baseline, "--processor", P, "--date", day(6), "--base-fog",
                   "0.18", "--mid-density", "1.2", "--density-difference", "1.8", "--repeat")
    assert "no QC entry for 2026-10-11 to repeat" in line


def test_a_correction_needs_a_reason_keeps_the_wrong_entry_and_rejudges(capsys, baseline):
    add(capsys, baseline, 5, 0.18, 1.12, 1.80)  # 1.21 read on the densitometer, 1.12 typed
    assert status(capsys, baseline)["latest"]["verdict"] == "ok"  # -0.08: within the ±0.10 tier (common practice)
    line = refused(capsys, "qc", "correct", "6", "--archive", baseline, "--mid-density", "1.21")
    assert "--reason is needed" in line
    line = refused(capsys, "qc", "correct", "6", "--archive", baseline, "--reason", "typo")
    assert "give the right value(s) for QC entry 6" in line
    line = refused(capsys, "qc", "correct", "60", "--archive", baseline, "--mid-density", "1.21", "--reason", "typo")
    assert "QC entry 60 is not in the archive" in line
    # A baseline day mistyped: the operating levels follow the correction (mean of 5 days, FDA guidance).
    out = ok(capsys, "qc", "correct", "2", "--archive", baseline, "--mid-density", "1.30", "--reason",
             "1.30 read, 1.20 typed")
    assert "stored entry 7: correction of entry 2 ('Darkroom B', 2026-10-06): mid-density 1.300 (was 1.200)" in out
    assert "reason: 1.30 read, 1.20 typed" in out and "entry 2 of 2026-10-06 is kept" in out
    data = status(capsys, baseline)
    assert data["operating_levels"]["mid_density"] == pytest.approx((4 * 1.20 + 1.30) / 5)
    line = refused(capsys, "qc", "correct", "2", "--archive", baseline, "--mid-density", "1.31", "--reason", "again")
    assert "QC entry 2 was already corrected by entry 7; correct that one instead" in line
    ok(capsys, "qc", "correct", "7", "--archive", baseline, "--mid-density", "1.29", "--reason", "read again")
    out = ok(capsys, "qc", "list", "--archive", baseline, "--processor", P)
    assert "7 entries kept" not in out and "8 entries kept, 0 repeat strip(s), 2 correction(s)" in out
    assert "corrected by entry 7, not used" in out and "correction of entry 7 (read again)" in out
    with Archive.open(baseline, read_only=True) as opened:
        assert opened.get_qc_entry(2).mid_density == 1.20  # the wrong entry is kept as it was


# --------------------------------------------------------------------------
# Bad input: one line, exit 1, nothing stored


def test_bad_input_is_answered_in_one_line_and_stores_nothing(capsys, baseline, tmp_path):
    before = stored_days(baseline)
    typed = ["--base-fog", "0.18", "--mid-density", "1.2", "--density-difference", "1.8"]
    line = refused(capsys, "qc", "add", "--archive", baseline, "--processor", "Darkroom Z", "--date", day(5), *typed)
    assert "processor 'Darkroom Z' is not in the archive" in line and "--new-processor" in line
    line = refused(capsys, "qc", "add", "--archive", baseline, "--processor", P, "--date", day(2), *typed)
    assert "dates out of order: 2026-10-07 is before" in line
    line = refused(capsys, "qc", "add", "--archive", baseline, "--processor", P, "--date", day(4), *typed)
    assert "already has a QC entry for 2026-10-09" in line and "duplicate day" in line
    line = refused(capsys, "qc", "add", "--archive", baseline, "--processor", P, "--date", "2026-10-32", *typed)
    assert "--date '2026-10-32' is not a calendar date" in line
    line = refused(capsys, "qc", "add", "--archive", baseline, "--processor", P, *typed)
    assert "--date is needed" in line
    line = refused(capsys, "qc", "add", "--archive", baseline, "--processor", P, "--date", day(5), *typed[:4])
    assert "missing: --density-difference" in line
    line = refused(capsys, "qc", "add", "scan.tif", "--archive", baseline, "--processor", P, "--date", day(5), *typed)
    assert "not both" in line
    line = refused(capsys, "qc", "event", "--archive", baseline, "--processor", P, "--date", day(1), "--kind",
                   "service")
    assert "dates out of order: the event of 2026-10-06" in line
    line = refused(capsys, "qc", "add", "--archive", baseline, "--date", day(5), *typed)
    assert "--processor is needed" in line
    line = refused(capsys, "qc", "event", "--archive", baseline, "--processor", P, "--date", day(5), "--kind",
                   "repair")
    assert "unknown event kind 'repair'" in line
    line = refused(capsys, "qc", "status", "--archive", tmp_path / "nowhere.sqlite3")
    assert "does not exist" in line
    line = refused(capsys, "qc", "chart", "--archive", baseline, "--processor", P, "-o", tmp_path / "c.png",
                   "--month", "2026-12")
    assert "no QC entries in 2026-12" in line and not (tmp_path / "c.png").exists()
    line = refused(capsys, "qc", "status", "--archive", baseline, "--processor", "Darkroom Z")
    assert "processor 'Darkroom Z' is not in the archive" in line
    assert stored_days(baseline) == before
    with Archive.open(baseline, read_only=True) as opened:
        assert opened.list_qc_events(P) == [] and [p.name for p in opened.list_processors()] == [P]


# --------------------------------------------------------------------------
# Scans


@pytest.fixture(scope="module")
def demo():
    return demo_files()


def test_scanned_days_keep_the_baseline_steps(capsys, archive, demo, tmp_path):
    strips = [StripSpec(film=daily_film(k), center_mm=(25.0 + 40.0 * i, 97.5), angle_deg=90.0)
              for i, k in enumerate((0, 6))]
    two = tmp_path / "two.tif"
    write_tiff(two, simulate_scan(strips, platen_mm=(90.0, 195.0), dpi=150.0, scanner=scanner_for(300)))
    empty = tmp_path / "empty.tif"
    write_tiff(empty, simulate_scan([], platen_mm=(50.0, 120.0), dpi=150.0, scanner=scanner_for(301)))
    scan = ["--archive", archive, "--processor", P, "--calibration", demo.calibration]
    line = refused(capsys, "qc", "add", two, *scan, "--date", day(0), "--new-processor")
    assert "two.tif holds 2 strips" in line and "--strip N" in line
    line = refused(capsys, "qc", "add", empty, *scan, "--date", day(0), "--new-processor")
    assert "empty.tif" in line and "no film found" in line
    assert not archive.exists() or stored_days(archive) == []
    out = ok(capsys, "qc", "add", two, *scan, "--date", day(0), "--strip", "1", "--new-processor")
    assert "QC steps chosen on this strip" in out
    first = status(capsys, archive)["steps"]
    out = ok(capsys, "qc", "add", two, *scan, "--date", day(1), "--strip", "2", "--lot", "QC-LOT-7")
    assert "lot 'QC-LOT-7' was not in the archive" in out
    data = status(capsys, archive)
    assert data["steps"] == first  # the same steps every day, chosen at baseline
    assert f"at steps {first['mid_step']} (mid-density)" in out
    with Archive.open(archive, read_only=True) as opened:
        entries = opened.list_qc_entries(P)
        snapshot = opened.get_snapshot(entries[1].snapshot_id)
    assert entries[0].snapshot_id is None and "[read from two.tif, strip 1" in entries[0].note
    od = {s.step: s.od for s in snapshot.strip.steps}
    assert entries[1].mid_density == pytest.approx(od[first["mid_step"]], abs=5e-5)  # the snapshot keeps 4 decimals
    assert snapshot.strip.index == 2 and snapshot.lot_id == "QC-LOT-7"


def test_a_scan_without_a_calibration_is_refused_before_anything_is_stored(capsys, baseline, tmp_path):
    strip = StripSpec(film=daily_film(0), center_mm=(25.0, 97.5), angle_deg=90.0)
    scan = tmp_path / "daily.tif"
    write_tiff(scan, simulate_scan([strip], platen_mm=(50.0, 195.0), dpi=150.0, scanner=scanner_for(302)))
    line = refused(capsys, "qc", "add", scan, "--archive", baseline, "--processor", P, "--date", day(5))
    # Direct mode reads log10(I0/I) capped by the scanner's flare, not densitometer density (common practice).
    assert "daily.tif was read without a calibration" in line and "--calibration CAL.json" in line
    assert "step tablet" in line and "--base-fog" in line and "nothing was stored" in line
    assert stored_days(baseline) == [day(n) for n in range(5)]


# --------------------------------------------------------------------------
# The demo month, its status and its chart


@pytest.fixture(scope="module")
def demo_archive(tmp_path_factory, demo) -> Path:
    path = tmp_path_factory.mktemp("demo") / "demo.sqlite3"
    # As the demo lot archive leaves it: the processor known, its chemistry change recorded in free words.
    with Archive.open(path) as archive:
        archive.add_processor(Processor("Processor 1"))
        archive.add_qc_event("Processor 1", "2026-11-17", "chemistry change", "developer and fixer renewed")
    assert main(["qc", "demo", "--archive", str(path)]) == 0
    return path


def test_the_demo_month(capsys, demo_archive):
    with Archive.open(demo_archive, read_only=True) as opened:
        plog = load_processor_log(opened, "Processor 1")
        entries = opened.list_qc_entries("Processor 1")
    days = plog.log.days
    assert len(days) == 29 and days[0].entry.date == datetime.date(2026, 11, 2)
    assert days[-1].entry.date == datetime.date(2026, 11, 30)
    # Every day's strip in use is within the control limits; the one past them was repeated the same day.
    assert not [d for d in days if d.verdict and d.verdict.verdict == "action"]
    tenth = [item for item in plog.logged() if item.date == datetime.date(2026, 11, 10)]
    first, repeat = tenth
    assert first.verdict.verdict == "action" and not first.state.in_use  # 21 CFR 900.12(e)(1): past ±0.15
    assert "Replenisher pump" in first.entry.action
    # Common practice: the repeat strip confirms or clears the first result, and is the day's value.
    assert repeat.entry.repeat_of == first.entry.id and repeat.state.in_use and repeat.verdict.verdict == "ok"
    assert repeat.entry.note.startswith("Repeat strip after the correction")
    assert [e.source for e in entries].count("scan") == 12 and [e.source for e in entries].count("manual") == 18
    # The chemistry change already stored is used, not recorded twice; it restarts the baseline.
    assert [(e.date, e.kind) for e in plog.log.events] == [(datetime.date(2026, 11, 17), "new_chemistry")]
    # A tiring developer: density difference falls on each strip up to the day before the limit was
    # broken (drift of 5, common practice, from memory); the repeat after the correction ends it.
    assert any(f.rule == "drift" and f.quantity == "density_difference" and f.dates[-1] == datetime.date(2026, 11, 9)
               for f in plog.log.findings)
    choices = plog.setup.step_choices
    assert [c.since for c in choices] == [datetime.date(2026, 11, 2), datetime.date(2026, 11, 17)]
    data = status(capsys, demo_archive, "Processor 1")
    assert data["latest"]["verdict"] == "ok" and data["latest"]["date"] == "2026-11-30"
    assert data["operating_levels"]["reason"] == "baseline after new chemistry on 2026-11-17"
    assert data["operating_levels"]["established"] == "2026-11-21"  # 5th strip after the change (FDA guidance)
    line = refused(capsys, "qc", "demo", "--archive", demo_archive)
    assert "already has a QC log" in line


def test_the_chart_png(capsys, demo_archive, tmp_path):
    png = tmp_path / "november.png"
    out = ok(capsys, "qc", "chart", "--archive", demo_archive, "--processor", "Processor 1", "-o", png,
             "--month", "2026-11", "--width", "1000", "--height", "900")
    assert "1000 x 900 px" in out and CAUTION in out
    image = iio.imread(png)
    assert image.shape[:2] == (900, 1000)
    rgb = image[..., :3].reshape(-1, 3)
    colours = {tuple(c) for c in rgb[:: 7]}
    assert len(colours) > 50  # not blank: text, bands, lines and marks
    assert (rgb == 255).all(axis=1).mean() < 0.9
    # The out-of-limit day is drawn with its own colour (and shape); so are warnings and the ordinary days.
    for hex_colour in ("#D55E00", "#E69F00", "#0072B2"):
        target = np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)])
        assert (np.abs(rgb.astype(int) - target).max(axis=1) <= 2).sum() > 20, hex_colour
    line = refused(capsys, "qc", "chart", "--archive", demo_archive, "--processor", "Processor 1", "-o",
                   tmp_path / "chart.jpg")
    assert "written as PNG" in line
