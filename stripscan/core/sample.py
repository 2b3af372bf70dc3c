"""Reading the signal of each step from the full-resolution scan.

A densitometer integrates the light through its aperture, so a step's
reading is the mean *signal* (light) over an inner area of the step, not
the mean of per-pixel densities.  Dust (dark specks), scratches (bright
lines) and hairs are rejected as outliers from a robust centre and spread
(median and scaled median absolute deviation) before the mean is taken.
"""

from __future__ import annotations

import numpy as np
from .records import StepReading, StripGeometry

__all__ = ["robust_mean", "read_area", "read_strip", "box_pixels"]

# A normal distribution's sd is 1.4826 times its median absolute deviation.
_MAD_TO_SD = 1.4826


def robust_mean(values: np.ndarray, *, cut: float = 4.0) -> tuple[float, float, int, int]:
    """Mean and sd of the values left after rejecting outliers.

    Parameters
    ----------
    values : ndarray, shape (n,)
    cut : float
        Values farther than ``cut`` robust sd from the median are rejected.

    Returns
    -------
    mean, sd : float
    kept, rejected : int
    """
    values = np.asarray(values, dtype=np.float64).ravel()
    if values.size == 0:
        return float("nan"), float("nan"), 0, 0
    median = float(np.median(values))
    spread = _MAD_TO_SD * float(np.median(np.abs(values - median)))
    if spread == 0.0:
        # Quantised dense steps can have most pixels on one code: fall back
        # to the plain sd so legitimate neighbouring codes are not rejected.
        spread = float(values.std())
    if spread == 0.0:
        return median, 0.0, int(values.size), 0
    keep = np.abs(values - median) <= cut * spread
    kept = values[keep]
    return float(kept.mean()), float(kept.std(ddof=1)) if kept.size > 1 else 0.0, int(kept.size), int(values.size - kept.size)


def box_pixels(corners_rc: list[tuple[float, float]], shape: tuple[int, int]) -> tuple[np.ndarray, np.ndarray, bool]:
    """Pixel indices whose centres lie inside a parallelogram.

    Parameters
    ----------
    corners_rc : sequence of 4 (row, col)
        Corners in order; the fourth is taken as ``c0 + (c3 - c0)`` so the
        area spanned is the parallelogram on the edges c0->c1 and c0->c3
        (every box the strip geometry makes is a rectangle).
    shape : (rows, cols)

    Returns
    -------
    rows, cols : ndarray of int
    clipped : bool
        True when part of the area lies outside the image.
    """
    corners = np.asarray(corners_rc, dtype=np.float64)
    clipped = bool(
        corners[:, 0].min() < -0.5
        or corners[:, 1].min() < -0.5
        or corners[:, 0].max() > shape[0] - 0.5
        or corners[:, 1].max() > shape[1] - 0.5
    )
    r0 = max(int(np.floor(corners[:, 0].min())), 0)
    r1 = min(int(np.ceil(corners[:, 0].max())), shape[0] - 1)
    c0 = max(int(np.floor(corners[:, 1].min())), 0)
    c1 = min(int(np.ceil(corners[:, 1].max())), shape[1] - 1)
    if r1 < r0 or c1 < c0:
        return np.empty(0, dtype=np.intp), np.empty(0, dtype=np.intp), True
    edges = np.column_stack((corners[1] - corners[0], corners[3] - corners[0]))
    if abs(np.linalg.det(edges)) < 1e-9:
        return np.empty(0, dtype=np.intp), np.empty(0, dtype=np.intp), clipped
    inverse = np.linalg.inv(edges)
    rr, cc = np.mgrid[r0 : r1 + 1, c0 : c1 + 1]
    dr = rr - corners[0][0]
    dc = cc - corners[0][1]
    # (a, b) are the pixel centre's coordinates along the two edges, 0..1 inside.
    a = inverse[0, 0] * dr + inverse[0, 1] * dc
    b = inverse[1, 0] * dr + inverse[1, 1] * dc
    inside = (a >= 0) & (a < 1) & (b >= 0) & (b < 1)
    return rr[inside], cc[inside], clipped


def read_area(
    signal: np.ndarray,
    saturated: np.ndarray | None,
    corners_rc: list[tuple[float, float]],
    *,
    step: int,
    center_rc: tuple[float, float],
) -> tuple[StepReading, bool]:
    """Read one quadrilateral area of the scan.

    Returns
    -------
    reading : StepReading
    clipped : bool
        True when the area runs off the scan (the reading is then NaN).
    """
    rr, cc, clipped = box_pixels(corners_rc, signal.shape)
    if clipped or rr.size < 4:
        return StepReading(step, center_rc, float("nan"), float("nan"), int(rr.size), 0, 0.0), True
    values = signal[rr, cc]
    mean, sd, kept, rejected = robust_mean(values)
    sat = float(saturated[rr, cc].mean()) if saturated is not None else 0.0
    return StepReading(step, center_rc, mean, sd, kept, rejected, sat), False


def read_strip(
    signal: np.ndarray,
    saturated: np.ndarray | None,
    geometry: StripGeometry,
) -> tuple[list[StepReading], StepReading | None, list[str]]:
    """Read every step and the base+fog area of one strip.

    Parameters
    ----------
    signal : ndarray, shape (rows, cols)
        Linear signal of the full-resolution scan.
    saturated : ndarray of bool, shape (rows, cols), optional
    geometry : StripGeometry

    Returns
    -------
    steps : list of StepReading
        One per step, step 1 first.
    base_fog : StepReading or None
    warnings : list of str
    """
    warnings: list[str] = []
    steps = []
    clipped_steps = []
    for step in range(1, geometry.n_steps + 1):
        reading, clipped = read_area(
            signal, saturated, geometry.step_box_rc(step), step=step, center_rc=geometry.step_center_rc(step)
        )
        if clipped:
            clipped_steps.append(step)
        steps.append(reading)
    if clipped_steps:
        warnings.append(f"{_step_list(clipped_steps)} run off the scan and are not read")
    base_fog = None
    box = geometry.base_fog_box_rc()
    if box is not None:
        centre = tuple(np.mean(np.asarray(box), axis=0))
        reading, clipped = read_area(signal, saturated, box, step=0, center_rc=(float(centre[0]), float(centre[1])))
        if clipped:
            warnings.append("the base+fog area runs off the scan and is not read")
        else:
            base_fog = reading
    return steps, base_fog, warnings


def _step_list(steps: list[int]) -> str:
    word = "step" if len(steps) == 1 else "steps"
    return f"{word} {', '.join(str(s) for s in steps)}"
