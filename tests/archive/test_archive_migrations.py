"""Upgrading archives written with schema versions 1 and 2.

The old files are built here by running the old versions' own SQL, as an
older stripscan did, then filled through raw SQL; opening them must carry
every row over to the latest schema.
"""

from __future__ import annotations

from pathlib import Path

import sqlite3

import pytest
from archive_factory import FILM, LOTS, PROCESSORS, make_draft, make_scan, make_strip, raw_connection

from stripscan.archive.sqlite import backend as store
from stripscan.archive import Archive, ArchiveConflictError, ArchiveError, QcEntry
from stripscan.archive.sqlite.migrations import APPLICATION_ID, LATEST_VERSION, MIGRATIONS, Migration
from stripscan.archive.records import FIGURES
from stripscan.archive.values import canonical_json


@pytest.fixture
def v1_archive(tmp_path: Path) -> Path:
    """An archive as the version 1 schema left it: one lot, one processor, one snapshot."""
    path = tmp_path / "from-2024.sqlite3"
    strip = make_strip(1)
    data = strip.to_dict()
    with raw_connection(path) as conn:
        conn.execute("PRAGMA journal_mode = WAL")
        conn.execute("BEGIN")
        for statement in MIGRATIONS[0].statements:
            conn.execute(statement)
        conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
        conn.execute("PRAGMA user_version = 1")
        conn.execute("INSERT INTO film_types (name, description) VALUES (?, ?)", (FILM.name, FILM.description))
        conn.execute("INSERT INTO emulsion_lots (lot_id, film_type, expiry_date) VALUES (?, ?, ?)",
                     (LOTS[0].lot_id, FILM.name, LOTS[0].expiry_date))
        conn.execute("INSERT INTO processors (name, developer_temperature_c) VALUES (?, ?)",
                     (PROCESSORS[0].name, 34.5))
        scan = make_scan("2024-06-03 north.tif")
        conn.execute(
            f"INSERT INTO snapshots (id, created_at, lot_id, processor, processed_on, scan_path, scan_sha256, "
            f"strip_index, {', '.join(FIGURES)}) VALUES (1, '2024-06-03T08:15:00.000000Z', ?, ?, '2024-06-03', "
            f"?, ?, 1, {', '.join('?' for _ in FIGURES)})",
            (LOTS[0].lot_id, PROCESSORS[0].name, scan.path, scan.sha256, *(data["metrics"][f] for f in FIGURES)))
        conn.execute("INSERT INTO snapshot_data (snapshot_id, scan_json, strip_json) VALUES (1, ?, ?)",
                     (canonical_json(scan.to_dict()), canonical_json(data)))
        conn.executemany("INSERT INTO snapshot_steps VALUES (1, ?, ?, ?, ?, ?, ?, ?)",
                         [(s["step"], s["log_exposure"], s["od"], s["od_sd"], s["pixels"], int(s["in_range"]),
                           int(s["excluded"])) for s in data["steps"]])
        conn.execute("COMMIT")
    return path


# Processor QC rows as an older stripscan stored them, deliberately not in date order:
# (processor, date, base_fog, mid_density, density_difference, source, snapshot_id, note, action).
V2_QC_ROWS = (
    (PROCESSORS[0].name, "2024-06-04", 0.19, 1.23, 1.84, "manual", None, "typed in", ""),
    (PROCESSORS[0].name, "2024-06-03", 0.19, 1.21, 1.83, "scan", 1, "", ""),
    (PROCESSORS[1].name, "2024-06-03", 0.20, 1.30, None, "manual", None, "", "developer topped up"),
    (PROCESSORS[0].name, "2024-06-05", 0.21, 1.38, 1.80, "manual", None, "Größe ✓", "strip repeated"),
)


@pytest.fixture
def v2_archive(v1_archive: Path) -> Path:
    """An archive as the version 2 schema left it, with a QC log of two processors."""
    with raw_connection(v1_archive) as conn:
        conn.execute("BEGIN")
        for statement in MIGRATIONS[1].statements:
            conn.execute(statement)
        conn.execute("PRAGMA user_version = 2")
        conn.execute("INSERT INTO processors (name) VALUES (?)", (PROCESSORS[1].name,))
        conn.executemany("INSERT INTO qc_entries (processor, date, base_fog, mid_density, density_difference, source, "
                         "snapshot_id, note, action) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)", V2_QC_ROWS)
        conn.execute("COMMIT")
    return v1_archive


def test_migrations_are_numbered_one_after_another() -> None:
    assert [m.version for m in MIGRATIONS] == list(range(1, len(MIGRATIONS) + 1))
    assert LATEST_VERSION == MIGRATIONS[-1].version >= 2
    assert all(m.statements and m.summary for m in MIGRATIONS)


def test_version_1_archive_is_upgraded_with_its_data(v1_archive: Path) -> None:
    with raw_connection(v1_archive) as conn:
        rows_before = conn.execute("SELECT * FROM snapshots").fetchall()
        assert "snapshot_notes" not in {r[0] for r in conn.execute("SELECT name FROM sqlite_master")}
    with Archive.open(v1_archive) as archive:
        assert archive.schema_version == LATEST_VERSION
        snapshot = archive.get_snapshot(1)
        assert snapshot.strip.to_dict() == make_strip(1).to_dict()
        assert (snapshot.lot_id, snapshot.processor, snapshot.date) == (LOTS[0].lot_id, PROCESSORS[0].name,
                                                                         "2024-06-03")
        assert len(archive.step_table(1)) == 21
        # What version 2 added works on the upgraded file.
        note = archive.add_note(1, "checked after the upgrade")
        assert archive.list_notes(1) == [note]
        assert [s.id for s in archive.list_snapshots(processor=PROCESSORS[0].name)] == [1]
        archive.add_snapshot(make_draft(0, sensitometer=None))
    with raw_connection(v1_archive) as conn:
        assert conn.execute("PRAGMA user_version").fetchone()[0] == LATEST_VERSION
        assert conn.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
        assert conn.execute("SELECT * FROM snapshots WHERE id = 1").fetchall() == rows_before
        indexes = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'index'")}
        assert "snapshots_processor" in indexes
        # SQLite docs (eqp.html): the planner names the index it uses.
        plan = " ".join(str(r) for r in conn.execute(
            "EXPLAIN QUERY PLAN SELECT id FROM snapshots WHERE processor = 'North room'"))
        assert "snapshots_processor" in plan


def test_failed_upgrade_step_leaves_the_file_at_its_version(archive_path: Path,
                                                            monkeypatch: pytest.MonkeyPatch) -> None:
    with Archive.open(archive_path):
        pass
    broken = Migration(LATEST_VERSION + 1, "half-written step", ("CREATE TABLE lot_photos (lot_id TEXT)",
                                                               "CREATE TABLE oops ("))
    monkeypatch.setattr(store, "MIGRATIONS", (*MIGRATIONS, broken))
    monkeypatch.setattr(store, "LATEST_VERSION", broken.version)
    with pytest.raises(ArchiveError, match="cannot open it: incomplete input"):
        Archive.open(archive_path)
    with raw_connection(archive_path) as conn:
        assert conn.execute("PRAGMA user_version").fetchone()[0] == LATEST_VERSION
        names = {r[0] for r in conn.execute("SELECT name FROM sqlite_master")}
    assert "lot_photos" not in names



def test_version_2_archive_keeps_every_qc_entry_and_freezes_them(v2_archive: Path) -> None:
    with raw_connection(v2_archive) as conn:
        old = conn.execute("SELECT rowid, * FROM qc_entries ORDER BY rowid").fetchall()
    assert [row[1:] for row in old] == list(V2_QC_ROWS)
    with Archive.open(v2_archive) as archive:
        assert archive.schema_version == LATEST_VERSION
        entries = {e.id: e for e in archive.list_qc_entries()}
        # Each old row keeps its rowid as its id, every value, and no time or links (none were kept).
        assert entries == {rowid: QcEntry(*row, id=rowid) for rowid, *row in old}
        assert all(e.recorded_at is None and e.kind == "first strip" for e in entries.values())
        # The old one-entry-a-day rule still holds for a day's first strip; a repeat is now possible.
        with pytest.raises(ArchiveConflictError, match="already has a QC entry for 2024-06-05 \\(duplicate day\\)"):
            archive.add_qc_entry(QcEntry(PROCESSORS[0].name, "2024-06-05", 0.19, 1.22, 1.84))
        repeat = archive.add_qc_entry(QcEntry(PROCESSORS[0].name, "2024-06-05", 0.19, 1.22, 1.84), repeat=True)
        assert repeat.id == len(old) + 1 and repeat.repeat_of == 4
    with raw_connection(v2_archive) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
        assert conn.execute("PRAGMA foreign_key_check").fetchall() == []
        names = {r[0] for r in conn.execute("SELECT name FROM sqlite_master")}
        assert "qc_entries_v2" not in names
        assert {"qc_entries_no_update", "qc_entries_no_delete", "qc_entries_no_replace"} <= names
        # SQLite docs (lang_createtrigger.html): RAISE(ABORT, ...) refuses the statement.
        with pytest.raises(sqlite3.IntegrityError, match="QC entries are never changed"):
            conn.execute("UPDATE qc_entries SET mid_density = 1.0 WHERE id = 2")
        with pytest.raises(sqlite3.IntegrityError, match="QC entries are never deleted"):
            conn.execute("DELETE FROM qc_entries")
        assert conn.execute("SELECT rowid, processor, date, base_fog, mid_density, density_difference, source, "
                            "snapshot_id, note, action FROM qc_entries WHERE id <= 4 ORDER BY id").fetchall() == old


def test_a_failed_qc_rebuild_leaves_the_version_2_file_as_it_was(v2_archive: Path,
                                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    with raw_connection(v2_archive) as conn:
        schema = conn.execute("SELECT type, name, sql FROM sqlite_master ORDER BY name").fetchall()
        rows = conn.execute("SELECT rowid, * FROM qc_entries ORDER BY rowid").fetchall()
    # Version 3 cut short after the old table is dropped: the step's transaction undoes all of it.
    cut = Migration(3, "cut short", (*MIGRATIONS[2].statements[:4], "CREATE TABLE oops ("))
    monkeypatch.setattr(store, "MIGRATIONS", (*MIGRATIONS[:2], cut))
    monkeypatch.setattr(store, "LATEST_VERSION", 3)
    with pytest.raises(ArchiveError, match="cannot open it: incomplete input"):
        Archive.open(v2_archive)
    with raw_connection(v2_archive) as conn:
        assert conn.execute("PRAGMA user_version").fetchone()[0] == 2
        assert conn.execute("SELECT type, name, sql FROM sqlite_master ORDER BY name").fetchall() == schema
        assert conn.execute("SELECT rowid, * FROM qc_entries ORDER BY rowid").fetchall() == rows


def test_version_2_archive_reaches_version_4_intact_chained_and_with_its_settings(v2_archive: Path) -> None:
    """Schema 4 (issue 15 items 16-20): old QC rows, settings, events and snapshots carried over unchanged;
    every record chained; the old rows are not marked late even where an older stripscan stored them out of
    date order; new entries follow the date-order rule."""
    settings = {"limits": {"md_dd_action": 0.15}}
    with raw_connection(v2_archive) as conn:
        conn.execute("INSERT INTO qc_settings (processor, settings_json, updated_at) VALUES (?, ?, ?)",
                     (PROCESSORS[0].name, canonical_json(settings), "2024-06-03T08:00:00Z"))
        conn.execute("INSERT INTO qc_events (id, processor, date, kind) VALUES (1, ?, '2024-06-02', 'service')",
                     (PROCESSORS[0].name,))
        snapshots_before = conn.execute("SELECT * FROM snapshots").fetchall()
        steps_before = conn.execute("SELECT * FROM snapshot_steps ORDER BY snapshot_id, step").fetchall()
    with Archive.open(v2_archive) as archive:
        assert archive.schema_version == LATEST_VERSION == 4
        assert archive.verify().ok
        assert [e.entered_late for e in archive.list_qc_entries()] == [False] * len(V2_QC_ROWS)
        kept = archive.get_qc_settings(PROCESSORS[0].name)
        assert (kept.settings, kept.updated_at, kept.reason, kept.id) == (settings, "2024-06-03T08:00:00Z", "", 1)
        assert [e.kind for e in archive.list_qc_events()] == ["service"]
        with pytest.raises(ArchiveConflictError, match="dates out of order: a repeat strip of 2024-06-04 would re-judge"):
            archive.add_qc_entry(QcEntry(PROCESSORS[0].name, "2024-06-04", 0.19, 1.2, 1.8), repeat=True)
        late = archive.add_qc_entry(QcEntry(PROCESSORS[1].name, "2024-06-01", 0.19, 1.2, 1.8), late=True)
        assert late.entered_late
        archive.set_qc_settings(PROCESSORS[0].name, {"limits": {"md_dd_action": 0.12}}, "tighter")
        assert [r.reason for r in archive.qc_settings_history(PROCESSORS[0].name)] == ["", "tighter"]
        assert archive.verify().ok
    with raw_connection(v2_archive) as conn:
        assert conn.execute("SELECT * FROM snapshots").fetchall() == snapshots_before
        assert conn.execute("SELECT * FROM snapshot_steps ORDER BY snapshot_id, step").fetchall() == steps_before
        kinds = dict(conn.execute("SELECT kind, count(*) FROM record_chain GROUP BY kind").fetchall())
    assert kinds == {"film_type": 1, "lot": 1, "processor": 2, "snapshot": 1, "qc_entry": len(V2_QC_ROWS) + 1,
                     "qc_settings": 2, "qc_event": 1}


def test_version_1_archive_is_chained_on_upgrade(v1_archive: Path) -> None:
    with Archive.open(v1_archive) as archive:
        report = archive.verify()
    assert report.ok and report.records == 4  # film type, lot, processor, snapshot
