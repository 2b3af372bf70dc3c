"""Reading the signal of each step from the full-resolution scan.

A densitometer integrates the light through its aperture, so a step's
reading is the mean *signal* (light) over an inner area of the step, not
the mean of per-pixel densities.  Dust (dark specks), scratches (bright
lines) and hairs are rejected as outliers from a robust centre and spread
(median and scaled median absolute deviation) before the mean is taken.
"""

from __future__ import annotations

import math

import numpy as np
from stripscan.core.records import StepReading, StripGeometry

__all__ = ["robust_mean", "read_area", "read_strip", "box_pixels", "box_mask"]

# A normal distribution's sd is 1.4826 times its median absolute deviation.
_MAD_TO_SD = 1.4826


def robust_mean(values: np.ndarray, *, cut: float = 4.0, estimate_from: int = 4096) -> tuple[float, float, int, int]:
    """Mean and sd of the values left after rejecting outliers.

    Parameters
    ----------
    values : ndarray, shape (n,)
    cut : float
        Values farther than ``cut`` robust sd from the median are rejected.
    estimate_from : int
        The median and spread that set the rejection window are estimated
        from an evenly strided subset of about this many values; the mean
        and sd are then taken over every kept value.  A window set from
        4096 of 20 000 pixels moves by well under a noise sd, while the
        selection cost drops several fold.

    Returns
    -------
    mean, sd : float
    kept, rejected : int
    """
    values = np.asarray(values).ravel()
    if values.size == 0:
        return float("nan"), float("nan"), 0, 0
    stride = max(1, values.size // estimate_from)
    subset = np.array(values[::stride], dtype=np.float64)
    median = _middle(subset)
    spread = _MAD_TO_SD * _middle(np.abs(subset - median))
    if spread == 0.0:
        # Quantised dense steps can have most pixels on one code: fall back
        # to the plain sd so legitimate neighbouring codes are not rejected.
        spread = float(subset.std())
    if spread == 0.0:
        return median, 0.0, int(values.size), 0
    # Two bound comparisons in the values' own type: no temporary of |x - m|.
    keep = (values >= median - cut * spread) & (values <= median + cut * spread)
    kept = (values if keep.all() else values[keep]).astype(np.float64)
    mean = float(kept.mean())
    if kept.size < 2:
        return mean, 0.0, int(kept.size), int(values.size - kept.size)
    deviation = kept - mean
    # Not ``deviation @ deviation``: a BLAS dot may hand 20 000 values to
    # worker threads, which only costs time on a busy two-core machine.
    sd = math.sqrt(float(np.square(deviation, out=deviation).sum()) / (kept.size - 1))
    return mean, sd, int(kept.size), int(values.size - kept.size)


def _middle(values: np.ndarray) -> float:
    """Median by one selection (the upper middle for an even count), in place."""
    k = values.size // 2
    values.partition(k)
    if values.size % 2:
        return float(values[k])
    return 0.5 * float(values[k] + values[:k].max())


def box_pixels(corners_rc: list[tuple[float, float]], shape: tuple[int, int]) -> tuple[np.ndarray, np.ndarray, bool]:
    """Pixel indices whose centres lie inside a parallelogram.

    Parameters
    ----------
    corners_rc : sequence of 4 (row, col)
        Corners in order; the area is the parallelogram on the edges
        c0->c1 and c0->c3 (every box the strip geometry makes is a rectangle).
    shape : (rows, cols)

    Returns
    -------
    rows, cols : ndarray of int
        Row-major order.
    clipped : bool
        True when part of the area lies outside the image.
    """
    (r0, c0), mask, clipped = box_mask(corners_rc, shape)
    rr, cc = np.nonzero(mask)
    return rr + r0, cc + c0, clipped


def box_mask(
    corners_rc: list[tuple[float, float]], shape: tuple[int, int]
) -> tuple[tuple[int, int], np.ndarray, bool]:
    """The pixels of a parallelogram as a mask over its bounding window.

    Parameters
    ----------
    corners_rc : sequence of 4 (row, col)
        As :func:`box_pixels`.
    shape : (rows, cols)

    Returns
    -------
    top_left : (int, int)
        Image (row, col) of the mask's first element.
    mask : ndarray of bool, shape (window_rows, window_cols)
        True where the pixel's centre lies inside; (0, 0) when none does.
    clipped : bool
        True when part of the area lies outside the image.

    Notes
    -----
    Each image row crosses the parallelogram in one run of columns, found
    from the two edge coordinates being linear in the column; the mask is
    those runs over the window that holds them, so reading the area is one
    boolean selection from a view of the image, not a gather by index.
    """
    corners = np.asarray(corners_rc, dtype=np.float64)
    clipped = bool(
        corners[:, 0].min() < -0.5
        or corners[:, 1].min() < -0.5
        or corners[:, 0].max() > shape[0] - 0.5
        or corners[:, 1].max() > shape[1] - 0.5
    )
    nothing = ((0, 0), np.zeros((0, 0), dtype=bool), clipped)
    edges = np.column_stack((corners[1] - corners[0], corners[3] - corners[0]))
    if abs(np.linalg.det(edges)) < 1e-9:
        return nothing
    inverse = np.linalg.inv(edges)
    r0 = max(int(np.ceil(corners[:, 0].min())), 0)
    r1 = min(int(np.floor(corners[:, 0].max())), shape[0] - 1)
    if r1 < r0:
        return (0, 0), nothing[1], True
    rows = np.arange(r0, r1 + 1, dtype=np.float64)
    lo = np.full(rows.size, -np.inf)
    hi = np.full(rows.size, np.inf)
    # Edge coordinate k of pixel (r, c): inverse[k, 0] (r - r_0) + inverse[k, 1] (c - c_0), inside on [0, 1).
    for k in range(2):
        base = inverse[k, 0] * (rows - corners[0][0]) - inverse[k, 1] * corners[0][1]
        slope = inverse[k, 1]
        if abs(slope) < 1e-12:
            outside = (base < 0) | (base >= 1)
            lo[outside], hi[outside] = np.inf, -np.inf
            continue
        a, b = (0.0 - base) / slope, (1.0 - base) / slope
        lo = np.maximum(lo, np.minimum(a, b))
        hi = np.minimum(hi, np.maximum(a, b))
    # Clip before the cast: rows the box misses carry infinite bounds.
    start = np.clip(np.ceil(lo - 1e-9), 0, shape[1]).astype(np.int64)
    stop = np.clip(np.floor(hi - 1e-9), -1, shape[1] - 1).astype(np.int64)  # inclusive
    filled = np.flatnonzero(stop >= start)
    if filled.size == 0:
        return nothing
    first, last = int(filled[0]), int(filled[-1])
    start, stop = start[first : last + 1], stop[first : last + 1]
    c0, c1 = int(start.min()), int(stop.max())
    window_cols = np.arange(c0, c1 + 1)
    mask = (window_cols >= start[:, None]) & (window_cols <= stop[:, None])
    return (r0 + first, c0), mask, clipped


class _ArraySource:
    """Adapts a plain signal array (and optional saturation mask) to the Scan interface."""

    def __init__(self, signal: np.ndarray, saturated: np.ndarray | None):
        self.shape = signal.shape[:2]
        self._signal = signal
        self._saturated = saturated

    def read_masked(self, top_left: tuple[int, int], mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        window = (slice(top_left[0], top_left[0] + mask.shape[0]), slice(top_left[1], top_left[1] + mask.shape[1]))
        values = self._signal[window][mask]
        if self._saturated is None:
            return values, np.zeros(values.shape, dtype=bool)
        return values, self._saturated[window][mask]


def _source(signal, saturated):
    return _ArraySource(signal, saturated) if isinstance(signal, np.ndarray) else signal


def read_area(
    signal,
    saturated: np.ndarray | None,
    corners_rc: list[tuple[float, float]],
    *,
    step: int,
    center_rc: tuple[float, float],
) -> tuple[StepReading, bool]:
    """Read one quadrilateral area of the scan.

    ``signal`` is a :class:`~stripscan.core.scan.Scan` (read straight from
    its stored pixels) or a linear signal array with its saturation mask.

    Returns
    -------
    reading : StepReading
    clipped : bool
        True when the area runs off the scan (the reading is then NaN).
    """
    source = _source(signal, saturated)
    top_left, mask, clipped = box_mask(corners_rc, source.shape)
    count = int(np.count_nonzero(mask))
    if clipped or count < 4:
        return StepReading(step, center_rc, float("nan"), float("nan"), count, 0, 0.0), True
    values, saturated_flags = source.read_masked(top_left, mask)
    mean, sd, kept, rejected = robust_mean(values)
    sat = float(np.count_nonzero(saturated_flags)) / saturated_flags.size
    return StepReading(step, center_rc, mean, sd, kept, rejected, sat), False


def read_strip(
    signal,
    saturated: np.ndarray | None,
    geometry: StripGeometry,
) -> tuple[list[StepReading], StepReading | None, list[str]]:
    """Read every step and the base+fog area of one strip.

    Parameters
    ----------
    signal : Scan or ndarray, shape (rows, cols)
        The scan (read from its stored pixels), or the linear signal of the
        full-resolution scan.
    saturated : ndarray of bool, shape (rows, cols), optional
        With a signal array: pixels at the top or bottom code.  Ignored for
        a Scan, which knows its own.
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
