"""Copy a whole archive from one location to another: a file to a server to start sharing, a
server to a file for a site's offline copy.

Every stored row goes across as it is, ids, times and links included, table
by table in one write transaction of the destination, so the copy's hash
chain is the original's.  Before the transaction commits, every table is
read back from the destination and must match what was read from the
source, row for row (one pass per table: walking the chain record by
record would cost a server a round trip per record).  Nothing half-copied
is ever visible: a copy that fails or is killed leaves the destination as
it was, and can be run again.
"""

from __future__ import annotations

import hashlib
from typing import TYPE_CHECKING, Any

from stripscan.archive.errors import ArchiveError

if TYPE_CHECKING:
    from stripscan.archive.backend import Connection
    from stripscan.archive.service import Archive

__all__ = ["TABLES", "copy_tables", "copy_archive"]

#: The archive's tables, each after those its rows refer to: the order to copy them in.
TABLES = ("film_types", "emulsion_lots", "processors", "sensitometers", "calibrations", "snapshots",
          "snapshot_data", "snapshot_steps", "snapshot_notes", "qc_entries", "qc_events", "qc_settings",
          "crossovers", "record_chain")

# Rows handed over at a time, so a large archive never sits in memory whole.
_BATCH = 2000


def _rows(conn: "Connection", table: str) -> Any:
    return conn.execute(f"SELECT * FROM {table} ORDER BY 1, 2")


def _digest(digest: Any, rows: list[Any]) -> None:
    for row in rows:
        digest.update(repr(tuple(row)).encode("utf-8"))


def copy_tables(source: "Connection", target: "Connection") -> dict[str, int]:
    """Insert every row of ``source``'s tables into ``target``'s (inside the caller's transactions).

    Rows go in key order, as they were stored, so the destination's own
    rules (a QC day's first strip, the chain growing at its end) pass as
    they did when the rows were first written.  Each table is then read
    back from ``target`` and compared with what was read.  Returns the rows
    per table.

    Raises
    ------
    ArchiveError
        When a table reads back otherwise than it was read (a value the
        destination cannot hold as it is).
    """
    counts = {}
    for table in TABLES:
        cursor = _rows(source, table)
        columns = [d[0] for d in cursor.description]
        insert = f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({', '.join('?' for _ in columns)})"
        counts[table], sent = 0, hashlib.sha256()
        while True:
            rows = cursor.fetchmany(_BATCH)  # type: ignore[attr-defined]
            if not rows:
                break
            target.executemany(insert, [tuple(row) for row in rows])  # type: ignore[attr-defined]
            _digest(sent, rows)
            counts[table] += len(rows)
        back, stored = _rows(target, table), hashlib.sha256()
        while rows := back.fetchmany(_BATCH):  # type: ignore[attr-defined]
            _digest(stored, rows)
        if stored.digest() != sent.digest():
            raise ArchiveError(f"the copied {table} do not read back as they were read; nothing was stored")
    return counts


def _stored(archive: "Archive") -> int:
    return sum(archive._query(f"SELECT count(*) FROM {table}")[0][0] for table in TABLES)


def copy_archive(source: "Archive", dest: "Archive") -> dict[str, int]:
    """Copy every record of ``source`` into the empty archive ``dest``; return the rows per table.

    Raises
    ------
    ArchiveError
        When ``dest`` holds records already, or a table of the copy does
        not read back as the source's (nothing is then stored).
    """
    if _stored(dest):
        raise ArchiveError(f"{dest.path} already holds records; copy into a new, empty archive")
    with source.read_together() as reading, dest._writing(f"copy {source.path} into it") as writing:
        return copy_tables(reading, writing)
