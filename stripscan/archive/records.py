"""Frozen records stored in and read from the lot archive.

The archive keeps the core's :class:`~stripscan.core.records.StripResult`
and :class:`~stripscan.core.records.ScanInfo` as they are and adds the
bookkeeping an audit needs: which emulsion lot, which processor, who, when,
which calibration, and how a reading was later corrected or retired.

Every record is a frozen dataclass with ``to_dict`` / ``from_dict`` giving
JSON-ready data; checks run in ``__post_init__``, so a record that exists
is a record the archive will accept, whether built by hand or read back
from an export file.  Dates are ISO 8601 calendar dates (``YYYY-MM-DD``),
times are UTC ISO 8601 with a ``Z`` suffix.
"""

from __future__ import annotations

import base64
import binascii
import dataclasses
import datetime as dt
import hashlib
import json
import math
import re
from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Any, NamedTuple

from stripscan.core.records import Analysis, CurveFigures, ScanInfo, StripResult

__all__ = [
    "FIGURES",
    "FIGURE_UNITS",
    "PREVIEW_MAX_BYTES",
    "QC_SOURCES",
    "canonical_json",
    "calibration_text",
    "calibration_hash",
    "FilmType",
    "EmulsionLot",
    "Processor",
    "Sensitometer",
    "NewSnapshot",
    "Snapshot",
    "SnapshotSummary",
    "snapshot_status",
    "SnapshotNote",
    "LotSummary",
    "TrendPoint",
    "StepReadings",
    "QcEntry",
    "QcEntryState",
    "qc_entry_states",
    "QcEvent",
    "QcSettings",
    "Crossover",
    "ImportReport",
    "snapshots_from_analysis",
]

#: Curve figures kept as columns of the snapshot table, in display order.
FIGURES: tuple[str, ...] = (
    "base_fog",
    "dmax",
    "speed_log_exposure",
    "average_gradient",
    "gamma",
    "latitude_log_exposure",
    "mid_density",
    "density_difference",
)

#: Unit of each figure, as written in CSV headers.
FIGURE_UNITS: dict[str, str] = {
    "base_fog": "OD",
    "dmax": "OD",
    "speed_log_exposure": "log10 rel. exposure",
    "average_gradient": "OD per log10 exposure",
    "gamma": "OD per log10 exposure",
    "latitude_log_exposure": "log10 rel. exposure",
    "mid_density": "OD",
    "density_difference": "OD",
}

#: Largest preview image kept with a snapshot; the archive is for numbers,
#: the scan itself stays on disk and is identified by its sha256.
PREVIEW_MAX_BYTES = 64 * 1024

QC_SOURCES: tuple[str, ...] = ("scan", "manual")

_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_DAY = re.compile(r"\d{4}-\d{2}-\d{2}")
_UTC_TIME = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d{1,6})?Z")
_SHA256 = re.compile(r"[0-9a-f]{64}")


def _json_default(value: Any) -> Any:
    # numpy scalars reach us from the pipeline; .item() gives the plain value.
    item = getattr(value, "item", None)
    if callable(item):
        return item()
    raise TypeError(f"{type(value).__name__} is not JSON data")


def canonical_json(data: Any) -> str:
    """Serialise ``data`` the one way the archive stores and hashes JSON.

    Keys are sorted and no spaces are written, so equal data gives equal
    text.  NaN and infinities are refused: JSON has no spelling for them.

    Raises
    ------
    ValueError
        When ``data`` holds a non-finite number or a value JSON cannot hold.
    """
    try:
        return json.dumps(
            data, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
            allow_nan=False, default=_json_default,
        )
    except (TypeError, ValueError) as exc:
        raise ValueError(f"not storable as JSON ({exc})") from None


def calibration_text(calibration: dict[str, Any]) -> str:
    """The canonical JSON text of a calibration, exactly as hashed and stored.

    This is ``json.dumps(d, sort_keys=True, separators=(",", ":"))`` with
    its default ASCII escaping, the form the whole program agrees on, so
    that anyone can check a stored calibration: sha256 of its text is its
    hash.
    """
    if not isinstance(calibration, dict):
        raise ValueError("a calibration must be a JSON object (dict)")
    try:
        return json.dumps(calibration, sort_keys=True, separators=(",", ":"),
                          allow_nan=False, default=_json_default)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"calibration is not storable as JSON ({exc})") from None


def calibration_hash(calibration: dict[str, Any]) -> str:
    """Content address of a calibration: sha256 of :func:`calibration_text`."""
    return hashlib.sha256(calibration_text(calibration).encode("ascii")).hexdigest()


def utc_now() -> str:
    """The current UTC time as stored in ``created_at`` columns."""
    return dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def check_day(value: str | None, what: str) -> None:
    """Refuse anything but None or a real ``YYYY-MM-DD`` date."""
    if value is None:
        return
    if not isinstance(value, str) or not _DAY.fullmatch(value):
        raise ValueError(f"{what} {value!r} is not a date written YYYY-MM-DD")
    try:
        dt.date.fromisoformat(value)
    except ValueError:
        raise ValueError(f"{what} {value!r} is not a calendar date") from None


def _check_time(value: str | None, what: str) -> None:
    if value is not None and (not isinstance(value, str) or not _UTC_TIME.fullmatch(value)):
        raise ValueError(f"{what} {value!r} is not a UTC time written YYYY-MM-DDTHH:MM:SSZ")


def _check_name(value: Any, what: str) -> None:
    if not isinstance(value, str) or not value.strip():
        raise ValueError(f"{what} must be a non-empty text")


def _check_text(value: Any, what: str) -> None:
    if not isinstance(value, str):
        raise ValueError(f"{what} must be text, not {type(value).__name__}")


def _check_number(value: Any, what: str, *, low: float | None = None,
                  high: float | None = None) -> None:
    if value is None:
        return
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ValueError(f"{what} must be a finite number, not {value!r}")
    if (low is not None and value <= low) or (high is not None and value >= high):
        raise ValueError(f"{what} {value!r} lies outside {low} .. {high}")


def _check_preview(value: bytes | None) -> None:
    if value is None:
        return
    if not isinstance(value, (bytes, bytearray)):
        raise ValueError("preview must be PNG bytes")
    if not bytes(value[:8]) == _PNG_SIGNATURE:
        raise ValueError("preview is not a PNG image (its first bytes are not the PNG signature)")
    if len(value) > PREVIEW_MAX_BYTES:
        raise ValueError(f"preview is {len(value)} bytes; at most {PREVIEW_MAX_BYTES} are kept")


def _set(record: Any, name: str, value: Any) -> None:
    # Normalising inside __post_init__ of a frozen dataclass.
    object.__setattr__(record, name, value)


def _fields_from(cls: type, data: dict[str, Any]) -> dict[str, Any]:
    """Pick ``cls``'s fields out of ``data``; a missing required field is an error."""
    if not isinstance(data, dict):
        raise ValueError(f"{cls.__name__} data must be a JSON object")
    kwargs: dict[str, Any] = {}
    for f in dataclasses.fields(cls):
        if f.name in data:
            kwargs[f.name] = data[f.name]
        elif f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING:
            raise ValueError(f"{cls.__name__} data lacks the field {f.name!r}")
    return kwargs


class _Plain:
    """``to_dict`` / ``from_dict`` for records made only of JSON values."""

    def to_dict(self) -> dict[str, Any]:
        data = {}
        for f in dataclasses.fields(self):  # type: ignore[arg-type]
            value = getattr(self, f.name)
            data[f.name] = list(value) if isinstance(value, tuple) else value
        return data

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Any:
        return cls(**_fields_from(cls, data))


@dataclass(frozen=True)
class FilmType(_Plain):
    """A kind of film, e.g. a green-sensitive screen film for mammography."""

    name: str
    description: str = ""

    def __post_init__(self) -> None:
        _check_name(self.name, "film type name")
        _check_text(self.description, "film type description")


@dataclass(frozen=True)
class EmulsionLot(_Plain):
    """One emulsion lot (batch) of film, as printed on the box."""

    lot_id: str
    film_type: str | None = None
    expiry_date: str | None = None
    received_date: str | None = None
    notes: str = ""

    def __post_init__(self) -> None:
        _check_name(self.lot_id, "lot id")
        if self.film_type is not None:
            _check_name(self.film_type, "film type")
        check_day(self.expiry_date, "expiry date")
        check_day(self.received_date, "date received")
        _check_text(self.notes, "lot notes")


@dataclass(frozen=True)
class Processor(_Plain):
    """A film processor and the conditions it runs at.

    Attributes
    ----------
    developer_temperature_c : float or None
        Developer temperature set point, degrees Celsius.
    cycle_time_s : float or None
        Dry-to-dry cycle time, seconds.
    """

    name: str
    place: str = ""
    chemistry: str = ""
    developer_temperature_c: float | None = None
    cycle_time_s: float | None = None
    notes: str = ""

    def __post_init__(self) -> None:
        _check_name(self.name, "processor name")
        for name in ("place", "chemistry", "notes"):
            _check_text(getattr(self, name), f"processor {name}")
        # Wide bounds: they catch Fahrenheit or minutes typed by mistake
        # without judging any real chemistry.
        _check_number(self.developer_temperature_c, "developer temperature (degC)", low=0, high=60)
        _check_number(self.cycle_time_s, "cycle time (s)", low=0, high=3600)


@dataclass(frozen=True)
class Sensitometer(_Plain):
    """A sensitometer and the relative log exposure it gives each step.

    Attributes
    ----------
    log_exposures : tuple of float
        Relative log10 exposure of step 1, 2, ... N.
    """

    sensitometer_id: str
    description: str = ""
    log_exposures: tuple[float, ...] = ()

    def __post_init__(self) -> None:
        _check_name(self.sensitometer_id, "sensitometer id")
        _check_text(self.description, "sensitometer description")
        values = tuple(self.log_exposures)
        if not values:
            raise ValueError(f"sensitometer {self.sensitometer_id!r} has no step log-exposure table")
        for i, value in enumerate(values, start=1):
            _check_number(value, f"log exposure of step {i}")
        _set(self, "log_exposures", tuple(float(v) for v in values))


@dataclass(frozen=True)
class NewSnapshot:
    """What a caller hands the archive to store one strip's reading.

    Attributes
    ----------
    lot_id : str
        Emulsion lot the strip was cut from.
    scan : ScanInfo
        The scan the strip was read from (path and sha256 are kept).
    strip : StripResult
        Steps, densities and curve figures of the strip.
    processor, sensitometer : str or None
        Names of the processor and sensitometer used.
    calibration : dict or None
        The scanner calibration used; stored once, addressed by its hash.
    operator : str
        Who exposed, processed and scanned the strip.
    exposed_on, processed_on, scanned_on : str or None
        Dates (YYYY-MM-DD).
    settings : dict
        Analysis settings (step count, increment, targets).
    warnings : tuple of str
        Warnings the analysis gave for the scan as a whole.
    program_version : str
        Version of the program that made the reading.
    notes : str
        Free text.
    preview_png : bytes or None
        A small PNG picture of the strip, at most ``PREVIEW_MAX_BYTES``.
    """

    lot_id: str
    scan: ScanInfo
    strip: StripResult
    processor: str | None = None
    sensitometer: str | None = None
    calibration: dict[str, Any] | None = None
    operator: str = ""
    exposed_on: str | None = None
    processed_on: str | None = None
    scanned_on: str | None = None
    settings: dict[str, Any] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    program_version: str = ""
    notes: str = ""
    preview_png: bytes | None = None

    def __post_init__(self) -> None:
        _check_name(self.lot_id, "lot id")
        _check_common(self)
        if self.calibration is not None:
            calibration_hash(self.calibration)


def _check_common(record: NewSnapshot | Snapshot) -> None:
    for name in ("processor", "sensitometer"):
        if getattr(record, name) is not None:
            _check_name(getattr(record, name), name)
    for name, what in (("exposed_on", "exposure date"), ("processed_on", "processing date"),
                       ("scanned_on", "scan date")):
        check_day(getattr(record, name), what)
    if not isinstance(record.scan, ScanInfo):
        raise ValueError("scan must be a ScanInfo record")
    if not isinstance(record.strip, StripResult):
        raise ValueError("strip must be a StripResult record")
    if not isinstance(record.scan.sha256, str) or not _SHA256.fullmatch(record.scan.sha256):
        raise ValueError(f"scan sha256 {record.scan.sha256!r} is not 64 lower-case hex digits")
    _check_name(record.scan.path, "scan path")
    for name in ("operator", "program_version", "notes"):
        _check_text(getattr(record, name), name)
    if not isinstance(record.settings, dict):
        raise ValueError("settings must be a JSON object (dict)")
    canonical_json(record.settings)
    _set(record, "warnings", tuple(record.warnings))
    for warning in record.warnings:
        _check_text(warning, "warning")
    if isinstance(record.preview_png, bytearray):
        _set(record, "preview_png", bytes(record.preview_png))
    _check_preview(record.preview_png)


def _preview_to_text(value: bytes | None) -> str | None:
    return None if value is None else base64.b64encode(value).decode("ascii")


def _preview_from_text(value: str | None) -> bytes | None:
    if value is None:
        return None
    try:
        return base64.b64decode(value, validate=True)
    except (binascii.Error, ValueError, TypeError):
        raise ValueError("preview is not valid base64 text") from None


def _day_of(processed_on: str | None, exposed_on: str | None, scanned_on: str | None,
            created_at: str) -> str:
    # The film's own date, best first: processing fixes the result.
    return processed_on or exposed_on or scanned_on or created_at[:10]


@dataclass(frozen=True)
class Snapshot:
    """One strip's reading as stored, with its audit trail.

    Attributes
    ----------
    id : int
        Archive-wide number of the snapshot.
    created_at : str
        When it was stored (UTC).
    calibration_hash : str or None
        sha256 of the calibration used, see :func:`calibration_hash`.
    revises : int or None
        Id of the snapshot this one corrects.
    revision_reason : str or None
        Why the correction was made (set exactly when ``revises`` is).
    retired_at, retired_reason : str or None
        When and why the snapshot was withdrawn from listings and trends.

    Other attributes are as in :class:`NewSnapshot`.
    """

    id: int
    created_at: str
    lot_id: str
    scan: ScanInfo
    strip: StripResult
    processor: str | None = None
    sensitometer: str | None = None
    calibration_hash: str | None = None
    operator: str = ""
    exposed_on: str | None = None
    processed_on: str | None = None
    scanned_on: str | None = None
    settings: dict[str, Any] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    program_version: str = ""
    notes: str = ""
    preview_png: bytes | None = None
    revises: int | None = None
    revision_reason: str | None = None
    retired_at: str | None = None
    retired_reason: str | None = None

    def __post_init__(self) -> None:
        if isinstance(self.id, bool) or not isinstance(self.id, int) or self.id < 1:
            raise ValueError(f"snapshot id must be a positive whole number, not {self.id!r}")
        _check_time(self.created_at, "created_at")
        _check_name(self.lot_id, "lot id")
        _check_common(self)
        if self.calibration_hash is not None and not _SHA256.fullmatch(str(self.calibration_hash)):
            raise ValueError(f"calibration hash {self.calibration_hash!r} is not a sha256 digest")
        if (self.revises is None) != (self.revision_reason is None):
            raise ValueError("revises and revision_reason go together")
        if self.revises is not None:
            if isinstance(self.revises, bool) or not isinstance(self.revises, int) or not 0 < self.revises < self.id:
                raise ValueError(f"snapshot {self.id} cannot revise {self.revises!r}: only an earlier snapshot")
            _check_name(self.revision_reason, "revision reason")
        if (self.retired_at is None) != (self.retired_reason is None):
            raise ValueError("retired_at and retired_reason go together")
        _check_time(self.retired_at, "retired_at")
        if self.retired_reason is not None:
            _check_name(self.retired_reason, "retirement reason")

    @property
    def date(self) -> str:
        """The film's date: processing, else exposure, else scan, else storage date."""
        return _day_of(self.processed_on, self.exposed_on, self.scanned_on, self.created_at)

    @property
    def figures(self) -> CurveFigures:
        return self.strip.figures

    @property
    def retired(self) -> bool:
        return self.retired_at is not None

    def to_dict(self) -> dict[str, Any]:
        data: dict[str, Any] = {}
        for f in dataclasses.fields(self):
            value = getattr(self, f.name)
            if f.name in ("scan", "strip"):
                value = value.to_dict()
            elif f.name == "preview_png":
                value = _preview_to_text(value)
            elif isinstance(value, tuple):
                value = list(value)
            data[f.name] = value
        return data

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "Snapshot":
        kwargs = _fields_from(cls, data)
        try:
            kwargs["scan"] = ScanInfo.from_dict(kwargs["scan"])
            kwargs["strip"] = StripResult.from_dict(kwargs["strip"])
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            raise ValueError(f"snapshot {data.get('id')!r}: scan or strip data is incomplete ({exc!r})") from None
        kwargs["preview_png"] = _preview_from_text(kwargs.get("preview_png"))
        kwargs["warnings"] = tuple(kwargs.get("warnings", ()))
        return cls(**kwargs)


@dataclass(frozen=True)
class SnapshotSummary(_Plain):
    """One line of a snapshot listing: the figures without steps or pictures.

    ``superseded_by`` is the id of the revision that corrects this snapshot,
    or None when it is the latest of its chain.
    """

    id: int
    created_at: str
    date: str
    lot_id: str
    processor: str | None
    operator: str
    strip_index: int
    base_fog: float | None
    dmax: float | None
    speed_log_exposure: float | None
    average_gradient: float | None
    gamma: float | None
    latitude_log_exposure: float | None
    mid_density: float | None
    density_difference: float | None
    revises: int | None
    superseded_by: int | None
    retired_at: str | None
    retired_reason: str | None
    scan_path: str

    @property
    def current(self) -> bool:
        """True when neither corrected by a later revision nor retired."""
        return self.superseded_by is None and self.retired_at is None

    @classmethod
    def from_row(cls, row: tuple[Any, ...]) -> "SnapshotSummary":
        """Build from a row of the archive's listing query, fields in order.

        Listings build thousands of these per redraw; filling the instance
        dictionary directly takes half the time of the frozen ``__init__``.
        The values come from the archive's own typed, checked columns.
        """
        summary = object.__new__(cls)
        summary.__dict__.update(zip(_SUMMARY_FIELDS, row))
        return summary


_SUMMARY_FIELDS = tuple(f.name for f in dataclasses.fields(SnapshotSummary))


def snapshot_status(item: Snapshot | SnapshotSummary, superseded_by: int | None = None) -> str:
    """A snapshot's status in the one wording the CLI, the window, CSV and reports share.

    Parameters
    ----------
    item : Snapshot or SnapshotSummary
    superseded_by : int, optional
        Id of the revision that corrects ``item``; a summary's own
        ``superseded_by`` is used when this is None (a full snapshot does
        not know its later revisions: the caller looks them up).

    Returns
    -------
    str
        ``"current"``, ``"revised by snapshot N"`` or
        ``"retired YYYY-MM-DD: reason"`` (a retirement wins: a retired
        snapshot is out of use whatever revised it).
    """
    if item.retired_at is not None:
        return f"retired {item.retired_at[:10]}: {item.retired_reason}"
    if superseded_by is None:
        superseded_by = getattr(item, "superseded_by", None)
    if superseded_by is not None:
        return f"revised by snapshot {superseded_by}"
    return "current"


@dataclass(frozen=True)
class SnapshotNote(_Plain):
    """A remark added to a snapshot after it was stored; never changed."""

    id: int
    snapshot_id: int
    created_at: str
    text: str
    author: str = ""

    def __post_init__(self) -> None:
        _check_time(self.created_at, "note time")
        _check_name(self.text, "note text")
        _check_text(self.author, "note author")


@dataclass(frozen=True)
class LotSummary:
    """An emulsion lot with how many current snapshots it has, and over which dates."""

    lot: EmulsionLot
    snapshot_count: int
    first_date: str | None
    last_date: str | None

    def to_dict(self) -> dict[str, Any]:
        return {"lot": self.lot.to_dict(), "snapshot_count": self.snapshot_count,
                "first_date": self.first_date, "last_date": self.last_date}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "LotSummary":
        return cls(EmulsionLot.from_dict(data["lot"]), int(data["snapshot_count"]),
                   data.get("first_date"), data.get("last_date"))


class TrendPoint(NamedTuple):
    """One point of a figure's trend: ``(date, value, lot, snapshot_id)``."""

    date: str
    value: float
    lot: str
    snapshot_id: int


class StepReadings(NamedTuple):
    """A snapshot's mid-density and density difference with the steps they were read at.

    ``None`` where a step is not known or not usable on the strip (outside
    the calibrated range or excluded).  Densities OD, steps 1-based.
    """

    mid_step: int | None
    mid_density: float | None
    dd_high_step: int | None
    dd_low_step: int | None
    density_difference: float | None


def _check_id(value: Any, what: str) -> None:
    if value is not None and (isinstance(value, bool) or not isinstance(value, int) or value < 1):
        raise ValueError(f"{what} must be a positive whole number, not {value!r}")


@dataclass(frozen=True)
class QcEntry(_Plain):
    """One processor QC strip of a day: the three control densities.

    A day normally has one entry.  A second strip processed the same day
    (after a result past a limit, say) is stored as a *repeat* linked to the
    entry it follows; a wrongly entered value is fixed by a *correction*, a
    new entry of the same processor and day that names the entry it
    corrects and why.  Nothing stored is ever changed.

    Attributes
    ----------
    source : str
        ``"scan"`` when read from an archived strip (see ``snapshot_id``),
        ``"manual"`` when typed in from a densitometer.
    action : str
        What was done about it, if anything.
    id : int or None
        Archive-wide number of the entry; None before it is stored.
    recorded_at : str or None
        When it was stored (UTC).  None for entries stored before the
        archive kept that time (schema version 2 and earlier).
    repeat_of : int or None
        For a repeat strip: the entry of the same day it follows.
    corrects : int or None
        For a correction: the entry whose values it replaces.
    reason : str or None
        Why the correction was made (set exactly when ``corrects`` is).
        A correction may also fix the date: it then carries the right date
        and the corrected entry's day is free again.
    entered_late : bool
        Stored after a later day of the same processor was already in the
        log (a missed day entered late, or a date corrected backwards);
        ``recorded_at`` says when.  Levels, limits and trend rules take the
        days in date order all the same.
    """

    processor: str
    date: str
    base_fog: float | None
    mid_density: float | None
    density_difference: float | None
    source: str = "manual"
    snapshot_id: int | None = None
    note: str = ""
    action: str = ""
    id: int | None = None
    recorded_at: str | None = None
    repeat_of: int | None = None
    corrects: int | None = None
    reason: str | None = None
    entered_late: bool = False

    def __post_init__(self) -> None:
        _check_name(self.processor, "processor")
        if self.entered_late not in (True, False):  # 0 and 1 as SQLite returns them are fine
            raise ValueError(f"entered_late must be true or false, not {self.entered_late!r}")
        _set(self, "entered_late", bool(self.entered_late))
        if self.date is None:
            raise ValueError("a QC entry needs a date")
        check_day(self.date, "QC date")
        for name in ("base_fog", "mid_density", "density_difference"):
            _check_number(getattr(self, name), name)
        if self.source not in QC_SOURCES:
            raise ValueError(f"QC source {self.source!r} is not one of {', '.join(QC_SOURCES)}")
        _check_text(self.note, "note")
        _check_text(self.action, "action")
        _check_id(self.id, "QC entry id")
        _check_time(self.recorded_at, "recorded_at")
        self._check_links()

    def _check_links(self) -> None:
        for name in ("repeat_of", "corrects"):
            link = getattr(self, name)
            _check_id(link, name)
            if link is not None and self.id is not None and link >= self.id:
                raise ValueError(f"QC entry {self.id} cannot name entry {link} in {name}: only an earlier entry")
        if self.repeat_of is not None and self.corrects is not None:
            raise ValueError("a QC entry is a repeat strip or a correction, not both")
        if (self.corrects is None) != (self.reason is None):
            raise ValueError("a correction names the entry it corrects and a reason, both or neither")
        if self.reason is not None:
            _check_name(self.reason, "reason for the correction")

    @property
    def kind(self) -> str:
        """``"first strip"``, ``"repeat"`` or ``"correction"``."""
        if self.corrects is not None:
            return "correction"
        return "first strip" if self.repeat_of is None else "repeat"


class QcEntryState(NamedTuple):
    """What became of a stored QC entry, from the entries of its day.

    Attributes
    ----------
    in_use : bool
        True for the one entry per processor and day that counts for
        operating levels, control limits and trend rules: the latest
        correction of the day's latest strip.
    corrected_by : int or None
        The correction that replaces this entry's values.
    repeated_by : int or None
        The first entry of the later strip of the same day that replaces
        this entry's strip.
    strip : int
        The entry this one's chain of corrections starts from (its own id
        when it is no correction).
    """

    in_use: bool
    corrected_by: int | None
    repeated_by: int | None
    strip: int


def qc_entry_states(entries: Iterable[QcEntry]) -> dict[int, QcEntryState]:
    """The state of every stored entry, by id.

    A day's strips are taken in the order they were stored; a correction
    belongs to the strip of the entry it corrects, and the strip belongs to
    the day of its latest correction (a correction may fix a wrong date).  The day's value is the
    latest strip's latest correction (common practice: a repeat strip
    confirms or clears the first result).

    Parameters
    ----------
    entries : iterable of QcEntry
        Stored entries (with ids), including every entry of each day they
        cover; any order.
    """
    by_id = {e.id: e for e in entries}
    if None in by_id:
        raise ValueError("only stored QC entries (with an id) have a state")
    corrected_by = {e.corrects: e.id for e in by_id.values() if e.corrects is not None}

    def strip_of(entry: QcEntry) -> int:
        while entry.corrects is not None and entry.corrects in by_id:
            entry = by_id[entry.corrects]
        return entry.id  # type: ignore[return-value]

    strips = {i: strip_of(e) for i, e in by_id.items()}
    later: dict[int, int] = {}
    days: dict[tuple[str, str], set[int]] = {}
    for i, e in by_id.items():
        if i not in corrected_by:  # the chain's latest entry says which day the strip is of
            days.setdefault((e.processor, e.date), set()).add(strips[i])
    for firsts in days.values():
        ordered = sorted(firsts)
        later.update(zip(ordered, ordered[1:]))
    return {i: QcEntryState(i not in corrected_by and strips[i] not in later, corrected_by.get(i),
                            later.get(strips[i]), strips[i])
            for i in by_id}


@dataclass(frozen=True)
class QcEvent(_Plain):
    """Something that happened to a processor (chemistry change, service...)."""

    id: int
    processor: str
    date: str
    kind: str
    note: str = ""

    def __post_init__(self) -> None:
        _check_name(self.processor, "processor")
        check_day(self.date, "event date")
        _check_name(self.kind, "event kind")
        _check_text(self.note, "note")


@dataclass(frozen=True)
class QcSettings(_Plain):
    """A processor's QC settings (operating levels, control limits, steps) as plain JSON.

    Settings are never changed in place: every change is a new row with its
    time and reason, and a processor's latest row is in force.

    Attributes
    ----------
    reason : str
        Why the settings were changed ('' for rows from before the archive
        kept a reason).
    id : int or None
        Archive-wide number of the row; None before it is stored.
    """

    processor: str
    settings: dict[str, Any]
    updated_at: str
    reason: str = ""
    id: int | None = None

    def __post_init__(self) -> None:
        _check_name(self.processor, "processor")
        _check_text(self.reason, "reason for the settings change")
        _check_id(self.id, "QC settings id")
        if not isinstance(self.settings, dict):
            raise ValueError("QC settings must be a JSON object (dict)")
        canonical_json(self.settings)
        _check_time(self.updated_at, "updated_at")


@dataclass(frozen=True)
class Crossover(_Plain):
    """A stored crossover (old lot against new lot) for a processor, as plain JSON."""

    id: int
    processor: str
    date: str
    record: dict[str, Any]

    def __post_init__(self) -> None:
        _check_name(self.processor, "processor")
        check_day(self.date, "crossover date")
        if not isinstance(self.record, dict):
            raise ValueError("a crossover record must be a JSON object (dict)")
        canonical_json(self.record)


@dataclass(frozen=True)
class ImportReport(_Plain):
    """What an import did: items added and items already present unchanged, per kind."""

    source: str
    added: dict[str, int]
    unchanged: dict[str, int]
    #: QC entries of the file dated before a day already in the log, stored marked as entered late.
    entered_late: tuple[int, ...] = ()


def snapshots_from_analysis(analysis: Analysis, lot_id: str, *, calibration: dict[str, Any] | None = None,
                            **details: Any) -> list[NewSnapshot]:
    """One :class:`NewSnapshot` per strip of an analysed scan.

    Parameters
    ----------
    analysis : Analysis
        The pipeline's result for one scan.
    lot_id : str
        Emulsion lot of the strips.
    calibration : dict, optional
        The full calibration used (its ``to_dict()``).  The analysis itself
        carries only a summary; when that summary names the calibration's
        sha256, it must match this one's content hash.  Without it the
        summary is stored as the calibration.
    **details
        Any other :class:`NewSnapshot` field (processor, operator,
        exposed_on, notes...) applied to every strip.  Scan, settings,
        warnings and program version come from ``analysis``.

    Raises
    ------
    ValueError
        When the scan holds no strip, the calibration is not the one the
        analysis used, or a detail is not acceptable.
    """
    if not analysis.strips:
        raise ValueError(f"no strip was found on {analysis.scan.path}; nothing to store")
    taken = {"scan", "strip", "settings", "warnings", "program_version"}
    clash = taken.intersection(details)
    if clash:
        raise ValueError(f"{', '.join(sorted(clash))} come(s) from the analysis and cannot be given")
    used = analysis.calibration
    if calibration is not None:
        named = used.get("sha256") if isinstance(used, dict) else None
        if named is not None and named != calibration_hash(calibration):
            raise ValueError(f"the calibration given (sha256 {calibration_hash(calibration)[:12]}...) is not "
                             f"the one the analysis used (sha256 {str(named)[:12]}...)")
        used = calibration
    return [
        NewSnapshot(
            lot_id=lot_id, scan=analysis.scan, strip=strip, calibration=used,
            settings=dict(analysis.settings), warnings=tuple(analysis.warnings),
            program_version=analysis.program_version, **details,
        )
        for strip in analysis.strips
    ]
