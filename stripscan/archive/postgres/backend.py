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

import time
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from typing import Any

from ..errors import ArchiveError, ArchiveReadOnlyError
from . import driver, schema
from .dialect import archive_error, configure, placeholders
from .location import public_location

__all__ = ["PostgresBackend", "Row", "DEFAULT_BUSY_TIMEOUT_MS", "CONNECT_ATTEMPTS"]

DEFAULT_BUSY_TIMEOUT_MS = 5000
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


def _row_factory(cursor: Any) -> Any:
    names = tuple(d.name for d in cursor.description or ())
    return lambda values: Row(values, names)


class PostgresBackend:
    """An open archive database on a server.

    Attributes
    ----------
    where : str
        The archive's location for messages and lists of recent archives:
        a ``postgresql://`` URL without the password.
    read_only : bool
        Every write raises :class:`ArchiveReadOnlyError`.
    busy_timeout_ms : int
        How long a write waits for another client's write to finish.
    """

    def __init__(self, conn: Any, where: str, *, read_only: bool, busy_timeout_ms: int) -> None:
        self._conn: Any = conn
        self.where = where
        self.read_only = read_only
        self.busy_timeout_ms = busy_timeout_ms
        # What the open write transaction does, for its statements' messages.
        self._doing: str | None = None

    # ------------------------------------------------------------ opening

    @classmethod
    def open(cls, location: str, *, read_only: bool = False, create: bool = True,
             busy_timeout_ms: int = DEFAULT_BUSY_TIMEOUT_MS) -> "PostgresBackend":
        """Connect to the archive database named by ``location`` and bring its schema up to date.

        Parameters
        ----------
        location : str
            A libpq connection string (``postgresql://user@host/dbname``,
            ``postgresql:///?service=NAME``, ``host=... dbname=...``); the
            password comes from it, ``.pgpass`` or ``PGPASSWORD``.
        read_only : bool
            Open for reading only (the server refuses writes too).
        create : bool
            Create the archive's tables in an empty database.
        busy_timeout_ms : int
            How long a write waits for another client's write.

        Raises
        ------
        ArchiveError
            When the server cannot be reached (after :data:`CONNECT_ATTEMPTS`
            tries), the database belongs to another program or to a newer
            stripscan, or is empty and ``create`` is False.
        ArchiveReadOnlyError
            When opened read-only and the schema needs an upgrade first.
        """
        if isinstance(busy_timeout_ms, bool) or not isinstance(busy_timeout_ms, int) or busy_timeout_ms < 0:
            raise ValueError(f"busy_timeout_ms must be a whole number of milliseconds >= 0, not {busy_timeout_ms!r}")
        psycopg = driver()
        where = public_location(location)
        conn = cls._connect(psycopg, location, where)
        backend = cls(conn, where, read_only=read_only, busy_timeout_ms=busy_timeout_ms)
        try:
            backend._prepare(create)
        except BaseException:
            backend.close()
            raise
        return backend

    @staticmethod
    def _connect(psycopg: Any, location: str, where: str) -> Any:
        for attempt in range(1, CONNECT_ATTEMPTS + 1):
            try:
                return psycopg.connect(location, autocommit=True, application_name="stripscan")
            except psycopg.OperationalError as exc:
                if attempt == CONNECT_ATTEMPTS:
                    raise archive_error(exc, where, "open it", attempts=attempt) from None
                time.sleep(_CONNECT_PAUSE_S[min(attempt, len(_CONNECT_PAUSE_S)) - 1])
            except psycopg.Error as exc:
                raise archive_error(exc, where, "open it") from None
        raise AssertionError("unreachable")

    def _prepare(self, create: bool) -> None:
        psycopg = driver()
        conn = self._conn
        try:
            configure(conn)
            # A write waits this long for the write lock, then gives up as SQLite's busy timeout does.
            conn.execute(f"SET lock_timeout = {int(self.busy_timeout_ms)}")
            if self.read_only:
                conn.execute("SET default_transaction_read_only = on")
            version = schema.schema_version(conn)
            if version > schema.latest_version():
                schema.migrate(conn, self.where)  # refuses, in words
            if version == 0 and (self.read_only or not create):
                raise ArchiveError(f"{self.where} holds no stripscan archive yet; open it once with write "
                                   "access to create one there")
            if version < schema.latest_version():
                if self.read_only:
                    raise ArchiveReadOnlyError(
                        f"{self.where} is opened read-only and uses the older server schema version {version}; "
                        "open it once with write access to upgrade it")
                schema.migrate(conn, self.where)
        except psycopg.Error as exc:
            raise archive_error(exc, self.where, "open it") from None

    def close(self) -> None:
        """Close the connection; calling it again does nothing."""
        if self._conn is not None:
            conn, self._conn = self._conn, None
            conn.close()

    def __enter__(self) -> "PostgresBackend":
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    def __repr__(self) -> str:
        state = "closed" if self._conn is None else ("read-only" if self.read_only else "open")
        return f"<PostgresBackend {self.where!r} {state}>"

    @property
    def _c(self) -> Any:
        if self._conn is None:
            raise ArchiveError(f"{self.where}: the archive is closed")
        return self._conn

    @property
    def schema_version(self) -> int:
        """The database's server schema version (its ``stripscan_schema`` table)."""
        return self._guarded("read it", lambda: schema.schema_version(self._c))

    @property
    def in_transaction(self) -> bool:
        return self._c.info.transaction_status != driver().pq.TransactionStatus.IDLE

    # ---------------------------------------------------------- statements

    def _guarded(self, action: str, call: Any, statement: str | None = None) -> Any:
        psycopg = driver()
        try:
            return call()
        except psycopg.Error as exc:
            raise archive_error(exc, self.where, action, statement=statement) from None

    def execute(self, sql: str, params: Sequence[Any] = ()) -> None:
        """Run one statement (inside :meth:`writing` for a write)."""
        self._guarded(self._doing or "write to it", lambda: self._c.execute(placeholders(sql), tuple(params)), sql)

    def executemany(self, sql: str, rows: Sequence[Sequence[Any]]) -> None:
        """Run one statement for each row of parameters."""
        def run() -> None:
            with self._c.cursor() as cursor:
                cursor.executemany(placeholders(sql), [tuple(row) for row in rows])
        self._guarded(self._doing or "write to it", run, sql)

    def query(self, sql: str, params: Sequence[Any] = ()) -> list[Row]:
        """The rows of one query, each readable by position and by column name."""
        def run() -> list[Row]:
            with self._c.cursor(row_factory=_row_factory) as cursor:
                cursor.execute(placeholders(sql), tuple(params))
                return cursor.fetchall()
        return self._guarded("read it", run, sql)

    # -------------------------------------------------------- transactions

    def _rollback(self) -> None:
        conn = self._conn
        if conn is not None and not conn.closed and self.in_transaction:
            try:
                conn.execute("ROLLBACK")
            except driver().Error:
                pass  # the connection is gone; the server rolls back by itself

    @contextmanager
    def reading(self) -> Iterator[None]:
        """Several reads that see one state of the archive (no write in between)."""
        if self.in_transaction:
            yield
            return
        self._guarded("read it", lambda: self._c.execute("BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY"))
        try:
            yield
        finally:
            if self.in_transaction:
                self._guarded("read it", lambda: self._c.execute("COMMIT"))

    @contextmanager
    def writing(self, action: str) -> Iterator["PostgresBackend"]:
        """One write transaction: all of it is stored, or none of it; one writer at a time."""
        if self.read_only:
            raise ArchiveReadOnlyError(f"{self.where} is read-only: cannot {action}")
        psycopg = driver()
        try:
            self._c.execute("BEGIN ISOLATION LEVEL READ COMMITTED")
            # Taken now, so a busy archive is found before anything is done.
            self._c.execute("SELECT pg_advisory_xact_lock(%s)", (_WRITE_LOCK,))
        except psycopg.Error as exc:
            self._rollback()
            raise archive_error(exc, self.where, action) from None
        self._doing = action
        try:
            yield self
            self._c.execute("COMMIT")
        except BaseException as exc:
            self._rollback()
            if isinstance(exc, psycopg.Error):
                raise archive_error(exc, self.where, action) from None
            raise
        finally:
            self._doing = None
