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

:func:`copy_archive` copies between two open archives; :func:`copy_location`
is ``stripscan archive copy SOURCE DEST``: it opens both places, builds a
file destination under a temporary name beside it and names it only when
complete (:func:`stripscan._shared.atomic.replacing`), and creates a server
destination's tables when the database has none.
"""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from stripscan._shared.atomic import replacing
from stripscan.archive.errors import ArchiveError
from stripscan.archive.location import Location, parse_location

if TYPE_CHECKING:
    from stripscan.archive.backend import Connection
    from stripscan.archive.service import Archive

__all__ = ["TABLES", "copy_tables", "copy_archive", "CopyReport", "copy_location"]

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


# ------------------------------------------------------ between two places

@dataclass(frozen=True)
class CopyReport:
    """What :func:`copy_location` copied.

    Attributes
    ----------
    source, dest : str
        The two places as messages show them (never with a password).
    rows : dict
        Table name -> rows copied, in copying order.
    head_seq : int
        The hash chain's latest record in the copy (0 for an empty archive).
    head_sha256 : str
        Its chain hash, the same as the source's.
    """

    source: str
    dest: str
    rows: dict[str, int]
    head_seq: int
    head_sha256: str


def _where(location: "str | os.PathLike[str]") -> Location:
    try:
        return parse_location(location)
    except ValueError as exc:
        raise ArchiveError(str(exc)) from None


def copy_location(source: "str | os.PathLike[str]", dest: "str | os.PathLike[str]") -> CopyReport:
    """Copy the whole archive at ``source`` to ``dest``, a new file or an empty database.

    Parameters
    ----------
    source : path-like or str
        An archive file or a server location; opened as any command opens
        it, never created.
    dest : path-like or str
        A file that does not exist yet (or holds an archive with no
        records), or a server database that has no tables yet or holds an
        archive with no records (its tables are created when it has none).

    Returns
    -------
    CopyReport
        Rows copied per table and the chain's head.

    Raises
    ------
    ArchiveError
        When either place cannot be opened, the destination holds records
        or is the source, or the copy fails; nothing of the copy is then
        left in the destination.
    """
    from stripscan.archive import open_archive  # the package chooses each place's backend

    here, there = _where(source), _where(dest)
    if _same_place(here, there):
        raise ArchiveError(f"{there.display}: the copy and the archive copied are the same place; "
                           "name another destination")
    with open_archive(source, create=False) as archive:
        if there.is_server:
            with open_archive(there.conninfo, create=True) as target:
                rows = copy_archive(archive, target)
                return _report(archive, target, there, rows)
        path = there.path
        assert path is not None
        if path.is_dir():
            raise ArchiveError(f"{path} is a folder; give the copy a file name")
        if path.exists():
            # An archive left empty (say by 'archive init') may be filled; anything else is left alone.
            with open_archive(path, create=False, read_only=True) as existing:
                if _stored(existing):
                    raise ArchiveError(f"{path} already holds records; copy into a new, empty archive")
        try:
            with replacing(path) as partial:
                try:
                    with open_archive(partial) as target:
                        rows = copy_archive(archive, target)
                        report = _report(archive, target, there, rows)
                finally:
                    for journal in ("-wal", "-shm", "-journal"):
                        partial.with_name(partial.name + journal).unlink(missing_ok=True)
        except OSError as exc:
            raise ArchiveError(f"{path}: cannot write the copy: {exc.strerror or exc}") from None
        return report


def _same_place(here: Location, there: Location) -> bool:
    if here.is_server or there.is_server:
        return here.display == there.display
    assert here.path is not None and there.path is not None
    try:
        return here.path == there.path or (there.path.exists() and here.path.samefile(there.path))
    except OSError:
        return False


def _report(archive: "Archive", target: "Archive", there: Location, rows: dict[str, int]) -> CopyReport:
    head = target._query("SELECT seq, chain_sha256 FROM record_chain ORDER BY seq DESC LIMIT 1")
    seq, sha = (int(head[0][0]), str(head[0][1])) if head else (0, "0" * 64)
    return CopyReport(str(archive.path), there.display, rows, seq, sha)
