"""Storage for the processor QC log: daily entries, repeat strips, corrections, events, settings, crossovers.

Outside reference for the file's own rules: SQLite documentation, "CREATE
TRIGGER" (lang_createtrigger.html): RAISE(ABORT, msg) aborts the statement
with SQLITE_CONSTRAINT and undoes it, which Python's sqlite3 raises as
IntegrityError.
"""

from __future__ import annotations

import dataclasses
import re
import sqlite3
from pathlib import Path

import pytest
from archive_factory import PROCESSORS, make_draft, raw_connection

from stripscan.archive import Archive, ArchiveConflictError, ArchiveError, ArchiveLookupError, QcEntry
from stripscan.archive.qc_records import QcEntryState, qc_entry_states

NORTH, SOUTH = (p.name for p in PROCESSORS)
_UTC = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}\.\d{6}Z")


def _bare(entry: QcEntry) -> QcEntry:
    """The entry as a caller hands it in: without the id and time the archive gives it."""
    return dataclasses.replace(entry, id=None, recorded_at=None, entered_late=False)


def test_daily_entries_are_listed_by_processor_and_date(archive: Archive) -> None:
    snapshot = archive.add_snapshot(make_draft(0))
    entries = [
        QcEntry(NORTH, "2024-10-02", 0.19, 1.24, 1.83, "manual", note="densitometer in room 2"),
        QcEntry(SOUTH, "2024-10-01", 0.20, 1.31, 1.79, "manual"),
        QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.85, "scan", snapshot.id),
        QcEntry(NORTH, "2024-10-03", 0.21, 1.41, 2.02, "manual", action="developer temperature checked: 35.6 degC"),
    ]
    stored = [archive.add_qc_entry(entry, late=True) for entry in entries]
    assert [_bare(e) for e in stored] == entries
    # Only North's 1 October came after a later day of its processor (issue 13, backfilling).
    assert [e.entered_late for e in stored] == [False, False, True, False]
    assert [e.id for e in stored] == [1, 2, 3, 4] and all(_UTC.fullmatch(e.recorded_at) for e in stored)
    assert [_bare(e) for e in archive.list_qc_entries(NORTH)] == \
        sorted((e for e in entries if e.processor == NORTH), key=lambda e: e.date)
    assert archive.get_qc_entry(3) == stored[2]
    assert [(e.processor, e.date) for e in archive.list_qc_entries()] == [
        (NORTH, "2024-10-01"), (NORTH, "2024-10-02"), (NORTH, "2024-10-03"), (SOUTH, "2024-10-01")]
    assert [e.date for e in archive.list_qc_entries(NORTH, since="2024-10-02")] == ["2024-10-02", "2024-10-03"]
    assert [e.date for e in archive.list_qc_entries(until="2024-10-01")] == ["2024-10-01", "2024-10-01"]


def test_a_second_entry_for_the_same_day_is_a_duplicate(archive: Archive, archive_path: Path) -> None:
    archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.85))
    with pytest.raises(ArchiveConflictError, match="processor 'North room' already has a QC entry for 2024-10-01 "
                                                   r"\(duplicate day\); a second strip of that day is stored as a "
                                                   "repeat"):
        archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.18, 1.20, 1.80))
    archive.add_qc_entry(QcEntry(SOUTH, "2024-10-01", 0.18, 1.20, 1.80))  # other processor, same day: fine
    with raw_connection(archive_path) as conn:
        # The rule is in the file too, through a trigger (SQLite docs, see the module notes).
        with pytest.raises(sqlite3.IntegrityError, match="one QC entry in use per processor and day"):
            conn.execute("INSERT INTO qc_entries (processor, date, source) VALUES (?, '2024-10-01', 'manual')", (NORTH,))
    assert [e.mid_density for e in archive.list_qc_entries(NORTH)] == [1.22]


def test_entries_need_a_known_processor_snapshot_and_source(archive: Archive) -> None:
    with pytest.raises(ArchiveLookupError, match="processor 'West room' is not in the archive"):
        archive.add_qc_entry(QcEntry("West room", "2024-10-01", 0.19, 1.22, 1.85))
    with pytest.raises(ArchiveLookupError, match="snapshot 7 is not in the archive"):
        archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.85, "scan", 7))
    with pytest.raises(ValueError, match="QC source 'guess' is not one of scan, manual"):
        QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.85, "guess")
    with pytest.raises(ValueError, match="mid_density must be a finite number"):
        QcEntry(NORTH, "2024-10-01", 0.19, float("inf"), 1.85)
    assert archive.list_qc_entries() == []


def test_events_settings_and_crossovers(archive: Archive) -> None:
    first = archive.add_qc_event(NORTH, "2024-10-02", "chemistry change", "fresh developer and fixer")
    second = archive.add_qc_event(NORTH, "2024-10-09", "service", "rollers cleaned")
    archive.add_qc_event(SOUTH, "2024-10-05", "developer temperature adjusted")
    assert archive.list_qc_events(NORTH) == [first, second]
    assert len(archive.list_qc_events()) == 3
    assert archive.get_qc_settings(NORTH) is None
    limits = {"operating levels": {"base_fog": 0.19, "mid_density": 1.22, "density_difference": 1.84},
              "control limits": {"mid_density": 0.15, "density_difference": 0.15, "base_fog": 0.03},
              "steps": {"mid_density": 11, "high": 13, "low": 9}}
    stored = archive.set_qc_settings(NORTH, limits)
    assert archive.get_qc_settings(NORTH) == stored and stored.settings == limits
    changed = archive.set_qc_settings(NORTH, {**limits, "steps": {"mid_density": 12, "high": 14, "low": 10}})
    assert archive.get_qc_settings(NORTH) == changed
    assert archive.list_qc_settings() == [changed]
    crossover = archive.add_crossover(NORTH, "2024-10-14", {"old lot": "ALD-2407-11", "new lot": "ALD-2409-03",
                                                            "mid_density shift": 0.03, "strips": 5})
    assert archive.list_crossovers(NORTH) == [crossover]
    assert archive.list_crossovers(SOUTH) == []
    with pytest.raises(ArchiveLookupError, match="processor 'West room' is not in the archive"):
        archive.add_crossover("West room", "2024-10-14", {})
    with pytest.raises(ArchiveLookupError, match="processor 'West room'"):
        archive.set_qc_settings("West room", limits)


# --------------------------------------------------------------------------
# Repeat strips and corrections


def test_a_repeat_strip_is_stored_beside_the_first_and_counts_for_the_day(archive: Archive) -> None:
    first = archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.40, 1.85, note="past the limit"))
    repeat = archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.23, 1.84, note="repeat"), repeat=True)
    again = archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.84), repeat=True)
    assert (repeat.repeat_of, again.repeat_of) == (first.id, repeat.id)
    assert [e.kind for e in archive.list_qc_entries(NORTH)] == ["first strip", "repeat", "repeat"]
    states = qc_entry_states(archive.list_qc_entries())
    # Common practice: the latest repeat strip confirms or clears the first result and is the day's value.
    assert [i for i, s in states.items() if s.in_use] == [again.id]
    assert states[first.id].repeated_by == repeat.id and states[repeat.id].repeated_by == again.id
    with pytest.raises(ArchiveConflictError, match="processor 'North room' has no QC entry for 2024-10-02 to repeat"):
        archive.add_qc_entry(QcEntry(NORTH, "2024-10-02", 0.19, 1.22, 1.84), repeat=True)
    # A repeat follows the day's entry in use, never an earlier strip (no forks).
    with pytest.raises(ArchiveConflictError, match="QC entry 1 is no longer the one in use for 2024-10-01 "
                                                   r"\(entry 3 is\)"):
        archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.84, repeat_of=first.id))
    with pytest.raises(ArchiveConflictError, match="QC entry 1 is not an entry of processor 'South room' on 2024-10-01"):
        archive.add_qc_entry(QcEntry(SOUTH, "2024-10-01", 0.19, 1.22, 1.84, repeat_of=first.id))
    with pytest.raises(ArchiveError, match="the archive gives a new entry its id and time"):
        archive.add_qc_entry(dataclasses.replace(again, repeat_of=None))
    assert len(archive.list_qc_entries()) == 3


def test_a_correction_keeps_the_wrong_entry_and_names_it_with_a_reason(archive: Archive) -> None:
    snapshot = archive.add_snapshot(make_draft(0))
    scanned = archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.85, "scan", snapshot.id, "scan A"))
    typed = archive.add_qc_entry(QcEntry(NORTH, "2024-10-02", 0.19, 2.21, 1.84, note="typed"))
    fixed = archive.add_qc_correction(typed.id, "  1.21 read, 2.21 typed  ", mid_density=1.21)
    assert (fixed.corrects, fixed.reason, fixed.date, fixed.processor) == (typed.id, "1.21 read, 2.21 typed",
                                                                          "2024-10-02", NORTH)
    assert (fixed.mid_density, fixed.base_fog, fixed.note, fixed.source) == (1.21, 0.19, "typed", "manual")
    assert archive.get_qc_entry(typed.id) == typed  # the wrong entry is kept as it was
    # A correction can itself be corrected: a chain, each link once.
    twice = archive.add_qc_correction(fixed.id, "density difference misread too", density_difference=1.86)
    with pytest.raises(ArchiveConflictError, match=f"QC entry {typed.id} was already corrected by entry {fixed.id}"):
        archive.add_qc_correction(typed.id, "again", mid_density=1.20)
    states = qc_entry_states(archive.list_qc_entries(NORTH))
    assert states[typed.id] == QcEntryState(False, fixed.id, None, typed.id)
    assert states[twice.id] == QcEntryState(True, None, None, typed.id)
    # A density set by hand no longer comes from the scanned strip; a note alone does.
    note_only = archive.add_qc_correction(scanned.id, "wrong scan named", note="scan B")
    assert (note_only.source, note_only.snapshot_id, note_only.mid_density) == ("scan", snapshot.id, 1.22)


@pytest.mark.parametrize("changes, reason, message", [
    ({"mid_density": 1.21}, " ", "QC entry 1 is corrected only with a reason"),
    ({"mid_density": 1.22}, "typo", "the correction of QC entry 1 changes nothing"),
    ({"processor": SOUTH}, "wrong room", "not processor .*wrong processor is not corrected this way"),
    ({"mid_density": float("nan")}, "typo", "cannot correct QC entry 1: mid_density must be a finite number"),
])
def test_unfit_corrections_are_refused_and_store_nothing(archive: Archive, changes: dict, reason: str,
                                                         message: str) -> None:
    archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.85))
    with pytest.raises(ArchiveError, match=message):
        archive.add_qc_correction(1, reason, **changes)
    with pytest.raises(ArchiveLookupError, match="QC entry 9 is not in the archive"):
        archive.add_qc_correction(9, "typo", mid_density=1.2)
    assert len(archive.list_qc_entries()) == 1


def test_correcting_a_repeated_first_strip_leaves_the_repeat_in_use(archive: Archive) -> None:
    first = archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.04, 1.85))
    repeat = archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.21, 1.85), repeat=True)
    fixed = archive.add_qc_correction(first.id, "1.40 read, 1.04 typed", mid_density=1.40)
    states = qc_entry_states(archive.list_qc_entries())
    assert [i for i, s in states.items() if s.in_use] == [repeat.id]
    assert states[fixed.id] == QcEntryState(False, None, repeat.id, first.id)
    # A later repeat follows the entry in use, found by the archive itself.
    assert archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.2, 1.85), repeat=True).repeat_of == repeat.id


def test_a_failed_repeat_stores_nothing_of_the_day(archive: Archive) -> None:
    settings = {"baseline_days": 5}
    with pytest.raises(ArchiveConflictError, match="no QC entry for 2024-10-01 to repeat"):
        archive.add_qc_day(QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.85), repeat=True, snapshot=make_draft(0),
                           settings=settings)
    assert archive.list_snapshots() == [] and archive.get_qc_settings(NORTH) is None
    assert archive.list_qc_entries() == []


def test_entry_states_from_entries_built_by_hand() -> None:
    def entry(i: int, day: str = "2024-10-01", **links: object) -> QcEntry:
        reason = "typo" if "corrects" in links else None
        return QcEntry(NORTH, day, 0.19, 1.2, 1.8, id=i, reason=reason, **links)  # type: ignore[arg-type]

    # Day 1: first strip 1, corrected by 3; repeat 2 of it; 4 corrects the repeat. Day 2: one strip.
    entries = [entry(4, corrects=2), entry(1), entry(5, "2024-10-02"), entry(2, repeat_of=1), entry(3, corrects=1)]
    states = qc_entry_states(entries)
    # Common practice: the latest strip of a day counts (the repeat confirms or clears the first);
    # a correction stands for the entry it corrects.
    assert states == {1: QcEntryState(False, 3, 2, 1), 2: QcEntryState(False, 4, None, 2),
                      3: QcEntryState(False, None, 2, 1), 4: QcEntryState(True, None, None, 2),
                      5: QcEntryState(True, None, None, 5)}
    with pytest.raises(ValueError, match="only stored QC entries"):
        qc_entry_states([QcEntry(NORTH, "2024-10-01", 0.19, 1.2, 1.8)])
    for bad, message in (({"repeat_of": 1, "corrects": 2, "reason": "x"}, "a repeat strip or a correction"),
                         ({"corrects": 2}, "both or neither"), ({"corrects": 2, "reason": " "}, "reason for the"),
                         ({"repeat_of": 7}, "only an earlier entry"), ({"id": 0}, "positive whole number")):
        with pytest.raises(ValueError, match=message):
            QcEntry(NORTH, "2024-10-01", 0.19, 1.2, 1.8, **{"id": 5, **bad})  # type: ignore[arg-type]


# --------------------------------------------------------------------------
# The file refuses to rewrite the QC log, whatever program writes to it


@pytest.fixture
def logged(archive: Archive, archive_path: Path) -> Path:
    first = archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.40, 1.85))
    archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.85), repeat=True)
    archive.add_qc_correction(first.id, "typed wrong", mid_density=1.41)
    archive.add_qc_entry(QcEntry(SOUTH, "2024-10-01", 0.20, 1.30, 1.80))
    return archive_path


def test_qc_entries_are_never_updated_deleted_or_replaced(logged: Path) -> None:
    with raw_connection(logged) as conn:
        before = conn.execute("SELECT * FROM qc_entries ORDER BY id").fetchall()
        columns = [row[1] for row in conn.execute("PRAGMA table_info(qc_entries)")]
        for column in columns:  # every column, so one added later is covered too
            with pytest.raises(sqlite3.IntegrityError, match="QC entries are never changed; store a correction"):
                conn.execute(f"UPDATE qc_entries SET {column} = {column} WHERE id = 1")
        with pytest.raises(sqlite3.IntegrityError, match="QC entries are never deleted"):
            conn.execute("DELETE FROM qc_entries WHERE id = 4")
        # SQLite docs (lang_conflict.html): REPLACE deletes the clashing row without DELETE
        # triggers unless recursive_triggers is on; the INSERT guards catch every unique key.
        conn.execute("PRAGMA recursive_triggers = OFF")
        listed = ", ".join(c for c in columns if c != "id")
        for sql, message in (
                # Two guards apply here; SQLite does not promise which fires first.
                ("INSERT OR REPLACE INTO qc_entries SELECT * FROM qc_entries WHERE id = 4",
                 "never replaced|one QC entry in use"),
                (f"INSERT OR REPLACE INTO qc_entries ({listed}) SELECT {listed} FROM qc_entries WHERE id = 2",
                 "never replaced; an entry is repeated once"),
                (f"INSERT OR REPLACE INTO qc_entries ({listed}) SELECT {listed} FROM qc_entries WHERE id = 3",
                 "never replaced; an entry is repeated once and corrected once"),
                (f"INSERT OR REPLACE INTO qc_entries ({listed}) SELECT {listed} FROM qc_entries WHERE id = 4",
                 "one QC entry in use per processor and day")):
            with pytest.raises(sqlite3.IntegrityError, match=message):
                conn.execute(sql)
        assert conn.execute("SELECT * FROM qc_entries ORDER BY id").fetchall() == before


def test_links_stay_within_one_processor_and_day_even_through_raw_sql(logged: Path) -> None:
    with raw_connection(logged) as conn:
        for sql in ("INSERT INTO qc_entries (processor, date, source, repeat_of) VALUES ('South room', "
                    "'2024-10-01', 'manual', 2)",
                    "INSERT INTO qc_entries (processor, date, source, corrects, reason) VALUES ('South room', "
                    "'2024-10-02', 'manual', 2, 'typo')"):
            with pytest.raises(sqlite3.IntegrityError, match="names an entry of the same processor"):
                conn.execute(sql)
        # SQLite docs (lang_createtable.html): a CHECK constraint refuses a row where it is false.
        with pytest.raises(sqlite3.IntegrityError, match="CHECK constraint failed"):
            conn.execute("INSERT INTO qc_entries (processor, date, source, corrects) VALUES ('South room', "
                         "'2024-10-01', 'manual', 4)")
