"""Storage for the processor QC log: daily entries, events, settings, crossovers."""

from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest
from archive_factory import PROCESSORS, make_draft, raw_connection

from stripscan.archive import Archive, ArchiveConflictError, ArchiveLookupError, QcEntry

NORTH, SOUTH = (p.name for p in PROCESSORS)


def test_daily_entries_are_listed_by_processor_and_date(archive: Archive) -> None:
    snapshot = archive.add_snapshot(make_draft(0))
    entries = [
        QcEntry(NORTH, "2024-10-02", 0.19, 1.24, 1.83, "manual", note="densitometer in room 2"),
        QcEntry(SOUTH, "2024-10-01", 0.20, 1.31, 1.79, "manual"),
        QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.85, "scan", snapshot.id),
        QcEntry(NORTH, "2024-10-03", 0.21, 1.41, 2.02, "manual", action="developer temperature checked: 35.6 degC"),
    ]
    for entry in entries:
        assert archive.add_qc_entry(entry) == entry
    assert archive.list_qc_entries(NORTH) == sorted((e for e in entries if e.processor == NORTH), key=lambda e: e.date)
    assert [(e.processor, e.date) for e in archive.list_qc_entries()] == [
        (NORTH, "2024-10-01"), (NORTH, "2024-10-02"), (NORTH, "2024-10-03"), (SOUTH, "2024-10-01")]
    assert [e.date for e in archive.list_qc_entries(NORTH, since="2024-10-02")] == ["2024-10-02", "2024-10-03"]
    assert [e.date for e in archive.list_qc_entries(until="2024-10-01")] == ["2024-10-01", "2024-10-01"]


def test_a_second_entry_for_the_same_day_is_a_duplicate(archive: Archive, archive_path: Path) -> None:
    archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.22, 1.85))
    with pytest.raises(ArchiveConflictError, match="processor 'North room' already has a QC entry for 2024-10-01 "
                                                   r"\(duplicate day\)"):
        archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.18, 1.20, 1.80))
    archive.add_qc_entry(QcEntry(SOUTH, "2024-10-01", 0.18, 1.20, 1.80))  # other processor, same day: fine
    with raw_connection(archive_path) as conn:
        # The rule is in the file too. SQLite docs (lang_createtable.html): a UNIQUE
        # constraint refuses a second row with the same values.
        with pytest.raises(sqlite3.IntegrityError, match="UNIQUE constraint failed: qc_entries.processor, qc_entries.date"):
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
