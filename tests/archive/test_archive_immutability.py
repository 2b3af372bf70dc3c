"""The audit trail holds against raw SQL: triggers in the file refuse rewrites.

Outside reference: SQLite documentation, "CREATE TRIGGER" (lang_createtrigger.html):
RAISE(ABORT, msg) aborts the statement with SQLITE_CONSTRAINT and undoes it,
which Python's sqlite3 raises as IntegrityError.
"""

from __future__ import annotations

import sqlite3
from pathlib import Path

import pytest
from archive_factory import make_draft, raw_connection

from stripscan.archive import Archive

RETIREMENT = {"retired_at", "retired_reason"}


def _dump(conn: sqlite3.Connection, table: str) -> list[tuple]:
    return conn.execute(f"SELECT * FROM {table} ORDER BY 1, 2").fetchall()


@pytest.fixture
def stored(archive: Archive, archive_path: Path) -> Path:
    first = archive.add_snapshot(make_draft(0))
    archive.revise(first.id, make_draft(1), "wrong strip")
    archive.add_note(first.id, "kept for the audit")
    return archive_path


def test_every_snapshot_column_but_retirement_is_frozen(stored: Path) -> None:
    with raw_connection(stored) as conn:
        columns = [row[1] for row in conn.execute("PRAGMA table_info(snapshots)")]
        before = _dump(conn, "snapshots")
        # Walk the real columns, so a column added later without joining the
        # trigger's list makes this test fail.
        for column in columns:
            if column in RETIREMENT:
                continue
            with pytest.raises(sqlite3.IntegrityError, match="snapshots are never changed; store a revision"):
                conn.execute(f"UPDATE snapshots SET {column} = {column} WHERE id = 1")
        assert _dump(conn, "snapshots") == before
    assert RETIREMENT < set(columns)


def test_snapshots_cannot_be_deleted_or_replaced(stored: Path) -> None:
    with raw_connection(stored) as conn:
        before = _dump(conn, "snapshots")
        with pytest.raises(sqlite3.IntegrityError, match="snapshots are never deleted"):
            conn.execute("DELETE FROM snapshots WHERE id = 2")
        # SQLite docs (lang_conflict.html): REPLACE deletes the old row without
        # DELETE triggers unless recursive_triggers is on; the INSERT guard catches it.
        conn.execute("PRAGMA recursive_triggers = OFF")
        with pytest.raises(sqlite3.IntegrityError, match="never reused or replaced"):
            conn.execute("INSERT OR REPLACE INTO snapshots SELECT * FROM snapshots WHERE id = 1")
        assert _dump(conn, "snapshots") == before


def test_retirement_is_set_once_with_a_reason_and_never_undone(stored: Path) -> None:
    with raw_connection(stored) as conn:
        for sql in ("UPDATE snapshots SET retired_at = '2024-11-01T09:00:00Z', retired_reason = '  ' WHERE id = 2",
                    "UPDATE snapshots SET retired_at = NULL, retired_reason = 'why' WHERE id = 2"):
            with pytest.raises(sqlite3.IntegrityError, match="retired once, with a reason"):
                conn.execute(sql)
        conn.execute("UPDATE snapshots SET retired_at = '2024-11-01T09:00:00Z', retired_reason = 'fogged' WHERE id = 2")
        for sql in ("UPDATE snapshots SET retired_at = NULL, retired_reason = NULL WHERE id = 2",
                    "UPDATE snapshots SET retired_at = '2024-12-01T09:00:00Z', retired_reason = 'later' WHERE id = 2"):
            with pytest.raises(sqlite3.IntegrityError, match="retired once, with a reason, and stays retired"):
                conn.execute(sql)
        assert conn.execute("SELECT retired_at, retired_reason FROM snapshots WHERE id = 2").fetchone() == (
            "2024-11-01T09:00:00Z", "fogged")


@pytest.mark.parametrize("table, message", [
    ("snapshot_data", "stored snapshot data is never"),
    ("snapshot_steps", "stored step densities are never"),
    ("calibrations", "a stored calibration is never"),
    ("snapshot_notes", "notes are never"),
])
def test_steps_calibrations_and_notes_are_frozen(stored: Path, table: str, message: str) -> None:
    with raw_connection(stored) as conn:
        before = _dump(conn, table)
        column = conn.execute(f"PRAGMA table_info({table})").fetchall()[-1][1]
        with pytest.raises(sqlite3.IntegrityError, match=message):
            conn.execute(f"UPDATE {table} SET {column} = {column}")
        with pytest.raises(sqlite3.IntegrityError, match=message):
            conn.execute(f"DELETE FROM {table}")
        with pytest.raises(sqlite3.IntegrityError, match=message):
            conn.execute(f"INSERT OR REPLACE INTO {table} SELECT * FROM {table} LIMIT 1")
        assert _dump(conn, table) == before


def test_one_revision_per_snapshot_even_through_raw_sql(stored: Path) -> None:
    with raw_connection(stored) as conn:
        columns = [row[1] for row in conn.execute("PRAGMA table_info(snapshots)") if row[1] != "id"]
        listed = ", ".join(columns)
        # SQLite docs (lang_createindex.html): a partial UNIQUE index refuses a second row with the same key.
        with pytest.raises(sqlite3.IntegrityError, match="UNIQUE constraint failed: snapshots.revises"):
            conn.execute(f"INSERT INTO snapshots ({listed}) SELECT {listed} FROM snapshots WHERE id = 2")
        with pytest.raises(sqlite3.IntegrityError, match="CHECK constraint failed"):
            conn.execute(f"INSERT INTO snapshots (id, {listed}) SELECT 5, {listed.replace('revises,', '9,', 1)} "
                         "FROM snapshots WHERE id = 2")
