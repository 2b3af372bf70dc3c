"""The small interface a storage backend gives the archive.

:class:`stripscan.archive.service.Archive` holds the rules (snapshots never
change, revisions, retirements, QC repeats and corrections, the hash chain)
and speaks portable SQL with ``?`` placeholders through a :class:`Backend`:
one open location (an SQLite file, or a database on a PostgreSQL server)
that runs transactions and statements, knows its schema version, checks
its own integrity, makes a backup and turns its driver's errors into
:class:`stripscan.archive.errors.ArchiveError` messages that name the
location.  Only :mod:`stripscan.archive` chooses and opens a backend.
"""

from __future__ import annotations

import abc
from collections.abc import Iterator, Mapping, Sequence
from contextlib import AbstractContextManager
from pathlib import Path
from typing import Any, Protocol

from stripscan.archive.errors import ArchiveError

__all__ = ["Backend", "Connection", "Cursor", "Row"]


class Row(Protocol):
    """A stored row: read by position (``row[0]``) or by column name (``row["id"]``)."""

    def __getitem__(self, key: int | str) -> Any: ...

    def keys(self) -> Sequence[str]: ...


class Cursor(Protocol):
    """What a statement returns (the DB-API 2.0 subset the archive uses)."""

    rowcount: int
    #: One 7-item sequence per column of the last query, the column's name first.
    description: Sequence[Sequence[Any]]

    def fetchone(self) -> Any: ...

    def fetchall(self) -> list[Any]: ...

    def __iter__(self) -> Iterator[Any]: ...


class Connection(Protocol):
    """Runs one statement with ``?`` placeholders inside the backend's transaction."""

    def execute(self, sql: str, params: Sequence[Any] = ...) -> Cursor: ...


class Backend(abc.ABC):
    """One open archive location.

    Attributes
    ----------
    location : str
        What messages call the archive: a file path, or a connection string
        without its password.
    path : Path or None
        The file, for a file backend; None for a server.
    read_only : bool
        Every write raises :class:`ArchiveReadOnlyError` when True.
    busy_timeout_ms : int
        How long a write waits for another writer before giving up.
    Error : type
        The driver's base exception class, which :meth:`translate` turns
        into an :class:`ArchiveError`.
    """

    location: str
    path: Path | None
    read_only: bool
    busy_timeout_ms: int
    Error: type[BaseException] = Exception

    #: The driver's open connection (what :attr:`connection` gives); None once closed.
    _conn: Any = None

    @property
    def connection(self) -> Connection:
        """The open connection; raises :class:`ArchiveError` once closed."""
        if self._conn is None:
            raise ArchiveError(f"{self.location}: the archive is closed")
        return self._conn

    @abc.abstractmethod
    def translate(self, exc: BaseException, action: str) -> ArchiveError:
        """The driver's error ``exc`` as an archive error naming the location and ``action``."""

    @abc.abstractmethod
    def reading(self) -> AbstractContextManager[Connection]:
        """Several reads that see one state of the archive (no write lands in between)."""

    @abc.abstractmethod
    def writing(self, action: str) -> AbstractContextManager[Connection]:
        """One write transaction: all of it is stored, or none of it; errors translated."""

    @abc.abstractmethod
    def rows(self, conn: Connection, sql: str, params: Sequence[Any] = ()) -> list[Row]:
        """The rows of one query, readable by column name as well as by position."""

    @property
    @abc.abstractmethod
    def has_chain(self) -> bool:
        """Whether the schema keeps the hash chain of stored records."""

    @abc.abstractmethod
    def schema_version(self) -> int:
        """The archive's schema version."""

    @abc.abstractmethod
    def backup(self, dest: Path, *, overwrite: bool = False) -> Path:
        """Copy the whole archive, in one consistent state, to the file ``dest``; checked before it is named."""

    @abc.abstractmethod
    def _close_connection(self, conn: Any) -> None:
        """Close the driver's connection ``conn`` (called once, by :meth:`close`)."""

    def close(self) -> None:
        """Close the location; calling it again does nothing."""
        if self._conn is not None:
            conn, self._conn = self._conn, None
            self._close_connection(conn)

    @property
    def closed(self) -> bool:
        """Whether :meth:`close` was called."""
        return self._conn is None

    def query(self, sql: str, params: Sequence[Any] = ()) -> list[Any]:
        """All rows of one read, outside any write; errors translated."""
        try:
            return list(self.connection.execute(sql, params).fetchall())
        except self.Error as exc:
            raise self.translate(exc, "read it") from None

    def named(self, sql: str, params: Sequence[Any] = ()) -> list[Mapping[str, Any]]:
        """As :meth:`query`, rows readable by column name."""
        try:
            return self.rows(self.connection, sql, params)
        except self.Error as exc:
            raise self.translate(exc, "read it") from None
