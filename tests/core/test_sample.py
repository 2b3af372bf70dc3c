"""Sampling areas: exact pixel sets, outlier rejection, reading straight from stored pixels."""

from __future__ import annotations

import numpy as np
import pytest
import tifffile

from stripscan.core.records import StripGeometry
from stripscan.core.sample import box_pixels, read_area, read_strip, robust_mean
from stripscan.core.scan import load_scan


def brute_force_mask(corners, shape):
    corners = np.asarray(corners, dtype=float)
    edges = np.column_stack((corners[1] - corners[0], corners[3] - corners[0]))
    inv = np.linalg.inv(edges)
    rows, cols = np.mgrid[0 : shape[0], 0 : shape[1]]
    a = inv[0, 0] * (rows - corners[0][0]) + inv[0, 1] * (cols - corners[0][1])
    b = inv[1, 0] * (rows - corners[0][0]) + inv[1, 1] * (cols - corners[0][1])
    return (a >= 0) & (a < 1) & (b >= 0) & (b < 1)


def test_box_pixels_match_a_brute_force_point_in_parallelogram_test():
    rng = np.random.default_rng(1)
    shape = (90, 110)
    for _ in range(200):
        centre = rng.uniform(-15, 115, 2)
        angle = rng.uniform(0, 2 * np.pi)
        length, width = rng.uniform(2, 60), rng.uniform(2, 40)
        axis = np.array([np.sin(angle), np.cos(angle)])
        normal = np.array([-axis[1], axis[0]])
        corners = [centre, centre + length * axis, centre + length * axis + width * normal, centre + width * normal]
        rr, cc, _ = box_pixels(corners, shape)
        got = np.zeros(shape, dtype=bool)
        got[rr, cc] = True
        expected = brute_force_mask(corners, shape)
        assert len(rr) == expected.sum() and np.array_equal(got, expected)


def test_axis_aligned_box_holds_its_pixels_exactly():
    rr, cc, clipped = box_pixels([(9.5, 19.5), (9.5, 29.5), (14.5, 29.5), (14.5, 19.5)], (50, 50))
    assert not clipped and len(rr) == 5 * 10
    assert (rr.min(), rr.max(), cc.min(), cc.max()) == (10, 14, 20, 29)


def test_robust_mean_rejects_dust_and_scratches():
    rng = np.random.default_rng(2)
    values = rng.normal(0.05, 0.001, 20000)
    values[:200] = 0.005  # dust: dark specks
    values[200:260] = 0.4  # a scratch lets light through
    mean, sd, kept, rejected = robust_mean(values)
    assert mean == pytest.approx(0.05, abs=5e-5) and sd == pytest.approx(0.001, rel=0.05)
    assert rejected >= 260 and kept + rejected == values.size


def test_robust_mean_keeps_quantised_neighbours():
    values = np.array([10.0] * 900 + [11.0] * 100)  # most pixels on one code
    mean, _, kept, _ = robust_mean(values)
    assert kept == 1000 and mean == pytest.approx(10.1)


def test_reading_from_stored_pixels_equals_reading_the_decoded_image(tmp_path):
    rng = np.random.default_rng(3)
    image = rng.integers(0, 256, size=(120, 160, 3), dtype=np.uint8)
    path = tmp_path / "rgb.tif"
    tifffile.imwrite(path, image, photometric="rgb")
    scan = load_scan(path)
    geometry = StripGeometry(origin_rc=(20.0, 10.0), axis_rc=(0.0, 1.0), normal_rc=(1.0, 0.0), step_pitch_px=12.0,
                             n_steps=11, band_width_px=40.0, base_fog_v_px=(45.0, 70.0))
    direct, bf_direct, _ = read_strip(scan, None, geometry)
    decoded, bf_decoded, _ = read_strip(scan.signal, scan.saturated, geometry)
    for a, b in zip(direct + [bf_direct], decoded + [bf_decoded]):
        assert a.pixels == b.pixels and a.signal == pytest.approx(b.signal, rel=1e-6)
        assert a.saturated_fraction == pytest.approx(b.saturated_fraction)


def test_sparse_sample_is_centred_like_a_block_mean(tmp_path):
    # A linear ramp along the columns: the mean of any centred taps equals the block mean.
    ramp = np.tile(np.arange(600, dtype=np.uint16) * 100, (60, 1))
    path = tmp_path / "ramp.tif"
    tifffile.imwrite(path, ramp)
    scan = load_scan(path)
    for factor in (2, 3, 6):
        sample = scan.sample(factor)
        block = scan.signal[: (60 // factor) * factor, : (600 // factor) * factor]
        block = block.reshape(60 // factor, factor, 600 // factor, factor).mean(axis=(1, 3))
        np.testing.assert_allclose(sample, block, rtol=1e-5)


def test_area_off_the_scan_is_not_read():
    signal = np.full((50, 50), 0.5, dtype=np.float32)
    reading, clipped = read_area(signal, None, [(40.0, 40.0), (40.0, 60.0), (45.0, 60.0), (45.0, 40.0)],
                                 step=1, center_rc=(42.5, 50.0))
    assert clipped and np.isnan(reading.signal)
