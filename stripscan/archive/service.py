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

import dataclasses
import json
import os
import sys
from collections.abc import Iterable, Sequence
from contextlib import AbstractContextManager
from pathlib import Path
from typing import Any, Callable

from stripscan.core.records import Analysis, ScanInfo, StripResult

from stripscan.archive import chain
from stripscan.archive.backend import Backend, Connection, Row
from stripscan.archive.entry_checks import check_note, check_qc_entry, check_reference, check_snapshot
from stripscan.archive.errors import (
    ArchiveConflictError,
    ArchiveError,
    ArchiveIntegrityError,
    ArchiveLookupError,
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
    calibration_text,
    canonical_json,
    qc_entry_states,
    snapshots_from_analysis,
    utc_now,
)

__all__ = ["Archive", "default_archive_path", "DEFAULT_BUSY_TIMEOUT_MS"]

DEFAULT_BUSY_TIMEOUT_MS = 5000

# The film's date, as in Snapshot.date: processing, exposure, scan, storage.
_DAY = "COALESCE(s.processed_on, s.exposed_on, s.scanned_on, substr(s.created_at, 1, 10))"

_SNAPSHOT_COLUMNS = (
    "id", "created_at", "lot_id", "processor", "sensitometer", "calibration_hash", "operator",
    "exposed_on", "processed_on", "scanned_on", "scan_path", "scan_sha256", "strip_index", *FIGURES,
    "revises", "revision_reason", "retired_at", "retired_reason", "program_version", "notes",
)
_DATA_COLUMNS = ("snapshot_id", "scan_json", "settings_json", "warnings_json", "strip_json", "preview_png")
_SNAPSHOT_SELECT = (
    f"SELECT {', '.join('s.' + c for c in _SNAPSHOT_COLUMNS)}, {', '.join('d.' + c for c in _DATA_COLUMNS)} "
    "FROM snapshots s JOIN snapshot_data d ON d.snapshot_id = s.id"
)


def _insert_sql(table: str, columns: Sequence[str]) -> str:
    return f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({', '.join('?' for _ in columns)})"


# What a correction of a QC entry may change; a wrong processor is another matter.
_QC_DENSITIES = ("base_fog", "mid_density", "density_difference")
_QC_CORRECTABLE = (*_QC_DENSITIES, "date", "note", "action")

# The latest day of a processor's log: of entries nothing corrects (a
# correction may have moved a wrongly dated entry to another day).
_QC_LATEST_DAY = ("SELECT max(e.date) FROM qc_entries e WHERE e.processor = ? AND e.id IS NOT ? "
                  "AND NOT EXISTS (SELECT 1 FROM qc_entries c WHERE c.corrects = e.id)")

_STEP_COLUMNS = ("snapshot_id", "step", "log_exposure", "od", "od_sd", "pixels", "in_range", "excluded")

_SUMMARY_SELECT = (
    f"SELECT s.id, s.created_at, {_DAY} AS day, s.lot_id, s.processor, s.operator, s.strip_index, "
    f"{', '.join('s.' + f for f in FIGURES)}, s.revises, n.id, s.retired_at, s.retired_reason, "
    "s.scan_path FROM snapshots s LEFT JOIN snapshots n ON n.revises = s.id"
)

# Reference data: record class -> (table, key column, plain word for messages).
# The key column has the same name as the record's key field.
_REFERENCE: dict[type, tuple[str, str, str]] = {
    FilmType: ("film_types", "name", "film type"),
    EmulsionLot: ("emulsion_lots", "lot_id", "lot"),
    Processor: ("processors", "name", "processor"),
    Sensitometer: ("sensitometers", "sensitometer_id", "sensitometer"),
}
# Their kind in the hash chain.
_CHAIN_KIND = {FilmType: "film_type", EmulsionLot: "lot", Processor: "processor", Sensitometer: "sensitometer"}

# Marks "leave as it is" where None is a value.
_KEEP: Any = object()


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


# A step is read only where it was in the calibrated range and not excluded (a join on snapshot_steps
# aliased {0}, the step number a parameter).
_USABLE_STEP = ("{0}.snapshot_id = s.id AND {0}.step = ? AND {0}.in_range = 1 AND {0}.excluded = 0 "
                "AND {0}.od IS NOT NULL")


def default_archive_path() -> Path:
    """Where the archive lives unless a path is given.

    ``STRIPSCAN_ARCHIVE`` wins when set.  Otherwise ``archive.sqlite3`` in
    :func:`user_data_folder` (``~/.local/share/stripscan/archive.sqlite3``).
    """
    override = os.environ.get("STRIPSCAN_ARCHIVE")
    if override:
        return Path(override).expanduser()
    return user_data_folder() / "archive.sqlite3"


class Archive:
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
        with self._reading():
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
        with self._reading():
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

    def _reading(self) -> AbstractContextManager[Connection]:
        """Several reads that must see one state of the archive (no write in between)."""
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
        table, column, word = _REFERENCE[record_class]
        if not self._exists(table, column, key):
            raise self._missing(word, key)

    # ------------------------------------------------------- reference data

    @staticmethod
    def _reference_row(record: Any) -> dict[str, Any]:
        row = record.to_dict()
        if isinstance(record, Sensitometer):
            row["log_exposures_json"] = canonical_json(row.pop("log_exposures"))
        return row

    @staticmethod
    def _reference_record(record_class: type, row: Row) -> Any:
        data = dict(row)
        if record_class is Sensitometer:
            data["log_exposures"] = tuple(json.loads(data.pop("log_exposures_json")))
        return record_class(**data)

    def _insert_reference(self, conn: Connection, record: Any) -> None:
        table, column, word = _REFERENCE[type(record)]
        key = getattr(record, column)
        check_reference(self.path, record)
        if self._exists(table, column, key):
            raise ArchiveConflictError(f"{self.path}: {word} {key!r} is already in the archive")
        if isinstance(record, EmulsionLot) and record.film_type is not None:
            self._require(FilmType, record.film_type)
        row = self._reference_row(record)
        conn.execute(f"INSERT INTO {table} ({', '.join(row)}) VALUES ({', '.join('?' for _ in row)})",
                     tuple(row.values()))
        self._chain(conn, _CHAIN_KIND[type(record)], key)

    def _add_reference(self, record: Any) -> Any:
        _, column, word = _REFERENCE[type(record)]
        with self._writing(f"add {word} {getattr(record, column)!r}") as conn:
            self._insert_reference(conn, record)
        return record

    def _get_reference(self, record_class: type, key: str) -> Any:
        table, column, word = _REFERENCE[record_class]
        rows = self._rows(f"SELECT * FROM {table} WHERE {column} = ?", (key,))
        if not rows:
            raise self._missing(word, key)
        return self._reference_record(record_class, rows[0])

    def _list_reference(self, record_class: type) -> list[Any]:
        table, column, _ = _REFERENCE[record_class]
        return [self._reference_record(record_class, row)
                for row in self._rows(f"SELECT * FROM {table} ORDER BY {column}")]

    def add_film_type(self, film_type: FilmType) -> FilmType:
        """Store a film type; its name must be new."""
        return self._add_reference(film_type)

    def add_lot(self, lot: EmulsionLot) -> EmulsionLot:
        """Store an emulsion lot; its id must be new and its film type stored."""
        return self._add_reference(lot)

    def add_processor(self, processor: Processor) -> Processor:
        """Store a processor; its name must be new."""
        return self._add_reference(processor)

    def add_sensitometer(self, sensitometer: Sensitometer) -> Sensitometer:
        """Store a sensitometer with its step log-exposure table; its id must be new."""
        return self._add_reference(sensitometer)

    def get_film_type(self, name: str) -> FilmType:
        return self._get_reference(FilmType, name)

    def get_lot(self, lot_id: str) -> EmulsionLot:
        return self._get_reference(EmulsionLot, lot_id)

    def get_processor(self, name: str) -> Processor:
        return self._get_reference(Processor, name)

    def get_sensitometer(self, sensitometer_id: str) -> Sensitometer:
        return self._get_reference(Sensitometer, sensitometer_id)

    def list_film_types(self) -> list[FilmType]:
        return self._list_reference(FilmType)

    def list_processors(self) -> list[Processor]:
        return self._list_reference(Processor)

    def list_sensitometers(self) -> list[Sensitometer]:
        return self._list_reference(Sensitometer)

    def update_lot(self, lot_id: str, *, film_type: str | None = None, expiry_date: str | None = None,
                   received_date: str | None = None, notes: str | None = None,
                   create_missing: bool = False) -> EmulsionLot:
        """Fill in or change a lot's details; what is not given (None) stays as stored.

        Parameters
        ----------
        lot_id : str
            The lot (its id never changes).
        film_type : str, optional
            The kind of film; must be stored (see :meth:`add_film_type`)
            unless ``create_missing``.
        expiry_date, received_date : str, optional
            ``YYYY-MM-DD``: the expiry date printed on the box, the day the
            box arrived.
        notes : str, optional
            Free text.
        create_missing : bool
            Add the lot, and a bare film type, when not stored yet.

        Returns
        -------
        EmulsionLot
            The lot as stored now.  Each change is a new record of the hash chain.
        """
        with self._writing(f"store the details of lot {lot_id!r}") as conn:
            exists = self._exists("emulsion_lots", "lot_id", lot_id)
            if not exists and not create_missing:
                raise self._missing("lot", lot_id)
            old = self._get_reference(EmulsionLot, lot_id) if exists else EmulsionLot(lot_id)
            given = {"film_type": film_type, "expiry_date": expiry_date, "received_date": received_date,
                     "notes": notes}
            new = self._checked(f"store the details of lot {lot_id!r}", EmulsionLot,
                                **{**old.to_dict(), **{k: v for k, v in given.items() if v is not None}})
            if new.film_type is not None and not self._exists("film_types", "name", new.film_type):
                if not create_missing:
                    raise self._missing("film type", new.film_type)
                self._insert_reference(conn, FilmType(new.film_type))
            if not exists:
                self._insert_reference(conn, new)
            elif new != old:
                conn.execute("UPDATE emulsion_lots SET film_type = ?, expiry_date = ?, received_date = ?, notes = ? "
                             "WHERE lot_id = ?", (new.film_type, new.expiry_date, new.received_date, new.notes,
                                                  lot_id))
                self._chain(conn, "lot", lot_id)
            return new

    def list_lots(self) -> list[LotSummary]:
        """Every lot with the count and first/last film date of its current snapshots."""
        rows = self._rows(
            f"SELECT l.*, count(c.id) AS n, min(c.day) AS first, max(c.day) AS last "
            f"FROM emulsion_lots l LEFT JOIN ("
            f"  SELECT s.id, s.lot_id, {_DAY} AS day FROM snapshots s"
            f"  WHERE s.retired_at IS NULL"
            f"  AND NOT EXISTS (SELECT 1 FROM snapshots n WHERE n.revises = s.id)"
            f") c ON c.lot_id = l.lot_id GROUP BY l.lot_id ORDER BY l.lot_id")
        lot_fields = ("lot_id", "film_type", "expiry_date", "received_date", "notes")
        return [LotSummary(EmulsionLot(**{k: row[k] for k in lot_fields}), row["n"], row["first"], row["last"])
                for row in rows]

    # --------------------------------------------------------- calibrations

    def _insert_calibration(self, conn: Connection, calibration: dict[str, Any]) -> str:
        digest = calibration_hash(calibration)
        if not self._exists("calibrations", "hash", digest):
            conn.execute("INSERT INTO calibrations (hash, json) VALUES (?, ?)",
                         (digest, calibration_text(calibration)))
            self._chain(conn, "calibration", digest)
        return digest

    def add_calibration(self, calibration: dict[str, Any]) -> str:
        """Store a calibration once and return its content hash."""
        try:
            calibration_hash(calibration)
        except ValueError as exc:
            raise ArchiveError(f"{self.path}: cannot store calibration: {exc}") from None
        with self._writing("store a calibration") as conn:
            return self._insert_calibration(conn, calibration)

    def get_calibration(self, digest: str) -> dict[str, Any]:
        """The calibration stored under ``digest``."""
        rows = self._query("SELECT json FROM calibrations WHERE hash = ?", (digest,))
        if not rows:
            raise self._missing("calibration", digest)
        return json.loads(rows[0][0])

    def list_calibrations(self) -> list[str]:
        """Hashes of all stored calibrations, sorted."""
        return [row[0] for row in self._query("SELECT hash FROM calibrations ORDER BY hash")]

    # ------------------------------------------------------------ snapshots

    def _next_id(self, conn: Connection, table: str) -> int:
        # Safe inside BEGIN IMMEDIATE: no other writer can take the number.
        return conn.execute(f"SELECT coalesce(max(id), 0) + 1 FROM {table}").fetchone()[0]

    def _check_links(self, conn: Connection, snapshot: Snapshot, create_missing: bool) -> None:
        if not self._exists("emulsion_lots", "lot_id", snapshot.lot_id):
            if not create_missing:
                raise self._missing("lot", snapshot.lot_id)
            self._insert_reference(conn, EmulsionLot(snapshot.lot_id))
        if snapshot.processor is not None and not self._exists("processors", "name", snapshot.processor):
            if not create_missing:
                raise self._missing("processor", snapshot.processor)
            self._insert_reference(conn, Processor(snapshot.processor))
        if snapshot.sensitometer is not None:
            self._require(Sensitometer, snapshot.sensitometer)
        if snapshot.calibration_hash is not None:
            if not self._exists("calibrations", "hash", snapshot.calibration_hash):
                raise self._missing("calibration", snapshot.calibration_hash)
        if snapshot.revises is not None:
            row = conn.execute("SELECT n.id FROM snapshots s LEFT JOIN snapshots n ON n.revises = s.id "
                               "WHERE s.id = ?", (snapshot.revises,)).fetchone()
            if row is None:
                raise self._missing("snapshot", snapshot.revises)
            if row[0] is not None:
                raise ArchiveConflictError(f"{self.path}: snapshot {snapshot.revises} has already been "
                                           f"revised by snapshot {row[0]}; revise that one instead")

    def _insert_snapshot(self, conn: Connection, snapshot: Snapshot, *,
                         create_missing: bool = False) -> None:
        """Write one snapshot, its step table and figure columns (inside a transaction)."""
        check_snapshot(self.path, snapshot)
        self._check_links(conn, snapshot, create_missing)
        strip = snapshot.strip.to_dict()
        steps = strip["steps"]
        numbers = [s["step"] for s in steps]
        if len(set(numbers)) != len(numbers):
            raise ArchiveError(f"{self.path}: cannot store snapshot: strip {snapshot.strip.index} "
                               "lists the same step number twice")
        metrics = strip["metrics"]
        values = {
            "id": snapshot.id, "snapshot_id": snapshot.id, "created_at": snapshot.created_at, "lot_id": snapshot.lot_id,
            "processor": snapshot.processor, "sensitometer": snapshot.sensitometer,
            "calibration_hash": snapshot.calibration_hash, "operator": snapshot.operator,
            "exposed_on": snapshot.exposed_on, "processed_on": snapshot.processed_on,
            "scanned_on": snapshot.scanned_on, "scan_path": snapshot.scan.path,
            "scan_sha256": snapshot.scan.sha256, "scan_json": canonical_json(snapshot.scan.to_dict()),
            "strip_index": snapshot.strip.index, "strip_json": canonical_json(strip),
            **{name: metrics.get(name) for name in FIGURES},
            "settings_json": canonical_json(snapshot.settings),
            "warnings_json": canonical_json(list(snapshot.warnings)),
            "program_version": snapshot.program_version, "notes": snapshot.notes,
            "preview_png": snapshot.preview_png, "revises": snapshot.revises,
            "revision_reason": snapshot.revision_reason, "retired_at": snapshot.retired_at,
            "retired_reason": snapshot.retired_reason,
        }
        conn.execute(_insert_sql("snapshots", _SNAPSHOT_COLUMNS), tuple(values[c] for c in _SNAPSHOT_COLUMNS))
        conn.execute(_insert_sql("snapshot_data", _DATA_COLUMNS), tuple(values[c] for c in _DATA_COLUMNS))
        conn.executemany(
            _insert_sql("snapshot_steps", _STEP_COLUMNS),
            [(snapshot.id, s["step"], s["log_exposure"], s["od"], s["od_sd"], s["pixels"],
              int(s["in_range"]), int(s["excluded"])) for s in steps])
        self._chain(conn, "snapshot", snapshot.id)
        if snapshot.retired_at is not None:
            self._chain(conn, "retirement", snapshot.id)

    def _store_new(self, conn: Connection, draft: NewSnapshot, *, create_missing: bool,
                   revises: int | None = None, reason: str | None = None) -> int:
        if not isinstance(draft, NewSnapshot):
            raise TypeError(f"expected a NewSnapshot, not {type(draft).__name__}")
        digest = self._insert_calibration(conn, draft.calibration) if draft.calibration is not None else None
        snapshot_id = self._next_id(conn, "snapshots")
        snapshot = self._checked(
            "store snapshot", Snapshot,
            id=snapshot_id, created_at=utc_now(), lot_id=draft.lot_id, scan=draft.scan,
            strip=draft.strip, processor=draft.processor, sensitometer=draft.sensitometer,
            calibration_hash=digest, operator=draft.operator, exposed_on=draft.exposed_on,
            processed_on=draft.processed_on, scanned_on=draft.scanned_on, settings=draft.settings,
            warnings=draft.warnings, program_version=draft.program_version, notes=draft.notes,
            preview_png=draft.preview_png, revises=revises, revision_reason=reason)
        self._insert_snapshot(conn, snapshot, create_missing=create_missing)
        return snapshot_id

    def add_snapshot(self, draft: NewSnapshot, *, create_missing: bool = False) -> Snapshot:
        """Store one strip's reading and return it as stored.

        Parameters
        ----------
        draft : NewSnapshot
            The reading and its bookkeeping.
        create_missing : bool
            Add a bare lot or processor entry when the named one is not
            stored yet, instead of refusing.

        Raises
        ------
        ArchiveLookupError
            When the lot, processor or sensitometer is not stored.
        """
        return self.add_snapshots([draft], create_missing=create_missing)[0]

    def add_snapshots(self, drafts: Iterable[NewSnapshot], *, create_missing: bool = False,
                      new_sensitometer: Sensitometer | None = None) -> list[Snapshot]:
        """Store several readings in one transaction: all of them or none.

        ``new_sensitometer`` is stored first, in the same transaction, for
        readings that name a sensitometer the archive does not know yet.
        """
        with self._writing("add snapshots") as conn:
            if new_sensitometer is not None:
                self._insert_reference(conn, new_sensitometer)
            ids = [self._store_new(conn, draft, create_missing=create_missing) for draft in drafts]
            return [self._load_snapshot(i) for i in ids]

    def add_analysis(self, analysis: Analysis, lot_id: str, *, calibration: dict[str, Any] | None = None,
                     create_missing: bool = False, new_sensitometer: Sensitometer | None = None,
                     **details: Any) -> list[Snapshot]:
        """Store every strip of an analysed scan as one snapshot each, in one transaction.

        ``calibration`` is the full calibration used (see
        :func:`~stripscan.archive.records.snapshots_from_analysis`);
        ``new_sensitometer`` a sensitometer to store with them (see
        :meth:`add_snapshots`); ``details`` are :class:`NewSnapshot` fields
        such as ``processor``, ``sensitometer``, ``operator``,
        ``exposed_on``, ``processed_on`` or ``notes``.
        """
        try:
            drafts = snapshots_from_analysis(analysis, lot_id, calibration=calibration, **details)
        except (TypeError, ValueError) as exc:
            raise ArchiveError(f"{self.path}: cannot store {analysis.scan.path}: {exc}") from None
        return self.add_snapshots(drafts, create_missing=create_missing, new_sensitometer=new_sensitometer)

    def _snapshot_from_row(self, row: Sequence[Any]) -> Snapshot:
        data = dict(zip((*_SNAPSHOT_COLUMNS, *_DATA_COLUMNS), row))
        return Snapshot(
            id=data["id"], created_at=data["created_at"], lot_id=data["lot_id"],
            scan=ScanInfo.from_dict(json.loads(data["scan_json"])),
            strip=StripResult.from_dict(json.loads(data["strip_json"])),
            processor=data["processor"], sensitometer=data["sensitometer"],
            calibration_hash=data["calibration_hash"], operator=data["operator"],
            exposed_on=data["exposed_on"], processed_on=data["processed_on"],
            scanned_on=data["scanned_on"], settings=json.loads(data["settings_json"]),
            warnings=tuple(json.loads(data["warnings_json"])), program_version=data["program_version"],
            notes=data["notes"], preview_png=data["preview_png"], revises=data["revises"],
            revision_reason=data["revision_reason"], retired_at=data["retired_at"],
            retired_reason=data["retired_reason"])

    def _load_snapshot(self, snapshot_id: int) -> Snapshot:
        row = self._c.execute(f"{_SNAPSHOT_SELECT} WHERE s.id = ?", (snapshot_id,)).fetchone()
        if row is None:
            raise self._missing("snapshot", snapshot_id)
        return self._snapshot_from_row(row)

    def get_snapshot(self, snapshot_id: int) -> Snapshot:
        """The snapshot with this id, retired or superseded ones included."""
        try:
            return self._load_snapshot(snapshot_id)
        except self._backend.Error as exc:
            raise self._translate(exc, "read it") from None

    def all_snapshots(self) -> list[Snapshot]:
        """Every stored snapshot in full, in id order (for export and audits)."""
        return [self._snapshot_from_row(row) for row in self._query(f"{_SNAPSHOT_SELECT} ORDER BY s.id")]

    def list_snapshots(self, lot: str | None = None, processor: str | None = None, *,
                       include_retired: bool = False, include_superseded: bool = False) -> list[SnapshotSummary]:
        """Snapshot summaries in film-date order.

        By default only current snapshots: the latest revision of each
        chain, and not retired.

        Parameters
        ----------
        lot, processor : str, optional
            Keep only this lot's / this processor's snapshots.
        include_retired : bool
            Also list retired snapshots.
        include_superseded : bool
            Also list snapshots that a later revision corrects.
        """
        where, params = self._filters(lot=[lot] if lot is not None else None, processor=processor,
                                      include_retired=include_retired, include_superseded=include_superseded)
        rows = self._query(f"{_SUMMARY_SELECT}{where} ORDER BY day, s.id", params)
        return [SnapshotSummary.from_row(row) for row in rows]

    @staticmethod
    def _filters(*, lot: Sequence[str] | None, processor: str | None, include_retired: bool,
                 include_superseded: bool) -> tuple[str, list[Any]]:
        clauses: list[str] = []
        params: list[Any] = []
        if lot is not None:
            clauses.append(f"s.lot_id IN ({', '.join('?' for _ in lot)})")
            params.extend(lot)
        if processor is not None:
            clauses.append("s.processor = ?")
            params.append(processor)
        if not include_retired:
            clauses.append("s.retired_at IS NULL")
        if not include_superseded:
            clauses.append("n.id IS NULL")
        return (" WHERE " + " AND ".join(clauses) if clauses else ""), params

    def trend(self, figure: str, lots: Sequence[str] | str | None = None, *, processor: str | None = None,
              include_retired: bool = False) -> list[TrendPoint]:
        """A figure over time: ``(date, value, lot, snapshot_id)`` of current snapshots.

        Snapshots where the figure could not be read are left out.
        Mid-density and density difference are read at the same steps in
        every strip of a lot, those of :meth:`lot_qc_steps` (common practice:
        once picked, the QC steps are kept); a strip on its own picks the step
        closest to the target, and neighbouring strips can pick neighbouring
        steps, a jump of several tenths that is no change of the film.

        Parameters
        ----------
        figure : str
            One of :data:`~stripscan.archive.records.FIGURES`.
        lots : sequence of str, optional
            Lots to include (all when omitted).
        processor : str, optional
            Keep only this processor's snapshots.
        """
        if figure not in FIGURES:
            raise ArchiveError(f"unknown figure {figure!r}; choose one of {', '.join(FIGURES)}")
        if isinstance(lots, str):
            lots = [lots]
        if figure in ("mid_density", "density_difference"):
            return self._trend_at_fixed_steps(figure, lots, processor=processor, include_retired=include_retired)
        where, params = self._filters(lot=list(lots) if lots is not None else None, processor=processor,
                                      include_retired=include_retired, include_superseded=False)
        where += (" AND " if where else " WHERE ") + f"s.{figure} IS NOT NULL"
        rows = self._query(
            f"SELECT {_DAY} AS day, s.{figure}, s.lot_id, s.id FROM snapshots s "
            f"LEFT JOIN snapshots n ON n.revises = s.id{where} ORDER BY day, s.id", params)
        return [TrendPoint(*row) for row in rows]

    def lot_qc_steps(self, lot: str) -> tuple[int, int, int] | None:
        """The steps a lot's mid-density and density difference are read at.

        Returns
        -------
        (mid_density_step, dd_high_step, dd_low_step) or None
            The steps the lot's first current snapshot (by date, then number)
            chose for itself; None when no snapshot of the lot has all three.
        """
        metrics = "json_extract(d.strip_json, '$.metrics.{}')"
        picked = [metrics.format(name) for name in ("mid_density_step", "dd_high_step", "dd_low_step")]
        columns = ", ".join(picked)
        current = "WHERE s.lot_id = ? AND s.retired_at IS NULL AND n.id IS NULL"
        first = f"ORDER BY {_DAY}, s.id LIMIT 1"
        # Nearly always the lot's first strip has its steps: read that one strip's JSON first,
        # as testing the JSON of every strip of the lot costs a server a parse of each (a
        # second for a lot of thousands); only when it lacks them, the first strip that has them.
        rows = self._query(f"SELECT {columns} FROM snapshot_data d WHERE d.snapshot_id = (SELECT s.id "
                           f"FROM snapshots s LEFT JOIN snapshots n ON n.revises = s.id {current} {first})", (lot,))
        if rows and any(step is None for step in rows[0]):
            has_all = "".join(f" AND {p} IS NOT NULL" for p in picked)
            rows = self._query(f"SELECT {columns} FROM snapshots s JOIN snapshot_data d ON d.snapshot_id = s.id "
                               f"LEFT JOIN snapshots n ON n.revises = s.id {current}{has_all} {first}", (lot,))
        return tuple(int(step) for step in rows[0]) if rows else None  # type: ignore[return-value]

    def step_readings(self, lot: str | None = None, processor: str | None = None, *, at_lot_steps: bool = True,
                      include_retired: bool = False, include_superseded: bool = False) -> dict[int, StepReadings]:
        """Mid-density and density difference of each listed snapshot, with the steps read, by snapshot id.

        Parameters
        ----------
        lot, processor : str, optional
            As :meth:`list_snapshots`, which lists the same snapshots.
        at_lot_steps : bool
            True: read every strip of a lot at the lot's kept steps
            (:meth:`lot_qc_steps`, as :meth:`trend` does), so that a lot's
            strips compare; False: each strip at the steps it chose itself.
        include_retired, include_superseded : bool
            As :meth:`list_snapshots`.
        """
        where, params = self._filters(lot=[lot] if lot is not None else None, processor=processor,
                                      include_retired=include_retired, include_superseded=include_superseded)
        if not at_lot_steps:
            own = "json_extract(d.strip_json, '$.metrics.{}')"
            rows = self._query(
                f"SELECT s.id, {own.format('mid_density_step')}, s.mid_density, {own.format('dd_high_step')}, "
                f"{own.format('dd_low_step')}, s.density_difference FROM snapshots s "
                f"JOIN snapshot_data d ON d.snapshot_id = s.id LEFT JOIN snapshots n ON n.revises = s.id{where}",
                params)
            return {row[0]: StepReadings(*row[1:]) for row in rows}
        out: dict[int, StepReadings] = {}
        lots = [row[0] for row in self._query(
            f"SELECT DISTINCT s.lot_id FROM snapshots s LEFT JOIN snapshots n ON n.revises = s.id{where}", params)]
        for name in lots:
            steps = self.lot_qc_steps(name)
            lot_where = where + (" AND " if where else " WHERE ") + "s.lot_id = ?"
            if steps is None:
                rows = self._query(f"SELECT s.id FROM snapshots s LEFT JOIN snapshots n ON n.revises = s.id"
                                   f"{lot_where}", [*params, name])
                out.update({row[0]: StepReadings(None, None, None, None, None) for row in rows})
                continue
            joins = " ".join(f"LEFT JOIN snapshot_steps {t} ON {_USABLE_STEP.format(t)}" for t in "abc")
            rows = self._query(f"SELECT s.id, a.od, b.od, c.od FROM snapshots s {joins} "
                               f"LEFT JOIN snapshots n ON n.revises = s.id{lot_where}", [*steps, *params, name])
            for sid, mid, high, low in rows:
                dd = high - low if high is not None and low is not None else None
                out[sid] = StepReadings(steps[0], mid, steps[1], steps[2], dd)
        return out

    def _trend_at_fixed_steps(self, figure: str, lots: Sequence[str] | None, *, processor: str | None,
                              include_retired: bool) -> list[TrendPoint]:
        if lots is None:
            lots = [row[0] for row in self._query("SELECT DISTINCT lot_id FROM snapshots ORDER BY lot_id")]
        usable = _USABLE_STEP
        points: list[TrendPoint] = []
        for lot in lots:
            steps = self.lot_qc_steps(lot)
            if steps is None:
                continue
            where, params = self._filters(lot=[lot], processor=processor, include_retired=include_retired,
                                          include_superseded=False)
            if figure == "mid_density":
                value, joins, step_params = "a.od", f"JOIN snapshot_steps a ON {usable.format('a')}", [steps[0]]
            else:
                value = "a.od - b.od"
                joins = f"JOIN snapshot_steps a ON {usable.format('a')} JOIN snapshot_steps b ON {usable.format('b')}"
                step_params = [steps[1], steps[2]]
            rows = self._query(
                f"SELECT {_DAY} AS day, {value}, s.lot_id, s.id FROM snapshots s {joins} "
                f"LEFT JOIN snapshots n ON n.revises = s.id{where}", [*step_params, *params])
            points += [TrendPoint(*row) for row in rows]
        return sorted(points, key=lambda p: (p.date, p.snapshot_id))

    def step_table(self, snapshot_id: int) -> list[tuple[int, float, float | None, float | None, bool, bool]]:
        """``(step, log_exposure, od, od_sd, in_range, excluded)`` rows of a snapshot, by step."""
        if not self._query("SELECT 1 FROM snapshots WHERE id = ?", (snapshot_id,)):
            raise self._missing("snapshot", snapshot_id)
        rows = self._query("SELECT step, log_exposure, od, od_sd, in_range, excluded FROM snapshot_steps "
                           "WHERE snapshot_id = ? ORDER BY step", (snapshot_id,))
        return [(s, e, od, sd, bool(r), bool(x)) for s, e, od, sd, r, x in rows]

    # ------------------------------------------------- revisions, retirement

    def _require_latest(self, conn: Connection, snapshot_id: int, doing: str) -> None:
        """Refuse to ``doing`` a snapshot that is retired or already corrected by a revision."""
        row = conn.execute("SELECT n.id, s.retired_at, s.retired_reason FROM snapshots s "
                           "LEFT JOIN snapshots n ON n.revises = s.id WHERE s.id = ?", (snapshot_id,)).fetchone()
        if row is None:
            raise self._missing("snapshot", snapshot_id)
        superseded_by, retired_at, retired_reason = row
        if retired_at is not None:
            raise ArchiveConflictError(f"{self.path}: snapshot {snapshot_id} was retired on {retired_at} "
                                       f"({retired_reason}); a retired snapshot cannot be {doing}")
        if superseded_by is not None:
            raise ArchiveConflictError(f"{self.path}: snapshot {snapshot_id} has already been revised by "
                                       f"snapshot {superseded_by}; only the latest revision can be {doing}")

    def _reason(self, reason: str, doing: str) -> str:
        if not isinstance(reason, str) or not reason.strip():
            raise ArchiveError(f"{self.path}: a snapshot is {doing} only with a reason")
        return reason.strip()

    def revise(self, snapshot_id: int, new_record: NewSnapshot, reason: str, *,
               new_sensitometer: Sensitometer | None = None) -> Snapshot:
        """Correct a snapshot by storing ``new_record`` as its revision.

        The old snapshot stays as it was and readable; listings and trends
        show the revision in its place.  Only the latest revision of a chain
        can be revised, and a retired snapshot cannot be.

        Raises
        ------
        ArchiveError
            When ``reason`` is empty.
        ArchiveConflictError
            When the snapshot is retired or has already been revised.
        """
        reason = self._reason(reason, "revised")
        with self._writing(f"revise snapshot {snapshot_id}") as conn:
            self._require_latest(conn, snapshot_id, "revised")
            if new_sensitometer is not None:
                self._insert_reference(conn, new_sensitometer)
            new_id = self._store_new(conn, new_record, create_missing=False, revises=snapshot_id, reason=reason)
            return self._load_snapshot(new_id)

    def retire(self, snapshot_id: int, reason: str) -> Snapshot:
        """Withdraw a snapshot from listings and trends, keeping it readable.

        A snapshot is retired once.  To withdraw a corrected reading, retire
        the latest revision of its chain.
        """
        reason = self._reason(reason, "retired")
        with self._writing(f"retire snapshot {snapshot_id}") as conn:
            self._require_latest(conn, snapshot_id, "retired")
            conn.execute("UPDATE snapshots SET retired_at = ?, retired_reason = ? WHERE id = ?",
                         (utc_now(), reason, snapshot_id))
            self._chain(conn, "retirement", snapshot_id)
            return self._load_snapshot(snapshot_id)

    def history(self, snapshot_id: int) -> list[Snapshot]:
        """The whole revision chain ``snapshot_id`` belongs to, oldest first."""
        with self._reading():
            rows = self._query(
                "WITH RECURSIVE up(id, revises) AS ("
                "  SELECT id, revises FROM snapshots WHERE id = ?"
                "  UNION ALL SELECT s.id, s.revises FROM snapshots s JOIN up ON s.id = up.revises),"
                " down(id) AS ("
                "  SELECT id FROM up WHERE revises IS NULL"
                "  UNION ALL SELECT s.id FROM snapshots s JOIN down ON s.revises = down.id)"
                " SELECT id FROM down ORDER BY id", (snapshot_id,))
            if not rows:
                raise self._missing("snapshot", snapshot_id)
            return [self.get_snapshot(row[0]) for row in rows]

    # ------------------------------------------------------------ notes

    def add_note(self, snapshot_id: int, text: str, author: str = "") -> SnapshotNote:
        """Attach a remark to a snapshot without changing it."""
        with self._writing(f"add a note to snapshot {snapshot_id}") as conn:
            if not self._exists("snapshots", "id", snapshot_id):
                raise self._missing("snapshot", snapshot_id)
            note = self._checked("add note", SnapshotNote, self._next_id(conn, "snapshot_notes"), snapshot_id,
                                 utc_now(), text, author)
            check_note(self.path, note)
            self._insert_note(conn, note)
            return note

    def _insert_note(self, conn: Connection, note: SnapshotNote) -> None:
        conn.execute("INSERT INTO snapshot_notes (id, snapshot_id, created_at, author, text) VALUES (?, ?, ?, ?, ?)",
                     (note.id, note.snapshot_id, note.created_at, note.author, note.text))
        self._chain(conn, "note", note.id)

    def list_notes(self, snapshot_id: int | None = None) -> list[SnapshotNote]:
        """Notes of one snapshot (or all notes), oldest first."""
        sql = "SELECT id, snapshot_id, created_at, text, author FROM snapshot_notes"
        params: tuple[Any, ...] = ()
        if snapshot_id is not None:
            sql, params = sql + " WHERE snapshot_id = ?", (snapshot_id,)
        return [SnapshotNote(*row) for row in self._query(sql + " ORDER BY id", params)]

    # ------------------------------------------------------ processor QC

    def _check_qc_processor(self, processor: str) -> None:
        if not self._exists("processors", "name", processor):
            raise self._missing("processor", processor)

    def _qc_day(self, conn: Connection, processor: str, date: str) -> list[QcEntry]:
        rows = self._backend.rows(conn, "SELECT * FROM qc_entries WHERE processor = ? AND date = ? ORDER BY id",
                                  (processor, date))
        return [QcEntry(**dict(row)) for row in rows]

    @staticmethod
    def _qc_in_use(day: list[QcEntry]) -> QcEntry:
        """The entry that counts for a day: its latest strip's latest correction."""
        states = qc_entry_states(day)
        return next(e for e in day if states[e.id].in_use)  # type: ignore[index]

    @staticmethod
    def _qc_latest_day(conn: Connection, processor: str, leaving: int | None = None) -> str | None:
        """The latest day of a processor's log, as it stands inside the caller's transaction.

        ``leaving`` is an entry about to be corrected: it no longer holds its day.
        """
        return conn.execute(_QC_LATEST_DAY, (processor, leaving)).fetchone()[0]

    def _check_not_back_dated(self, conn: Connection, processor: str, date: str, what: str) -> None:
        """Refuse an event or crossover dated before the latest QC day: it would re-judge days already reported."""
        latest = self._qc_latest_day(conn, processor)
        if latest is not None and date < latest:
            raise OutOfOrderError(f"{self.path}: dates out of order: the {what} of {date} is before processor "
                                  f"{processor!r}'s latest QC entry ({latest}); it would re-judge days already "
                                  "reported")

    def _qc_target(self, entry: QcEntry, day: list[QcEntry], link: int, doing: str) -> QcEntry:
        """The entry of ``entry``'s own processor and day that ``link`` names."""
        target = next((e for e in day if e.id == link), None)
        if target is None:
            raise ArchiveConflictError(f"{self.path}: QC entry {link} is not an entry of processor "
                                       f"{entry.processor!r} on {entry.date}; {doing} names an entry of its own day")
        return target

    def _check_qc_correction(self, conn: Connection, entry: QcEntry, day: list[QcEntry]) -> QcEntry:
        """The entry ``entry`` corrects, checked: same processor, not corrected yet, a moved day left whole."""
        target = next((e for e in day if e.id == entry.corrects), None)
        if target is None:
            rows = self._rows("SELECT * FROM qc_entries WHERE id = ?", (entry.corrects,))
            target = QcEntry(**dict(rows[0])) if rows else None
            if target is None or target.processor != entry.processor:
                raise ArchiveConflictError(f"{self.path}: QC entry {entry.corrects} is not an entry of processor "
                                           f"{entry.processor!r}; a correction names an entry of its own processor")
        old_day = day if target.date == entry.date else self._qc_day(conn, target.processor, target.date)
        states = qc_entry_states(old_day)
        corrected_by = states[target.id].corrected_by  # type: ignore[index]
        if corrected_by is not None:
            raise ArchiveConflictError(f"{self.path}: QC entry {target.id} was already corrected by entry "
                                       f"{corrected_by}; correct that one instead")
        if target.date != entry.date:
            strip = states[target.id].strip  # type: ignore[index]
            if any(s.strip != strip for s in states.values()):
                raise ArchiveConflictError(
                    f"{self.path}: {target.date} of processor {entry.processor!r} holds a repeat strip; only a "
                    "day's single strip can be moved to another date")
            if any(e.id not in {x.corrects for x in day} for e in day):
                raise DuplicateDayError(
                    f"{self.path}: processor {entry.processor!r} already has a QC entry for {entry.date}; a "
                    "correction moves an entry only to a day without one")
        return target

    def _insert_qc_entry(self, conn: Connection, entry: QcEntry, *, late: str = "refuse") -> QcEntry:
        """Check ``entry`` against its processor's log and write it, in the caller's transaction.

        The date-order rule is checked here, inside the write transaction, so
        that two writers at once cannot both pass it.

        Parameters
        ----------
        late : str
            What to do with an entry dated before the log's latest day and not
            marked entered late: ``"refuse"`` it, ``"allow"`` it (a missed day
            entered late on purpose) or ``"mark"`` it (an import); both of the
            latter store it marked as entered late.  A correction that keeps
            its entry's date is not late.
        """
        check_qc_entry(self.path, entry)
        self._check_qc_processor(entry.processor)
        if entry.snapshot_id is not None and not self._exists("snapshots", "id", entry.snapshot_id):
            raise self._missing("snapshot", entry.snapshot_id)
        day = self._qc_day(conn, entry.processor, entry.date)
        holders = [e for e in day if e.id not in {x.corrects for x in day}]
        latest = self._qc_latest_day(conn, entry.processor, entry.corrects)
        back_dated = not entry.entered_late and latest is not None and entry.date < latest
        if back_dated and late != "mark" and entry.repeat_of is not None:
            raise OutOfOrderError(
                f"{self.path}: dates out of order: a repeat strip of {entry.date} would re-judge the days after it; "
                f"only the latest day ({latest}) of processor {entry.processor!r} takes a repeat")
        if back_dated and late == "refuse" and entry.corrects is None:
            raise OutOfOrderError(
                f"{self.path}: dates out of order: {entry.date} is before processor {entry.processor!r}'s latest QC "
                f"entry ({latest}); a missed day is entered late on purpose (stored marked as entered late, "
                "and the days after it are judged again)")
        if entry.kind == "first strip" and holders:
            raise DuplicateDayError(
                f"{self.path}: processor {entry.processor!r} already has a QC entry for {entry.date} (duplicate "
                "day); a second strip of that day is stored as a repeat strip (which then counts for the day), a "
                "wrongly entered value as a correction")
        if entry.repeat_of is not None:
            target = self._qc_target(entry, day, entry.repeat_of, "a repeat")
            in_use = self._qc_in_use(day)
            if target.id != in_use.id:
                raise ArchiveConflictError(f"{self.path}: QC entry {target.id} is no longer the one in use for "
                                           f"{entry.date} (entry {in_use.id} is); a repeat follows the entry in use")
        same_day_fix = False
        if entry.corrects is not None:
            same_day_fix = self._check_qc_correction(conn, entry, day).date == entry.date
        if back_dated and not same_day_fix:
            entry = dataclasses.replace(entry, entered_late=True)
        if entry.id is None:
            entry = dataclasses.replace(entry, id=self._next_id(conn, "qc_entries"))
        row = entry.to_dict()
        conn.execute(_insert_sql("qc_entries", tuple(row)), tuple(row.values()))
        self._chain(conn, "qc_entry", entry.id)
        return entry

    def _new_qc_entry(self, conn: Connection, entry: QcEntry, repeat: bool) -> QcEntry:
        """A caller's new entry as it is stored: recorded now and, for a repeat, linked to the day's entry in use."""
        if entry.id is not None or entry.recorded_at is not None or entry.corrects is not None:
            raise ArchiveError(f"{self.path}: cannot add the QC entry of {entry.date}: the archive gives a new entry "
                               "its id and time; a correction is stored with add_qc_correction")
        if not repeat:
            return dataclasses.replace(entry, recorded_at=utc_now())
        self._check_qc_processor(entry.processor)
        day = self._qc_day(conn, entry.processor, entry.date)
        if not day:
            raise ArchiveConflictError(f"{self.path}: processor {entry.processor!r} has no QC entry for {entry.date} "
                                       "to repeat; store the day's first strip without calling it a repeat")
        return dataclasses.replace(entry, recorded_at=utc_now(), repeat_of=self._qc_in_use(day).id)

    def add_qc_entry(self, entry: QcEntry, *, repeat: bool = False, late: bool = False) -> QcEntry:
        """Store one QC strip's densities for a processor and day; return the entry as stored.

        Parameters
        ----------
        entry : QcEntry
            The densities, without id, time or links (the archive sets them).
        repeat : bool
            A second (third...) strip of a day that has an entry already: it is
            linked to the day's entry in use and replaces it as the day's value.
            Without it a second entry on the same day is refused.
        late : bool
            A missed day entered after later days: stored marked as entered
            late.  Without it an entry dated before the log's latest day is
            refused.

        Raises
        ------
        DuplicateDayError
            A second entry for the day not declared a repeat.
        OutOfOrderError
            An entry dated before the log's latest day, without ``late``.
        ArchiveConflictError
            A repeat of a day with no entry.
        """
        with self._writing(f"add the QC entry of {entry.date}") as conn:
            return self._insert_qc_entry(conn, self._new_qc_entry(conn, entry, repeat),
                                         late="allow" if late else "refuse")

    def add_qc_day(self, entry: QcEntry, *, repeat: bool = False, new_processor: Processor | None = None,
                   snapshot: NewSnapshot | None = None, settings: dict[str, Any] | None = None,
                   settings_reason: str = "", late: bool = False) -> QcEntry:
        """Store one day's QC entry together with what belongs to it, in one transaction.

        Parameters
        ----------
        entry : QcEntry
            The day's densities.
        repeat : bool
            The entry is a repeat strip of a day that has an entry already
            (see :meth:`add_qc_entry`).
        new_processor : Processor, optional
            A processor to add first, for its first QC day.
        snapshot : NewSnapshot, optional
            The strip the densities were read from, kept for the audit trail;
            the entry is linked to it (``source="scan"``).  A lot it names
            that is not stored yet is added bare.
        settings : dict, optional
            The processor's QC settings to store with the day (for instance
            the QC steps chosen on this strip); a new settings row.
        settings_reason : str
            Why the settings changed, kept with them.
        late : bool
            A missed day entered late (see :meth:`add_qc_entry`).

        Returns
        -------
        QcEntry
            The entry as stored.  If any part fails, nothing is stored.
        """
        with self._writing(f"add the QC entry of {entry.date}") as conn:
            if new_processor is not None:
                self._insert_reference(conn, new_processor)
            if snapshot is not None:
                entry = QcEntry(**{**entry.to_dict(), "source": "scan",
                                   "snapshot_id": self._store_new(conn, snapshot, create_missing=True)})
            entry = self._insert_qc_entry(conn, self._new_qc_entry(conn, entry, repeat),
                                          late="allow" if late else "refuse")
            if settings is not None:
                self._replace_qc_settings(conn, entry.processor, settings, settings_reason)
        return entry

    def add_qc_correction(self, entry_id: int, reason: str, **changes: Any) -> QcEntry:
        """Correct a wrongly entered QC entry: store a new entry that replaces its values.

        The corrected entry stays as it was, readable and marked corrected;
        the correction names it.  A correction can itself be corrected (a
        chain); an entry is corrected once.

        Parameters
        ----------
        entry_id : int
            The entry to correct.
        reason : str
            Why (needed).
        **changes
            New ``base_fog``, ``mid_density``, ``density_difference``,
            ``date``, ``note`` or ``action``; what is not given is kept.  A
            changed density makes the correction a typed value (source
            ``"manual"``, no snapshot).  A new ``date`` moves a day's single
            strip to a day that has no entry (a year typed wrong, say); moved
            before the log's latest day, it is marked entered late.

        Returns
        -------
        QcEntry
            The correction as stored.

        Raises
        ------
        ArchiveError
            An empty reason, a field that cannot be corrected, a bad value, or
            nothing changed.
        ArchiveLookupError
            No entry ``entry_id``.
        ArchiveConflictError
            The entry was corrected already, or the new date has an entry.
        """
        unknown = sorted(set(changes) - set(_QC_CORRECTABLE))
        if unknown:
            raise ArchiveError(f"{self.path}: a correction changes {', '.join(_QC_CORRECTABLE)} only, "
                               f"not {', '.join(unknown)} (a wrong processor is not corrected this way)")
        if not isinstance(reason, str) or not reason.strip():
            raise ArchiveError(f"{self.path}: QC entry {entry_id} is corrected only with a reason")
        with self._writing(f"correct QC entry {entry_id}") as conn:
            old = self._load_qc_entry(entry_id)
            changed = {k: v for k, v in changes.items() if v != getattr(old, k)}
            if not changed:
                raise ArchiveError(f"{self.path}: the correction of QC entry {entry_id} changes nothing")
            typed = {"source": "manual", "snapshot_id": None} if changed.keys() & set(_QC_DENSITIES) else {}
            correction = self._checked(f"correct QC entry {entry_id}", QcEntry, **{
                **old.to_dict(), **changed, **typed, "id": None, "recorded_at": utc_now(), "repeat_of": None,
                "corrects": old.id, "reason": reason.strip(), "entered_late": False})
            return self._insert_qc_entry(conn, correction, late="allow")

    def _load_qc_entry(self, entry_id: int) -> QcEntry:
        rows = self._rows("SELECT * FROM qc_entries WHERE id = ?", (entry_id,))
        if not rows:
            raise self._missing("QC entry", entry_id)
        return QcEntry(**dict(rows[0]))

    def get_qc_entry(self, entry_id: int) -> QcEntry:
        """The QC entry with this id, whatever became of it (see :func:`~.records.qc_entry_states`)."""
        return self._load_qc_entry(entry_id)

    def list_qc_entries(self, processor: str | None = None, *, since: str | None = None,
                        until: str | None = None) -> list[QcEntry]:
        """Every QC entry (repeats and corrections too) by processor, date and id, optionally from ``since`` to
        ``until`` (inclusive); :func:`~.records.qc_entry_states` tells which one counts for each day."""
        clauses, params = [], []
        for clause, value in (("processor = ?", processor), ("date >= ?", since), ("date <= ?", until)):
            if value is not None:
                clauses.append(clause)
                params.append(value)
        where = " WHERE " + " AND ".join(clauses) if clauses else ""
        return [QcEntry(**dict(row)) for row in
                self._rows(f"SELECT * FROM qc_entries{where} ORDER BY processor, date, id", params)]

    def add_qc_event(self, processor: str, date: str, kind: str, note: str = "") -> QcEvent:
        """Record something that happened to a processor (chemistry change, service, ...).

        Raises
        ------
        OutOfOrderError
            When dated before the processor's latest QC entry: it would
            re-judge days already reported.  Checked inside the write.
        """
        with self._writing(f"add a QC event for {processor!r}") as conn:
            event = self._checked("add QC event", QcEvent, self._next_id(conn, "qc_events"), processor, date,
                                  kind, note)
            self._check_not_back_dated(conn, processor, date, "event")
            self._insert_qc_event(conn, event)
            return event

    def _insert_qc_event(self, conn: Connection, event: QcEvent) -> None:
        self._check_qc_processor(event.processor)
        conn.execute("INSERT INTO qc_events (id, processor, date, kind, note) VALUES (?, ?, ?, ?, ?)",
                     (event.id, event.processor, event.date, event.kind, event.note))
        self._chain(conn, "qc_event", event.id)

    def list_qc_events(self, processor: str | None = None) -> list[QcEvent]:
        where, params = (" WHERE processor = ?", (processor,)) if processor is not None else ("", ())
        return [QcEvent(**dict(row)) for row in
                self._rows(f"SELECT * FROM qc_events{where} ORDER BY processor, date, id", params)]

    def set_qc_settings(self, processor: str, settings: dict[str, Any], reason: str = "") -> QcSettings:
        """Store a processor's new QC settings (operating levels, limits, steps) as a new row.

        The rows before stay: :meth:`qc_settings_history` lists them.  Settings
        equal to those in force store nothing and return the row in force.

        Parameters
        ----------
        processor : str
        settings : dict
            JSON-ready settings.
        reason : str
            Why they change, kept with them.
        """
        with self._writing(f"store QC settings for {processor!r}") as conn:
            return self._replace_qc_settings(conn, processor, settings, reason)

    def _replace_qc_settings(self, conn: Connection, processor: str, settings: dict[str, Any],
                             reason: str = "") -> QcSettings:
        record = self._checked("store QC settings", QcSettings, processor, settings, utc_now(), reason.strip())
        current = self.get_qc_settings(processor)
        if current is not None and canonical_json(current.settings) == canonical_json(record.settings):
            return current
        return self._insert_qc_settings(conn, record)

    def _insert_qc_settings(self, conn: Connection, record: QcSettings) -> QcSettings:
        self._check_qc_processor(record.processor)
        if record.id is None:
            record = dataclasses.replace(record, id=self._next_id(conn, "qc_settings"))
        conn.execute("INSERT INTO qc_settings (id, processor, settings_json, updated_at, reason) VALUES (?, ?, ?, ?, ?)",
                     (record.id, record.processor, canonical_json(record.settings), record.updated_at, record.reason))
        self._chain(conn, "qc_settings", record.id)
        return record

    _SETTINGS_SELECT = "SELECT processor, settings_json, updated_at, reason, id FROM qc_settings"

    def _settings(self, where: str = "", params: Sequence[Any] = ()) -> list[QcSettings]:
        return [QcSettings(p, json.loads(s), u, r, i) for p, s, u, r, i in
                self._query(f"{self._SETTINGS_SELECT}{where} ORDER BY processor, id", params)]

    def get_qc_settings(self, processor: str) -> QcSettings | None:
        """A processor's QC settings in force (its latest row), or None when none are stored."""
        rows = self._settings(" WHERE id = (SELECT max(id) FROM qc_settings WHERE processor = ?)", (processor,))
        return rows[0] if rows else None

    def list_qc_settings(self) -> list[QcSettings]:
        """The settings in force for each processor that has any, by processor."""
        return self._settings(" WHERE id IN (SELECT max(id) FROM qc_settings GROUP BY processor)")

    def qc_settings_history(self, processor: str | None = None) -> list[QcSettings]:
        """Every settings row ever stored (of one processor, or all), oldest first per processor."""
        return self._settings(" WHERE processor = ?", (processor,)) if processor is not None else self._settings()

    def add_crossover(self, processor: str, date: str, record: dict[str, Any]) -> Crossover:
        """Store a crossover (old lot against new lot) as plain JSON.

        Refused (:class:`OutOfOrderError`) when dated before the processor's latest QC entry.
        """
        with self._writing(f"add a crossover for {processor!r}") as conn:
            crossover = self._checked("add crossover", Crossover, self._next_id(conn, "crossovers"), processor,
                                      date, record)
            self._check_not_back_dated(conn, processor, date, "crossover")
            self._insert_crossover(conn, crossover)
            return crossover

    def add_crossover_with_event(self, processor: str, date: str, record: dict[str, Any],
                                 note: Callable[[int], str]) -> tuple[Crossover, QcEvent]:
        """Store a crossover and the ``crossover`` QC event that moves the levels, in one transaction.

        Parameters
        ----------
        processor, date : str
        record : dict
            The crossover as JSON-ready data.
        note : callable
            Makes the event's note from the crossover's new id.

        Returns
        -------
        (Crossover, QcEvent)
            As stored; if anything fails, neither is.
        """
        with self._writing(f"store the crossover of {date} for {processor!r}") as conn:
            crossover = self._checked("add crossover", Crossover, self._next_id(conn, "crossovers"), processor,
                                      date, record)
            self._check_not_back_dated(conn, processor, date, "crossover")
            self._insert_crossover(conn, crossover)
            event = self._checked("add QC event", QcEvent, self._next_id(conn, "qc_events"), processor, date,
                                  "crossover", note(crossover.id))
            self._insert_qc_event(conn, event)
            return crossover, event

    def _insert_crossover(self, conn: Connection, crossover: Crossover) -> None:
        self._check_qc_processor(crossover.processor)
        conn.execute("INSERT INTO crossovers (id, processor, date, record_json) VALUES (?, ?, ?, ?)",
                     (crossover.id, crossover.processor, crossover.date, canonical_json(crossover.record)))
        self._chain(conn, "crossover", crossover.id)

    def list_crossovers(self, processor: str | None = None) -> list[Crossover]:
        where, params = (" WHERE processor = ?", (processor,)) if processor is not None else ("", ())
        return [Crossover(i, p, d, json.loads(r)) for i, p, d, r in
                self._query(f"SELECT id, processor, date, record_json FROM crossovers{where} "
                            "ORDER BY processor, date, id", params)]

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

