"""Calibrating the scanner from a step tablet: the tablet found and read, the stray-light model and the
density map fitted on it (:func:`calibrate_tablet`), also when the tablet lies on the strips' own scan
(:func:`calibrate_loaded`)."""

from __future__ import annotations

import math
import os
from typing import Sequence

import numpy as np

from stripscan.core.calibration import Calibration, LateralCorrection
from stripscan.core.calibration_fit import fit_calibration
from stripscan.core.certificate import CalibrationError, Certificate
from stripscan.core.locate import FoundStrip, LocateOptions, locate_in_scan
from stripscan.core.records import StepReading, StripGeometry
from stripscan.core.sample import read_area, read_strip
from stripscan.core.scan import Scan, load_scan
from stripscan.core.straylight import (
    BASIS_SIGMA_MM,
    fit_stray_light,
    platen_observations,
    reduce_scan,
    spread_field,
    Observation,
)

from stripscan.core.scan_checks import apply_flat_field, check_exposure, same_piece, step_list

__all__ = ["fit_tablet", "calibrate_loaded", "calibrate_tablet", "check_tablet_count"]


def check_tablet_count(scan: Scan, certificate: Certificate) -> None:
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


#: Sub-areas each tablet step is split into (along, across) to see how light varies inside it.
_STEP_CELLS = (2, 4)


def _step_areas(scan: Scan, geometry: StripGeometry, steps: Sequence[int]) -> list[Observation]:
    """Each step (and the base+fog area, as step 0) read in sub-areas.

    Light varies inside an area of one transmittance only by stray light
    and the lamp, which is what the stray-light fit needs to see.
    """
    areas = []
    n_u, n_v = _STEP_CELLS
    boxes = [(step, geometry.step_box_rc(step)) for step in steps]
    if 0 in steps and geometry.base_fog_box_rc() is not None:
        boxes = [(s, b) for s, b in boxes if s != 0] + [(0, geometry.base_fog_box_rc())]
    for step, box in boxes:
        c0, c1, _, c3 = (np.asarray(p, dtype=np.float64) for p in box)
        e_u, e_v = (c1 - c0) / n_u, (c3 - c0) / n_v
        rc, signal, sem = [], [], []
        for i in range(n_u):
            for j in range(n_v):
                a = c0 + i * e_u + j * e_v
                corners = [tuple(a), tuple(a + e_u), tuple(a + e_u + e_v), tuple(a + e_v)]
                centre = a + 0.5 * (e_u + e_v)
                reading, clipped = read_area(scan, None, corners, step=step, center_rc=(centre[0], centre[1]))
                if clipped or not math.isfinite(reading.signal) or reading.pixels < 4:
                    continue
                rc.append(centre)
                signal.append(reading.signal)
                sem.append(reading.signal_sd / math.sqrt(reading.pixels))
        if len(signal) >= 3:
            areas.append(Observation(np.asarray(rc), np.asarray(signal), np.maximum(np.asarray(sem), 1e-9)))
    return areas


def _piece_mask(reduced, geometry: StripGeometry, margin_px: float, *, film: bool = False) -> np.ndarray:
    """Cells of a reduced scan within ``margin_px`` of a step band (with ``film``, of its unexposed band too)."""
    rows, cols = np.meshgrid(reduced.rows_px, reduced.cols_px, indexing="ij")
    (r0, c0), (ar, ac), (nr, nc) = geometry.origin_rc, geometry.axis_rc, geometry.normal_rc
    u = (rows - r0) * ar + (cols - c0) * ac
    v = (rows - r0) * nr + (cols - c0) * nc
    width = geometry.band_width_px
    if film and geometry.base_fog_v_px is not None:
        width = max(width, geometry.base_fog_v_px[1])
    return (u > -margin_px) & (u < geometry.length_px + margin_px) & (v > -margin_px) & (v < width + margin_px)


def fit_tablet(scan: Scan, geometry: StripGeometry, readings: Sequence[StepReading], certificate: Certificate,
               *, others: Sequence[StripGeometry] = (), **provenance) -> Calibration:
    """Fit the calibration of a read tablet, with the scanner's stray light when the scan's resolution is known.

    The map is fitted first as if there were no stray light; the stray light
    and lamp are then fitted on the light's variations inside areas of one
    transmittance — the tablet's steps, the steps and unexposed film of the
    strips ``others`` on the same scan, the open platen
    (see :mod:`stripscan.core.straylight`) — the map refitted on the light
    the sensor saw, and both once more.
    """
    calibration = fit_calibration(readings, certificate, **provenance)
    if not scan.pixel_mm:
        return calibration
    reduced = reduce_scan(scan)
    used = [r.step for r in readings if r.step not in calibration.excluded_steps and math.isfinite(r.signal)]
    areas = _step_areas(scan, geometry, used)
    for other in others:
        areas += _step_areas(scan, other, range(0, other.n_steps + 1))
    # The pieces read step by step (the tablet's clear ends too) are kept out of the cell areas.
    pieces = _piece_mask(reduced, geometry, 12.0 / scan.pixel_mm)
    for other in others:
        pieces |= _piece_mask(reduced, other, 3.0 / scan.pixel_mm, film=True)
    # A kernel much wider than the scan spreads light mostly from beyond its edges, where
    # nothing is seen: it cannot be told from a constant, so it is not offered to the fit.
    side_mm = min(scan.shape) * scan.pixel_mm
    sigmas = tuple(s for s in BASIS_SIGMA_MM if s <= side_mm / 3.0) or BASIS_SIGMA_MM[:1]
    for _ in range(2):
        platen = platen_observations(reduced, calibration.light, exclude=pieces)
        model, _info = fit_stray_light(reduced, calibration.light, calibration.light_slope, areas,
                                       platen=platen, sigmas_mm=sigmas,
                                       code_step=scan.code_step, source="the tablet scan")
        field = spread_field(reduced, calibration.light, model)
        spread, unit, _, lamp = field.values_at(np.array([r.center_rc for r in readings]))
        seen = list(zip(lamp, spread, unit))
        calibration = fit_calibration(readings, certificate, stray_light=model, seen=seen, **provenance)
    return calibration


def _steps_fill_width(scan: Scan, geometry: StripGeometry) -> bool:
    """True when a piece's steps run across its whole width, as a tablet's do.

    The two long halves of the band are read step by step: on a tablet both
    change along the piece alike; on a strip one half is the unexposed film
    beside the steps, nearly flat.
    """
    profiles = []
    for v0, v1 in ((0.1, 0.4), (0.6, 0.9)):
        values = []
        for step in range(1, geometry.n_steps + 1):
            u0, u1 = (step - 0.8) * geometry.step_pitch_px, (step - 0.2) * geometry.step_pitch_px
            w0, w1 = v0 * geometry.band_width_px, v1 * geometry.band_width_px
            corners = [geometry.point_rc(u0, w0), geometry.point_rc(u1, w0), geometry.point_rc(u1, w1),
                       geometry.point_rc(u0, w1)]
            reading, clipped = read_area(scan, None, corners, step=step, center_rc=geometry.step_center_rc(step))
            values.append(reading.signal if not clipped and reading.signal > 0 else np.nan)
        profiles.append(np.log10(np.asarray(values, dtype=np.float64)))
    spreads = [float(np.nanstd(p)) if np.isfinite(p).sum() >= 3 else 0.0 for p in profiles]
    # A uniform piece (black film, clear film) changes along neither half.
    return min(spreads) > 0.1 and min(spreads) > 0.5 * max(spreads)


def calibrate_loaded(scan: Scan, certificate: Certificate, *, lateral: LateralCorrection | None = None,
                     flat_field_sha256: str | None = None, note: str = "") -> tuple[Calibration, FoundStrip, list[str]]:
    """Locate a step tablet on a loaded scan, read it and fit the calibration; see :func:`calibrate_tablet`.

    When the scan holds several pieces of film, the tablet is the one whose
    steps fill its whole width (no unexposed film beside them); the longest
    such piece if there are several.
    """
    path = scan.header.path
    n = len(certificate.densities)
    try:
        check_exposure(scan)
        found = locate_in_scan(scan, LocateOptions(n_steps=n, full_width_band=True))
    except ValueError as exc:
        raise CalibrationError(f"{path}: {exc}") from None
    warnings = []
    several = len(found) > 1
    if several:
        tablets = [f for f in found if _steps_fill_width(scan, f.geometry)]
        if not tablets:
            raise CalibrationError(
                f"{path}: {len(found)} pieces of film were found but none is a step tablet (steps across the "
                "whole width, no unexposed film beside them)"
            )
        if len(tablets) > 1:
            warnings.append(f"{len(tablets)} tablet-like pieces found on the scan; the longest is taken as the tablet")
        found = tablets
    tablet = max(found, key=lambda f: f.geometry.length_px)
    others: list[StripGeometry] = []
    if several:
        # The strips beside the tablet, found as strips: their steps and unexposed film
        # are more areas of one transmittance each for the stray-light fit.
        try:
            others = [f.geometry for f in locate_in_scan(scan, LocateOptions())
                      if not same_piece(f.geometry, tablet.geometry) and not f.dense_end_cut]
        except ValueError:
            others = []
    warnings += list(tablet.warnings)
    readings, _, notes = read_strip(scan, None, tablet.geometry)
    warnings += notes
    centre = tablet.geometry.point_rc(0.5 * tablet.geometry.length_px, 0.5 * tablet.geometry.band_width_px)
    try:
        calibration = fit_tablet(
            scan,
            tablet.geometry,
            readings,
            certificate,
            others=others,
            scan_sha256=scan.info.sha256,
            scan_path=scan.info.path,
            bits=scan.info.bits,
            channel=scan.info.channel,
            decoding=scan.info.decoding,
            dpi=scan.info.dpi,
            tablet_center_rc=centre,
            lateral=lateral,
            flat_field_sha256=flat_field_sha256,
            note=note,
        )
    except CalibrationError as exc:
        raise CalibrationError(f"{path}: {exc}") from None
    if calibration.excluded_steps:
        warnings.append(
            f"tablet {step_list(calibration.excluded_steps)} "
            f"{'is' if len(calibration.excluded_steps) == 1 else 'are'} not distinguished by the scanner; "
            f"the calibration ends at {calibration.covered_od[1]:.2f} OD"
        )
    return calibration, tablet, warnings


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
    check_tablet_count(scan, certificate)
    ff_sha = None
    if flat_field_scan is not None:
        scan = apply_flat_field(scan, flat_field_scan, channel)
        ff_sha = load_scan(flat_field_scan, channel=channel).info.sha256
    return calibrate_loaded(scan, certificate, lateral=lateral, flat_field_sha256=ff_sha, note=note)
