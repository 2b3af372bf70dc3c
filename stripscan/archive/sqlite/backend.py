"""The archive in one SQLite file (standard library ``sqlite3``).

The file is kept in write-ahead-log mode, so the window can read while a
command-line run writes; every write is one ``BEGIN IMMEDIATE``
transaction, so it lands whole or not at all, even if the program is
killed half way.  Opening checks the file (``PRAGMA integrity_check``,
broken references, whose file it is) and brings its schema up to date
(:mod:`.migrations`).
"""

from __future__ import annotations

import os
import sqlite3
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from stripscan._shared.atomic import replacing
from stripscan.archive.backend import Backend, Row
from stripscan.archive.entry_checks import on_read_only_media
from stripscan.archive.errors import ArchiveBusyError, ArchiveError, ArchiveReadOnlyError
from stripscan.archive.sqlite.migrations import APPLICATION_ID, CHAIN_VERSION, LATEST_VERSION, MIGRATIONS

__all__ = ["SqliteBackend", "remove_if_unused", "FILE_SUFFIXES"]

#: File name endings an archive file usually has (for file dialogs).
FILE_SUFFIXES = (".sqlite3", ".sqlite", ".db")

# SQLite primary result codes (sqlite.org/rescode.html).
_SQLITE_BUSY, _SQLITE_LOCKED, _SQLITE_READONLY = 5, 6, 8
_SQLITE_CORRUPT, _SQLITE_FULL, _SQLITE_NOTADB = 11, 13, 26


def _marked_read_only(path: Path) -> bool:
    # The permission bits count even for an administrator, who could write
    # anyway: a file someone made read-only is meant to stay as it is.
    try:
        mode = path.stat().st_mode
    except OSError:
        return False
    return not (mode & 0o222) or not os.access(path, os.W_OK)


def _sqlite_uri(path: Path, mode: str) -> str:
    # as_uri() percent-encodes spaces, '?', '#' and non-ASCII letters,
    # which SQLite decodes back to the UTF-8 file name.
    return f"{path.as_uri()}?mode={mode}"


class SqliteBackend(Backend):
    """An open archive file.  Use :meth:`open`."""

    Error = sqlite3.Error

    def __init__(self, connection: sqlite3.Connection, path: Path, *, read_only: bool,
                 busy_timeout_ms: int) -> None:
        self._conn: sqlite3.Connection | None = connection
        self.path = path
        self.location = str(path)
        self.read_only = read_only
        self.busy_timeout_ms = busy_timeout_ms

    @classmethod
    def open(cls, path: Path, *, busy_timeout_ms: int, read_only: bool, create: bool) -> "SqliteBackend":
        """Open (or create) the file, check it and bring its schema up to date.

        Raises
        ------
        ArchiveError
            When the file is not an SQLite database, is damaged (the message
            carries SQLite's integrity check), belongs to another program or
            to a newer stripscan, or cannot be created.
        ArchiveBusyError
            When another program holds the write lock during an upgrade.
        """
        if path.is_dir():
            raise ArchiveError(f"{path} is a folder, not an archive file")
        if not path.exists():
            if read_only or not create:
                raise ArchiveError(f"{path} does not exist")
            try:
                path.parent.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise ArchiveError(f"{path}: cannot create its folder: {exc.strerror or exc}") from None
        read_only = read_only or _marked_read_only(path)
        try:
            uri = _sqlite_uri(path, "ro" if read_only else "rwc") + ("&immutable=1" if on_read_only_media(path) else "")
            conn = sqlite3.connect(uri, uri=True, timeout=busy_timeout_ms / 1000.0, isolation_level=None)
        except sqlite3.Error as exc:
            raise ArchiveError(f"{path}: cannot open: {exc}") from None
        backend = cls(conn, path, read_only=read_only, busy_timeout_ms=busy_timeout_ms)
        try:
            backend._prepare()
        except BaseException:
            backend.close()
            raise
        return backend

    def _prepare(self) -> None:
        conn = self.connection
        try:
            conn.execute(f"PRAGMA busy_timeout = {int(self.busy_timeout_ms)}")
            conn.execute("PRAGMA foreign_keys = ON")
            try:
                objects = conn.execute("SELECT count(*) FROM sqlite_master").fetchone()[0]
            except sqlite3.DatabaseError as exc:
                if (getattr(exc, "sqlite_errorcode", 0) & 0xFF) == _SQLITE_NOTADB:
                    raise ArchiveError(f"{self.path} is not an SQLite database: {exc}") from None
                raise self.translate(exc, "open it") from None
            self._check_integrity()
            version = conn.execute("PRAGMA user_version").fetchone()[0]
            app_id = conn.execute("PRAGMA application_id").fetchone()[0]
            fresh = objects == 0 and version == 0 and app_id == 0
            if not fresh and app_id != APPLICATION_ID:
                raise ArchiveError(f"{self.path} is an SQLite database, but not a stripscan archive")
            if version > LATEST_VERSION:
                raise ArchiveError(
                    f"{self.path} was written by a newer stripscan (schema version {version}; "
                    f"this one knows up to {LATEST_VERSION}); update stripscan to open it")
            if self.read_only:
                if version < LATEST_VERSION:
                    raise ArchiveReadOnlyError(
                        f"{self.path} is read-only and uses the older schema version {version}; "
                        "open it once with write access to upgrade it")
                return
            conn.execute("PRAGMA journal_mode = WAL")
            self._migrate()
        except sqlite3.Error as exc:
            raise self.translate(exc, "open it") from None

    def _check_integrity(self) -> None:
        conn = self.connection
        try:
            # One line per problem: the command line prints errors as one line.
            problems = [" ".join(str(row[0]).split()) for row in conn.execute("PRAGMA integrity_check")]
            broken = conn.execute("PRAGMA foreign_key_check").fetchall()
        except sqlite3.DatabaseError as exc:
            raise self.translate(exc, "open it") from None
        if problems != ["ok"]:
            shown = "; ".join(problems[:10]) + (f"; ... {len(problems) - 10} more" if len(problems) > 10 else "")
            raise ArchiveError(f"{self.path} is damaged: {shown}")
        if broken:
            table, rowid, parent, _ = broken[0]
            raise ArchiveError(f"{self.path} is damaged: {len(broken)} broken reference(s), "
                               f"first {table} row {rowid} points to a missing {parent} row")

    def _migrate(self) -> None:
        conn = self.connection
        for migration in MIGRATIONS:
            if conn.execute("PRAGMA user_version").fetchone()[0] >= migration.version:
                continue
            conn.execute("BEGIN IMMEDIATE")
            try:
                # Another program may have upgraded the file while we waited.
                if conn.execute("PRAGMA user_version").fetchone()[0] < migration.version:
                    for statement in migration.statements:
                        conn.execute(statement)
                    if migration.code is not None:
                        migration.code(conn)
                    if migration.version == 1:
                        conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
                    conn.execute(f"PRAGMA user_version = {migration.version}")
                conn.execute("COMMIT")
            except BaseException:
                if conn.in_transaction:
                    conn.execute("ROLLBACK")
                raise

    # ------------------------------------------------------------ the interface

    @property
    def connection(self) -> sqlite3.Connection:
        return super().connection  # type: ignore[return-value]

    def _close_connection(self, conn: sqlite3.Connection) -> None:
        conn.close()

    @property
    def has_chain(self) -> bool:
        """Whether the schema keeps the hash chain (every file upgraded by this stripscan does)."""
        return self.schema_version() >= CHAIN_VERSION

    def schema_version(self) -> int:
        """``PRAGMA user_version``."""
        return int(self.query("PRAGMA user_version")[0][0])

    def translate(self, exc: BaseException, action: str) -> ArchiveError:
        code = getattr(exc, "sqlite_errorcode", None)
        primary = code & 0xFF if isinstance(code, int) else None
        text = str(exc)
        if primary in (_SQLITE_BUSY, _SQLITE_LOCKED) or "database is locked" in text:
            return ArchiveBusyError(
                f"{self.path} is busy: another program is writing to it and did not finish "
                f"within {self.busy_timeout_ms} ms; cannot {action} now, try again")
        if primary == _SQLITE_READONLY or "readonly" in text:
            return ArchiveReadOnlyError(f"{self.path} is read-only: cannot {action}")
        if primary in (_SQLITE_CORRUPT, _SQLITE_NOTADB):
            return ArchiveError(f"{self.path} is damaged: {text}")
        if primary == _SQLITE_FULL:
            return ArchiveError(f"{self.path}: cannot {action}: the disk is full")
        return ArchiveError(f"{self.path}: cannot {action}: {text}")

    def rows(self, conn: Any, sql: str, params: Sequence[Any] = ()) -> list[Row]:
        cursor = conn.cursor()
        cursor.row_factory = sqlite3.Row
        return cursor.execute(sql, params).fetchall()

    @contextmanager
    def reading(self) -> Iterator[sqlite3.Connection]:
        conn = self.connection
        if conn.in_transaction:
            yield conn
            return
        try:
            conn.execute("BEGIN")
        except sqlite3.Error as exc:
            raise self.translate(exc, "read it") from None
        try:
            yield conn
        finally:
            conn.execute("COMMIT")

    @contextmanager
    def writing(self, action: str) -> Iterator[sqlite3.Connection]:
        if self.read_only:
            raise ArchiveReadOnlyError(f"{self.path} is read-only: cannot {action}")
        conn = self.connection
        try:
            # IMMEDIATE takes the write lock now, so a busy file is found
            # before anything is done rather than at COMMIT.
            conn.execute("BEGIN IMMEDIATE")
        except sqlite3.Error as exc:
            raise self.translate(exc, action) from None
        try:
            yield conn
            conn.execute("COMMIT")
        except BaseException as exc:
            if conn.in_transaction:
                conn.execute("ROLLBACK")
            if isinstance(exc, sqlite3.Error):
                raise self.translate(exc, action) from None
            raise

    def _copy_to(self, partial: Path, dest: Path) -> None:
        target = sqlite3.connect(partial)
        try:
            self.connection.backup(target)
            verdict = [row[0] for row in target.execute("PRAGMA integrity_check")]
        except sqlite3.Error as exc:
            raise self.translate(exc, f"back it up to {dest}") from None
        finally:
            target.close()
        if verdict != ["ok"]:
            raise ArchiveError(f"{dest}: the backup copy failed its integrity check: {'; '.join(verdict[:5])}")

    def backup(self, dest: Path, *, overwrite: bool = False) -> Path:
        """Copy the file to ``dest`` with SQLite's online backup API.

        The copy is one consistent state of the file even while other
        programs write.  It is checked with ``PRAGMA integrity_check``
        before it takes the name ``dest``.
        """
        dest = dest.expanduser().absolute()
        if dest.exists() and dest.samefile(self.path):
            raise ArchiveError(f"{dest}: a backup cannot overwrite the archive itself")
        if dest.is_dir():
            raise ArchiveError(f"{dest} is a folder; give the backup a file name")
        if dest.exists() and not overwrite:
            raise ArchiveError(f"{dest} already exists; choose another name or allow overwriting")
        if not dest.parent.is_dir():
            raise ArchiveError(f"{dest}: the folder {dest.parent} does not exist")
        try:
            with replacing(dest) as partial:
                try:
                    self._copy_to(partial, dest)
                finally:
                    _remove_companions(partial)
        except OSError as exc:
            raise ArchiveError(f"{dest}: cannot write the backup: {exc.strerror or exc}") from None
        return dest


def _remove_companions(path: Path) -> None:
    # The journal files SQLite keeps beside a database file while it writes.
    for leftover in (Path(f"{path}-journal"), Path(f"{path}-wal"), Path(f"{path}-shm")):
        try:
            leftover.unlink()
        except OSError:
            pass


def remove_if_unused(path: Path) -> bool:
    """Delete an archive file that a failed command has just created and left empty.

    Only a file whose every table is empty is removed (with its ``-wal`` and
    ``-shm`` companions); returns whether it was.
    """
    try:
        connection = sqlite3.connect(f"{path.absolute().as_uri()}?mode=ro", uri=True)
        try:
            tables = [row[0] for row in connection.execute(
                "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%'")]
            if any(connection.execute(f'SELECT 1 FROM "{name}" LIMIT 1').fetchone() for name in tables):
                return False
        finally:
            connection.close()
        for leftover in (path, Path(f"{path}-wal"), Path(f"{path}-shm"), Path(f"{path}-journal")):
            leftover.unlink(missing_ok=True)
    except (sqlite3.Error, OSError):
        return False
    return True
