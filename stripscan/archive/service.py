"""The lot archive's rules and public API, over a storage backend.

Open it with :func:`stripscan.archive.open_archive` or :meth:`Archive.open`
(a context manager).  Where the records are kept (an SQLite file, or a
database on a PostgreSQL server) is the backend's business
(:mod:`stripscan.archive.backend`); every write is one transaction of the
backend, so a write either lands whole or not at all, even if the program
is killed half way.

Snapshots are never changed or deleted.  A mistake is corrected with
:meth:`Archive.revise`, which stores a new snapshot linked to the old one,
and a reading that should not count is withdrawn with
:meth:`Archive.retire`, which keeps it readable.  Triggers in the file
enforce the same rules against any other tool.

Processor QC entries are kept the same way: a second strip of a day is a
*repeat* linked to the day's entry (:meth:`Archive.add_qc_entry` with
``repeat=True``), a wrongly entered value is fixed by a *correction* that
names the entry and a reason (:meth:`Archive.add_qc_correction`), and
nothing stored is changed or deleted.  Entries go in date order, checked
inside the write transaction; a missed day is stored late on purpose
(``late=True``) and marked as entered late.

Every stored record also joins a hash chain (:mod:`.chain`) in the same
transaction: :meth:`Archive.verify` names the first record changed outside
stripscan, and opening the file checks the chain's head cheaply.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Sequence
from contextlib import AbstractContextManager
from pathlib import Path
from typing import Any

from stripscan.archive import chain
from stripscan.archive.backend import Backend, Connection, Row
from stripscan.archive.errors import ArchiveError, ArchiveIntegrityError, ArchiveLookupError
from stripscan.archive.importing import Importing
from stripscan.archive.location import SERVER_SCHEMES
from stripscan.archive.processor_qc import ProcessorQc
from stripscan.archive.records import ImportReport
from stripscan.archive.reference_data import ReferenceData
from stripscan.archive.snapshots import SnapshotHistory
from stripscan.archive.tables import REFERENCE

__all__ = ["Archive", "default_archive_path", "DEFAULT_BUSY_TIMEOUT_MS"]

DEFAULT_BUSY_TIMEOUT_MS = 5000


def user_data_folder() -> Path:
    """The one folder of the user's stripscan data: the default archive and the window's log.

    ``$XDG_DATA_HOME/stripscan`` (``~/.local/share/stripscan`` when
    XDG_DATA_HOME is unset or not absolute, as the XDG base directory
    specification asks), or ``%LOCALAPPDATA%\\stripscan`` on Windows.
    """
    if sys.platform == "win32":
        base = Path(os.environ.get("LOCALAPPDATA") or Path.home() / "AppData" / "Local")
    else:
        xdg = os.environ.get("XDG_DATA_HOME", "")
        base = Path(xdg) if xdg and os.path.isabs(xdg) else Path.home() / ".local" / "share"
    return base / "stripscan"


def default_archive_path() -> Path:
    """Where the archive lives unless a path is given.

    ``STRIPSCAN_ARCHIVE`` wins when set to a file.  Otherwise ``archive.sqlite3`` in
    :func:`user_data_folder` (``~/.local/share/stripscan/archive.sqlite3``).  A server
    named there is not a path: :func:`stripscan.archive.parse_location` reads it.
    """
    override = os.environ.get("STRIPSCAN_ARCHIVE", "").strip()
    if override and not override.lower().startswith(SERVER_SCHEMES):
        return Path(override).expanduser()
    return user_data_folder() / "archive.sqlite3"


class Archive(ReferenceData, SnapshotHistory, ProcessorQc, Importing):
    """An open lot archive.  Use :func:`stripscan.archive.open_archive`; close it (or use ``with``).

    Parameters
    ----------
    backend : Backend
        The open storage location.

    Attributes
    ----------
    path : Path or str
        The archive file, or the server location (without a password).
    read_only : bool
        True when opened read-only or when the file's permissions forbid
        writing; every write then raises :class:`ArchiveReadOnlyError`.
    busy_timeout_ms : int
        How long a write waits for another program's write to finish.
    """

    def __init__(self, backend: Backend) -> None:
        self._backend = backend
        self.path: Path | str = backend.path if backend.path is not None else backend.location
        self.read_only = backend.read_only
        self.busy_timeout_ms = backend.busy_timeout_ms

    # ------------------------------------------------------------------ opening

    @classmethod
    def open(cls, path: str | os.PathLike[str] | None = None, *,
             busy_timeout_ms: int = DEFAULT_BUSY_TIMEOUT_MS, read_only: bool = False,
             create: bool = True, check_chain: bool = True) -> "Archive":
        """Open (or create) an archive and bring its schema up to date: :func:`stripscan.archive.open_archive`."""
        from stripscan.archive import open_archive

        return open_archive(path, busy_timeout_ms=busy_timeout_ms, read_only=read_only, create=create,
                            check_chain=check_chain)

    def _check_chain_head(self) -> None:
        if not self._backend.has_chain:
            return
        with self.read_together():
            try:
                problem = chain.check_head(self._c)
            except self._backend.Error as exc:
                raise self._translate(exc, "check its record chain") from None
        if problem is not None:
            raise ArchiveIntegrityError(
                f"{self.path}: the stored history does not match its hash chain ({problem}): it was changed "
                "outside stripscan; 'stripscan archive verify' names the first record that does not match")

    def verify(self) -> chain.ChainReport:
        """Walk the whole hash chain and report the first stored record that does not match.

        Returns
        -------
        ChainReport
            Records walked, the chain's head (number and hash) and the first
            problem in words, None when every record matches.  It detects a
            change made outside stripscan; it cannot prevent one.
        """
        if not self._backend.has_chain:
            raise ArchiveError(f"{self.path} uses schema version {self.schema_version}, before the hash chain; "
                               "open it once with write access to upgrade it")
        with self.read_together():
            try:
                return chain.verify(self._c)
            except self._backend.Error as exc:
                raise self._translate(exc, "verify it") from None

    def _chain(self, conn: Connection, kind: str, key: Any) -> None:
        """Add the record just written to the hash chain, in the same transaction."""
        chain.append(conn, kind, key)

    def close(self) -> None:
        """Close the archive; calling it again does nothing."""
        self._backend.close()

    def __enter__(self) -> "Archive":
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    def __repr__(self) -> str:
        state = "closed" if self._backend.closed else ("read-only" if self.read_only else "open")
        return f"<Archive {str(self.path)!r} {state}>"

    @property
    def schema_version(self) -> int:
        """The archive's schema version."""
        return self._backend.schema_version()

    # ------------------------------------------------------------ plumbing

    @property
    def _c(self) -> Connection:
        return self._backend.connection

    def _translate(self, exc: BaseException, action: str) -> ArchiveError:
        """Turn a storage error into an archive error that names the archive."""
        return self._backend.translate(exc, action)

    def _query(self, sql: str, params: Sequence[Any] = ()) -> list[Any]:
        return self._backend.query(sql, params)

    def _rows(self, sql: str, params: Sequence[Any] = ()) -> list[Row]:
        return self._backend.named(sql, params)

    def read_together(self) -> AbstractContextManager[Connection]:
        """Several reads that see one state of the archive, no write landing in between.

        ``with archive.read_together(): ...`` around calls of the public
        reading methods (an export, a report).
        """
        return self._backend.reading()

    def _writing(self, action: str) -> AbstractContextManager[Connection]:
        """One write transaction: all of it is stored, or none of it."""
        return self._backend.writing(action)

    def _checked(self, doing: str, record_class: type, *args: Any, **kwargs: Any) -> Any:
        """Build a record; its own checks' complaint becomes an ArchiveError naming the file."""
        try:
            return record_class(*args, **kwargs)
        except ValueError as exc:
            raise ArchiveError(f"{self.path}: cannot {doing}: {exc}") from None

    def _missing(self, word: str, key: Any) -> ArchiveLookupError:
        return ArchiveLookupError(f"{self.path}: {word} {key!r} is not in the archive")

    def _exists(self, table: str, column: str, key: Any) -> bool:
        return self._c.execute(f"SELECT 1 FROM {table} WHERE {column} = ?", (key,)).fetchone() is not None

    def _require(self, record_class: type, key: Any) -> None:
        table, column, word = REFERENCE[record_class]
        if not self._exists(table, column, key):
            raise self._missing(word, key)

    # ------------------------------------------------ export, import, backup

    def export_json(self, path: str | os.PathLike[str]) -> Path:
        """Write everything in the archive to a JSON file that :meth:`import_json` reads back exactly."""
        from stripscan.archive.exchange import export_json
        return export_json(self, Path(path))

    def import_json(self, path: str | os.PathLike[str]) -> ImportReport:
        """Add an exported JSON file's contents in one transaction.

        Items already present with the same content are left alone; an item
        whose key (id or name; for a QC entry of an export format 1 file,
        processor and day) is taken by other content stops the import with
        :class:`ArchiveConflictError`, and nothing of the file is stored.
        """
        from stripscan.archive.exchange import import_json
        return import_json(self, Path(path))

    def export_csv(self, path: str | os.PathLike[str], *, lot: str | None = None, processor: str | None = None,
                   include_retired: bool = False, include_superseded: bool = False) -> Path:
        """Write the snapshots' figures as a UTF-8 CSV table, header row with units."""
        from stripscan.archive.exchange import export_csv
        return export_csv(self, Path(path), lot=lot, processor=processor, include_retired=include_retired,
                          include_superseded=include_superseded)

    def backup(self, dest: str | os.PathLike[str], *, overwrite: bool = False) -> Path:
        """Copy the archive to the file ``dest``, one consistent state even while others write."""
        return self._backend.backup(Path(dest), overwrite=overwrite)

