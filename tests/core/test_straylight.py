"""Stray light: the model against an independent forward computation, the fit against known truth.

The forward model ``seen = (1 - f) T + sum_k f_k G_k * T`` is computed here
with scipy's own Gaussian filter (``scipy.ndimage.gaussian_filter``, edges
extended as ours are), a reference independent of the module's FFT.
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from scipy import ndimage

from stripscan.core.calibration import Calibration
from stripscan.core.calibration_files import load_calibration, save_calibration
from stripscan.core.certificate import Certificate
from stripscan.core.pipeline import analyze_scan
from stripscan.core.tablet import calibrate_tablet
from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec, TabletSpec
from stripscan.sim.simulate import simulate_scan, write_tiff
from stripscan.core.straylight import (
    ReducedScan,
    StrayLight,
    _Blur,
    _invert,
    spread_field,
)

TABLET_OD = tuple(round(0.05 + 0.15 * k, 2) for k in range(21))  # common practice: 21 steps 0.05 -> 3.05


def forward(t: np.ndarray, cell_mm: float, sigmas_mm, fractions) -> np.ndarray:
    """seen = (1 - f) T + sum f_k G_k * T, by scipy's Gaussian filter (the reference)."""
    out = (1.0 - sum(fractions)) * t
    for s, f in zip(sigmas_mm, fractions):
        out = out + f * ndimage.gaussian_filter(t, s / cell_mm, mode="nearest", truncate=6.0)
    return out


def grid(shape=(60, 80)) -> np.ndarray:
    """Open platen with a dense film piece and a light one: T per 2 mm cell."""
    t = np.ones(shape)
    t[10:40, 10:25] = 10 ** -3.0  # a dense piece
    t[20:50, 40:70] = 10 ** -0.5
    t[25:30, 45:50] = 10 ** -2.5
    return t


def test_blur_matches_scipy_gaussian_filter():
    t = grid()
    blur = _Blur(t.shape, 2.0, (4.0, 16.0, 40.0))
    for got, sigma in zip(blur.each(t), (4.0, 16.0, 40.0)):
        want = ndimage.gaussian_filter(t, sigma / 2.0, mode="nearest", truncate=6.0)
        assert np.abs(got - want).max() < 2e-4  # scipy reference; FFT of a sampled Gaussian


def test_inversion_recovers_the_transmittance_exactly():
    t = grid()
    sigmas, fractions = (8.0, 32.0), (0.002, 0.003)
    seen = forward(t, 2.0, sigmas, fractions)
    recovered = _invert(seen, _Blur(t.shape, 2.0, sigmas), fractions)
    # Densities back within 0.001 OD even at 3 OD, where spread light is 3x the transmitted.
    dense = t < 0.01
    assert np.abs(np.log10(recovered[dense]) - np.log10(t[dense])).max() < 1e-3
    assert np.abs(recovered - t).max() < 1e-5


def test_spread_field_equals_the_forward_models_spread():
    t = grid()
    model = StrayLight((8.0, 32.0), (0.002, 0.003), relative_sd=0.1)
    seen = forward(t, 2.0, model.sigmas_mm, model.fractions)
    reduced = ReducedScan(seen, np.full(seen.shape, 1e-4), np.arange(60) * 20.0 + 9.5,
                          np.arange(80) * 20.0 + 9.5, 20.0, 0.1)
    field = spread_field(reduced, lambda s: s, model)
    want = seen - (1.0 - model.total) * t
    assert np.abs(field.spread - want).max() < 1e-5
    # At a cell centre the field reads that cell's spread.
    spread, _, _, lamp = field.values_at(np.array([(25 * 20.0 + 9.5, 15 * 20.0 + 9.5)]))
    assert spread[0] == pytest.approx(want[25, 15], abs=1e-5) and lamp[0] == 1.0


def test_model_round_trips_and_refuses_nonsense():
    model = StrayLight((4.0, 16.0), (0.001, 0.002), 0.15, fraction_sd=0.0004, lamp=(0.01, -0.02),
                       lamp_span_mm=(5.0, 200.0))
    assert StrayLight.from_dict(json.loads(json.dumps(model.to_dict()))) == model
    assert model.total == pytest.approx(0.003)
    with pytest.raises(ValueError):
        StrayLight((4.0,), (-0.001,), 0.1)
    with pytest.raises(ValueError):
        StrayLight((4.0,), (math.nan,), 0.1)


# --------------------------------------------------------------------------- fit on simulated scans


def tablet_scan(tmp_path, scanner, *, objects=(), dpi=150.0, name="tablet.tif"):
    tablet = TabletSpec(densities=TABLET_OD, center_mm=(60.0, 130.0), angle_deg=90.0)
    sim = simulate_scan([tablet, *objects], platen_mm=(216.0, 297.0), dpi=dpi, scanner=scanner)
    path = tmp_path / name
    write_tiff(path, sim)
    return path


@pytest.mark.parametrize("fraction, sigma", [(0.003, 8.0), (0.003, 24.0), (0.001, 40.0)])
def test_fit_recovers_a_known_fraction(tmp_path, fraction, sigma):
    scanner = ScannerModel(flare_fraction=fraction, flare_sigma_mm=sigma, lamp_platen_mm=216.0, seed=3)
    cal, _, _ = calibrate_tablet(tablet_scan(tmp_path, scanner), Certificate(tuple(range(1, 22)), TABLET_OD))
    model = cal.stray_light
    assert model is not None
    # The total within twice the model's own stated uncertainty (and never off by half), and the
    # weight where the true kernel is (its mean width within a factor 2.5).
    assert abs(model.total - fraction) <= 2.0 * math.hypot(model.fraction_sd, model.relative_sd * model.total)
    assert model.total == pytest.approx(fraction, rel=0.5)
    mean_sigma = sum(s * f for s, f in zip(model.sigmas_mm, model.fractions)) / model.total
    assert sigma / 2.5 <= mean_sigma <= sigma * 2.5


def test_fit_measures_the_lamp_across_the_carriage(tmp_path):
    scanner = ScannerModel(flare_fraction=0.001, lamp_falloff=0.05, lamp_platen_mm=216.0, seed=5)
    cal, _, _ = calibrate_tablet(tablet_scan(tmp_path, scanner), Certificate(tuple(range(1, 22)), TABLET_OD))
    model = cal.stray_light
    x = np.array([10.0, 60.0, 108.0, 200.0])
    truth = 1.0 - 0.05 * ((x - 108.0) / 108.0) ** 2  # the simulator's parabola
    got = model.lamp_factor(x)
    # Relative profile (the map holds the absolute level): within 0.3 %, i.e. 0.0013 OD.
    np.testing.assert_allclose(got / got[2], truth / truth[2], atol=3e-3)


def test_calibration_with_stray_light_round_trips_and_is_marked_for_new_readers(tmp_path):
    scanner = ScannerModel(flare_fraction=0.002, flare_sigma_mm=16.0, seed=7)
    cal, _, _ = calibrate_tablet(tablet_scan(tmp_path, scanner), Certificate(tuple(range(1, 22)), TABLET_OD))
    save_calibration(cal, tmp_path / "cal.json")
    data = json.loads((tmp_path / "cal.json").read_text())
    # Knots now hold the light seen: an older reader must refuse the file, not misread it.
    assert data["format_version"] == 2 and data["stray_light"]["total_fraction"] == pytest.approx(cal.stray_light.total)
    again = load_calibration(tmp_path / "cal.json")
    assert again.sha256 == cal.sha256 and again.stray_light == cal.stray_light
    od, _ = again.density(np.array([0.05, 0.005]))
    np.testing.assert_allclose(od, cal.density(np.array([0.05, 0.005]))[0])


def test_old_calibration_files_read_as_before():
    """A format-1 file (no stray light) maps signal to density exactly as it did."""
    cert = Certificate(tuple(range(1, 6)), (0.05, 0.5, 1.0, 1.5, 2.0))
    data = {
        "format": "stripscan-calibration", "format_version": 1,
        "log_signal": sorted(-d for d in cert.densities), "od": sorted(cert.densities, reverse=True),
        "valid_od": [0.05, 2.0], "covered_od": [0.05, 2.0], "residuals": [None] * 5, "excluded_steps": [],
        "rms_residual": 0.0, "certificate": cert.to_dict(), "readings": [], "scan_sha256": "0" * 64,
        "scan_path": "t.tif", "created": "2026-01-01T00:00:00+00:00", "bits": 16, "channel": "grey",
        "decoding": "linear", "dpi": 300.0, "tablet_center_rc": [0, 0], "lateral": None,
        "flat_field_sha256": None, "note": "",
    }
    cal = Calibration.from_dict(data)
    assert cal.stray_light is None
    od, ok = cal.density(np.array([0.1, 0.01]))
    np.testing.assert_allclose(od, [1.0, 2.0], atol=1e-9)  # ISO 5-2: D = -log10 T
    assert ok.all()


def test_strips_crowded_on_the_platen_read_within_the_goal(tmp_path):
    """A tablet alone, strips crowded: in-range steps within ±0.02 OD, and the share of spread light reported."""
    scanner = ScannerModel(flare_fraction=0.003, flare_sigma_mm=16.0, lamp_platen_mm=216.0, seed=11)
    cal, _, _ = calibrate_tablet(tablet_scan(tmp_path, scanner), Certificate(tuple(range(1, 22)), TABLET_OD))
    strips = [StripSpec(film=FilmModel(), center_mm=(40.0 + 34.0 * k, 150.0), angle_deg=90.0, film_width_mm=32.0)
              for k in range(5)]
    sim = simulate_scan(strips, platen_mm=(216.0, 297.0), dpi=150.0, scanner=dataclasses.replace(scanner, seed=12))
    write_tiff(tmp_path / "strips.tif", sim)
    analysis = analyze_scan(tmp_path / "strips.tif", calibration=cal)
    assert len(analysis.strips) == 5
    worst = 0.0
    for strip in analysis.strips:
        truth = min(sim.truth, key=lambda t: abs(t["step_centers_rc"][0][1] - strip.steps[0].center_rc[1]))
        for step, od in zip(strip.steps, truth["od"]):
            assert step.stray_light_share is not None and 0.0 <= step.stray_light_share <= 1.0
            if step.in_range:
                worst = max(worst, abs(step.od - od))
            else:
                assert step.flag  # every step kept off the curve says why
    assert worst <= 0.02  # common practice: a QC densitometer reads within ±0.02 OD


def in_scan_layout(tmp_path, scanner, dpi=150.0):
    objects = [TabletSpec(densities=TABLET_OD, center_mm=(30.0, 140.0), angle_deg=90.0)]
    objects += [StripSpec(film=FilmModel(), center_mm=(75.0 + 34.0 * k, 150.0), angle_deg=90.0, film_width_mm=32.0)
                for k in range(3)]
    sim = simulate_scan(objects, platen_mm=(216.0, 297.0), dpi=dpi, scanner=scanner)
    write_tiff(tmp_path / "with_tablet.tif", sim)
    return tmp_path / "with_tablet.tif", sim


def test_a_tablet_on_the_scan_calibrates_that_scan(tmp_path):
    """The in-scan reference: the tablet is found, calibrates the scan, and is not read as a strip."""
    scanner = ScannerModel(flare_fraction=0.003, flare_sigma_mm=16.0, lamp_platen_mm=216.0, seed=13)
    path, sim = in_scan_layout(tmp_path, scanner)
    analysis = analyze_scan(path, tablet_certificate=Certificate(tuple(range(1, 22)), TABLET_OD))
    assert len(analysis.strips) == 3 and analysis.calibration["tablet_on_scan"] is True
    # The whole fit travels with the result: an audit can see what calibrated it.
    assert Calibration.from_dict(analysis.calibration["fit"]).sha256 == analysis.calibration["sha256"]
    for strip in analysis.strips:
        truth = min(sim.truth[1:], key=lambda t: abs(t["step_centers_rc"][0][1] - strip.steps[0].center_rc[1]))
        used = [(s.od, od) for s, od in zip(strip.steps, truth["od"]) if s.in_range]
        assert len(used) >= 10
        assert max(abs(a - b) for a, b in used) <= 0.01  # well within ±0.02 OD (common practice)
        assert strip.figures.base_fog == pytest.approx(truth["base_fog"], abs=0.01)


def test_a_calibration_and_a_tablet_on_the_scan_together_are_refused(tmp_path):
    scanner = ScannerModel(seed=14)
    path, _ = in_scan_layout(tmp_path, scanner)
    cal, _, _ = calibrate_tablet(tablet_scan(tmp_path, scanner), Certificate(tuple(range(1, 22)), TABLET_OD))
    with pytest.raises(ValueError, match="not both"):
        analyze_scan(path, calibration=cal, tablet_certificate=Certificate(tuple(range(1, 22)), TABLET_OD))


def test_the_tablet_read_with_its_own_calibration_is_in_range_throughout(tmp_path):
    """Issue 14 item 5: the tablet's step 1 sets the range's lower end, so reading it back is in range."""
    scanner = ScannerModel(flare_fraction=0.001, flare_sigma_mm=16.0, seed=21)
    path = tablet_scan(tmp_path, scanner)
    cal, _, _ = calibrate_tablet(path, Certificate(tuple(range(1, 22)), TABLET_OD))
    (strip,) = analyze_scan(path, calibration=cal).strips
    lo, hi = cal.valid_od
    for step in strip.steps:
        # Steps are numbered from the dense end; a tablet has no unexposed band, so compare by density.
        certified = min(TABLET_OD, key=lambda d: abs(d - step.od))
        if lo <= certified <= hi:
            # In range — or, at the dense end, flagged for its noise (with the calibration's own
            # RMS added) or for the unknown light from beyond the scan's edge.
            assert step.in_range or step.flag in ("too_noisy", "stray_light"), (step.step, step.od, step.flag)
            assert abs(step.od - certified) <= 0.01  # its own surroundings: the map is exact there
    lightest = min(strip.steps, key=lambda s: s.od)
    assert lightest.in_range and lightest.od == pytest.approx(TABLET_OD[0], abs=0.01)
