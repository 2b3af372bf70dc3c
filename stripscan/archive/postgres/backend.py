"""One connection to a lot archive on a PostgreSQL server: transactions, statements, errors.

What SQLite gets from its file this backend gets from the server:

* **one writer at a time**, as SQLite's ``BEGIN IMMEDIATE``: every write
  transaction first takes a transaction-level advisory lock of the archive
  database, so the archive's rules (next id, the hash chain's head, a QC
  day's first strip) are checked and written by one client at a time and
  no write is lost or stored twice; readers never wait.  A writer that
  cannot get the lock within the busy timeout gets :class:`ArchiveBusyError`;
* **reads that see one state**: several reads in :meth:`reading` run in one
  REPEATABLE READ transaction;
* **nothing half-written**: a transaction the server or the connection
  loses before COMMIT is rolled back by the server;
* **the schema** is brought up to date on opening (:mod:`.schema`), and a
  newer one is refused plainly;
* **errors** as the archive's own, one line naming the archive and, for a
  missing right, which (:mod:`.dialect`).

Statements are the archive's portable SQL with ``?`` placeholders.
"""

from __future__ import annotations

import os
import time
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from stripscan.archive.backend import Backend
from stripscan.archive.errors import ArchiveError, ArchiveReadOnlyError

from . import driver, schema
from .dialect import archive_error, configure, placeholders

__all__ = ["PostgresBackend", "ServerConnection", "Row", "CONNECT_ATTEMPTS"]

#: Tries at opening a connection (a server restarting, a network blip) before giving up.
CONNECT_ATTEMPTS = 3
_CONNECT_PAUSE_S = (0.2, 0.5)

# Key of the advisory lock every write transaction takes ("SSWR"); advisory
# locks belong to one database, so two archives on one server do not queue
# on each other.
_WRITE_LOCK = 0x53535752


class Row(tuple):
    """A result row read by position or by column name, as ``sqlite3.Row``."""

    _names: tuple[str, ...]

    def __new__(cls, values: Sequence[Any], names: tuple[str, ...]) -> "Row":
        row = super().__new__(cls, values)
        row._names = names
        return row

    def __getitem__(self, key: Any) -> Any:  # type: ignore[override]
        if isinstance(key, str):
            try:
                key = self._names.index(key)
            except ValueError:
                raise IndexError(f"no column named {key!r}") from None
        return tuple.__getitem__(self, key)

    def keys(self) -> list[str]:
        return list(self._names)


class ServerConnection:
    """The archive's statements on one psycopg connection: ``?`` placeholders, SQLite's ways.

    Errors are psycopg's own, as ``sqlite3``'s are for a file; the backend
    translates them (and remembers the statement, to name a missing right).
    """

    def __init__(self, conn: Any) -> None:
        self.raw = conn
        self.failed_statement: str | None = None

    def execute(self, sql: str, params: Sequence[Any] = ()) -> Any:
        try:
            return self.raw.execute(placeholders(sql), tuple(params))
        except driver().Error:
            self.failed_statement = sql
            raise

    def executemany(self, sql: str, seq: Any) -> None:
        try:
            with self.raw.cursor() as cursor:
                cursor.executemany(placeholders(sql), [tuple(row) for row in seq])
        except driver().Error:
            self.failed_statement = sql
            raise

    @property
    def in_transaction(self) -> bool:
        return self.raw.info.transaction_status != driver().pq.TransactionStatus.IDLE


class PostgresBackend(Backend):
    """An archive database on a server.  Use :meth:`open`.

    Attributes
    ----------
    location : str
        The connection string without its password, for messages.
    """

    path = None

    def __init__(self, conn: Any, location: str, *, read_only: bool, busy_timeout_ms: int) -> None:
        self._conn: ServerConnection | None = ServerConnection(conn)
        self.location = location
        self.read_only = read_only
        self.busy_timeout_ms = busy_timeout_ms
        self.Error = driver().Error

    # ------------------------------------------------------------ opening

    @classmethod
    def open(cls, conninfo: str, location: str, *, busy_timeout_ms: int, read_only: bool,
             create: bool) -> "PostgresBackend":
        """Connect to the archive database and bring its schema up to date.

        Parameters
        ----------
        conninfo : str
            A libpq connection string (``postgresql://user@host/dbname``,
            ``postgresql:///?service=NAME``, ``host=... dbname=...``); the
            password comes from it, ``.pgpass`` or ``PGPASSWORD``.
        location : str
            The same without its password, for messages.
        busy_timeout_ms : int
            How long a write waits for another client's write.
        read_only : bool
            Open for reading only (the server refuses writes too).
        create : bool
            Create the archive's tables in an empty database.

        Raises
        ------
        ArchiveError
            When the server cannot be reached (after :data:`CONNECT_ATTEMPTS`
            tries), the database belongs to another program or to a newer
            stripscan, or is empty and ``create`` is False.
        ArchiveReadOnlyError
            When opened read-only and the schema needs an upgrade first.
        """
        psycopg = driver()
        conn = cls._connect(psycopg, conninfo, location)
        backend = cls(conn, location, read_only=read_only, busy_timeout_ms=busy_timeout_ms)
        try:
            backend._prepare(create)
        except BaseException:
            backend.close()
            raise
        return backend

    @staticmethod
    def _connect(psycopg: Any, conninfo: str, location: str) -> Any:
        for attempt in range(1, CONNECT_ATTEMPTS + 1):
            try:
                return psycopg.connect(conninfo, autocommit=True, application_name="stripscan")
            except psycopg.OperationalError as exc:
                if attempt == CONNECT_ATTEMPTS:
                    raise archive_error(exc, location, "open it", attempts=attempt) from None
                time.sleep(_CONNECT_PAUSE_S[min(attempt, len(_CONNECT_PAUSE_S)) - 1])
            except psycopg.Error as exc:
                raise archive_error(exc, location, "open it") from None
        raise AssertionError("unreachable")

    def _prepare(self, create: bool) -> None:
        conn = self.connection.raw
        try:
            configure(conn)
            # A write waits this long for the write lock, then gives up as SQLite's busy timeout does.
            conn.execute(f"SET lock_timeout = {int(self.busy_timeout_ms)}")
            if self.read_only:
                conn.execute("SET default_transaction_read_only = on")
            version = schema.schema_version(conn)
            if version > schema.latest_version():
                schema.migrate(conn, self.location)  # refuses, in words
            if version == 0 and (self.read_only or not create):
                raise ArchiveError(f"{self.location} holds no stripscan archive yet; open it once with write "
                                   "access to create one there")
            if version < schema.latest_version():
                if self.read_only:
                    raise ArchiveReadOnlyError(
                        f"{self.location} is opened read-only and uses the older server schema version "
                        f"{version}; open it once with write access to upgrade it")
                schema.migrate(conn, self.location)
        except self.Error as exc:
            raise self.translate(exc, "open it") from None

    # ---------------------------------------------------------- the interface

    @property
    def connection(self) -> ServerConnection:
        return super().connection  # type: ignore[return-value]

    def _close_connection(self, conn: ServerConnection) -> None:
        conn.raw.close()

    @property
    def has_chain(self) -> bool:
        """Always: the server schema starts with the hash chain."""
        return True

    def schema_version(self) -> int:
        """The archive's schema version: that of the SQLite schema the server's tables equal.

        The server's own version (the highest row of ``stripscan_schema``) is
        :meth:`server_schema_version`; exports and reports show this one, the
        same for the same records in a file or on a server.
        """
        return schema.SQLITE_EQUIVALENT[self.server_schema_version()]

    def server_schema_version(self) -> int:
        """The version of the server schema (``schema/NNNN_*.sql``) the database is at."""
        try:
            return schema.schema_version(self.connection.raw)
        except self.Error as exc:
            raise self.translate(exc, "read it") from None

    def translate(self, exc: BaseException, action: str) -> ArchiveError:
        statement = self._conn.failed_statement if self._conn is not None else None
        return archive_error(exc, self.location, action, statement=statement)

    def rows(self, conn: Any, sql: str, params: Sequence[Any] = ()) -> list[Row]:
        cursor = conn.execute(sql, params)
        names = tuple(d.name for d in cursor.description or ())
        return [Row(values, names) for values in cursor.fetchall()]

    def _rollback(self) -> None:
        conn = self._conn
        if conn is not None and not conn.raw.closed and conn.in_transaction:
            try:
                conn.raw.execute("ROLLBACK")
            except self.Error:
                pass  # the connection is gone; the server rolls back by itself

    @contextmanager
    def reading(self) -> Iterator[ServerConnection]:
        """Several reads in one REPEATABLE READ transaction: one state of the archive."""
        conn = self.connection
        if conn.in_transaction:
            yield conn
            return
        try:
            conn.raw.execute("BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY")
        except self.Error as exc:
            raise self.translate(exc, "read it") from None
        try:
            yield conn
        finally:
            if conn.in_transaction and not conn.raw.closed:
                try:
                    conn.raw.execute("COMMIT")
                except self.Error:
                    self._rollback()

    @contextmanager
    def writing(self, action: str) -> Iterator[ServerConnection]:
        """One write transaction: all of it is stored, or none of it; one writer at a time."""
        if self.read_only:
            raise ArchiveReadOnlyError(f"{self.location} is read-only: cannot {action}")
        conn = self.connection
        conn.failed_statement = None
        try:
            conn.raw.execute("BEGIN ISOLATION LEVEL READ COMMITTED")
            # Taken now, so a busy archive is found before anything is done.
            conn.raw.execute("SELECT pg_advisory_xact_lock(%s)", (_WRITE_LOCK,))
        except self.Error as exc:
            self._rollback()
            raise self.translate(exc, action) from None
        try:
            yield conn
            conn.raw.execute("COMMIT")
        except BaseException as exc:
            self._rollback()
            if isinstance(exc, self.Error):
                raise self.translate(exc, action) from None
            raise

    def backup(self, dest: Path, *, overwrite: bool = False) -> Path:
        """Copy the whole archive, as one state of it, into the SQLite archive file ``dest``.

        The copy (:func:`stripscan.archive.copying.copy_archive`) is written
        under a temporary name beside ``dest``, its hash chain walked in full,
        and only then named ``dest``: a site's offline copy of a shared
        archive, opened like any archive file.
        """
        from stripscan.archive import open_archive  # the package chooses the file's backend
        from stripscan.archive.copying import copy_archive

        dest = dest.expanduser().absolute()
        if dest.is_dir():
            raise ArchiveError(f"{dest} is a folder; give the backup a file name")
        if dest.exists() and not overwrite:
            raise ArchiveError(f"{dest} already exists; choose another name or allow overwriting")
        if not dest.parent.is_dir():
            raise ArchiveError(f"{dest}: the folder {dest.parent} does not exist")
        partial = dest.with_name(f".{dest.name}.{os.getpid()}.partial")
        try:
            with open_archive(partial) as copy:
                copy_archive(_SourceView(self), copy)
            os.replace(partial, dest)
        except self.Error as exc:
            raise self.translate(exc, f"back it up to {dest}") from None
        except OSError as exc:
            raise ArchiveError(f"{dest}: cannot write the backup: {exc.strerror or exc}") from None
        finally:
            for leftover in (partial, Path(f"{partial}-wal"), Path(f"{partial}-shm"), Path(f"{partial}-journal")):
                leftover.unlink(missing_ok=True)
        return dest


class _SourceView:
    """What :func:`copy_archive` reads of a source archive, given by its backend alone."""

    def __init__(self, backend: PostgresBackend) -> None:
        self.path = backend.location
        self.read_together = backend.reading
