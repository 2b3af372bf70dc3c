"""The whole job in two calls: calibrate from a tablet scan, analyse a strip scan.

Both are thin compositions of the stages (load, locate, sample, calibrate,
figures) so that the command line, the GUI and the archive get identical
numbers.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from .. import __version__
from .calibration import (
    MAX_STEPS,
    ACCURACY_GOAL,
    Calibration,
    CalibrationError,
    Certificate,
    DirectMode,
    LateralCorrection,
    fit_calibration,
    flat_field,
)
from .curve import DEFAULT_INCREMENT, FigureSettings, compute_figures, step_log_exposures
from .locate import FoundStrip, LocateOptions, locate_in_scan, with_step_count
from .records import Analysis, StepDensity, StepReading, StripGeometry, StripResult
from .sample import read_strip
from .scan import Scan, load_scan

__all__ = [
    "AnalysisError",
    "AnalysisOptions",
    "analyze_scan",
    "analyze_loaded",
    "calibrate_tablet",
    "check_exposure",
    "direct_mode_for",
    "read_found_strip",
    "strip_result",
]

#: The warning every direct-mode result carries, for the scan and for each strip.
UNCALIBRATED = (
    "UNCALIBRATED: densities are log10(I0/I) straight from the scanner (direct mode); "
    "calibrate against a reference step tablet before trusting them"
)

#: Largest fraction of saturated pixels a step may have and still be read.
MAX_SATURATED = 0.01


class AnalysisError(ValueError):
    """The scan cannot be analysed as asked; the message says why."""


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


def _check_tablet_count(scan: Scan, certificate: Certificate) -> None:
    """Refuse a certificate with fewer steps than the tablet on ``scan`` shows.

    The tablet's steps are counted first; forcing a 21-step tablet into the
    5 steps of a wrong certificate would fit a map to readings that straddle
    several steps each.  A tablet may show fewer steps than certified (the
    densest ones melt together on a scanner with flare), so only a count
    above the certificate's is refused.  A scan where no tablet is found is
    left to the calibration itself to explain.
    """
    certified = len(certificate.densities)
    try:
        found = locate_in_scan(scan, LocateOptions(full_width_band=True))
    except ValueError:
        return
    counted = max((f.geometry.n_steps for f in found), default=0)
    if counted > certified:
        raise CalibrationError(
            f"{scan.header.path}: the tablet shows {counted} steps but the certificate {certificate.source} lists "
            f"{certified}; steps {certified + 1} to {counted} are missing from it (is it the certificate of this "
            "tablet?)")


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
        i0 = float(np.percentile(sample, 99.0))
    if i0 <= dark:
        raise AnalysisError(f"{info.path}: no open platen or clear area is bright enough to serve as I0")
    darkest = sample[sample <= np.percentile(sample, 0.5)]
    floor_sd = float(darkest.std()) if darkest.size > 1 else 0.0
    return DirectMode(i0=i0, dark=dark, floor_sd=floor_sd)


def check_exposure(scan: Scan) -> None:
    """Refuse scans that hold no usable picture: white or black everywhere.

    Raises
    ------
    AnalysisError
        Naming the file and the likely cause.
    """
    step = max(1, int(math.sqrt(scan.shape[0] * scan.shape[1] / 250_000)))
    sample = scan.decode(scan.raw[::step, ::step])
    path = scan.header.path
    if np.mean(sample >= 0.995) > 0.98:
        raise AnalysisError(
            f"{path}: the scan is white (saturated) almost everywhere; lower the scanner's exposure "
            "and switch off its automatic corrections"
        )
    if np.mean(sample <= 0.002) > 0.98:
        raise AnalysisError(
            f"{path}: the scan is black almost everywhere; was it made in reflection mode, or with "
            "the transparency light off?"
        )


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


def strip_result(
    index: int,
    geometry: StripGeometry,
    readings: Sequence[StepReading],
    base_fog_reading: StepReading | None,
    mapping: Calibration | DirectMode,
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
    mapping : Calibration or DirectMode
    options : AnalysisOptions
    pixel_mm : float or None
        Pixel pitch, for the lateral correction.
    excluded : sequence of int
        Steps a person excluded.
    notes : sequence of str
        Warnings from locating the strip.
    """
    # Each strip says it for itself: a strip's warnings travel alone (the window's list, a snapshot).
    warnings = ([] if isinstance(mapping, Calibration) else [UNCALIBRATED]) + list(notes)
    log_e = step_log_exposures(geometry.n_steps, options.increment, options.exposure_table)
    signals = np.array([r.signal for r in readings], dtype=np.float64)
    od, in_range = mapping.density(signals)
    cal_sd = mapping.rms_residual if isinstance(mapping, Calibration) and mapping.rms_residual else 0.0

    def lateral_offset(center_rc: tuple[float, float]) -> float:
        """Density the lateral response adds at ``center_rc`` over the tablet's place (0 without one)."""
        if not isinstance(mapping, Calibration) or mapping.lateral is None or not pixel_mm:
            return 0.0
        tablet_pixel_mm = 25.4 / mapping.dpi if mapping.dpi else pixel_mm
        return mapping.lateral.offset_od(center_rc, pixel_mm, mapping.tablet_center_rc, tablet_pixel_mm)

    steps = []
    saturated_steps, out_steps, noisy_steps = [], [], []
    for k, reading in enumerate(readings):
        value = float(od[k])
        ok = bool(in_range[k])
        if reading.saturated_fraction > MAX_SATURATED:
            ok = False
            saturated_steps.append(reading.step)
        if math.isfinite(value):
            value -= lateral_offset(reading.center_rc)
        if math.isfinite(reading.signal) and reading.signal > 0 and reading.pixels > 0:
            rel = reading.signal_sd / math.sqrt(reading.pixels) / (reading.signal * math.log(10.0))
            sd = math.hypot(mapping.slope(reading.signal) * rel, cal_sd)
        else:
            sd = float("nan")
            ok = False
        if ok and 2.0 * sd > ACCURACY_GOAL:
            # In range, but too noisy to claim the goal at k = 2.
            ok = False
            noisy_steps.append(reading.step)
        elif not ok and reading.step not in saturated_steps:
            out_steps.append(reading.step)
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
            )
        )
    if saturated_steps:
        warnings.append(f"{_list(saturated_steps)}: the scanner saturates; not used")
    if out_steps and isinstance(mapping, Calibration):
        lo, hi = mapping.valid_od
        warnings.append(
            f"{_list(out_steps)}: outside the calibrated range {lo:.2f}-{hi:.2f} OD; not used"
        )
    elif out_steps:
        warnings.append(f"{_list(out_steps)}: at the scanner's dark floor or saturated; not used")
    if noisy_steps:
        warnings.append(
            f"{_list(noisy_steps)}: reading noise too high to be within ±{ACCURACY_GOAL:.2f} OD; not used"
        )

    base_fog = None
    if base_fog_reading is not None and math.isfinite(base_fog_reading.signal):
        bf_od, bf_ok = mapping.density(base_fog_reading.signal)
        value = float(bf_od[0])
        value -= lateral_offset(base_fog_reading.center_rc)
        if bool(bf_ok[0]) and base_fog_reading.saturated_fraction <= MAX_SATURATED:
            base_fog = value
        else:
            warnings.append(f"base+fog ({value:.2f} OD) is outside the calibrated range; not used")
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
    return StripResult(
        index=index,
        geometry=geometry,
        steps=tuple(steps),
        base_fog_reading=base_fog_reading,
        figures=figures,
        warnings=tuple(warnings),
    )


def _list(steps: Sequence[int]) -> str:
    """'step 3' or 'steps 3, 4, 5'."""
    word = "step" if len(steps) == 1 else "steps"
    return f"{word} {', '.join(str(s) for s in steps)}"


def analyze_loaded(
    scan: Scan,
    *,
    calibration: Calibration | None = None,
    options: AnalysisOptions = AnalysisOptions(),
    geometries: Sequence[StripGeometry] | None = None,
    excluded: dict[int, Sequence[int]] | None = None,
) -> Analysis:
    """Analyse a loaded scan; see :func:`analyze_scan`."""
    warnings: list[str] = []
    check_exposure(scan)
    if calibration is None:
        mapping: Calibration | DirectMode = direct_mode_for(scan, dark=options.dark, clear_area=options.clear_area)
        warnings.append(UNCALIBRATED)
    else:
        warnings += _check_compatible(scan, calibration)
        mapping = calibration
    if geometries is None:
        try:
            found = locate_in_scan(scan, LocateOptions(n_steps=options.n_steps))
        except ValueError as exc:
            raise AnalysisError(f"{scan.header.path}: {exc}") from None
    else:
        found = [
            FoundStrip(with_step_count(g, options.n_steps) if options.n_steps else g, (), False)
            for g in geometries
        ]
    strips = []
    for index, item in enumerate(found, start=1):
        readings, bf, notes = read_found_strip(scan, item)
        result = strip_result(
            index,
            item.geometry,
            readings,
            bf,
            mapping,
            options,
            pixel_mm=scan.pixel_mm,
            excluded=(excluded or {}).get(index, ()),
            notes=notes,
        )
        strips.append(result)
        warnings += [f"strip {index}: {w}" for w in result.warnings if w != UNCALIBRATED]  # said once above
    return Analysis(
        scan=scan.info,
        calibration=mapping.summary(),
        strips=tuple(strips),
        warnings=tuple(warnings),
        program_version=__version__,
        settings=options.to_dict(),
    )


def analyze_scan(
    path: str | os.PathLike[str],
    *,
    calibration: Calibration | None = None,
    options: AnalysisOptions = AnalysisOptions(),
    dpi: float | None = None,
    channel: str = "auto",
    flat_field_scan: str | os.PathLike[str] | None = None,
) -> Analysis:
    """Read every strip on a scan: densities per step, curve figures.

    Parameters
    ----------
    path : path-like
        The scan of processed strips.
    calibration : Calibration, optional
        From :func:`calibrate_tablet`; None for uncalibrated direct mode
        (linear 16-bit scans only; every result says it is uncalibrated).
    options : AnalysisOptions
    dpi : float, optional
        Overrides the file's resolution.
    channel : str
        Channel rule, see :func:`stripscan.core.scan.load_scan`.
    flat_field_scan : path-like, optional
        Blank-platen scan of the same size to divide by.
    """
    scan = load_scan(path, dpi=dpi, channel=channel)
    if flat_field_scan is not None:
        scan = _apply_flat_field(scan, flat_field_scan, channel)
    return analyze_loaded(scan, calibration=calibration, options=options)


def _apply_flat_field(scan: Scan, blank_path: str | os.PathLike[str], channel: str) -> Scan:
    blank = load_scan(blank_path, channel=channel)
    try:
        corrected = flat_field(scan.signal, blank.signal)
    except CalibrationError as exc:
        raise AnalysisError(f"{blank_path}: {exc}") from None
    return Scan.from_signal(corrected, scan.info)


def calibrate_tablet(
    path: str | os.PathLike[str],
    certificate: Certificate,
    *,
    dpi: float | None = None,
    channel: str = "auto",
    flat_field_scan: str | os.PathLike[str] | None = None,
    lateral: LateralCorrection | None = None,
    note: str = "",
) -> tuple[Calibration, FoundStrip, list[str]]:
    """Locate a step tablet on a scan, read it and fit the calibration.

    Returns
    -------
    calibration : Calibration
    tablet : FoundStrip
        Where the tablet was found (for drawing).
    warnings : list of str
    """
    scan = load_scan(path, dpi=dpi, channel=channel)
    _check_tablet_count(scan, certificate)
    ff_sha = None
    if flat_field_scan is not None:
        scan = _apply_flat_field(scan, flat_field_scan, channel)
        ff_sha = load_scan(flat_field_scan, channel=channel).info.sha256
    n = len(certificate.densities)
    try:
        check_exposure(scan)
        found = locate_in_scan(scan, LocateOptions(n_steps=n, full_width_band=True))
    except ValueError as exc:
        raise CalibrationError(f"{path}: {exc}") from None
    warnings = []
    if len(found) > 1:
        warnings.append(f"{len(found)} pieces found on the tablet scan; the longest is taken as the tablet")
    tablet = max(found, key=lambda f: f.geometry.length_px)
    warnings += list(tablet.warnings)
    readings, _, notes = read_strip(scan, None, tablet.geometry)
    warnings += notes
    centre = tablet.geometry.point_rc(0.5 * tablet.geometry.length_px, 0.5 * tablet.geometry.band_width_px)
    try:
        calibration = fit_calibration(
            readings,
            certificate,
            scan_sha256=scan.info.sha256,
            scan_path=scan.info.path,
            bits=scan.info.bits,
            channel=scan.info.channel,
            decoding=scan.info.decoding,
            dpi=scan.info.dpi,
            tablet_center_rc=centre,
            lateral=lateral,
            flat_field_sha256=ff_sha,
            note=note,
        )
    except CalibrationError as exc:
        raise CalibrationError(f"{path}: {exc}") from None
    if calibration.excluded_steps:
        warnings.append(
            f"tablet {_list(calibration.excluded_steps)} "
            f"{'is' if len(calibration.excluded_steps) == 1 else 'are'} not distinguished by the scanner; "
            f"the calibration ends at {calibration.covered_od[1]:.2f} OD"
        )
    return calibration, tablet, warnings
