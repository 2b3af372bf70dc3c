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
from dataclasses import dataclass, field
from typing import Any, NamedTuple

from stripscan.core.figures import figure_unit
from stripscan.core.records import Analysis, CurveFigures, ScanInfo, StripResult

from stripscan.archive.values import (
    SHA256_HEX,
    PREVIEW_MAX_BYTES,
    canonical_json,
    calibration_text,
    calibration_hash,
    check_day,
    check_time,
    check_name,
    check_text,
    check_number,
    check_preview,
    set_field,
    fields_from,
    PlainRecord,
)

__all__ = [
    "FIGURES",
    "FIGURE_UNITS",
    "PREVIEW_MAX_BYTES",
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
    "ImportReport",
    "snapshots_from_analysis",
]

#: Curve figures kept as columns of the snapshot table, in display order.  These are column
#: names of the stored schema (a change needs a migration); their names, units and printed
#: decimals are those of the one figure table, :mod:`stripscan.core.figures`.
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

#: Unit of each figure, as written in CSV headers (the figure table's long units).
FIGURE_UNITS: dict[str, str] = {name: figure_unit(name, "long") for name in FIGURES}

@dataclass(frozen=True)
class FilmType(PlainRecord):
    """A kind of film, e.g. a green-sensitive screen film for mammography."""

    name: str
    description: str = ""

    def __post_init__(self) -> None:
        check_name(self.name, "film type name")
        check_text(self.description, "film type description")


@dataclass(frozen=True)
class EmulsionLot(PlainRecord):
    """One emulsion lot (batch) of film, as printed on the box."""

    lot_id: str
    film_type: str | None = None
    expiry_date: str | None = None
    received_date: str | None = None
    notes: str = ""

    def __post_init__(self) -> None:
        check_name(self.lot_id, "lot id")
        if self.film_type is not None:
            check_name(self.film_type, "film type")
        check_day(self.expiry_date, "expiry date")
        check_day(self.received_date, "date received")
        check_text(self.notes, "lot notes")


@dataclass(frozen=True)
class Processor(PlainRecord):
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
        check_name(self.name, "processor name")
        for name in ("place", "chemistry", "notes"):
            check_text(getattr(self, name), f"processor {name}")
        # Wide bounds: they catch Fahrenheit or minutes typed by mistake
        # without judging any real chemistry.
        check_number(self.developer_temperature_c, "developer temperature (degC)", low=0, high=60)
        check_number(self.cycle_time_s, "cycle time (s)", low=0, high=3600)


@dataclass(frozen=True)
class Sensitometer(PlainRecord):
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
        check_name(self.sensitometer_id, "sensitometer id")
        check_text(self.description, "sensitometer description")
        values = tuple(self.log_exposures)
        if not values:
            raise ValueError(f"sensitometer {self.sensitometer_id!r} has no step log-exposure table")
        for i, value in enumerate(values, start=1):
            check_number(value, f"log exposure of step {i}")
        set_field(self, "log_exposures", tuple(float(v) for v in values))


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
        check_name(self.lot_id, "lot id")
        _check_common(self)
        if self.calibration is not None:
            calibration_hash(self.calibration)


def _check_common(record: NewSnapshot | Snapshot) -> None:
    for name in ("processor", "sensitometer"):
        if getattr(record, name) is not None:
            check_name(getattr(record, name), name)
    for name, what in (("exposed_on", "exposure date"), ("processed_on", "processing date"),
                       ("scanned_on", "scan date")):
        check_day(getattr(record, name), what)
    if not isinstance(record.scan, ScanInfo):
        raise ValueError("scan must be a ScanInfo record")
    if not isinstance(record.strip, StripResult):
        raise ValueError("strip must be a StripResult record")
    if not isinstance(record.scan.sha256, str) or not SHA256_HEX.fullmatch(record.scan.sha256):
        raise ValueError(f"scan sha256 {record.scan.sha256!r} is not 64 lower-case hex digits")
    check_name(record.scan.path, "scan path")
    for name in ("operator", "program_version", "notes"):
        check_text(getattr(record, name), name)
    if not isinstance(record.settings, dict):
        raise ValueError("settings must be a JSON object (dict)")
    canonical_json(record.settings)
    set_field(record, "warnings", tuple(record.warnings))
    for warning in record.warnings:
        check_text(warning, "warning")
    if isinstance(record.preview_png, bytearray):
        set_field(record, "preview_png", bytes(record.preview_png))
    check_preview(record.preview_png)


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
        check_time(self.created_at, "created_at")
        check_name(self.lot_id, "lot id")
        _check_common(self)
        if self.calibration_hash is not None and not SHA256_HEX.fullmatch(str(self.calibration_hash)):
            raise ValueError(f"calibration hash {self.calibration_hash!r} is not a sha256 digest")
        if (self.revises is None) != (self.revision_reason is None):
            raise ValueError("revises and revision_reason go together")
        if self.revises is not None:
            if isinstance(self.revises, bool) or not isinstance(self.revises, int) or not 0 < self.revises < self.id:
                raise ValueError(f"snapshot {self.id} cannot revise {self.revises!r}: only an earlier snapshot")
            check_name(self.revision_reason, "revision reason")
        if (self.retired_at is None) != (self.retired_reason is None):
            raise ValueError("retired_at and retired_reason go together")
        check_time(self.retired_at, "retired_at")
        if self.retired_reason is not None:
            check_name(self.retired_reason, "retirement reason")

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
        kwargs = fields_from(cls, data)
        try:
            kwargs["scan"] = ScanInfo.from_dict(kwargs["scan"])
            kwargs["strip"] = StripResult.from_dict(kwargs["strip"])
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            raise ValueError(f"snapshot {data.get('id')!r}: scan or strip data is incomplete ({exc!r})") from None
        kwargs["preview_png"] = _preview_from_text(kwargs.get("preview_png"))
        kwargs["warnings"] = tuple(kwargs.get("warnings", ()))
        return cls(**kwargs)


@dataclass(frozen=True)
class SnapshotSummary(PlainRecord):
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
class SnapshotNote(PlainRecord):
    """A remark added to a snapshot after it was stored; never changed."""

    id: int
    snapshot_id: int
    created_at: str
    text: str
    author: str = ""

    def __post_init__(self) -> None:
        check_time(self.created_at, "note time")
        check_name(self.text, "note text")
        check_text(self.author, "note author")


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


@dataclass(frozen=True)
class ImportReport(PlainRecord):
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
