"""The lot archive: stripscan's memory of strip readings, for audits.

Film types, emulsion lots, processors, sensitometers, calibrations and one
*snapshot* per strip reading, with processor QC logs beside them.
Snapshots are never changed: corrections are revisions, withdrawals are
retirements.

Open one with :func:`open_archive`: a file path (an embedded SQLite file,
the default) or a PostgreSQL connection string (a shared archive on a
server).  The rules live in :mod:`.service`, over the small interface of
:mod:`.backend`; this module is the only one that chooses a backend
(:mod:`.sqlite`, :mod:`.postgres`).  The archive reads and writes the
core's records (:mod:`stripscan.core.records`); the core knows nothing of
storage.
"""

import os

from stripscan.archive.errors import (
    ArchiveBusyError,
    ArchiveConflictError,
    ArchiveConnectionError,
    ArchiveError,
    ArchiveIntegrityError,
    ArchiveLookupError,
    ArchiveReadOnlyError,
    DuplicateDayError,
    OutOfOrderError,
)
from stripscan.archive.records import (
    FIGURES,
    EmulsionLot,
    FilmType,
    ImportReport,
    LotSummary,
    NewSnapshot,
    Processor,
    Sensitometer,
    Snapshot,
    SnapshotNote,
    SnapshotSummary,
    StepReadings,
    TrendPoint,
    snapshots_from_analysis,
)
from stripscan.archive.values import calibration_hash
from stripscan.archive.qc_records import Crossover, QcEntry, QcEvent, QcSettings
from stripscan.archive.location import Location, parse_location, without_password
from stripscan.archive.service import DEFAULT_BUSY_TIMEOUT_MS, Archive, default_archive_path, user_data_folder

__all__ = [
    "open_archive",
    "discard_if_empty",
    "parse_location",
    "without_password",
    "Location",
    "FILE_SUFFIXES",
    "Archive",
    "default_archive_path",
    "user_data_folder",
    "ArchiveError",
    "ArchiveBusyError",
    "ArchiveConflictError",
    "ArchiveConnectionError",
    "ArchiveLookupError",
    "ArchiveReadOnlyError",
    "ArchiveIntegrityError",
    "DuplicateDayError",
    "OutOfOrderError",
    "FIGURES",
    "Crossover",
    "EmulsionLot",
    "FilmType",
    "ImportReport",
    "LotSummary",
    "NewSnapshot",
    "Processor",
    "QcEntry",
    "QcEvent",
    "QcSettings",
    "Sensitometer",
    "Snapshot",
    "SnapshotNote",
    "SnapshotSummary",
    "TrendPoint",
    "StepReadings",
    "calibration_hash",
    "snapshots_from_analysis",
]


def __getattr__(name: str) -> object:
    # FILE_SUFFIXES (the endings an archive file usually has, for file dialogs) is the file backend's;
    # read on first use, so importing the archive package does not load sqlite3.
    if name == "FILE_SUFFIXES":
        from stripscan.archive.sqlite.backend import FILE_SUFFIXES

        return FILE_SUFFIXES
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


#: What to install for a server archive (the driver is an optional extra).
SERVER_EXTRA = 'pip install "stripscan[postgres]"'


def _server_backend(location: Location, *, busy_timeout_ms: int, read_only: bool, create: bool) -> object:
    # The server backend's one entry point: stripscan.archive.postgres.open_backend(location, *,
    # busy_timeout_ms, read_only, create) -> Backend (stripscan.archive.backend), imported only when a
    # server is named, so a file archive never loads the driver.
    try:
        from stripscan.archive.postgres import open_backend
    except ImportError:
        raise ArchiveError(f"{location.display}: a PostgreSQL archive needs the PostgreSQL driver: "
                           f"{SERVER_EXTRA}") from None
    return open_backend(location, busy_timeout_ms=busy_timeout_ms, read_only=read_only, create=create)


def open_archive(location: "str | os.PathLike[str] | None" = None, *,
                 busy_timeout_ms: int = DEFAULT_BUSY_TIMEOUT_MS, read_only: bool = False,
                 create: bool = True, check_chain: bool = True) -> Archive:
    """Open (or create) an archive and bring its schema up to date.

    Parameters
    ----------
    location : path-like or str, optional
        A file path (or ``sqlite:///PATH``), or a PostgreSQL connection
        string (``postgresql://user@host/dbname``,
        ``postgresql:///?service=NAME``); ``$STRIPSCAN_ARCHIVE``, then
        :func:`default_archive_path`, when omitted.
    busy_timeout_ms : int
        How long to wait for another program's write before giving up
        with :class:`ArchiveBusyError`.
    read_only : bool
        Open for reading only.
    create : bool
        Create the file (and its folders), or the server's schema, when
        there is none.
    check_chain : bool
        Check the head of the hash chain and that every stored record is
        in it (cheap); False only to open an archive whose chain is broken,
        to look at it with :meth:`Archive.verify`.

    Raises
    ------
    ArchiveError
        When the location is not an archive, is damaged (the message
        carries the storage's own integrity check), belongs to another
        program or to a newer stripscan, or cannot be created; for a server
        without the driver installed, the message says what to install.
    ArchiveBusyError
        When another program holds the write lock during an upgrade.
    ArchiveIntegrityError
        When the stored history does not match its hash chain (a change
        made outside stripscan); :meth:`Archive.verify` names the record.
    """
    if isinstance(busy_timeout_ms, bool) or not isinstance(busy_timeout_ms, int) or busy_timeout_ms < 0:
        raise ValueError(f"busy_timeout_ms must be a whole number of milliseconds >= 0, not {busy_timeout_ms!r}")
    try:
        where = parse_location(location)
    except ValueError as exc:
        raise ArchiveError(str(exc)) from None
    if where.is_server:
        backend = _server_backend(where, busy_timeout_ms=busy_timeout_ms, read_only=read_only, create=create)
    else:
        from stripscan.archive.sqlite.backend import SqliteBackend

        backend = SqliteBackend.open(where.path, busy_timeout_ms=busy_timeout_ms, read_only=read_only,
                                     create=create)
    archive = Archive(backend)  # type: ignore[arg-type]
    try:
        if check_chain:
            archive._check_chain_head()
    except BaseException:
        archive.close()
        raise
    return archive


def discard_if_empty(location: "str | os.PathLike[str]") -> bool:
    """Remove an archive file that a failed command has just created and left empty; whether it was.

    A server's database is never removed (an administrator made it).
    """
    where = parse_location(location)
    if where.is_server:
        return False
    from stripscan.archive.sqlite.backend import remove_if_unused

    return remove_if_unused(where.path)
