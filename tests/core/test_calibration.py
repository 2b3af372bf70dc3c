"""Certificates, the tablet fit, its valid range and direct mode, on exact synthetic readings."""

from __future__ import annotations

import math

import numpy as np
import pytest

from stripscan.core.calibration import ACCURACY_GOAL, DirectMode, fit_lateral, flat_field
from stripscan.core.calibration_fit import fit_calibration
from stripscan.core.calibration_files import load_calibration, save_calibration
from stripscan.core.certificate import CalibrationError, parse_certificate, read_certificate
from stripscan.core.records import StepReading

NOMINAL = tuple(round(0.05 + 0.15 * k, 3) for k in range(21))  # common practice: 21 steps 0.05..3.05


def readings_for(signals, *, sd=1e-4, pixels=4000, saturated=None):
    saturated = saturated or [0.0] * len(signals)
    return [
        StepReading(step=k + 1, center_rc=(10.0 * k, 5.0), signal=float(s), signal_sd=sd, pixels=pixels,
                    rejected=0, saturated_fraction=saturated[k])
        for k, s in enumerate(signals)
    ]


def fit(signals, densities=NOMINAL, **kwargs):
    cert = parse_certificate("\n".join(f"{k + 1},{d}" for k, d in enumerate(densities)))
    return fit_calibration(
        readings_for(signals, **kwargs), cert, scan_sha256="0" * 64, scan_path="tablet.tif", bits=16,
        channel="grey", decoding="linear", dpi=300.0, tablet_center_rc=(100.0, 50.0),
    )


# ----------------------------------------------------------------------------- certificate


def test_certificate_with_header_comments_and_blank_lines():
    text = "# Tablet T-1, certified 2026-06-15\n\nstep,density\n1,0.05\n\n2, 0.21 \n# a remark\n3,0.36\n"
    cert = parse_certificate(text, source="cert.csv")
    assert cert.steps == (1, 2, 3) and cert.densities == (0.05, 0.21, 0.36) and cert.uncertainties is None


def test_certificate_uncertainty_column():
    cert = parse_certificate("step,density,uncertainty\n1,0.05,0.006\n2,0.2,0.006\n3,0.35,0.007\n")
    assert cert.uncertainties == (0.006, 0.006, 0.007)


@pytest.mark.parametrize(
    "text, message",
    [
        ("1,0.05\n2,0.2\n4,0.5\n5,0.65\n", "step 3 is missing"),
        ("1,0.05\n2,0.2\n2,0.35\n3,0.5\n", "step 2 is listed twice"),
        ("1,0.05\n2,abc\n3,0.35\n", "density 'abc' is not a number"),
        ("1,0.05\n2,0.20\n3,0.15\n", "densities must increase"),
        ("1,0.05\n1.5,0.2\n3,0.35\n", "not a whole number"),
        ("1,0.05\n2,0.2\n", "at least 3 steps"),
        ("1,0.05\n2\n3,0.3\n", "expected 'step,density'"),
    ],
)
def test_bad_certificates_are_refused_with_the_reason(text, message):
    with pytest.raises(CalibrationError, match=message) as info:
        parse_certificate(text, source="my-cert.csv")
    assert "my-cert.csv" in str(info.value)


def test_certificate_file_errors_name_the_file(tmp_path):
    with pytest.raises(CalibrationError, match="no such certificate"):
        read_certificate(tmp_path / "none.csv")
    binary = tmp_path / "binary.csv"
    binary.write_bytes(bytes(range(256)))
    with pytest.raises(CalibrationError, match="binary.csv"):
        read_certificate(binary)


# ----------------------------------------------------------------------------- fit


def test_ideal_scanner_maps_signal_to_density_by_definition():
    # A scanner that reads transmittance: signal = 10**-D.
    cal = fit([10 ** -d for d in NOMINAL])
    od, ok = cal.density(np.array([0.1, 0.01]))
    # ISO 5-2: D = -log10 T, so T 10 % is D 1 and T 1 % is D 2.
    np.testing.assert_allclose(od, [1.0, 2.0], atol=1e-9)
    assert ok.all()
    # PCHIP through points on a straight line reproduces it: every residual is zero.
    assert cal.rms_residual == pytest.approx(0.0, abs=1e-12)
    # The lightest step starts the range (no residual); the densest is tested
    # one-sidedly, extrapolated from the others (issue: a verified range top).
    assert cal.residuals[0] is None and cal.residuals[-1] == pytest.approx(0.0, abs=1e-9)
    assert cal.valid_od == (0.05, 3.05)


def test_range_top_is_tested_not_taken_on_trust():
    """The densest usable step ends the range only when its one-sided residual is within the goal."""
    signals = [10 ** -d for d in NOMINAL]
    # The densest step reads 5 % too bright (stray light the map cannot know):
    # extrapolated from the others it is predicted 0.021 OD too light.
    signals[-1] *= 1.05
    cal = fit(signals)
    assert cal.residuals[-1] == pytest.approx(-math.log10(1.05), abs=2e-3)
    # ±0.02 OD, the accuracy expected of a QC densitometer (common practice):
    # the untested top would have been 3.05; the range now ends one step lower.
    assert cal.valid_od == (0.05, 2.90)


def test_nonlinear_scanner_is_undone_at_and_between_steps():
    # s = 0.9 T**0.9 + 0.002 (gain, non-linear sensor, dark offset).
    def scanner(d):
        return 0.9 * (10.0 ** -np.asarray(d)) ** 0.9 + 0.002

    cal = fit(scanner(NOMINAL), sd=1e-6)
    between = np.array([0.4, 1.13, 1.8, 2.31])
    od, ok = cal.density(scanner(between))
    np.testing.assert_allclose(od, between, atol=0.005)
    assert ok.all()


def test_valid_range_ends_where_the_scanner_stops_separating_steps():
    # Flare caps the scanner: beyond D 2.6 the signal no longer falls.
    signals = [max(10 ** -d, 10 ** -2.6) + 1e-5 for d in NOMINAL]
    cal = fit(signals, sd=1e-6)
    assert cal.covered_od[1] <= 2.6 + 1e-9
    assert 19 in cal.excluded_steps and 21 in cal.excluded_steps
    od, ok = cal.density(np.array([10 ** -2.9]))
    assert not ok[0]  # beyond the densest usable step: flagged, not trusted


def test_noisy_dense_steps_end_the_valid_range():
    # 20 pixels of sd 0.0005: sem = 1.118e-4.  Ideal scanner, slope 1:
    # D 2.30: s = 0.00501, 2 * sem / (s ln 10) = 0.0194 <= 0.02 (kept);
    # D 2.45: s = 0.00355, 2 * sem / (s ln 10) = 0.0274 > 0.02 (range ends before it).
    cal = fit([10 ** -d for d in NOMINAL], sd=5e-4, pixels=20)
    lo, hi = cal.valid_od
    assert lo == 0.05 and hi == 2.3
    # at the range's end the predicted noise still meets the goal
    signal = 10 ** -hi
    assert 2 * (5e-4 / math.sqrt(20)) / (signal * math.log(10)) <= ACCURACY_GOAL + 1e-9


def test_saturated_steps_are_not_used():
    signals = [10 ** -d for d in NOMINAL]
    saturated = [0.0] * 21
    saturated[17] = 0.5
    cal = fit(signals, saturated=saturated)
    assert cal.excluded_steps == (18, 19, 20, 21) and cal.covered_od[1] == NOMINAL[16]


def test_outside_the_fit_density_is_extended_but_flagged():
    cal = fit([10 ** -d for d in NOMINAL[:15]], densities=NOMINAL[:15])
    od, ok = cal.density(np.array([10 ** -2.5, 10 ** 0.02]))
    assert not ok.any()
    np.testing.assert_allclose(od, [2.5, -0.02], atol=1e-6)  # straight line in log signal


def test_too_few_distinct_steps_is_an_error():
    with pytest.raises(CalibrationError, match="distinct signals"):
        fit([0.5, 0.2, 0.2, 0.2, 0.2], densities=(0.05, 0.4, 0.7, 1.0, 1.3))


def test_step_count_mismatch_is_an_error():
    with pytest.raises(CalibrationError, match="certificate lists 21"):
        fit([10 ** -d for d in NOMINAL[:20]])


def test_json_round_trip_keeps_the_map(tmp_path):
    cal = fit([0.9 * 10 ** -d + 0.001 for d in NOMINAL])
    path = tmp_path / "cal.json"
    save_calibration(cal, path)
    again = load_calibration(path)
    assert again.to_dict() == cal.to_dict() and again.sha256 == cal.sha256
    probe = np.geomspace(0.9, 0.002, 50)
    np.testing.assert_array_equal(again.density(probe)[0], cal.density(probe)[0])
    assert not list(tmp_path.glob("*.partial"))


@pytest.mark.parametrize(
    "content, message",
    [("{not json", "invalid JSON"), ('{"format": "other"}', "not a stripscan calibration"),
     ('{"format": "stripscan-calibration", "format_version": 1}', "incomplete")],
)
def test_bad_calibration_files(tmp_path, content, message):
    path = tmp_path / "cal.json"
    path.write_text(content)
    with pytest.raises(CalibrationError, match=message):
        load_calibration(path)


# ----------------------------------------------------------------------------- corrections


def test_direct_mode_is_log_ratio():
    mode = DirectMode(i0=0.9, dark=0.01)
    od, ok = mode.density(np.array([0.9, 0.099, 0.0189]))
    # D = log10((I0 - dark) / (I - dark)): 0.89/0.89 -> 0, 0.89/0.089 -> 1, 0.89/0.0089 -> 2
    np.testing.assert_allclose(od, [0.0, 1.0, 2.0], atol=1e-9)
    assert ok.all()


def test_lateral_fit_recovers_a_parabola():
    pixel_mm = 0.25
    cols = np.arange(800)
    x = (cols - 399.5) * pixel_mm
    od = 0.01 + 2e-6 * x**2  # Schoenfeld et al. (2016) form: OD(x) = c0 + c x^2
    blank = np.tile(10.0 ** -od, (50, 1)).astype(np.float32)
    lateral = fit_lateral(blank, pixel_mm=pixel_mm)
    assert lateral.c_per_mm2 == pytest.approx(2e-6, rel=1e-3)
    # offset between a place 80 mm off the midline and the midline itself
    assert lateral.offset_od((0.0, 399.5 + 320), pixel_mm, (0.0, 399.5), pixel_mm) == pytest.approx(2e-6 * 80**2, rel=1e-3)


def test_flat_field_removes_lamp_unevenness():
    cols = np.arange(300)
    lamp = 1.0 - 0.05 * ((cols - 150) / 150.0) ** 2
    blank = np.tile(0.9 * lamp, (100, 1)).astype(np.float32)
    scan = np.tile(0.09 * lamp, (100, 1)).astype(np.float32)
    flat = flat_field(scan, blank, sigma_px=2.0)
    centre = flat[20:80, 20:280]
    assert centre.max() / centre.min() == pytest.approx(1.0, abs=2e-3)
    with pytest.raises(CalibrationError, match="same area and resolution"):
        flat_field(scan, blank[:, :200])
