"""Plain frozen records passed between the stages of the pipeline.

Every record serialises to JSON-ready dictionaries with :func:`to_dict` and
comes back with the matching ``from_dict`` class method, so the archive, the
reports and the GUI all read the same data.

Conventions
-----------
Inside the core, image positions are (row, column) in pixels of the full
resolution scan.  The JSON output of the command line speaks (x = column,
y = row), as the issue tracker's contract asks; the conversion happens only
in :meth:`StepDensity.to_dict` / :meth:`StripGeometry.outline_xy` and friends.
Densities are optical densities (dimensionless, ISO 5-2), exposures are
log10 relative exposure, lengths in pixels unless a name says ``_mm``.
"""

from __future__ import annotations

import dataclasses
import math
import re
from dataclasses import dataclass, field
from typing import Any, Sequence

__all__ = [
    "ScanInfo",
    "StripGeometry",
    "StepReading",
    "StepDensity",
    "STEP_FLAGS",
    "CurveFigures",
    "StripResult",
    "Analysis",
    "to_dict",
    "clean_float",
    "warnings_of_strip",
]


def clean_float(value: float | None, ndigits: int | None = None) -> float | None:
    """Return ``value`` as a JSON-safe float: NaN and infinities become None."""
    if value is None:
        return None
    value = float(value)
    if not math.isfinite(value):
        return None
    return round(value, ndigits) if ndigits is not None else value


def to_dict(record: Any) -> Any:
    """Convert a record (or nested records, tuples, lists) to JSON-ready data."""
    if hasattr(record, "to_dict"):
        return record.to_dict()
    if dataclasses.is_dataclass(record):
        return {f.name: to_dict(getattr(record, f.name)) for f in dataclasses.fields(record)}
    if isinstance(record, (list, tuple)):
        return [to_dict(item) for item in record]
    if isinstance(record, dict):
        return {key: to_dict(val) for key, val in record.items()}
    if isinstance(record, float):
        return clean_float(record)
    return record


@dataclass(frozen=True)
class ScanInfo:
    """Where a scan came from and how its pixels were turned into signal.

    Attributes
    ----------
    path : str
        File the scan was read from.
    sha256 : str
        Hex digest of the file's bytes.
    width, height : int
        Columns and rows of the full-resolution image.
    dpi : float or None
        Resolution in dots per inch (from the file's tags, or given).
    bits : int
        Bits per sample of the stored file (8 or 16; 32 for float files).
    channels : int
        Samples per pixel in the file (1 grey, 3 RGB, 4 RGBA).
    channel : str
        How channels were reduced to one signal: ``"grey"``, ``"mean"``,
        ``"red"``, ``"green"``, ``"blue"`` or ``"luminance"``.
    decoding : str
        Transfer function undone on load: ``"linear"``, ``"srgb"`` or
        ``"gamma 2.2"`` style strings.
    """

    path: str
    sha256: str
    width: int
    height: int
    dpi: float | None
    bits: int
    channels: int
    channel: str
    decoding: str

    @property
    def pixel_mm(self) -> float | None:
        """Pixel pitch in millimetres, or None when the resolution is unknown."""
        return 25.4 / self.dpi if self.dpi else None

    def to_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "ScanInfo":
        return cls(**{f.name: data[f.name] for f in dataclasses.fields(cls)})


@dataclass(frozen=True)
class StripGeometry:
    """Where one strip (or step tablet) lies on the scan.

    The strip has its own frame: ``u`` runs along the strip from the outer
    edge of step 1 (least exposed) towards step N, ``v`` runs across it.
    A point (u, v) maps to the image as
    ``(row, col) = origin_rc + u * axis_rc + v * normal_rc``.

    Attributes
    ----------
    origin_rc : tuple of float
        (row, col) of the step band's corner at the start of step 1, px.
    axis_rc : tuple of float
        Unit vector (d_row, d_col) pointing from step 1 towards step N.
    normal_rc : tuple of float
        Unit vector across the strip, perpendicular to ``axis_rc``.
    step_pitch_px : float
        Length of one step along ``u``, px.
    n_steps : int
        Number of steps.
    band_width_px : float
        Width of the step band along ``v`` (from v = 0), px.
    base_fog_v_px : tuple of float or None
        (v_start, v_end) of unexposed film beside the steps, px, or None
        when there is none.
    inner_fraction : float
        Fraction of each step's length and width that is sampled (centred).
    manual : bool
        True when a person drew or edited the outline.
    """

    origin_rc: tuple[float, float]
    axis_rc: tuple[float, float]
    normal_rc: tuple[float, float]
    step_pitch_px: float
    n_steps: int
    band_width_px: float
    base_fog_v_px: tuple[float, float] | None = None
    inner_fraction: float = 0.6
    manual: bool = False

    @property
    def length_px(self) -> float:
        return self.step_pitch_px * self.n_steps

    def point_rc(self, u: float, v: float) -> tuple[float, float]:
        """Image (row, col) of strip coordinates (u, v), px."""
        r0, c0 = self.origin_rc
        ar, ac = self.axis_rc
        nr, nc = self.normal_rc
        return (r0 + u * ar + v * nr, c0 + u * ac + v * nc)

    @property
    def angle_deg(self) -> float:
        """Direction from step 1 to step N, degrees counter-clockwise from +x.

        Measured as seen on screen (image rows grow downwards), in
        (-180, 180].
        """
        ar, ac = self.axis_rc
        angle = math.degrees(math.atan2(-ar, ac))
        return 180.0 if angle == -180.0 else angle

    def outline_rc(self) -> list[tuple[float, float]]:
        """Corners of the step band, (row, col), starting at step 1's outer edge."""
        length, width = self.length_px, self.band_width_px
        return [self.point_rc(u, v) for u, v in ((0, 0), (length, 0), (length, width), (0, width))]

    def step_center_rc(self, step: int) -> tuple[float, float]:
        """Centre (row, col) of step ``step`` (1-based), px."""
        return self.point_rc((step - 0.5) * self.step_pitch_px, 0.5 * self.band_width_px)

    def step_box_rc(self, step: int, *, inner: bool = True) -> list[tuple[float, float]]:
        """Corners (row, col) of a step's sampling box (or whole box when ``inner`` is False)."""
        frac = self.inner_fraction if inner else 1.0
        pad_u = 0.5 * (1.0 - frac) * self.step_pitch_px
        pad_v = 0.5 * (1.0 - frac) * self.band_width_px
        u0 = (step - 1) * self.step_pitch_px + pad_u
        u1 = step * self.step_pitch_px - pad_u
        v0, v1 = pad_v, self.band_width_px - pad_v
        return [self.point_rc(u, v) for u, v in ((u0, v0), (u1, v0), (u1, v1), (u0, v1))]

    def base_fog_box_rc(self) -> list[tuple[float, float]] | None:
        """Corners (row, col) of the base+fog sampling box, or None."""
        if self.base_fog_v_px is None:
            return None
        v0, v1 = self.base_fog_v_px
        # Keep clear of the strip's ends, where the film may be cut or bent.
        u0, u1 = 0.1 * self.length_px, 0.9 * self.length_px
        return [self.point_rc(u, v) for u, v in ((u0, v0), (u1, v0), (u1, v1), (u0, v1))]

    def replace(self, **changes: Any) -> "StripGeometry":
        return dataclasses.replace(self, **changes)

    def to_dict(self) -> dict[str, Any]:
        data = dataclasses.asdict(self)
        data["base_fog_v_px"] = list(self.base_fog_v_px) if self.base_fog_v_px else None
        return data

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "StripGeometry":
        bf = data.get("base_fog_v_px")
        return cls(
            origin_rc=tuple(data["origin_rc"]),
            axis_rc=tuple(data["axis_rc"]),
            normal_rc=tuple(data["normal_rc"]),
            step_pitch_px=float(data["step_pitch_px"]),
            n_steps=int(data["n_steps"]),
            band_width_px=float(data["band_width_px"]),
            base_fog_v_px=tuple(bf) if bf else None,
            inner_fraction=float(data.get("inner_fraction", 0.6)),
            manual=bool(data.get("manual", False)),
        )


@dataclass(frozen=True)
class StepReading:
    """Robust signal statistics of one sampled area, before calibration.

    Attributes
    ----------
    step : int
        1-based step number; 0 for the base+fog area.
    center_rc : tuple of float
        (row, col) of the area's centre, px.
    signal : float
        Mean linear signal of the kept pixels (0..1 of full scale).
    signal_sd : float
        Standard deviation of the kept pixels' signal.
    pixels : int
        Pixels kept after rejecting outliers (dust, scratches).
    rejected : int
        Pixels rejected as outliers.
    saturated_fraction : float
        Fraction of the area's pixels at the file's top or bottom code.
    """

    step: int
    center_rc: tuple[float, float]
    signal: float
    signal_sd: float
    pixels: int
    rejected: int
    saturated_fraction: float

    def to_dict(self) -> dict[str, Any]:
        return to_dict(dataclasses.asdict(self))


#: Why a step's reading is not used (``StepDensity.flag``), in the words the
#: window, the tables and the reports use.
STEP_FLAGS = {
    "": "",
    "not_read": "not read",
    "outside_range": "outside the calibrated range",
    "saturated": "the scanner saturates",
    "dark_floor": "at the scanner's dark floor",
    "too_noisy": "reading noise too high for ±0.02 OD",
    "stray_light": "stray light from the surroundings too large to correct within ±0.02 OD",
    "flare_plateau": "density no longer rises with exposure (flare plateau or shoulder; uncalibrated)",
}


@dataclass(frozen=True)
class StepDensity:
    """Calibrated optical density of one step.

    Attributes
    ----------
    step : int
        1-based step number (1 = least exposed).
    log_exposure : float
        Relative log10 exposure of the step.
    od : float
        Optical density (gross, including base+fog).
    od_sd : float
        Standard uncertainty of ``od`` (pixel noise and calibration).
    pixels : int
        Pixels averaged.
    in_range : bool
        False when the signal lies outside the calibrated range or the
        scanner saturates; ``od`` is then an extrapolation not to be trusted.
    center_rc : tuple of float
        (row, col) of the step's centre, px.
    excluded : bool
        True when a person excluded the step (dust, damage); excluded steps
        are kept in the table but not used for the curve.
    flag : str
        Why the reading is not used, one of :data:`STEP_FLAGS`; empty when
        it is used (``in_range`` True).
    stray_light_share : float or None
        Share of the light seen at the step that the stray-light model calls
        spread light from the surroundings (0..1); None without a model.
    """

    step: int
    log_exposure: float
    od: float
    od_sd: float
    pixels: int
    in_range: bool
    center_rc: tuple[float, float]
    excluded: bool = False
    flag: str = ""
    stray_light_share: float | None = None

    def to_dict(self) -> dict[str, Any]:
        row, col = self.center_rc
        return {
            "step": self.step,
            "log_exposure": clean_float(self.log_exposure, 6),
            "od": clean_float(self.od, 4),
            "od_sd": clean_float(self.od_sd, 4),
            "pixels": int(self.pixels),
            "in_range": bool(self.in_range),
            "excluded": bool(self.excluded),
            "center_px": [clean_float(col, 2), clean_float(row, 2)],
            "flag": self.flag,
            "stray_light_share": clean_float(self.stray_light_share, 4),
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "StepDensity":
        x, y = data["center_px"]
        od = data["od"]
        return cls(
            step=int(data["step"]),
            log_exposure=float(data["log_exposure"]),
            od=float("nan") if od is None else float(od),
            od_sd=float("nan") if data["od_sd"] is None else float(data["od_sd"]),
            pixels=int(data["pixels"]),
            in_range=bool(data["in_range"]),
            center_rc=(float(y), float(x)),
            excluded=bool(data.get("excluded", False)),
            # Results written before the reasons existed say only "not in range".
            flag=str(data.get("flag", "" if data["in_range"] else "outside_range")),
            stray_light_share=None if data.get("stray_light_share") is None else float(data["stray_light_share"]),
        )


@dataclass(frozen=True)
class CurveFigures:
    """The standard figures read from one characteristic curve.

    A figure that cannot be reached is None, and ``notes`` says why.

    Attributes
    ----------
    base_fog : float or None
        Base+fog density as read beside the steps; None when no unexposed
        area was read (or its reading was unusable).
    dmax : float or None
        Highest in-range density on the strip.
    speed_log_exposure : float or None
        Log relative exposure at net density ``speed_net_density`` (1.00).
    average_gradient : float or None
        (D2 - D1) / (log E2 - log E1) between net densities ``gradient_low``
        and ``gradient_high`` (ISO 9236-1: 0.25 and 2.00).
    gradient_low_log_exposure, gradient_high_log_exposure : float or None
        Log E where the curve reaches the two net densities.
    gamma : float or None
        Maximum slope dD/dlog E of the curve.
    gamma_log_exposure : float or None
        Log E where the maximum slope occurs.
    latitude_log_exposure : float or None
        Log E span between the two chosen net densities.
    mid_density_step, mid_density : int, float or None
        Step whose density is closest to ``mid_density_target`` and its density.
    density_difference : float or None
        Density of ``dd_high_step`` minus that of ``dd_low_step``.
    dd_high_step, dd_low_step : int or None
        Steps used for the density difference.
    iso_speed : float or None
        S = 1 mGy / K_S at net density 1.00 (ISO 9236-1), when air kerma per
        step was supplied.
    relative_speed_percent : float or None
        Speed relative to a reference speed point, percent faster (+) or
        slower (-), when a reference was given.
    net_reference : float or None
        The density net densities count from: ``base_fog``, or, when none
        was read, the lightest usable step (a note says so).
    settings : dict
        The targets used (net densities, mid-density target, rule...).
    notes : tuple of str
        Why a figure is missing or what to be careful about.
    """

    base_fog: float | None
    dmax: float | None
    speed_log_exposure: float | None
    average_gradient: float | None
    gradient_low_log_exposure: float | None
    gradient_high_log_exposure: float | None
    gamma: float | None
    gamma_log_exposure: float | None
    latitude_log_exposure: float | None
    mid_density_step: int | None
    mid_density: float | None
    density_difference: float | None
    dd_high_step: int | None
    dd_low_step: int | None
    iso_speed: float | None = None
    relative_speed_percent: float | None = None
    net_reference: float | None = None
    settings: dict[str, Any] = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        data: dict[str, Any] = {}
        for f in dataclasses.fields(self):
            value = getattr(self, f.name)
            if isinstance(value, float):
                value = clean_float(value, 5)
            elif f.name == "notes":
                value = list(value)
            data[f.name] = value
        return data

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "CurveFigures":
        names = {f.name for f in dataclasses.fields(cls)}
        kwargs = {k: v for k, v in data.items() if k in names}
        kwargs["notes"] = tuple(data.get("notes", ()))
        kwargs["settings"] = dict(data.get("settings", {}))
        # Records written before net_reference existed counted from base_fog.
        kwargs.setdefault("net_reference", kwargs.get("base_fog"))
        return cls(**kwargs)


@dataclass(frozen=True)
class StripResult:
    """Everything read from one strip."""

    index: int
    geometry: StripGeometry
    steps: tuple[StepDensity, ...]
    base_fog_reading: StepReading | None
    figures: CurveFigures
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        outline = [[clean_float(c, 2), clean_float(r, 2)] for r, c in self.geometry.outline_rc()]
        return {
            "index": self.index,
            "angle_deg": clean_float(self.geometry.angle_deg, 3),
            "outline_px": outline,
            "n_steps": self.geometry.n_steps,
            "geometry": self.geometry.to_dict(),
            "steps": [s.to_dict() for s in self.steps],
            "base_fog_reading": self.base_fog_reading.to_dict() if self.base_fog_reading else None,
            "metrics": self.figures.to_dict(),
            "warnings": list(self.warnings),
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "StripResult":
        bf = data.get("base_fog_reading")
        return cls(
            index=int(data["index"]),
            geometry=StripGeometry.from_dict(data["geometry"]),
            steps=tuple(StepDensity.from_dict(s) for s in data["steps"]),
            base_fog_reading=StepReading(**{**bf, "center_rc": tuple(bf["center_rc"])}) if bf else None,
            figures=CurveFigures.from_dict(data["metrics"]),
            warnings=tuple(data.get("warnings", ())),
        )


@dataclass(frozen=True)
class Analysis:
    """The result of analysing one scan."""

    scan: ScanInfo
    calibration: dict[str, Any] | None
    strips: tuple[StripResult, ...]
    warnings: tuple[str, ...] = ()
    program_version: str = ""
    settings: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {
            "scan": self.scan.to_dict(),
            "calibration": self.calibration,
            "strips": [s.to_dict() for s in self.strips],
            "warnings": list(self.warnings),
            "program_version": self.program_version,
            "settings": self.settings,
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "Analysis":
        return cls(
            scan=ScanInfo.from_dict(data["scan"]),
            calibration=data.get("calibration"),
            strips=tuple(StripResult.from_dict(s) for s in data["strips"]),
            warnings=tuple(data.get("warnings", ())),
            program_version=data.get("program_version", ""),
            settings=dict(data.get("settings", {})),
        )


def warnings_of_strip(scan_warnings: Sequence[str], strip: StripResult) -> list[str]:
    """One strip's warnings out of a whole scan's: the scan-wide ones and the strip's own, once each.

    A scan's warnings repeat each strip's as ``"strip N: ..."``
    (:func:`stripscan.core.pipeline.analyze_loaded`); those of other strips
    are left out and this strip's lose the prefix.

    Parameters
    ----------
    scan_warnings : sequence of str
        :attr:`Analysis.warnings` (or a snapshot's stored copy of them).
    strip : StripResult

    Returns
    -------
    list of str
        Scan-wide warnings first, then the strip's own, without repeats.
    """
    prefix = f"strip {strip.index}: "
    out: list[str] = []
    for text in (*scan_warnings, *strip.warnings):
        if re.match(r"strip \d+: ", text):
            if not text.startswith(prefix):
                continue  # another strip's warning
            text = text[len(prefix):]
        if text not in out:
            out.append(text)
    return out
