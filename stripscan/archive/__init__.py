"""The lot archive: stripscan's memory of strip readings, for audits.

An embedded SQLite file (standard library ``sqlite3``) holding film types,
emulsion lots, processors, sensitometers, calibrations and one *snapshot*
per strip reading, with processor QC logs beside them.  Snapshots are never
changed: corrections are revisions, withdrawals are retirements.

The archive reads and writes the core's records
(:mod:`stripscan.core.records`); the core itself knows nothing of SQLite.
"""

from stripscan.archive.errors import (
    ArchiveBusyError,
    ArchiveConflictError,
    ArchiveError,
    ArchiveIntegrityError,
    ArchiveLookupError,
    ArchiveReadOnlyError,
    DuplicateDayError,
    OutOfOrderError,
)
from stripscan.archive.records import (
    FIGURES,
    Crossover,
    EmulsionLot,
    FilmType,
    ImportReport,
    LotSummary,
    NewSnapshot,
    Processor,
    QcEntry,
    QcEvent,
    QcSettings,
    Sensitometer,
    Snapshot,
    SnapshotNote,
    SnapshotSummary,
    StepReadings,
    TrendPoint,
    calibration_hash,
    snapshots_from_analysis,
)
from stripscan.archive.service import Archive, default_archive_path, user_data_folder

__all__ = [
    "Archive",
    "default_archive_path",
    "user_data_folder",
    "ArchiveError",
    "ArchiveBusyError",
    "ArchiveConflictError",
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
