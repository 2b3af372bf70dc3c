"""From a located strip to its step densities and result.

The analysis options, the density map a scan is read with (calibrated and
stray-light corrected, or uncalibrated direct mode), each step's density
with its uncertainty and flag, and one strip's whole result with its
warnings.  :mod:`stripscan.core.pipeline` runs these over a whole scan.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from typing import NamedTuple, Sequence

import numpy as np

from stripscan.core.calibration import (
    ACCURACY_GOAL,
    Calibration,
    DirectMode,
)
from stripscan.core.certificate import MAX_STEPS
from stripscan.core.checks import reading_notes
from stripscan.core.curve import DEFAULT_INCREMENT, compute_figures, step_log_exposures
from stripscan.core.figure_settings import FigureSettings
from stripscan.core.locate import FoundStrip
from stripscan.core.numerics import percentile
from stripscan.core.records import StepDensity, StepReading, StripGeometry, StripResult
from stripscan.core.sample import read_strip
from stripscan.core.scan import Scan
from stripscan.core.straylight import (
    LAMP_REACH_MM,
    reduce_scan,
    SpreadField,
    spread_field,
)

from stripscan.core.scan_checks import AnalysisError, step_list

__all__ = ["AnalysisOptions", "CorrectedMap", "density_map_for", "direct_mode_for", "read_densities", "read_density",
           "read_found_strip", "strip_result", "UNCALIBRATED", "MAX_SATURATED"]

#: The warning every direct-mode result carries, for the scan and for each strip.
UNCALIBRATED = (
    "UNCALIBRATED: densities are log10(I0/I) straight from the scanner (direct mode); "
    "calibrate against a reference step tablet before trusting them"
)

#: Largest fraction of saturated pixels a step may have and still be read.
MAX_SATURATED = 0.01

#: Share of the spread light from beyond the scan's edges counted as its
#: standard uncertainty (what lies there — lid, housing, more platen — is unknown).
OUTSIDE_UNCERTAINTY = 0.5

#: Without a measured lamp profile, how far (mm) across the carriage a strip may
#: lie from the tablet's place before a warning is given.
LAMP_UNMEASURED_MM = 20.0


@dataclass(frozen=True)
class AnalysisOptions:
    """Settings of one analysis (they are stored with every result).

    Attributes
    ----------
    n_steps : int or None
        Fixed step count, or None to count.
    increment : float
        Log exposure per step (common practice: 0.15 = log10 √2).
    exposure_table : tuple of float or None
        Per-step log exposure from the sensitometer instead of ``increment``.
    air_kerma_ugy : tuple of float or None
        Air kerma per step in µGy, for ISO speed (X-ray sensitometry).
    figures : FigureSettings
    dark : float
        Dark signal for direct mode, 0..1.
    clear_area : (row0, col0, row1, col1) or None
        Clear area giving I0 in direct mode, px.
    """

    n_steps: int | None = None
    increment: float = DEFAULT_INCREMENT
    exposure_table: tuple[float, ...] | None = None
    air_kerma_ugy: tuple[float, ...] | None = None
    figures: FigureSettings = FigureSettings()
    dark: float = 0.0
    clear_area: tuple[int, int, int, int] | None = None

    def __post_init__(self) -> None:
        _check_options(self)

    def to_dict(self) -> dict:
        return {
            "n_steps": self.n_steps,
            "increment": self.increment,
            "exposure_table": list(self.exposure_table) if self.exposure_table else None,
            "air_kerma_ugy": list(self.air_kerma_ugy) if self.air_kerma_ugy else None,
            "figures": self.figures.to_dict(),
            "dark": self.dark,
            "clear_area": list(self.clear_area) if self.clear_area else None,
        }


def _check_options(options: "AnalysisOptions") -> None:
    """Refuse settings no strip can have, before any scan is read.

    Raises
    ------
    AnalysisError
        Naming the setting and the range it must lie in.
    """
    n = options.n_steps
    if n is not None and (isinstance(n, bool) or not isinstance(n, (int, np.integer)) or not 2 <= n <= MAX_STEPS):
        raise AnalysisError(f"the step count must be a whole number from 2 to {MAX_STEPS}, not {n!r}")
    if not (math.isfinite(options.increment) and 0.0 < options.increment <= 2.0):
        raise AnalysisError(f"the log exposure per step must lie above 0 and at most 2, not {options.increment!r}")
    for name, table in (("exposure table", options.exposure_table), ("air kerma table", options.air_kerma_ugy)):
        if table is None:
            continue
        if not 2 <= len(table) <= MAX_STEPS:
            raise AnalysisError(f"the {name} has {len(table)} values; a strip has 2 to {MAX_STEPS} steps")
        bad = next((k for k, v in enumerate(table, start=1) if not math.isfinite(v)), None)
        if bad is not None:
            raise AnalysisError(f"the {name} gives step {bad} the value {table[bad - 1]!r}, not a finite number")
    if not (math.isfinite(options.dark) and 0.0 <= options.dark < 1.0):
        raise AnalysisError(f"the dark signal must lie from 0 to below 1 of full scale, not {options.dark!r}")
    for name, value in options.figures.to_dict().items():
        if isinstance(value, float) and not math.isfinite(value):
            raise AnalysisError(f"the figure setting {name} must be a finite number, not {value!r}")


def direct_mode_for(
    scan: Scan, *, dark: float = 0.0, clear_area: tuple[int, int, int, int] | None = None
) -> DirectMode:
    """Direct-mode densities for a linear 16-bit scan.

    Parameters
    ----------
    scan : Scan
    dark : float
        Signal with no light, 0..1 of full scale.
    clear_area : (row0, col0, row1, col1), optional
        A clear area (open platen or clear film base) marked by the user,
        px, half-open; its mean signal is I0.  By default I0 is the bright
        end (99th percentile) of the whole scan, i.e. the open platen.

    Raises
    ------
    AnalysisError
        For gamma-encoded or 8-bit scans, where log10(I0/I) means nothing.
    """
    info = scan.header
    if info.bits < 16 or info.decoding != "linear":
        raise AnalysisError(
            f"{info.path}: direct mode needs a linear 16-bit scan, this one is {info.bits}-bit "
            f"{info.decoding}; calibrate with a step tablet (stripscan calibrate) and pass --calibration"
        )
    step = max(1, int(math.sqrt(scan.shape[0] * scan.shape[1] / 250_000)))
    sample = scan.decode(scan.raw[::step, ::step])
    if clear_area is not None:
        r0, c0, r1, c1 = clear_area
        area = scan.decode(scan.raw[max(r0, 0) : r1, max(c0, 0) : c1])
        if area.size < 16:
            raise AnalysisError(f"{info.path}: the clear area {clear_area} holds too few pixels of the scan")
        i0 = float(area.mean())
    else:
        i0 = percentile(sample, 99.0)
    if i0 <= dark:
        raise AnalysisError(f"{info.path}: no open platen or clear area is bright enough to serve as I0")
    darkest = sample[sample <= percentile(sample, 0.5)]
    floor_sd = float(darkest.std()) if darkest.size > 1 else 0.0
    return DirectMode(i0=i0, dark=dark, floor_sd=floor_sd)


def _check_compatible(scan: Scan, calibration: Calibration) -> list[str]:
    info = scan.header
    if info.bits != calibration.bits:
        raise AnalysisError(
            f"{info.path}: the scan is {info.bits}-bit but the calibration was made from a "
            f"{calibration.bits}-bit scan; scan with the same settings or calibrate again"
        )
    if info.decoding != calibration.decoding or info.channel != calibration.channel:
        raise AnalysisError(
            f"{info.path}: the scan was decoded as {info.decoding}/{info.channel} but the calibration "
            f"as {calibration.decoding}/{calibration.channel}; use the same settings for both"
        )
    warnings = []
    if info.dpi and calibration.dpi and abs(info.dpi - calibration.dpi) > 0.5:
        warnings.append(
            f"the scan is at {info.dpi:g} dpi but the calibration at {calibration.dpi:g} dpi; "
            "flare and sharpness differ between resolutions"
        )
    return warnings


def read_found_strip(scan: Scan, found: FoundStrip) -> tuple[list[StepReading], StepReading | None, list[str]]:
    """Read a located strip's steps and base+fog area from the stored pixels.

    A strip whose dense end is cut off by the scan's edge is not read at
    all: steps are numbered from the dense end, so without it every number
    (and so every log E) could be wrong.

    Returns
    -------
    readings, base_fog_reading, notes
        As :func:`stripscan.core.sample.read_strip`; the notes include the
        search's own warnings.
    """
    readings, bf, notes = read_strip(scan, None, found.geometry)
    notes = list(found.warnings) + notes
    if found.dense_end_cut:
        notes.append(
            "the strip's dense end is cut off by the scan's edge, so its steps cannot be numbered; "
            "lay the whole strip on the platen and scan again (or draw it by hand)"
        )
        readings = [StepReading(r.step, r.center_rc, float("nan"), float("nan"), 0, 0, 0.0) for r in readings]
        bf = None
    return readings, bf, notes


@dataclass(frozen=True)
class CorrectedMap:
    """A calibration with a stray-light model, applied to one scan.

    Attributes
    ----------
    calibration : Calibration
    field : SpreadField
        The scan's own spread light and lamp profile.
    """

    calibration: Calibration
    field: SpreadField

    def summary(self) -> dict:
        return self.calibration.summary()


Mapping = Calibration | DirectMode | CorrectedMap


def density_map_for(scan: Scan, calibration: Calibration | None, options: "AnalysisOptions") -> tuple[Mapping, list[str]]:
    """How this scan's signals become densities: direct mode, or the calibration with this scan's stray light.

    Returns
    -------
    mapping : Calibration, DirectMode or CorrectedMap
    warnings : list of str
        Scan-level warnings (an uncalibrated reading, another resolution,
        stray light that cannot be computed).

    Raises
    ------
    AnalysisError
        When the scan and the calibration do not go together.
    """
    if calibration is None:
        return direct_mode_for(scan, dark=options.dark, clear_area=options.clear_area), [UNCALIBRATED]
    warnings = _check_compatible(scan, calibration)
    if calibration.stray_light is None:
        return calibration, warnings
    if not scan.pixel_mm:
        warnings.append(
            "the scan's resolution is unknown, so its stray light cannot be computed; steps are read "
            "as if they lay in the tablet's surroundings"
        )
        return calibration, warnings
    field = spread_field(reduce_scan(scan), calibration.light, calibration.stray_light)
    return CorrectedMap(calibration, field), warnings


def _calibration_of(mapping: Mapping) -> Calibration | None:
    if isinstance(mapping, CorrectedMap):
        return mapping.calibration
    return mapping if isinstance(mapping, Calibration) else None


class Densities(NamedTuple):
    """Readings turned into densities, one entry per reading (see :func:`read_densities`)."""

    od: np.ndarray  # (n,) OD
    in_range: np.ndarray  # (n,) bool: inside the valid range (before the noise and stray-light checks)
    correction_sd: np.ndarray  # (n,) standard uncertainty of the stray-light correction, OD
    share: list[float | None]  # share of the light seen that is spread light
    reason: list[str]  # a STEP_FLAGS key where not in range


def read_densities(mapping: Mapping, readings: Sequence[StepReading], pixel_mm: float | None) -> Densities:
    """Readings as densities, all at once.

    Parameters
    ----------
    mapping : Calibration, DirectMode or CorrectedMap
    readings : sequence of StepReading
    pixel_mm : float or None
        Pixel pitch, for the lateral correction.
    """
    n = len(readings)
    calibration = _calibration_of(mapping)
    signal = np.array([r.signal for r in readings], dtype=np.float64)
    read = np.isfinite(signal) & (signal > 0) & np.array([r.pixels > 0 for r in readings], dtype=bool)
    safe = np.where(read, signal, 1.0)
    correction_sd = np.zeros(n)
    share: list[float | None] = [None] * n
    if calibration is None:
        assert isinstance(mapping, DirectMode)
        od, ok = mapping.density(safe)
        floor = max(5.0 * mapping.floor_sd, 1e-5)
        reason = ["" if k else ("dark_floor" if s - mapping.dark <= floor else "outside_range")
                  for k, s in zip(ok, safe)]
    elif isinstance(mapping, CorrectedMap):
        model = calibration.stray_light
        assert model is not None
        spread, unit, outside, lamp = mapping.field.values_at(np.array([r.center_rc for r in readings]))
        od, ok = calibration.density(safe, spread=spread, lamp=lamp)
        seen = calibration.light(safe) / lamp
        share = [min(max(float(a / b), 0.0), 1.0) if b > 0 else 1.0 for a, b in zip(spread, seen)]
        finite = np.isfinite(od)
        value = np.where(finite, od, 0.0)
        transmitted = (1.0 - model.total) * 10.0 ** -value
        # The map is exact for the tablet's surroundings.  The kernel's shape acts on the spread
        # beyond the tablet's at this density; the fraction's own uncertainty through the spread
        # per unit fraction beyond the tablet's.  Light from beyond the scan's edges is taken as
        # the edge's own; what lies there is unknown, so half of it is counted as uncertain (also
        # where the tablet had as much: what lies beyond the edge differs from place to place).
        shape = model.relative_sd * np.abs(spread - calibration.reference_spread(value))
        fraction = model.fraction_sd * np.abs(unit - calibration.reference_spread(value, part="unit"))
        unknown = OUTSIDE_UNCERTAINTY * outside
        correction_sd = np.where(finite, np.sqrt(shape**2 + fraction**2 + unknown**2) / (math.log(10.0) * transmitted),
                                 np.inf)
        reason = ["" if k else ("outside_range" if f else "stray_light") for k, f in zip(ok, finite)]
    else:
        od, ok = calibration.density(safe)
        if calibration.stray_light is not None:
            seen = calibration.light(safe)
            reference = calibration.reference_spread(np.where(np.isfinite(od), od, 0.0))
            share = [float(a / b) if b > 0 else None for a, b in zip(reference, seen)]
        reason = ["" if k else "outside_range" for k in ok]
    od = np.where(read, od, np.nan)
    ok = ok & read
    if calibration is not None and calibration.lateral is not None and pixel_mm:
        tablet_pixel_mm = 25.4 / calibration.dpi if calibration.dpi else pixel_mm
        od = od - np.array([calibration.lateral.offset_od(r.center_rc, pixel_mm, calibration.tablet_center_rc,
                                                          tablet_pixel_mm) for r in readings])
    reason = [r if k else "not_read" for r, k in zip(reason, read)]
    share = [s if k else None for s, k in zip(share, read)]
    return Densities(od, ok, np.where(read, correction_sd, 0.0), share, reason)


def read_density(
    mapping: Mapping, reading: StepReading, pixel_mm: float | None
) -> tuple[float, bool, float, float | None, str]:
    """One reading as a density: ``(od, in_range, correction_sd, share, reason)``; see :func:`read_densities`."""
    d = read_densities(mapping, [reading], pixel_mm)
    return float(d.od[0]), bool(d.in_range[0]), float(d.correction_sd[0]), d.share[0], d.reason[0]


def strip_result(
    index: int,
    geometry: StripGeometry,
    readings: Sequence[StepReading],
    base_fog_reading: StepReading | None,
    mapping: Mapping,
    options: AnalysisOptions,
    *,
    pixel_mm: float | None,
    excluded: Sequence[int] = (),
    notes: Sequence[str] = (),
) -> StripResult:
    """Turn one strip's signal readings into densities and figures.

    Parameters
    ----------
    index : int
        1-based strip number on the scan.
    geometry : StripGeometry
    readings : sequence of StepReading
        Step 1 first.
    base_fog_reading : StepReading or None
    mapping : Calibration, DirectMode or CorrectedMap
        From :func:`density_map_for`.
    options : AnalysisOptions
    pixel_mm : float or None
        Pixel pitch, for the lateral correction.
    excluded : sequence of int
        Steps a person excluded.
    notes : sequence of str
        Warnings from locating the strip.
    """
    calibration = _calibration_of(mapping)
    # Each strip says it for itself: a strip's warnings travel alone (the window's list, a snapshot).
    warnings = ([] if calibration is not None else [UNCALIBRATED]) + list(notes)
    log_e = step_log_exposures(geometry.n_steps, options.increment, options.exposure_table)
    cal_sd = calibration.rms_residual if calibration is not None and calibration.rms_residual else 0.0
    steps = []
    flagged: dict[str, list[int]] = {}
    densities = read_densities(mapping, readings, pixel_mm)
    for k, reading in enumerate(readings):
        value, ok = float(densities.od[k]), bool(densities.in_range[k])
        correction_sd, share, reason = float(densities.correction_sd[k]), densities.share[k], densities.reason[k]
        if reading.saturated_fraction > MAX_SATURATED:
            # Clipped at one end of the codes: a dense step crushed to the bottom code is
            # not the scanner saturating, and the advice differs (mid-scale splits the ends).
            ok, reason = False, "saturated" if reading.signal >= 0.5 else "dark_floor"
        if reason == "not_read":
            sd = float("nan")
        else:
            rel = reading.signal_sd / math.sqrt(reading.pixels) / (reading.signal * math.log(10.0))
            slope = (calibration or mapping).slope(reading.signal)  # type: ignore[union-attr]
            # Taking spread light off magnifies the reading noise by seen / (seen - spread).
            noise = slope * rel / (1.0 - share) if share is not None and share < 1.0 else slope * rel
            sd = math.sqrt(noise**2 + cal_sd**2 + correction_sd**2)
            if ok and 2.0 * math.hypot(noise, cal_sd) > ACCURACY_GOAL:
                # In range, but too noisy to claim the goal at k = 2.
                ok, reason = False, "too_noisy"
            elif ok and 2.0 * sd > ACCURACY_GOAL:
                ok, reason = False, "stray_light"
        if not ok:
            flagged.setdefault(reason, []).append(reading.step)
        steps.append(
            StepDensity(
                step=reading.step,
                log_exposure=float(log_e[k]),
                od=value,
                od_sd=sd,
                pixels=reading.pixels,
                in_range=ok,
                center_rc=reading.center_rc,
                excluded=reading.step in excluded,
                flag="" if ok else reason,
                stray_light_share=share,
            )
        )
    if calibration is None:
        steps, plateau = _flare_plateau(steps)
        if plateau:
            flagged.setdefault("flare_plateau", []).extend(plateau)
    warnings += _flag_warnings(flagged, calibration)

    base_fog = None
    if base_fog_reading is not None and math.isfinite(base_fog_reading.signal):
        value, bf_ok, correction_sd, _, _ = read_density(mapping, base_fog_reading, pixel_mm)
        if bf_ok and base_fog_reading.saturated_fraction <= MAX_SATURATED and 2.0 * correction_sd <= ACCURACY_GOAL:
            base_fog = value
        else:
            warnings.append(f"base+fog ({value:.2f} OD) is outside the calibrated range; not used")
    if isinstance(mapping, CorrectedMap) and pixel_mm:
        warnings += _lamp_guard(mapping, geometry, pixel_mm)
    usable = [s.in_range and not s.excluded for s in steps]
    # A step past the range stays past it when a person excludes it too: the
    # film is denser than anything read, so Dmax is not stated.
    densest_usable = max((s.step for s, use in zip(steps, usable) if use), default=0)
    densest_unusable = any((not s.in_range) and s.step > densest_usable for s in steps)
    figures = compute_figures(
        log_e,
        [s.od for s in steps],
        usable,
        base_fog=base_fog,
        settings=options.figures,
        air_kerma_ugy=options.air_kerma_ugy,
        beyond_range_denser=densest_unusable,
    )
    warnings += list(figures.notes)
    warnings += reading_notes(steps, figures)  # a wrong step count or unreached targets, never silent
    return StripResult(
        index=index,
        geometry=geometry,
        steps=tuple(steps),
        base_fog_reading=base_fog_reading,
        figures=figures,
        warnings=tuple(warnings),
    )


def _flag_warnings(flagged: dict[str, list[int]], calibration: Calibration | None) -> list[str]:
    """One warning per reason, naming its steps."""
    words = {
        "saturated": "the scanner saturates (the signal is clipped at full scale)",
        "too_noisy": f"reading noise too high to be within ±{ACCURACY_GOAL:.2f} OD",
        "stray_light": f"stray light from the surroundings too large to correct within ±{ACCURACY_GOAL:.2f} OD",
        "dark_floor": "at the scanner's dark floor (too dense to read: the signal is clipped at the bottom code)",
        "flare_plateau": (
            "the density no longer rises as the exposure step predicts (the scanner's flare plateau, or the "
            "film's shoulder: without a calibration they cannot be told apart); not used, and not taken as Dmax"
        ),
    }
    out = []
    for reason in ("saturated", "outside_range", "dark_floor", "too_noisy", "stray_light", "flare_plateau"):
        steps = flagged.get(reason)
        if not steps:
            continue
        if reason == "outside_range":
            if calibration is not None:
                lo, hi = calibration.valid_od
                out.append(f"{step_list(steps)}: outside the calibrated range {lo:.2f}-{hi:.2f} OD; not used")
            else:
                out.append(f"{step_list(steps)}: brighter than the open platen; not used")
        elif reason == "flare_plateau":
            out.append(f"{step_list(steps)}: {words[reason]}")
        else:
            out.append(f"{step_list(steps)}: {words[reason]}; not used")
    return out


#: In direct mode a step whose rise over the previous step is below this share
#: of the strip's steepest rise, at a density above :data:`PLATEAU_MIN_OD`, is
#: on a plateau (common practice: flare caps a flatbed's direct reading).
PLATEAU_RISE = 0.25
PLATEAU_MIN_OD = 1.5


def _flare_plateau(steps: list[StepDensity]) -> tuple[list[StepDensity], list[int]]:
    """Direct mode: take the dense steps whose density has stopped rising off the curve.

    Walking down from the densest usable step, every step that rose less
    than :data:`PLATEAU_RISE` of the strip's steepest step-to-step rise, at
    a density above :data:`PLATEAU_MIN_OD`, is on the plateau, together
    with every denser step.
    """
    usable = [s for s in steps if s.in_range and math.isfinite(s.od)]
    if len(usable) < 4:
        return steps, []
    rises = [b.od - a.od for a, b in zip(usable, usable[1:])]
    steepest = max(rises)
    if steepest <= 0:
        return steps, []
    cut = None
    for k in range(len(usable) - 1, 0, -1):
        if usable[k].od > PLATEAU_MIN_OD and rises[k - 1] < PLATEAU_RISE * steepest:
            cut = usable[k].step
        else:
            break
    if cut is None:
        return steps, []
    out, plateau = [], []
    for s in steps:
        if s.step >= cut and s.in_range:
            plateau.append(s.step)
            s = dataclasses.replace(s, in_range=False, flag="flare_plateau")
        out.append(s)
    return out, plateau


def _lamp_guard(mapping: CorrectedMap, geometry: StripGeometry, pixel_mm: float) -> list[str]:
    """Warn when the strip lies across the carriage where the lamp was not measured."""
    calibration, model = mapping.calibration, mapping.field.model
    cols = [p[1] * pixel_mm for p in geometry.outline_rc()]
    lo, hi = min(cols), max(cols)
    if model.lamp_span_mm is not None:
        a, b = model.lamp_span_mm
        if lo < a - LAMP_REACH_MM or hi > b + LAMP_REACH_MM:
            return [
                f"the strip lies {lo:.0f}-{hi:.0f} mm across the carriage, but the lamp was measured only over "
                f"{a:.0f}-{b:.0f} mm on the tablet scan; scan the tablet with open platen beside the strip's place"
            ]
        return []
    tablet_pixel_mm = 25.4 / calibration.dpi if calibration.dpi else pixel_mm
    x_tablet = calibration.tablet_center_rc[1] * tablet_pixel_mm
    if max(abs(lo - x_tablet), abs(hi - x_tablet)) > LAMP_UNMEASURED_MM:
        return [
            f"the strip lies up to {max(abs(lo - x_tablet), abs(hi - x_tablet)):.0f} mm across the carriage from "
            "where the tablet lay, and the lamp's profile was not measured (no open platen on the tablet scan); "
            "place the strip where the tablet was, or calibrate with the tablet on the same scan"
        ]
    return []
