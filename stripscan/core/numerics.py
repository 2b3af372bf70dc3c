"""Small numerical tools the analysis of a scan needs, in numpy alone.

Importing scipy's interpolation, optimisation or image modules costs
0.2-0.35 s in a fresh process (they load much of scipy and parts of numpy
besides), more than reading and hashing a 600-dpi page.  The analysis of a
scan needs only a handful of their simplest tools, on small arrays: the
ones here give the same results to rounding (``tests/core/test_numerics.py``
checks each against scipy), so that ``stripscan analyze`` imports numpy and
tifffile and nothing heavier.  Fitting (calibration, stray light) still
uses scipy, imported where it runs.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "HermiteCubic",
    "pchip",
    "pchip_slopes",
    "spline_slopes",
    "label",
    "median",
    "percentile",
    "bilinear",
    "gaussian_smooth_1d",
    "fast_fft_length",
]


class HermiteCubic:
    """Piecewise cubic through (x, y) with given slopes at the knots.

    The same curve as ``scipy.interpolate.CubicHermiteSpline(x, y, slopes)``
    (and, with :func:`pchip_slopes`, as ``PchipInterpolator``).

    Parameters
    ----------
    x : array_like, shape (n,)
        Knots, strictly increasing; n >= 2.
    y, slopes : array_like, shape (n,)
        Values and first derivatives at the knots.
    extrapolate : bool
        Beyond the knots: continue the end pieces (True) or give NaN.
    """

    def __init__(self, x, y, slopes, *, extrapolate: bool = True):
        self.x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        s = np.asarray(slopes, dtype=np.float64)
        if self.x.ndim != 1 or self.x.size < 2 or y.shape != self.x.shape or s.shape != self.x.shape:
            raise ValueError("a cubic needs at least two knots, with one value and one slope each")
        h = np.diff(self.x)
        if np.any(h <= 0):
            raise ValueError("knots must be strictly increasing")
        secant = np.diff(y) / h
        # Power-basis coefficients of each piece in t = x - x_k: ((c0 t + c1) t + c2) t + c3.
        self._c = np.stack([(s[:-1] + s[1:] - 2.0 * secant) / (h * h),
                            (3.0 * secant - 2.0 * s[:-1] - s[1:]) / h, s[:-1], y[:-1]])
        self.extrapolate = extrapolate

    def _piece(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        # Pieces are closed on the left; the last knot belongs to the last piece.
        k = np.clip(np.searchsorted(self.x, t, side="right") - 1, 0, self.x.size - 2)
        return k, t - self.x[k]

    def _finish(self, t: np.ndarray, values: np.ndarray, scalar: bool):
        if not self.extrapolate:
            values = np.where((t < self.x[0]) | (t > self.x[-1]) | np.isnan(t), np.nan, values)
        return values[()] if scalar else values

    def __call__(self, t) -> np.ndarray:
        """Values at ``t`` (scalar or array)."""
        t = np.asarray(t, dtype=np.float64)
        k, d = self._piece(t)
        c = self._c[:, k]
        return self._finish(t, ((c[0] * d + c[1]) * d + c[2]) * d + c[3], t.ndim == 0)

    def slope(self, t) -> np.ndarray:
        """First derivative at ``t`` (scalar or array)."""
        t = np.asarray(t, dtype=np.float64)
        k, d = self._piece(t)
        c = self._c[:, k]
        return self._finish(t, (3.0 * c[0] * d + 2.0 * c[1]) * d + c[2], t.ndim == 0)

    def crossing(self, value: float, piece: int, *, tol: float = 1e-12) -> float:
        """Where piece ``piece`` (between knots ``piece`` and ``piece + 1``) takes ``value``.

        The piece must be monotone and take ``value`` between its ends (as
        on a monotone-limited curve); found by bisection to ``tol``.
        """
        c0, c1, c2, c3 = (float(v) for v in self._c[:, piece])
        h = float(self.x[piece + 1] - self.x[piece])
        rising = ((c0 * h + c1) * h + c2) * h + c3 >= c3
        lo, hi = 0.0, h
        while hi - lo > tol:
            mid = 0.5 * (lo + hi)
            below = ((c0 * mid + c1) * mid + c2) * mid + c3 < value
            if below == rising:
                lo = mid
            else:
                hi = mid
        return float(self.x[piece]) + 0.5 * (lo + hi)


def pchip_slopes(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Slopes at the knots of the monotone PCHIP interpolant (Fritsch & Butland; ends as in Moler's pchiptx).

    The same slopes as ``scipy.interpolate.PchipInterpolator``: a weighted
    harmonic mean of the neighbouring secants, 0 where they change sign or
    one is 0, and a shape-preserving one-sided estimate at the ends.

    Parameters
    ----------
    x, y : ndarray, shape (n,)
        Knots (strictly increasing) and values; n >= 2.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    h = np.diff(x)
    m = np.diff(y) / h
    if x.size == 2:
        return np.array([m[0], m[0]])
    flat = (np.sign(m[1:]) != np.sign(m[:-1])) | (m[1:] == 0) | (m[:-1] == 0)
    w1, w2 = 2.0 * h[1:] + h[:-1], h[1:] + 2.0 * h[:-1]
    with np.errstate(divide="ignore", invalid="ignore"):
        inverse = (w1 / m[:-1] + w2 / m[1:]) / (w1 + w2)
        inner = np.where(flat, 0.0, 1.0 / inverse)
    return np.concatenate(([_pchip_end(h[0], h[1], m[0], m[1])], inner, [_pchip_end(h[-1], h[-2], m[-1], m[-2])]))


def _pchip_end(h0: float, h1: float, m0: float, m1: float) -> float:
    """One-sided three-point slope at an end, kept from overshooting."""
    d = ((2.0 * h0 + h1) * m0 - h0 * m1) / (h0 + h1)
    if np.sign(d) != np.sign(m0):
        return 0.0
    if np.sign(m0) != np.sign(m1) and abs(d) > 3.0 * abs(m0):
        return 3.0 * m0
    return float(d)


def pchip(x, y, *, extrapolate: bool = True) -> HermiteCubic:
    """The PCHIP interpolant through (x, y): :class:`HermiteCubic` with :func:`pchip_slopes`."""
    return HermiteCubic(x, y, pchip_slopes(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)),
                        extrapolate=extrapolate)


def spline_slopes(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Slopes at the knots of the not-a-knot cubic spline through (x, y).

    The same slopes as ``scipy.interpolate.CubicSpline(x, y).derivative()(x)``
    (scipy's default end condition: the first two and the last two pieces
    are one cubic each; through three points, the parabola; through two, the line).

    Parameters
    ----------
    x, y : ndarray, shape (n,)
        Knots (strictly increasing) and values; n >= 2.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    n = x.size
    dx = np.diff(x)
    secant = np.diff(y) / dx
    if n == 2:
        return np.array([secant[0], secant[0]])
    a = np.zeros((n, n))
    b = np.empty(n)
    if n == 3:
        a[0, :2] = 1.0
        a[1] = (dx[1], 2.0 * (dx[0] + dx[1]), dx[0])
        a[2, 1:] = 1.0
        b[:] = (2.0 * secant[0], 3.0 * (dx[0] * secant[1] + dx[1] * secant[0]), 2.0 * secant[1])
        return np.linalg.solve(a, b)
    i = np.arange(1, n - 1)
    a[i, i - 1] = dx[1:]
    a[i, i] = 2.0 * (dx[:-1] + dx[1:])
    a[i, i + 1] = dx[:-1]
    b[1:-1] = 3.0 * (dx[1:] * secant[:-1] + dx[:-1] * secant[1:])
    d = x[2] - x[0]
    a[0, 0], a[0, 1] = dx[1], d
    b[0] = ((dx[0] + 2.0 * d) * dx[1] * secant[0] + dx[0] ** 2 * secant[1]) / d
    d = x[-1] - x[-3]
    a[-1, -1], a[-1, -2] = dx[-2], d
    b[-1] = (dx[-1] ** 2 * secant[-2] + (2.0 * d + dx[-1]) * dx[-2] * secant[-1]) / d
    return np.linalg.solve(a, b)


def label(mask: np.ndarray) -> tuple[np.ndarray, int, list[tuple[slice, slice]]]:
    """Connected areas of a 2-D boolean image, neighbours sharing an edge (4-connected).

    The same labels as ``scipy.ndimage.label(mask)``, and the same boxes as
    ``scipy.ndimage.find_objects`` of them: 0 outside, 1..count numbered in
    the order their first pixel comes in row-major order.  Works on runs of
    True along rows, so its cost follows the runs, not the pixels.

    Returns
    -------
    labels : ndarray of int32, shape of ``mask``
    count : int
    boxes : list of (slice, slice)
        Bounding box (rows, cols) of each label 1..count.
    """
    mask = np.asarray(mask, dtype=bool)
    rows, cols = mask.shape
    padded = np.zeros((rows, cols + 2), dtype=bool)
    padded[:, 1:-1] = mask
    # Along each row the runs of True start and end where the padded row
    # changes: in row-major order, a start, its end, the next start ...
    changes = np.flatnonzero(padded[:, 1:] != padded[:, :-1])
    width = cols + 1
    run_row, run_start = np.divmod(changes[0::2], width)
    run_end = changes[1::2] - run_row * width  # one past the run's last column
    n = run_row.size
    labels = np.zeros((rows, width), dtype=np.int32)
    if n == 0:
        return labels[:, :cols], 0, []
    # Runs of neighbouring rows touch when their column spans overlap;
    # the runs of one row are sorted and apart, so those touching a run of
    # the next row are a contiguous range, found by bisection on row-major keys.
    above = (run_row - 1) * width
    first = np.searchsorted(changes[1::2], above + run_start, side="right")
    stop = np.searchsorted(changes[0::2], above + run_end, side="left")
    count = np.maximum(stop - first, 0)
    count[run_row == 0] = 0
    lower = np.repeat(np.arange(n), count)
    upper = np.repeat(first, count) + (np.arange(count.sum()) - np.repeat(np.cumsum(count) - count, count))
    # Union by the smaller index, with pointer jumping: every run ends up
    # pointing at the first run of its area.
    parent = np.arange(n)
    while True:
        pa, pb = parent[lower], parent[upper]
        if np.array_equal(pa, pb):
            break
        low = np.minimum(pa, pb)
        np.minimum.at(parent, pa, low)
        np.minimum.at(parent, pb, low)
        while True:
            jumped = parent[parent]
            if np.array_equal(jumped, parent):
                break
            parent = jumped
    # Areas numbered by their first run, which is also their first pixel.
    is_first = parent == np.arange(n)
    number = np.cumsum(is_first, dtype=np.int32)
    run_label = number[parent]
    total = int(number[-1])
    # Paint: the label at each run's start, minus it one past its end, summed along the row.
    labels[run_row, run_start] = run_label
    labels[run_row, run_end] = -run_label
    np.cumsum(labels, axis=1, out=labels)
    index = run_label - 1
    bounds = np.empty((4, total), dtype=np.intp)
    bounds[0], bounds[1], bounds[2:] = rows, cols, -1
    np.minimum.at(bounds[0], index, run_row)
    np.minimum.at(bounds[1], index, run_start)
    np.maximum.at(bounds[2], index, run_row)
    np.maximum.at(bounds[3], index, run_end - 1)
    boxes = [(slice(int(r0), int(r1) + 1), slice(int(c0), int(c1) + 1)) for r0, c0, r1, c1 in bounds.T]
    return labels[:, :cols], total, boxes


def median(values: np.ndarray, axis: int | None = None) -> np.ndarray | float:
    """The median, of all values or along an axis, by one selection.

    The same as ``np.median(values, axis)`` for data without NaN (the mean of
    the two middle values for an even count), without loading numpy's
    masked-array module as np.median does (see :func:`percentile`).
    """
    values = np.asarray(values)
    if axis is None:
        values, axis = values.ravel(), 0
    n = values.shape[axis]
    k = n // 2
    middle = np.partition(values, (k - 1, k) if n % 2 == 0 and n > 1 else k, axis=axis)
    picked = np.take(middle, [k - 1, k] if n % 2 == 0 and n > 1 else [k], axis=axis)
    out = np.mean(picked, axis=axis)
    return float(out) if out.ndim == 0 else out


def percentile(values: np.ndarray, q: float) -> float:
    """The ``q``-th percentile of an array's values, interpolated linearly between the nearest two.

    The same as ``np.percentile(values, q)`` (its default method), by one
    selection: np.percentile's general code also loads numpy's masked-array
    module, some 10-15 ms of start-up on its own.
    """
    flat = np.ravel(values)
    index = q / 100.0 * (flat.size - 1)
    below = int(np.floor(index))
    above = min(below + 1, flat.size - 1)
    chosen = np.partition(flat, (below, above))
    a, b = float(chosen[below]), float(chosen[above])
    t = index - below
    # numpy's own interpolation, exact at both ends.
    return a + (b - a) * t if t < 0.5 else b - (b - a) * (1.0 - t)


def bilinear(image: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """Values of a 2-D image at fractional (row, col) positions, linear between pixel centres.

    The same as ``scipy.ndimage.map_coordinates(image, [rows, cols], order=1, mode="nearest")``:
    beyond the image the edge pixels go on.  The result has the positions'
    shape and the image's floating-point type.
    """
    n_rows, n_cols = image.shape
    if n_rows < 2 or n_cols < 2:  # a line or a point: repeat it to a 2 x 2 image, the same values
        image = np.repeat(np.repeat(image, 2 if n_rows < 2 else 1, axis=0), 2 if n_cols < 2 else 1, axis=1)
        n_rows, n_cols = image.shape
    r, c = np.broadcast_arrays(np.asarray(rows, dtype=np.float64), np.asarray(cols, dtype=np.float64))
    # Few full-size temporaries, most updated in place: on a page this runs over 400 000 positions.
    if r.size and (r.min() < 0.0 or r.max() > n_rows - 1.0):
        r = np.clip(r, 0.0, n_rows - 1.0)
    if c.size and (c.min() < 0.0 or c.max() > n_cols - 1.0):
        c = np.clip(c, 0.0, n_cols - 1.0)
    # The cell's top-left pixel; a position on the last row or column uses the cell before it (weight 1 on its edge).
    r0 = r.astype(np.intp)
    np.minimum(r0, n_rows - 2, out=r0)
    c0 = c.astype(np.intp)
    np.minimum(c0, n_cols - 2, out=c0)
    fr, fc = r - r0, c - c0
    corner = r0
    corner *= n_cols
    corner += c0
    flat = np.ravel(image)
    left, right = flat[corner], flat[corner + 1]
    top = right - left
    top *= fc
    top += left
    corner += n_cols
    left, right = flat[corner], flat[corner + 1]
    bottom = right - left
    bottom *= fc
    bottom += left
    bottom -= top
    bottom *= fr
    bottom += top
    kind = image.dtype if image.dtype.kind == "f" else np.float64
    return bottom.astype(kind, copy=False)


def gaussian_smooth_1d(values: np.ndarray, sigma: float, *, truncate: float = 4.0) -> np.ndarray:
    """A 1-D profile smoothed by a sampled Gaussian, ends mirrored.

    The same as ``scipy.ndimage.gaussian_filter1d(values, sigma)`` on float64
    data (kernel to ``truncate`` standard deviations, mode "reflect").
    """
    radius = int(truncate * sigma + 0.5)
    x = np.arange(-radius, radius + 1, dtype=np.float64)
    weights = np.exp(-0.5 * (x / sigma) ** 2)
    weights /= weights.sum()
    padded = np.pad(np.asarray(values, dtype=np.float64), radius, mode="symmetric")
    return np.convolve(padded, weights, mode="valid")


def fast_fft_length(n: int) -> int:
    """The smallest length >= n with no prime factor above 5, where real FFTs are fast.

    The same as ``scipy.fft.next_fast_len(n, real=True)``.
    """
    if n <= 6:
        return max(int(n), 1)
    best = 1 << (int(n) - 1).bit_length()  # a power of two is always a candidate
    p5 = 1
    while p5 < best:
        p35 = p5
        while p35 < best:
            p = p35
            while p < n:
                p *= 2
            best = min(best, p)
            p35 *= 3
        p5 *= 5
    return best
