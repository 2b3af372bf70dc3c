"""The whole job in two calls: calibrate from a tablet scan, analyse a strip scan.

Both are thin compositions of the stages (load, locate, sample, calibrate,
figures) so that the command line, the GUI and the archive get identical
numbers.
"""

from __future__ import annotations

import os
from typing import Sequence


from stripscan import __version__
from stripscan.core.calibration import (
    Calibration,
)
from stripscan.core.certificate import Certificate
from stripscan.core.locate import FoundStrip, LocateOptions, locate_in_scan, with_step_count
from stripscan.core.records import Analysis, StripGeometry, StripResult
from stripscan.core.scan import Scan, load_scan

from stripscan.core.scan_checks import AnalysisError, apply_flat_field, check_exposure, same_piece
from stripscan.core.tablet import calibrate_loaded

from stripscan.core.reading import UNCALIBRATED, AnalysisOptions, density_map_for, read_found_strip, strip_result

__all__ = ["analyze_scan", "analyze_loaded"]

#: Base+fog read at different places on one scan should agree within this, OD
#: (half the accuracy goal): more means the lamp or stray light differs there.
BASE_FOG_SPREAD = 0.01


def analyze_loaded(
    scan: Scan,
    *,
    calibration: Calibration | None = None,
    options: AnalysisOptions = AnalysisOptions(),
    geometries: Sequence[StripGeometry] | None = None,
    excluded: dict[int, Sequence[int]] | None = None,
    tablet_certificate: Certificate | None = None,
) -> Analysis:
    """Analyse a loaded scan; see :func:`analyze_scan`."""
    warnings: list[str] = []
    check_exposure(scan)
    tablet_outline = None
    if tablet_certificate is not None:
        if calibration is not None:
            raise AnalysisError(f"{scan.header.path}: give a calibration or a tablet on the scan, not both")
        calibration, tablet, notes = calibrate_loaded(scan, tablet_certificate)
        tablet_outline = tablet.geometry
        warnings += [f"tablet on the scan: {n}" for n in notes]
    mapping, notes = density_map_for(scan, calibration, options)
    warnings += notes
    if geometries is None:
        try:
            found = locate_in_scan(scan, LocateOptions(n_steps=options.n_steps))
        except ValueError as exc:
            raise AnalysisError(f"{scan.header.path}: {exc}") from None
        if tablet_outline is not None:
            found = [f for f in found if not same_piece(f.geometry, tablet_outline)]
            if not found:
                raise AnalysisError(f"{scan.header.path}: no strip was found beside the tablet")
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
    warnings += _base_fog_spread(strips)
    summary = mapping.summary()
    if tablet_outline is not None:
        # The result carries the whole fit: nothing else records this calibration.
        summary = {**summary, "tablet_on_scan": True, "fit": calibration.to_dict()}
    return Analysis(
        scan=scan.info,
        calibration=summary,
        strips=tuple(strips),
        warnings=tuple(warnings),
        program_version=__version__,
        settings=options.to_dict(),
    )


def _base_fog_spread(strips: Sequence[StripResult]) -> list[str]:
    """Warn when the strips' base+fog differ across the platen by more than :data:`BASE_FOG_SPREAD`."""
    read = [(s.index, s.figures.base_fog) for s in strips if s.figures.base_fog is not None]
    if len(read) < 2:
        return []
    low = min(read, key=lambda p: p[1])
    high = max(read, key=lambda p: p[1])
    if high[1] - low[1] <= BASE_FOG_SPREAD:
        return []
    return [
        f"base+fog differs by {high[1] - low[1]:.3f} OD between strip {low[0]} ({low[1]:.3f}) and strip "
        f"{high[0]} ({high[1]:.3f}); if they are the same film, the lamp or the stray light differs between "
        "their places on the platen"
    ]


def analyze_scan(
    path: str | os.PathLike[str],
    *,
    calibration: Calibration | None = None,
    options: AnalysisOptions = AnalysisOptions(),
    dpi: float | None = None,
    channel: str = "auto",
    flat_field_scan: str | os.PathLike[str] | None = None,
    tablet_certificate: Certificate | None = None,
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
    tablet_certificate : Certificate, optional
        A reference tablet lies on the same scan as the strips: it is found,
        calibrates this scan (same lamp, same stray light, same moment) and
        is left out of the strips.
    """
    scan = load_scan(path, dpi=dpi, channel=channel)
    if flat_field_scan is not None:
        scan = apply_flat_field(scan, flat_field_scan, channel)
    return analyze_loaded(scan, calibration=calibration, options=options, tablet_certificate=tablet_certificate)


