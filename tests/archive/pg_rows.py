"""A small archive with a row in every table, and a row-for-row copy of it into a server database.

Used by the PostgreSQL schema and role tests, which talk to the server in
plain SQL (not through stripscan) so that what they show is the server's
own doing.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from archive_factory import PROCESSORS, make_draft, populate, raw_connection

from stripscan.archive import Archive, QcEntry
from stripscan.archive.copying import TABLES  # parents before children
from stripscan.archive.postgres import schema

NORTH = PROCESSORS[0].name



def filled_archive(path: Path) -> Path:
    """An SQLite archive with every kind of record: revisions, retirement, notes, QC repeats,
    corrections and late entries, events, settings and a crossover."""
    with Archive.open(path) as archive:
        populate(archive)
        first = archive.add_snapshot(make_draft(0))
        archive.add_snapshot(make_draft(1))
        archive.revise(first.id, make_draft(2), "wrong lot on the form")
        archive.retire(2, "strip fogged in handling")
        archive.add_note(first.id, "checked against the densitometer")
        day = archive.add_qc_entry(QcEntry(NORTH, "2024-10-02", 0.19, 1.22, 1.85))
        archive.add_qc_entry(QcEntry(NORTH, "2024-10-02", 0.19, 1.24, 1.86), repeat=True)
        archive.add_qc_correction(day.id, "typed 1.22 for 1.21", mid_density=1.21)
        archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.20, 1.84), late=True)
        archive.add_qc_event(NORTH, "2024-10-02", "chemistry change", "fresh developer")
        archive.set_qc_settings(NORTH, {"mid_density_step": 11, "levels": [0.19, 1.2, 1.85]}, "first levels")
        archive.add_crossover(NORTH, "2024-10-03", {"old_lot": "ALD-2407-11", "new_lot": "ALD-2409-03"})
    return path


def sqlite_rows(path: Path, table: str) -> tuple[list[str], list[tuple[Any, ...]]]:
    """Column names and rows of one table of an SQLite archive, in key order."""
    with raw_connection(path) as conn:
        cursor = conn.execute(f"SELECT * FROM {table} ORDER BY 1, 2")
        return [d[0] for d in cursor.description], cursor.fetchall()


def copy_rows(path: Path, conn: Any) -> dict[str, int]:
    """Insert every row of the SQLite archive into the server database, table by table, in
    key order as they were stored; return the rows copied per table."""
    counts = {}
    with conn.transaction():
        for table in TABLES:
            columns, rows = sqlite_rows(path, table)
            placeholders = ", ".join(["%s"] * len(columns))
            with conn.cursor() as cursor:
                cursor.executemany(f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({placeholders})", rows)
            counts[table] = len(rows)
        schema.sync_identities(conn)
    return counts


def sqlite_schema(path: Path) -> dict[str, list[str]]:
    """Each table's columns in order, as SQLite has them."""
    with raw_connection(path) as conn:
        tables = [row[0] for row in conn.execute(
            "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%' ORDER BY name")]
        return {t: [row[1] for row in conn.execute(f"PRAGMA table_info({t})")] for t in tables}


def sqlite_objects(path: Path, kind: str) -> set[str]:
    """Names of SQLite's indexes or triggers (its automatic indexes left out)."""
    with raw_connection(path) as conn:
        return {row[0] for row in conn.execute("SELECT name FROM sqlite_master WHERE type = ? "
                                               "AND name NOT LIKE 'sqlite_autoindex%'", (kind,))}


__all__ = ["NORTH", "TABLES", "filled_archive", "sqlite_rows", "copy_rows", "sqlite_schema",
           "sqlite_objects"]
