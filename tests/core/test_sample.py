"""Sampling areas: exact pixel sets, outlier rejection, reading straight from stored pixels."""

from __future__ import annotations

import numpy as np
import pytest
import tifffile

from stripscan.core import sample
from stripscan.core.locate import locate_in_scan
from stripscan.core.records import StripGeometry
from stripscan.core.sample import (
    box_mask,
    LATTICE_SEM_OD,
    box_pixels,
    lattice_stride,
    read_area,
    read_strip,
    robust_mean,
    robust_mean_of_counts,
)
from stripscan.core.scan import load_scan
from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec
from stripscan.sim.simulate import simulate_scan, write_tiff


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


def test_robust_mean_of_counts_equals_robust_mean_of_the_values():
    rng = np.random.default_rng(8)
    codes = np.clip(rng.normal(3000, 40, 30001).round(), 0, None)
    codes[:300] = 200  # dust
    codes[300:320] = 9000  # a scratch
    levels, counts = np.unique(codes, return_counts=True)
    # Every value (a subset of 30 001 would only estimate the window): the same numbers.
    expected = robust_mean(codes, estimate_from=codes.size)
    got = robust_mean_of_counts(levels, counts)
    assert got[2:] == expected[2:]
    assert got[:2] == pytest.approx(expected[:2], rel=1e-12)
    even = np.array([1.0, 2.0, 2.0, 7.0])  # an even count: the mean of the two middle values
    assert robust_mean_of_counts(np.array([1.0, 2.0, 7.0]), np.array([1, 2, 1]))[:3] == \
        pytest.approx(robust_mean(even)[:3])
    assert robust_mean_of_counts(np.array([5.0]), np.array([9]))[:3] == (5.0, 0.0, 9)


def test_histogram_reading_equals_reading_decoded_pixels(tmp_path):
    rng = np.random.default_rng(9)
    image = rng.normal(20000, 300, size=(200, 300)).astype(np.uint16)
    image[50:60, 50:60] = 65535  # saturated
    image[70:75, 70:75] = 0
    path = tmp_path / "grey.tif"
    tifffile.imwrite(path, image)
    scan = load_scan(path)
    corners = [(40.3, 40.2), (40.3, 180.7), (120.6, 180.7), (120.6, 40.2)]
    from_codes, _ = read_area(scan, None, corners, step=1, center_rc=(80.0, 110.0))
    from_signal, _ = read_area(scan.signal, scan.saturated, corners, step=1, center_rc=(80.0, 110.0))
    assert from_codes.pixels == from_signal.pixels and from_codes.rejected == from_signal.rejected
    assert from_codes.signal == pytest.approx(from_signal.signal, rel=1e-6)
    assert from_codes.signal_sd == pytest.approx(from_signal.signal_sd, rel=1e-4)
    assert from_codes.saturated_fraction == pytest.approx(from_signal.saturated_fraction) and from_codes.saturated_fraction > 0


def test_large_areas_are_read_on_a_lattice():
    assert lattice_stride(15_000) == 1 and lattice_stride(4 * 16_384) == 2 and lattice_stride(600_000) == 6
    corners = [(10.0, 10.0), (10.0, 410.0), (310.0, 410.0), (310.0, 10.0)]
    (r0, c0), mask, _ = box_mask(corners, (400, 500), stride=3)
    _, whole, _ = box_mask(corners, (400, 500))
    assert (r0, c0) == (10, 10) and np.array_equal(mask, whole[::3, ::3])


def test_a_few_thousand_pixels_read_as_well_as_every_pixel(tmp_path, monkeypatch):
    # The simulator's scanner: read and shot noise, optical blur, flare, dust specks and scratches.
    strip = StripSpec(film=FilmModel(), center_mm=(20.0, 75.0), angle_deg=90.7, film_width_mm=26.0, band_width_mm=11.0)
    scanner = ScannerModel(seed=21, dust=60, scratches=4)
    path = tmp_path / "strip.tif"
    write_tiff(path, simulate_scan([strip], platen_mm=(40.0, 150.0), dpi=600.0, scanner=scanner))
    scan = load_scan(path)
    (found,) = locate_in_scan(scan)
    geometry = found.geometry
    monkeypatch.setattr(sample, "MAX_AREA_PIXELS", 2048)  # steps too (about 15 000 pixels each) on a lattice
    steps, base_fog, _ = read_strip(scan, None, geometry)
    boxes = [geometry.step_box_rc(k) for k in range(1, geometry.n_steps + 1)] + [geometry.base_fog_box_rc()]
    worst, on_lattice = 0.0, 0
    for reading, box in zip(steps + [base_fog], boxes):
        rr, cc, _ = box_pixels(box, scan.shape)
        every, _, _, _ = robust_mean(scan.signal[rr, cc], estimate_from=rr.size)
        read = reading.pixels + reading.rejected
        if read < rr.size:
            on_lattice += 1
            assert 0.9 * 2048 <= read < rr.size / 3
            assert reading.signal_sd / (reading.signal * np.log(10) * np.sqrt(reading.pixels)) <= LATTICE_SEM_OD
        else:
            assert read == rr.size  # too noisy on the lattice: every pixel
        worst = max(worst, abs(np.log10(every / reading.signal)))
    assert on_lattice >= 10  # the lighter steps and base+fog; the densest steps are noise-limited
    # Issue 18: the same readings within 0.001 OD; a densitometer for film QC reads within ±0.02 (common practice).
    assert worst < 0.001
