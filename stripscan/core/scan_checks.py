"""Checks and small helpers both the analysis and the tablet calibration use: a scan worth reading,
the flat-field applied, two outlines of one film piece, step lists in words."""

from __future__ import annotations

import math
import os
from typing import Sequence

import numpy as np

from stripscan.core.calibration import (
    flat_field,
)
from stripscan.core.certificate import CalibrationError
from stripscan.core.records import StripGeometry
from stripscan.core.scan import Scan, load_scan

__all__ = ["AnalysisError", "check_exposure", "apply_flat_field", "same_piece", "step_list"]


class AnalysisError(ValueError):
    """The scan cannot be analysed as asked; the message says why."""


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


def apply_flat_field(scan: Scan, blank_path: str | os.PathLike[str], channel: str) -> Scan:
    blank = load_scan(blank_path, channel=channel)
    try:
        corrected = flat_field(scan.signal, blank.signal)
    except CalibrationError as exc:
        raise AnalysisError(f"{blank_path}: {exc}") from None
    return Scan.from_signal(corrected, scan.info)


def same_piece(a: StripGeometry, b: StripGeometry) -> bool:
    """True when the centre of ``a``'s step band lies inside ``b``'s."""
    r, c = a.point_rc(0.5 * a.length_px, 0.5 * a.band_width_px)
    (r0, c0), (ar, ac), (nr, nc) = b.origin_rc, b.axis_rc, b.normal_rc
    u = (r - r0) * ar + (c - c0) * ac
    v = (r - r0) * nr + (c - c0) * nc
    return 0.0 <= u <= b.length_px and 0.0 <= v <= b.band_width_px


def step_list(steps: Sequence[int]) -> str:
    """'step 3' or 'steps 3, 4, 5'."""
    word = "step" if len(steps) == 1 else "steps"
    return f"{word} {', '.join(str(s) for s in steps)}"
