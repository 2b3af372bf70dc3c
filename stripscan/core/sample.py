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

__all__ = ["robust_mean", "robust_mean_of_counts", "read_area", "read_strip", "box_pixels", "box_mask",
           "MAX_AREA_PIXELS", "LATTICE_SEM_OD", "lattice_stride"]

# A normal distribution's sd is 1.4826 times its median absolute deviation.
_MAD_TO_SD = 1.4826

#: About how many pixels are read from a larger area.  A step of a scan up
#: to 600 dpi (about 15 000 pixels) is read whole; a larger area (base+fog,
#: about 600 000 pixels at 600 dpi; a step at 1200 dpi) is first read on an
#: even lattice of every k-th pixel along both axes, k the largest that leaves
#: about this many (at least 1 / k**2 of the area), and kept when that
#: reading is sure enough (:data:`LATTICE_SEM_OD`); the cost then no longer
#: grows with the resolution where the pixels add nothing.
MAX_AREA_PIXELS = 16_384

#: Largest standard error of the mean, in OD, of an area read on a lattice;
#: noisier (dense) areas are read again, every pixel.  A hundredth of the
#: ±0.02 OD a densitometer for film QC reads within (common practice): a
#: lattice reading then differs from the whole area's by well under
#: 0.001 OD (``tests/core/test_sample.py``, with the simulator's noise).
LATTICE_SEM_OD = 0.0002


def lattice_stride(count: int, max_pixels: int = MAX_AREA_PIXELS) -> int:
    """Every how many pixels, along both axes, an area of ``count`` pixels is read (see :data:`MAX_AREA_PIXELS`)."""
    return max(1, math.isqrt(max(count, 0) // max_pixels))


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


def robust_mean_of_counts(levels: np.ndarray, counts: np.ndarray, *, cut: float = 4.0) -> tuple[float, float, int, int]:
    """:func:`robust_mean` of values given as a histogram: each of ``levels`` occurs ``counts`` times.

    The median and spread that set the rejection window come from every
    value (a histogram makes that cheap), so the window is exact rather than
    estimated from a subset.

    Parameters
    ----------
    levels : ndarray, shape (k,)
        Distinct values, increasing.
    counts : ndarray of int, shape (k,)
        How often each occurs (positive).
    cut : float
        As :func:`robust_mean`.

    Returns
    -------
    mean, sd : float
    kept, rejected : int
    """
    levels = np.asarray(levels, dtype=np.float64)
    counts = np.asarray(counts, dtype=np.int64)
    total = int(counts.sum())
    if total == 0:
        return float("nan"), float("nan"), 0, 0
    median = _counted_middle(levels, counts, total)
    distance = np.abs(levels - median)
    order = np.argsort(distance, kind="stable")
    spread = _MAD_TO_SD * _counted_middle(distance[order], counts[order], total)
    if spread == 0.0:
        # As robust_mean: most values on one code, fall back to the plain sd.
        mean_all = float(counts @ levels) / total
        spread = math.sqrt(float(counts @ np.square(levels - mean_all)) / total)
    if spread == 0.0:
        return median, 0.0, total, 0
    keep = (levels >= median - cut * spread) & (levels <= median + cut * spread)
    values, weights = levels[keep], counts[keep]
    kept = int(weights.sum())
    mean = float(weights @ values) / kept
    if kept < 2:
        return mean, 0.0, kept, total - kept
    sd = math.sqrt(float(weights @ np.square(values - mean)) / (kept - 1))
    return mean, sd, kept, total - kept


def _counted_middle(ordered: np.ndarray, counts: np.ndarray, total: int) -> float:
    """Median of sorted values each occurring ``counts`` times (the mean of the two middle ones for an even total)."""
    cumulative = np.cumsum(counts)
    upper = float(ordered[int(np.searchsorted(cumulative, total // 2, side="right"))])
    if total % 2:
        return upper
    lower = float(ordered[int(np.searchsorted(cumulative, total // 2 - 1, side="right"))])
    return 0.5 * (lower + upper)


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
    corners_rc: list[tuple[float, float]], shape: tuple[int, int], *, stride: int = 1
) -> tuple[tuple[int, int], np.ndarray, bool]:
    """The pixels of a parallelogram as a mask over its bounding window.

    Parameters
    ----------
    corners_rc : sequence of 4 (row, col)
        As :func:`box_pixels`.
    shape : (rows, cols)
    stride : int
        Only every ``stride``-th row and column of the window: the mask then
        covers the lattice ``top_left + stride * (i, j)``.

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
    row0, start, stop, clipped = _box_runs(corners_rc, shape)
    top_left, mask = _runs_mask(row0, start, stop, stride)
    return top_left, mask, clipped


def _runs_mask(row0: int, start: np.ndarray, stop: np.ndarray, stride: int) -> tuple[tuple[int, int], np.ndarray]:
    """Top-left pixel and lattice mask of :func:`_box_runs`' rows."""
    if start.size == 0:
        return (0, 0), np.zeros((0, 0), dtype=bool)
    start, stop = start[::stride], stop[::stride]
    c0, c1 = int(start.min()), int(stop.max())
    window_cols = np.arange(c0, max(c1, c0) + 1, stride)
    mask = (window_cols >= start[:, None]) & (window_cols <= stop[:, None])
    return (row0, c0), mask


def _box_runs(
    corners_rc: list[tuple[float, float]], shape: tuple[int, int]
) -> tuple[int, np.ndarray, np.ndarray, bool]:
    """First row, and each row's first and last column (inclusive) inside a parallelogram; see :func:`box_mask`.

    Rows from the first to the last that hold a pixel; a row between them
    holding none has ``stop < start``.  Empty arrays when no pixel is inside.
    """
    corners = np.asarray(corners_rc, dtype=np.float64)
    clipped = bool(
        corners[:, 0].min() < -0.5
        or corners[:, 1].min() < -0.5
        or corners[:, 0].max() > shape[0] - 0.5
        or corners[:, 1].max() > shape[1] - 0.5
    )
    none = np.zeros(0, dtype=np.int64)
    nothing = (0, none, none, clipped)
    # The inverse of the 2 x 2 matrix of the edges c0->c1 and c0->c3 (as columns), written out:
    # np.linalg's general routines cost more than the rest of this function on a step.
    (ar, ac), (br, bc) = corners[1] - corners[0], corners[3] - corners[0]
    det = float(ar * bc - br * ac)
    if abs(det) < 1e-9:
        return nothing
    inverse = np.array([[bc, -br], [-ac, ar]]) / det
    r0 = max(int(np.ceil(corners[:, 0].min())), 0)
    r1 = min(int(np.floor(corners[:, 0].max())), shape[0] - 1)
    if r1 < r0:
        return 0, none, none, True
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
    start = np.minimum(np.maximum(np.ceil(lo - 1e-9), 0), shape[1]).astype(np.int64)
    stop = np.minimum(np.maximum(np.floor(hi - 1e-9), -1), shape[1] - 1).astype(np.int64)  # inclusive
    filled = np.flatnonzero(stop >= start)
    if filled.size == 0:
        return nothing
    first, last = int(filled[0]), int(filled[-1])
    return r0 + first, start[first : last + 1], stop[first : last + 1], clipped


class _ArraySource:
    """Adapts a plain signal array (and optional saturation mask) to the Scan interface."""

    def __init__(self, signal: np.ndarray, saturated: np.ndarray | None):
        self.shape = signal.shape[:2]
        self._signal = signal
        self._saturated = saturated

    def read_masked(self, top_left: tuple[int, int], mask: np.ndarray, stride: int = 1) -> tuple[np.ndarray, np.ndarray]:
        window = (slice(top_left[0], top_left[0] + stride * mask.shape[0], stride),
                  slice(top_left[1], top_left[1] + stride * mask.shape[1], stride))
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
    row0, start, stop, clipped = _box_runs(corners_rc, source.shape)
    count = int(np.maximum(stop - start + 1, 0).sum())
    if clipped or count < 4:
        return StepReading(step, center_rc, float("nan"), float("nan"), count, 0, 0.0), True
    stride = lattice_stride(count, MAX_AREA_PIXELS)
    mean, sd, kept, rejected, sat = _read_runs(source, row0, start, stop, stride)
    if stride > 1 and not (mean > 0 and sd / (mean * math.log(10.0) * math.sqrt(kept)) <= LATTICE_SEM_OD):
        mean, sd, kept, rejected, sat = _read_runs(source, row0, start, stop, 1)
    return StepReading(step, center_rc, mean, sd, kept, rejected, sat), False


def _read_runs(source, row0: int, start: np.ndarray, stop: np.ndarray,
               stride: int) -> tuple[float, float, int, int, float]:
    """Robust mean, sd, kept and rejected counts and saturated share of an area's pixels on a lattice."""
    top_left, mask = _runs_mask(row0, start, stop, stride)
    # Integer grey pixels are counted code by code: the median, the spread and
    # the mean then come from a histogram, with no float copy and no sort.
    counted = source.read_histogram(top_left, mask, stride) if hasattr(source, "read_histogram") else None
    if counted is not None:
        levels, counts, saturated_count = counted
        mean, sd, kept, rejected = robust_mean_of_counts(levels, counts)
        return mean, sd, kept, rejected, saturated_count / max(kept + rejected, 1)
    values, saturated_flags = source.read_masked(top_left, mask, stride)
    mean, sd, kept, rejected = robust_mean(values)
    return mean, sd, kept, rejected, float(np.count_nonzero(saturated_flags)) / max(saturated_flags.size, 1)


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
