"""Copy a whole archive from one location to another: a file to a server to start sharing, a
server to a file for a site's offline copy.

Every stored row goes across as it is, ids, times and links included, table
by table in one write transaction of the destination, so the copy's hash
chain is the original's; it is walked in full before the transaction
commits.  Nothing half-copied is ever visible: a copy that fails or is
killed leaves the destination as it was, and can be run again.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from stripscan.archive import chain
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


def copy_tables(source: "Connection", target: "Connection") -> dict[str, int]:
    """Insert every row of ``source``'s tables into ``target``'s (inside the caller's transactions).

    Rows go in key order, as they were stored, so the destination's own
    rules (a QC day's first strip, the chain growing at its end) pass as
    they did when the rows were first written.  Returns the rows per table.
    """
    counts = {}
    for table in TABLES:
        cursor = source.execute(f"SELECT * FROM {table} ORDER BY 1, 2")
        columns = [d[0] for d in cursor.description]
        insert = f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({', '.join('?' for _ in columns)})"
        counts[table] = 0
        while True:
            rows = cursor.fetchmany(_BATCH)  # type: ignore[attr-defined]
            if not rows:
                break
            target.executemany(insert, [tuple(row) for row in rows])  # type: ignore[attr-defined]
            counts[table] += len(rows)
    return counts


def _stored(archive: "Archive") -> int:
    return sum(archive._query(f"SELECT count(*) FROM {table}")[0][0] for table in TABLES)


def copy_archive(source: "Archive", dest: "Archive") -> dict[str, int]:
    """Copy every record of ``source`` into the empty archive ``dest``; return the rows per table.

    Raises
    ------
    ArchiveError
        When ``dest`` holds records already, or the copy's hash chain does
        not walk clean (nothing is then stored).
    """
    if _stored(dest):
        raise ArchiveError(f"{dest.path} already holds records; copy into a new, empty archive")
    with source._reading() as reading, dest._writing(f"copy {source.path} into it") as writing:
        counts = copy_tables(reading, writing)
        report = chain.verify(writing)
        if not report.ok:
            raise ArchiveError(f"{dest.path}: the copy of {source.path} does not match its hash chain "
                               f"({report.problem}); nothing was stored")
    return counts
