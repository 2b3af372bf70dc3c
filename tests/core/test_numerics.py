"""The numpy-only tools of stripscan.core.numerics against scipy, the general-purpose reference library they replace."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import fft, ndimage
from scipy.interpolate import CubicHermiteSpline, CubicSpline, PchipInterpolator
from scipy.optimize import brentq

from stripscan.core.numerics import (
    HermiteCubic,
    bilinear,
    fast_fft_length,
    gaussian_smooth_1d,
    label,
    pchip,
    median,
    pchip_slopes,
    percentile,
    spline_slopes,
)


def knots(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    x = np.cumsum(rng.uniform(0.05, 0.3, n))
    y = np.cumsum(rng.normal(0.1, 0.2, n))
    return x, y


@pytest.mark.parametrize("n", [2, 3, 4, 5, 21, 60])
def test_spline_slopes_match_scipy(n):
    rng = np.random.default_rng(n)
    for _ in range(5):
        x, y = knots(rng, n)
        expected = CubicSpline(x, y).derivative()(x)  # scipy reference
        assert spline_slopes(x, y) == pytest.approx(expected, rel=1e-9, abs=1e-9)


@pytest.mark.parametrize("n", [2, 3, 4, 7, 21])
def test_pchip_matches_scipy(n):
    rng = np.random.default_rng(10 + n)
    for _ in range(5):
        x, y = knots(rng, n)
        y[n // 2 :: 3] = y[n // 2]  # flat pieces and sign changes: the cases the slopes treat apart
        ref = PchipInterpolator(x, y)  # scipy reference
        assert pchip_slopes(x, y) == pytest.approx(ref.derivative()(x), rel=1e-12, abs=1e-12)
        t = np.linspace(x[0] - 0.2, x[-1] + 0.2, 301)
        ours = pchip(x, y)
        assert ours(t) == pytest.approx(ref(t), rel=1e-10, abs=1e-10)
        assert ours.slope(t) == pytest.approx(ref.derivative()(t), rel=1e-9, abs=1e-9)
        inside = pchip(x, y, extrapolate=False)(t)
        expected = PchipInterpolator(x, y, extrapolate=False)(t)
        assert np.array_equal(np.isnan(inside), np.isnan(expected))
        assert inside[~np.isnan(inside)] == pytest.approx(expected[~np.isnan(expected)], rel=1e-10, abs=1e-10)
        assert float(ours(x[1])) == pytest.approx(y[1], abs=1e-12)
        assert isinstance(ours(float(x[1])), float)


def test_hermite_cubic_and_its_crossing_match_scipy():
    rng = np.random.default_rng(3)
    x = np.arange(8) * 0.15
    y = np.cumsum(rng.uniform(0.05, 0.4, 8))  # rising: every piece monotone with PCHIP slopes
    slopes = pchip_slopes(x, y)
    ref = CubicHermiteSpline(x, y, slopes)  # scipy reference
    ours = HermiteCubic(x, y, slopes)
    t = np.linspace(-0.1, 1.2, 500)
    assert ours(t) == pytest.approx(ref(t), rel=1e-10, abs=1e-10)
    for k in range(7):
        value = 0.3 * y[k] + 0.7 * y[k + 1]
        expected = brentq(lambda s: float(ref(s)) - value, x[k], x[k + 1], xtol=1e-13)  # scipy reference
        assert ours.crossing(value, k) == pytest.approx(expected, abs=1e-11)
    falling = HermiteCubic(x, -y, -slopes)
    assert falling.crossing(-0.5 * (y[2] + y[3]), 2) == pytest.approx(ours.crossing(0.5 * (y[2] + y[3]), 2), abs=1e-11)
    with pytest.raises(ValueError):
        HermiteCubic([0.0, 0.0], [1.0, 2.0], [0.0, 0.0])


def test_label_and_boxes_match_scipy():
    rng = np.random.default_rng(5)
    for density in (0.3, 0.5, 0.6):
        mask = ndimage.binary_opening(rng.random((150, 210)) < density)
        mask[40:100, 30:34] = True  # a long area across many rows
        mask[0, :] = True  # one touching the first row
        expected, count = ndimage.label(mask)  # scipy reference
        labels, n, boxes = label(mask)
        assert n == count
        assert np.array_equal(labels, expected)
        assert boxes == ndimage.find_objects(expected)  # scipy reference
    spiral = np.zeros((9, 9), bool)  # one area whose runs join only through a long chain
    spiral[0, :] = spiral[:, 8] = spiral[8, :] = spiral[2:, 0] = spiral[2, :7] = spiral[2:7, 6] = spiral[6, 2:7] = True
    assert np.array_equal(label(spiral)[0], ndimage.label(spiral)[0])
    assert label(np.zeros((4, 5), bool))[1:] == (0, [])


def test_bilinear_matches_scipy():
    rng = np.random.default_rng(6)
    image = rng.random((40, 60)).astype(np.float32)
    rows = rng.uniform(-3, 43, (25, 30))
    cols = rng.uniform(-3, 63, (25, 30))
    rows[0, :5], cols[0, :5] = 39.0, 59.0  # exactly on the last pixel
    expected = ndimage.map_coordinates(image, [rows, cols], order=1, mode="nearest")  # scipy reference
    out = bilinear(image, rows, cols)
    assert out.dtype == np.float32
    assert out == pytest.approx(expected, rel=1e-6, abs=1e-6)
    doubles = image.astype(np.float64)
    assert bilinear(doubles, rows, cols) == pytest.approx(
        ndimage.map_coordinates(doubles, [rows, cols], order=1, mode="nearest"), rel=1e-12, abs=1e-12)


@pytest.mark.parametrize("sigma", [0.7, 1.0, 2.5])
def test_gaussian_smooth_matches_scipy(sigma):
    values = np.random.default_rng(7).normal(size=90).cumsum()
    expected = ndimage.gaussian_filter1d(values, sigma)  # scipy reference
    assert gaussian_smooth_1d(values, sigma) == pytest.approx(expected, rel=1e-12, abs=1e-12)


def test_fast_fft_length_matches_scipy():
    for n in [*range(1, 300), 1021, 4097, 65537]:
        assert fast_fft_length(n) == fft.next_fast_len(n, real=True), n  # scipy reference


def test_bilinear_on_a_line_of_pixels_matches_scipy():
    line = np.linspace(0.0, 1.0, 7).reshape(1, 7)
    rows, cols = np.array([-1.0, 0.0, 0.4]), np.array([0.5, 3.25, 9.0])
    expected = ndimage.map_coordinates(line, [rows, cols], order=1, mode="nearest")  # scipy reference
    assert bilinear(line, rows, cols) == pytest.approx(expected, abs=1e-12)
    assert bilinear(line.T, cols, rows) == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize("q", [0.0, 0.5, 5.0, 37.3, 50.0, 95.0, 99.0, 100.0])
def test_percentile_matches_numpy(q):
    rng = np.random.default_rng(int(q * 10))
    for values in (rng.normal(size=1001), rng.random((33, 17)).astype(np.float32), np.array([3.0, 1.0])):
        assert percentile(values, q) == pytest.approx(float(np.percentile(values, q)), rel=1e-6)  # numpy reference


def test_median_matches_numpy():
    rng = np.random.default_rng(12)
    for shape in [(7,), (8,), (1,), (5, 9), (6, 4)]:
        values = rng.normal(size=shape).astype(np.float32)
        assert median(values) == pytest.approx(float(np.median(values)), rel=1e-6)  # numpy reference
        if len(shape) == 2:
            for axis in (0, 1):
                expected = np.median(values, axis=axis)  # numpy reference
                got = median(values, axis=axis)
                assert got.dtype == expected.dtype and np.allclose(got, expected, rtol=1e-6)
