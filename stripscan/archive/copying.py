"""A whole archive copied from one location to another (``stripscan archive copy``).

An SQLite file onto a server to start sharing it, a server into a file for a
site's offline copy, or a file into another file.  Every table is copied
row for row, ids, times and the hash chain included, so that the copy is
the same archive: its JSON export equals the source's, and its chain's head
is the source's.

Nothing half-written is ever visible: a file is built under a temporary
name beside its destination and renamed into place when complete
(:func:`stripscan._shared.atomic.replacing`); on a server everything is
written in one transaction, which the server rolls back if the client dies.
The destination must be new or empty, so a copy never mixes two archives;
a copy that failed or was killed can simply be run again.

Rows move table by table in one pass (COPY on a server,
:mod:`stripscan.archive.postgres.bulk`), not record by record through the
archive's rules: those were checked when each record was first stored, and
record by record 10 000 snapshots took minutes rather than seconds.
"""

from __future__ import annotations

import itertools
import os
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from stripscan._shared.atomic import replacing
from stripscan.archive import chain, open_archive
from stripscan.archive.errors import ArchiveError
from stripscan.archive.location import Location, parse_location
from stripscan.archive.postgres.schema import TABLES
from stripscan.archive.service import DEFAULT_BUSY_TIMEOUT_MS
from stripscan.archive.tables import insert_sql

if TYPE_CHECKING:
    from stripscan.archive.backend import Connection
    from stripscan.archive.service import Archive

__all__ = ["CopyReport", "copy_archive"]

# Rows handed to the destination at a time: memory stays flat on a large archive.
_CHUNK_ROWS = 5000


@dataclass(frozen=True)
class CopyReport:
    """What :func:`copy_archive` copied.

    Attributes
    ----------
    source, dest : str
        The two locations as messages show them (never with a password).
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

    @property
    def snapshots(self) -> int:
        return self.rows.get("snapshots", 0)


def _where(location: str | os.PathLike[str]) -> Location:
    try:
        return parse_location(location)
    except ValueError as exc:
        raise ArchiveError(str(exc)) from None


def copy_archive(source: str | os.PathLike[str], dest: str | os.PathLike[str], *,
                 busy_timeout_ms: int = DEFAULT_BUSY_TIMEOUT_MS) -> CopyReport:
    """Copy the whole archive at ``source`` to ``dest``, a new file or an empty database.

    Parameters
    ----------
    source : path-like or str
        An archive file or a server location (it is opened as any command
        opens it, never created).
    dest : path-like or str
        A file that does not exist yet (or holds an archive with no
        records), or a server database that is empty or holds an archive
        with no records; a server database's tables are created when it
        has none.
    busy_timeout_ms : int
        How long to wait for another program's write on either side.

    Returns
    -------
    CopyReport
        Rows copied per table and the chain's head.

    Raises
    ------
    ArchiveError
        When either location cannot be opened, the destination holds
        records or is the source, or the copy fails; nothing of the copy is
        then left in the destination.
    """
    here, there = _where(source), _where(dest)
    if _same_place(here, there):
        raise ArchiveError(f"{there.display}: the copy and the archive copied are the same place; "
                           "name another destination")
    with open_archive(source, create=False, busy_timeout_ms=busy_timeout_ms) as archive:
        if there.is_server:
            with open_archive(there.conninfo, create=True, busy_timeout_ms=busy_timeout_ms) as target:
                return _copy_into(archive, target, there)
        return _copy_to_file(archive, there, busy_timeout_ms)


def _same_place(here: Location, there: Location) -> bool:
    if here.is_server or there.is_server:
        return here.display == there.display
    assert here.path is not None and there.path is not None
    try:
        return here.path == there.path or (there.path.exists() and here.path.samefile(there.path))
    except OSError:
        return False


def _copy_to_file(archive: "Archive", there: Location, busy_timeout_ms: int) -> CopyReport:
    path = there.path
    assert path is not None
    if path.is_dir():
        raise ArchiveError(f"{path} is a folder; give the copy a file name")
    if path.exists():
        # An archive made empty (say by 'archive init') may be filled; anything else is left alone.
        with open_archive(path, create=False, read_only=True, busy_timeout_ms=busy_timeout_ms) as existing:
            with existing.read_together() as conn:
                _refuse_filled(conn, there.display)
    try:
        with replacing(path) as partial:
            with open_archive(partial, check_chain=False, busy_timeout_ms=busy_timeout_ms) as target:
                report = _copy_into(archive, target, there)
    except OSError as exc:
        raise ArchiveError(f"{path}: cannot write the copy: {exc.strerror or exc}") from None
    return report


def _refuse_filled(conn: "Connection", where: str) -> None:
    held = {table: conn.execute(f"SELECT count(*) FROM {table}").fetchone()[0] for table in TABLES}
    filled = [f"{count} {table.replace('_', ' ')}" for table, count in held.items() if count]
    if filled:
        raise ArchiveError(f"{where} already holds an archive ({', '.join(filled[:3])}); a copy goes into a new "
                           "file or an empty database, so that two archives are never mixed")


def _counted(rows: Iterable[Sequence[Any]], counts: dict[str, int], table: str) -> Iterator[Sequence[Any]]:
    for row in rows:
        counts[table] += 1
        yield row


def _copy_into(archive: "Archive", target: "Archive", there: Location) -> CopyReport:
    """Copy every table of ``archive`` into the empty ``target`` in one write transaction of ``target``."""
    source_backend = archive._backend
    counts = {table: 0 for table in TABLES}
    with target._writing(f"copy {archive.path} into it") as writer:
        _refuse_filled(writer, there.display)
        if archive.schema_version != target.schema_version:
            raise ArchiveError(f"{archive.path} uses schema version {archive.schema_version} and {there.display} "
                               f"version {target.schema_version}; open both with this stripscan first")
        try:
            with archive.read_together() as reader:
                for table in TABLES:
                    cursor = reader.execute(f"SELECT * FROM {table} ORDER BY 1, 2")
                    columns = [d[0] for d in cursor.description]
                    rows = _counted(iter(cursor), counts, table)
                    while chunk := list(itertools.islice(rows, _CHUNK_ROWS)):
                        _store(writer, there, table, columns, chunk)
        except source_backend.Error as exc:
            raise source_backend.translate(exc, f"copy it to {there.display}") from None
        if there.is_server:
            from stripscan.archive.postgres.schema import sync_identities

            sync_identities(writer.raw)  # type: ignore[attr-defined]
        _check_copy(writer, counts, there.display, archive.path)
        head_seq, head = writer.execute(
            "SELECT seq, chain_sha256 FROM record_chain ORDER BY seq DESC LIMIT 1").fetchone() or (0, chain.GENESIS)
    return CopyReport(str(archive.path), there.display, counts, int(head_seq), str(head))


def _store(writer: "Connection", there: Location, table: str, columns: Sequence[str],
           rows: Sequence[Sequence[Any]]) -> None:
    if there.is_server:
        from stripscan.archive.postgres.bulk import copy_rows

        copy_rows(writer, table, columns, rows, where=there.display)  # type: ignore[arg-type]
    else:
        writer.executemany(insert_sql(table, columns), rows)  # type: ignore[attr-defined]


def _check_copy(writer: "Connection", counts: dict[str, int], where: str, source: object) -> None:
    """Before the copy is committed (or named): every row arrived, and the chain's head matches its content.

    The full walk of the chain is ``stripscan archive verify``; the rows are
    the source's, so the head and the counts are enough to catch a copy cut
    short.
    """
    for table, expected in counts.items():
        stored = writer.execute(f"SELECT count(*) FROM {table}").fetchone()[0]
        if stored != expected:
            raise ArchiveError(f"{where}: the copy of {source} holds {stored} rows of {table}, not {expected}; "
                               "nothing was kept")
    problem = chain.check_head(writer)
    if problem is not None:
        raise ArchiveError(f"{where}: the copy of {source} does not match its hash chain ({problem}); "
                           "nothing was kept")
