"""Upgrading an archive written with schema version 1.

The v1 file is built here by running version 1's own SQL, as an older
stripscan did, then filled through raw SQL; opening it must carry every row
over to the latest schema.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from archive_factory import FILM, LOTS, PROCESSORS, make_draft, make_scan, make_strip, raw_connection

import stripscan.archive.store as store
from stripscan.archive import Archive, ArchiveError
from stripscan.archive.migrations import APPLICATION_ID, LATEST_VERSION, MIGRATIONS, Migration
from stripscan.archive.records import FIGURES, canonical_json


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

