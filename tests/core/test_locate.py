"""Finding strips and their steps on simulated scans of known geometry."""

from __future__ import annotations

import numpy as np
import pytest

from stripscan.core.locate import LocateError, LocateOptions, geometry_from_outline, locate_strips, with_step_count
from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec
from stripscan.sim.simulate import simulate_scan

SCANNER = ScannerModel(seed=5)


def signal_of(sim):
    full = 255.0 if sim.image.dtype == np.uint8 else 65535.0
    image = sim.image.astype(np.float32) / full
    return image.mean(axis=-1) if image.ndim == 3 else image


def assert_matches(found, truth, dpi, tol_mm=0.7):
    pixel_mm = 25.4 / dpi
    geometry = found.geometry
    assert geometry.n_steps == truth["n_steps"]
    centres = np.array([geometry.step_center_rc(k) for k in range(1, geometry.n_steps + 1)])
    error = np.hypot(*(centres - np.asarray(truth["step_centers_rc"])).T) * pixel_mm
    assert error.max() < tol_mm, f"step centres off by up to {error.max():.2f} mm"
    diff = (geometry.angle_deg - truth["angle_deg"] + 180) % 360 - 180
    assert abs(diff) < 0.5


@pytest.mark.parametrize(
    "angle, flip",
    [(90.0, False), (93.0, True), (-87.5, False), (-92.0, True), (60.0, False), (-121.0, True)],
)
def test_one_strip_at_many_angles(angle, flip):
    platen = (120.0, 200.0) if abs(abs(angle) - 90) < 40 else (200.0, 200.0)
    spec = StripSpec(film=FilmModel(), center_mm=(platen[0] / 2, platen[1] / 2), angle_deg=angle, flip=flip)
    sim = simulate_scan([spec], platen_mm=platen, dpi=150.0, scanner=SCANNER)
    found = locate_strips(signal_of(sim), dpi=150.0)
    assert len(found) == 1
    assert_matches(found[0], sim.truth[0], 150.0)


@pytest.mark.parametrize("angle", [1.5, 178.0, -179.0])
def test_near_horizontal_and_reversed(angle):
    spec = StripSpec(film=FilmModel(), center_mm=(100.0, 40.0), angle_deg=angle)
    sim = simulate_scan([spec], platen_mm=(200.0, 80.0), dpi=150.0, scanner=SCANNER)
    (found,) = locate_strips(signal_of(sim), dpi=150.0)
    assert_matches(found, sim.truth[0], 150.0)


def test_two_strips_reading_order_and_step_one_least_exposed():
    specs = [
        StripSpec(film=FilmModel(), center_mm=(80.0, 100.0), angle_deg=-90.0),
        StripSpec(film=FilmModel(log_e_mid=1.3), center_mm=(30.0, 100.0), angle_deg=91.0),
    ]
    sim = simulate_scan(specs, platen_mm=(120.0, 200.0), dpi=150.0, scanner=SCANNER)
    found = locate_strips(signal_of(sim), dpi=150.0)
    assert len(found) == 2
    # reading order: left to right on the scan
    assert found[0].geometry.step_center_rc(1)[1] < found[1].geometry.step_center_rc(1)[1]
    assert_matches(found[0], sim.truth[1], 150.0)
    assert_matches(found[1], sim.truth[0], 150.0)


def test_eleven_step_strip_is_counted():
    spec = StripSpec(film=FilmModel(log_e_mid=1.4, slope=3.0), n_steps=11, increment=0.30, step_length_mm=12.0,
                     center_mm=(60.0, 100.0), angle_deg=90.0)
    sim = simulate_scan([spec], platen_mm=(120.0, 200.0), dpi=150.0, scanner=SCANNER)
    (found,) = locate_strips(signal_of(sim), dpi=150.0)
    assert_matches(found, sim.truth[0], 150.0)


def test_fixed_step_count_is_obeyed():
    spec = StripSpec(film=FilmModel(), center_mm=(60.0, 100.0), angle_deg=90.0)
    sim = simulate_scan([spec], platen_mm=(120.0, 200.0), dpi=150.0, scanner=SCANNER)
    (found,) = locate_strips(signal_of(sim), dpi=150.0, options=LocateOptions(n_steps=21))
    assert_matches(found, sim.truth[0], 150.0)


def test_base_fog_area_lies_on_unexposed_film():
    spec = StripSpec(film=FilmModel(), center_mm=(60.0, 100.0), angle_deg=90.0, flip=True)
    sim = simulate_scan([spec], platen_mm=(120.0, 200.0), dpi=150.0, scanner=SCANNER)
    (found,) = locate_strips(signal_of(sim), dpi=150.0)
    box = np.asarray(found.geometry.base_fog_box_rc())
    centre = box.mean(axis=0)
    truth = np.asarray(sim.truth[0]["base_fog_center_rc"])
    # within the unexposed band (about 21 mm wide): its centre within 4 mm of the band's middle
    assert np.hypot(*(centre - truth)) * 25.4 / 150.0 < 4.0


def test_blank_scan_has_no_strip():
    blank = np.full((400, 300), 0.9, dtype=np.float32)
    with pytest.raises(LocateError, match="no film"):
        locate_strips(blank, dpi=100.0)


def test_uniform_film_without_steps_is_not_a_strip():
    image = np.full((600, 400), 0.9, dtype=np.float32)
    image[100:500, 100:250] = 0.6  # a plain piece of film
    with pytest.raises(LocateError, match="no strip"):
        locate_strips(image, dpi=100.0)


def test_outline_drawn_by_hand():
    corners = [(100.0, 50.0), (100.0, 260.0), (140.0, 260.0), (140.0, 50.0)]
    geometry = geometry_from_outline(corners, 21, base_fog_side=30.0)
    assert geometry.manual and geometry.n_steps == 21
    assert geometry.step_pitch_px == pytest.approx(10.0) and geometry.band_width_px == pytest.approx(40.0)
    np.testing.assert_allclose(geometry.step_center_rc(1), (120.0, 55.0))
    np.testing.assert_allclose(geometry.outline_rc()[2], (140.0, 260.0))
    assert with_step_count(geometry, 11).step_pitch_px == pytest.approx(210.0 / 11)
    with pytest.raises(ValueError):
        geometry_from_outline(corners[:3], 21)


def test_open_3x3_equals_scipy_rank_filter_opening():
    # Reference: scipy.ndimage's minimum then maximum filter (edges reflected,
    # which for a 3 x 3 window repeats the edge pixel) is a 3 x 3 opening.
    from scipy import ndimage

    from stripscan.core.locate import _open_3x3

    rng = np.random.default_rng(11)
    for _ in range(100):
        shape = tuple(int(n) for n in rng.integers(1, 30, 2))
        mask = rng.random(shape) < rng.random()
        expected = ndimage.maximum_filter(ndimage.minimum_filter(mask.view(np.uint8), size=3), size=3).astype(bool)
        assert np.array_equal(_open_3x3(mask), expected)
