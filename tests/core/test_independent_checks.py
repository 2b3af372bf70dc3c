"""Independent checks of the numbers: figures, calibration, QC and lot comparison.

Every expected value here is worked out beside its assertion from an outside
source: the definitions of ISO 9236-1 (average gradient, speed point, ISO
speed), ISO 5-2 (transmission density), 21 CFR 900.12(e)(1) (processor QC
limits), common practice of processor QC, closed-form arithmetic on
hand-made step tables, or a general-purpose reference library (scipy).
Nothing is copied from the program's own output.

Some of these found faults in review (ISO speed read at a moved speed
point, a calibration RMS taken past the valid range, a lateral correction
mixing two scans' pixel pitches, excluded dense steps turning into a Dmax,
a missing base+fog stored as if read); they stay as regression tests.
"""

from __future__ import annotations

import datetime
import math

import numpy as np
import pytest
from scipy import stats
from scipy.interpolate import PchipInterpolator
from scipy.optimize import brentq

from stripscan.core.calibration import Calibration, DirectMode, LateralCorrection, fit_lateral
from stripscan.core.calibration_fit import fit_calibration
from stripscan.core.certificate import Certificate
from stripscan.core.compare.comparison import compare_sets
from stripscan.core.compare.sets import StripSet
from stripscan.core.compare.statistics import judge, welch_interval
from stripscan.core.curve import CharacteristicCurve, compute_figures, relative_speed_percent, step_log_exposures
from stripscan.core.figure_settings import FigureSettings
from stripscan.core.reading import AnalysisOptions, strip_result
from stripscan.core.qc.crossover import crossover
from stripscan.core.qc.levels import choose_qc_steps, establish_levels
from stripscan.core.qc.records import OperatingLevels, QCEntry, QCLimits, QCValues, TrendRules
from stripscan.core.qc.rules import apply_trend_rules, evaluate_day
from stripscan.core.records import Analysis, ScanInfo, StepDensity, StepReading, StripGeometry, StripResult

# --------------------------------------------------------------------------
# Helpers (data only; no expected values are computed by the program here)


def figures_of(log_e, od, *, usable=None, **kwargs):
    usable = [True] * len(od) if usable is None else usable
    return compute_figures(log_e, od, usable, **kwargs)


def logistic_film(x, *, base_fog=0.20, top=3.0, k=4.0, x0=1.5):
    """Gross density of a model film: base+fog plus a logistic rise of height ``top``."""
    return base_fog + top / (1.0 + np.exp(-k * (np.asarray(x, dtype=float) - x0)))


def logistic_log_e_at(net, *, top=3.0, k=4.0, x0=1.5):
    """Closed-form inverse of the logistic net density (plain algebra)."""
    return x0 - math.log(top / net - 1.0) / k


def geometry(n_steps: int) -> StripGeometry:
    return StripGeometry((0.0, 0.0), (0.0, 1.0), (1.0, 0.0), 10.0, n_steps, 10.0, base_fog_v_px=(12.0, 16.0))


def make_strip(log_e, od, *, base_fog, index=1, unusable=()) -> StripResult:
    """A StripResult built from a step table (as the pipeline would after calibration)."""
    steps = tuple(
        StepDensity(step=k + 1, log_exposure=float(x), od=float(d), od_sd=0.003, pixels=400,
                    in_range=(k + 1) not in unusable, center_rc=(5.0, 10.0 * k + 5.0))
        for k, (x, d) in enumerate(zip(log_e, od))
    )
    figs = compute_figures(log_e, od, [s.in_range for s in steps], base_fog=base_fog)
    return StripResult(index=index, geometry=geometry(len(od)), steps=steps, base_fog_reading=None, figures=figs)


def tablet_certificate(n: int, increment: float) -> Certificate:
    # common practice: tablets from 0.05 rising by 0.15 (21 steps) or 0.30 (11 steps)
    return Certificate(tuple(range(1, n + 1)), tuple(round(0.05 + increment * k, 3) for k in range(n)))


def flare_signal(density, flare=0.0):
    """Linear scanner with stray light: transmittance 10**-D (ISO 5-2) plus a flare floor, normalised."""
    return (10.0 ** (-np.asarray(density, dtype=float)) + flare) / (1.0 + flare)


def flare_truth(signal, flare=0.0):
    """Exact inverse of :func:`flare_signal` (plain algebra)."""
    return -np.log10(np.asarray(signal, dtype=float) * (1.0 + flare) - flare)


def fit(certificate, signals, *, sd=0.0005, pixels=2000, dpi=600.0, centre=(10.0, 100.0), lateral=None) -> Calibration:
    readings = [StepReading(i + 1, (centre[0], centre[1] + 5.0 * i), float(s), sd, pixels, 0, 0.0)
                for i, s in enumerate(signals)]
    return fit_calibration(readings, certificate, scan_sha256="0" * 64, scan_path="tablet.tif", bits=16,
                           channel="grey", decoding="linear", dpi=dpi, tablet_center_rc=centre, lateral=lateral,
                           created="2025-01-01T00:00:00+00:00")


def strip_readings(densities, signal_of, *, sd=0.0005, pixels=2000, row=200.0, col0=100.0):
    return [StepReading(k + 1, (row, col0 + 10.0 * k), float(signal_of(d)), sd, pixels, 0, 0.0)
            for k, d in enumerate(densities)]


def day(n: int) -> datetime.date:
    return datetime.date(2025, 3, 1) + datetime.timedelta(days=n)


def entry(n: int, bf: float, md: float, dd: float) -> QCEntry:
    return QCEntry(day(n), QCValues(bf, md, dd), "manual")


def levels(bf=0.18, md=1.20, dd=1.80) -> OperatingLevels:
    return OperatingLevels(bf, md, dd, established=day(0), n_days=5, reason="baseline")


# --------------------------------------------------------------------------
# Curve figures on hand-made step tables with exact answers

# Nine steps, 0.15 log E apart (common practice), base+fog 0.20.  The target
# gross densities 0.45 (net 0.25), 1.20 (net 1.00) and 2.20 (net 2.00) are
# steps 3, 5 and 7 exactly, so every figure follows by plain arithmetic.
HAND_LOG_E = [0.00, 0.15, 0.30, 0.45, 0.60, 0.75, 0.90, 1.05, 1.20]
HAND_OD = [0.20, 0.30, 0.45, 0.80, 1.20, 1.70, 2.20, 2.60, 2.80]


def test_hand_table_with_exact_answers():
    f = figures_of(HAND_LOG_E, HAND_OD, base_fog=0.20)
    assert f.speed_log_exposure == pytest.approx(0.60, abs=1e-9)  # ISO 9236-1: speed point at net 1.00 = step 5
    assert f.gradient_low_log_exposure == pytest.approx(0.30, abs=1e-9)  # ISO 9236-1: net 0.25 = step 3
    assert f.gradient_high_log_exposure == pytest.approx(0.90, abs=1e-9)  # ISO 9236-1: net 2.00 = step 7
    assert f.average_gradient == pytest.approx(1.75 / 0.60, abs=1e-6)  # ISO 9236-1: (2.00-0.25)/(0.90-0.30)
    assert f.latitude_log_exposure == pytest.approx(0.60, abs=1e-9)  # DESIGN §1: log E span between the two points
    assert (f.mid_density_step, f.mid_density) == (5, pytest.approx(1.20))  # common practice: step closest to 1.20
    assert (f.dd_high_step, f.dd_low_step) == (7, 3)  # common practice: closest to 2.20 and to 0.45
    assert f.density_difference == pytest.approx(2.20 - 0.45)  # common practice: DD = 1.75
    assert f.dmax == pytest.approx(2.80)  # densest step
    assert f.base_fog == pytest.approx(0.20)


def test_gamma_on_the_hand_table_is_bounded_by_the_step_secants():
    # Mean value theorem: somewhere in a step interval the slope equals its
    # secant, so the maximum slope is at least the largest secant, 0.50/0.15.
    # Fritsch & Carlson (SIAM J Numer Anal 17 (1980) 238): a monotone-limited
    # cubic keeps its knot slopes within 3 x the neighbouring secant.
    f = figures_of(HAND_LOG_E, HAND_OD, base_fog=0.20)
    largest_secant = max(np.diff(HAND_OD) / np.diff(HAND_LOG_E))
    assert largest_secant == pytest.approx(0.50 / 0.15)
    assert f.gamma >= largest_secant - 1e-3  # mean value theorem
    assert f.gamma <= 3.0 * largest_secant  # Fritsch & Carlson 1980 bound
    assert 0.45 <= f.gamma_log_exposure <= 1.05  # it lies where the steep secants are (steps 4-8)


def test_straight_line_film_on_a_custom_exposure_table():
    # A sensitometer's own per-step table, unevenly spaced; film D = 0.18 + 1.8 log E.
    # By hand: net 1.00 at 1/1.8 = 0.5556; net 0.25 at 0.25/1.8; net 2.00 at 2/1.8;
    # average gradient 1.8 (ISO 9236-1), gamma 1.8.
    table = [0.00, 0.14, 0.31, 0.44, 0.62, 0.75, 0.93, 1.04, 1.21, 1.35, 1.52]
    x = step_log_exposures(11, table=table)
    np.testing.assert_array_equal(x, table)  # the table is used as given
    od = 0.18 + 1.8 * np.asarray(table)
    f = figures_of(x, od, base_fog=0.18)
    assert f.speed_log_exposure == pytest.approx(1.0 / 1.8, abs=1e-6)  # ISO 9236-1: net 1.00
    assert f.gradient_low_log_exposure == pytest.approx(0.25 / 1.8, abs=1e-6)
    assert f.gradient_high_log_exposure == pytest.approx(2.00 / 1.8, abs=1e-6)
    assert f.average_gradient == pytest.approx(1.8, abs=1e-5)  # ISO 9236-1
    assert f.latitude_log_exposure == pytest.approx(1.75 / 1.8, abs=1e-6)
    assert f.gamma == pytest.approx(1.8, abs=1e-5)  # a straight line's slope everywhere
    # Step densities 0.18, 0.432, 0.738, 0.972, 1.296, 1.53, 1.854, 2.052, 2.358, 2.61, 2.916:
    # closest to 1.20 is step 5 (0.096 away); to 2.20 step 8 (0.148 vs 0.158); to 0.45 step 2.
    assert f.mid_density_step == 5  # common practice: closest to 1.20
    assert (f.dd_high_step, f.dd_low_step) == (8, 2)  # common practice: closest to 2.20 / 0.45
    assert f.density_difference == pytest.approx(2.052 - 0.432, abs=1e-9)


def test_eleven_step_tablet_at_030_per_step():
    # common practice: an 11-step tablet rises 0.30 per step; film D = 0.15 + 1.2 log E.
    x = step_log_exposures(11, increment=0.30)
    np.testing.assert_allclose(x, 0.30 * np.arange(11), atol=1e-12)  # common practice: 0.30 per step
    od = 0.15 + 1.2 * x
    f = figures_of(x, od, base_fog=0.15)
    assert f.speed_log_exposure == pytest.approx(1.0 / 1.2, abs=1e-6)  # ISO 9236-1 speed point
    assert f.average_gradient == pytest.approx(1.2, abs=1e-5)  # ISO 9236-1
    assert f.latitude_log_exposure == pytest.approx(1.75 / 1.2, abs=1e-6)
    assert f.gamma == pytest.approx(1.2, abs=1e-5)
    # One 0.30 step is about one doubling: gradient ~ ΔD / log10 2 (REFERENCES: arithmetic).
    assert f.gamma == pytest.approx((od[5] - od[4]) / math.log10(2.0), rel=0.005)


def test_two_step_gradient_on_an_exact_root_two_tablet():
    # REFERENCES (arithmetic): with log10 √2 steps two steps are one doubling,
    # so the gradient of a straight stretch is ΔD(two steps) / log10 2 = 3.3219 ΔD.
    x = step_log_exposures(21, increment=math.log10(math.sqrt(2.0)))
    od = 0.21 + 2.5 * x
    f = figures_of(x, od, base_fog=0.21)
    two_step = od[10] - od[8]
    assert 1.0 / math.log10(2.0) == pytest.approx(3.3219, abs=1e-4)  # arithmetic
    assert f.gamma == pytest.approx(two_step / math.log10(2.0), rel=1e-6)


@pytest.mark.parametrize("k", [3.0, 4.0, 6.0])
def test_smooth_model_film_against_closed_form(k):
    # A logistic model film sampled at 21 steps of 0.15.  Closed form (plain algebra):
    # log E at net n is x0 - ln(top/n - 1)/k; the greatest slope top*k/4 sits at x0.
    x = step_log_exposures(21)
    f = figures_of(x, logistic_film(x, k=k), base_fog=0.20)
    lo, speed, hi = (logistic_log_e_at(n, k=k) for n in (0.25, 1.00, 2.00))
    assert f.speed_log_exposure == pytest.approx(speed, abs=0.002)  # ISO 9236-1, net 1.00
    assert f.average_gradient == pytest.approx(1.75 / (hi - lo), rel=0.005)  # ISO 9236-1
    assert f.latitude_log_exposure == pytest.approx(hi - lo, abs=0.003)
    assert f.gamma == pytest.approx(3.0 * k / 4.0, rel=0.015)  # maximum of dD/dlog E (DESIGN §1)
    assert f.gamma_log_exposure == pytest.approx(1.5, abs=0.02)


def test_speed_point_agrees_with_scipy_monotone_interpolation():
    # scipy's PCHIP (a general-purpose monotone interpolant) through the same
    # steps must find nearly the same log E at net 1.00 and at the gradient points.
    x = step_log_exposures(21)
    d = logistic_film(x, k=5.0)
    f = figures_of(x, d, base_fog=0.20)
    ref = PchipInterpolator(x, d)

    def ref_at(net):
        return brentq(lambda t: float(ref(t)) - (0.20 + net), x[0], x[-1])

    assert f.speed_log_exposure == pytest.approx(ref_at(1.00), abs=0.005)  # scipy.interpolate.PchipInterpolator
    assert f.gradient_low_log_exposure == pytest.approx(ref_at(0.25), abs=0.005)  # scipy reference
    assert f.gradient_high_log_exposure == pytest.approx(ref_at(2.00), abs=0.005)  # scipy reference


def test_user_moved_gradient_points():
    # ISO 9236-1 fixes 0.25 and 2.00 but the user may move both (DESIGN §1):
    # straight line D = 0.20 + 2.0 log E, points at net 0.50 and 1.50 -> log E 0.25 and 0.75.
    x = step_log_exposures(21)
    f = figures_of(x, 0.20 + 2.0 * x, base_fog=0.20, settings=FigureSettings(gradient_low=0.50, gradient_high=1.50))
    assert f.gradient_low_log_exposure == pytest.approx(0.25, abs=1e-6)
    assert f.gradient_high_log_exposure == pytest.approx(0.75, abs=1e-6)
    assert f.average_gradient == pytest.approx(2.0, abs=1e-5)  # (1.50-0.50)/(0.75-0.25)
    assert f.latitude_log_exposure == pytest.approx(0.50, abs=1e-6)


# --------------------------------------------------------------------------
# Edge cases of the figures


def test_curve_that_never_reaches_net_200_gives_no_gradient_and_no_extrapolation():
    # D = 0.20 + 0.5 log E over 0..3.0: highest net 1.50 < 2.00 (ISO 9236-1 point not reached).
    x = step_log_exposures(21)
    f = figures_of(x, 0.20 + 0.5 * x, base_fog=0.20)
    assert f.speed_log_exposure == pytest.approx(2.0, abs=1e-6)  # net 1.00 at log E 2.0 (arithmetic)
    assert f.gradient_low_log_exposure == pytest.approx(0.5, abs=1e-6)  # net 0.25 at 0.5
    assert f.gradient_high_log_exposure is None  # never reached: not extrapolated
    assert f.average_gradient is None and f.latitude_log_exposure is None
    assert any("2.00" in n and "never reach" in n for n in f.notes)
    assert f.dmax == pytest.approx(1.70)


def test_lightest_usable_step_above_net_025_gives_no_low_point():
    # Base+fog 0.20 but the first step already reads 0.60 (net 0.40): net 0.25 is not on the curve.
    x = step_log_exposures(21)
    f = figures_of(x, 0.60 + 1.0 * x, base_fog=0.20)
    assert f.gradient_low_log_exposure is None and f.average_gradient is None
    assert f.speed_log_exposure == pytest.approx(0.60, abs=1e-6)  # gross 1.20 at log E 0.60 (arithmetic)
    assert any("0.25" in n and "lightest usable step" in n for n in f.notes)


def test_excluded_and_out_of_range_steps_are_never_used():
    # Straight line D = 0.20 + 2.0 log E (21 steps).  Step 10 reads a bogus 9.99
    # (dust) and step 12 an out-of-range 0.01; both are marked unusable.  Every
    # figure must equal the clean line's, worked by hand:
    #   speed 0.5, average gradient 2.0 (ISO 9236-1), mid-density step 4 (1.1),
    #   DD steps 8 (2.3) and 2 (0.5) -> 1.8 (common practice), Dmax step 21 = 6.2.
    x = step_log_exposures(21)
    od = 0.20 + 2.0 * x
    od[9], od[11] = 9.99, 0.01
    usable = [k not in (9, 11) for k in range(21)]
    f = figures_of(x, od, usable=usable, base_fog=0.20)
    assert f.speed_log_exposure == pytest.approx(0.5, abs=1e-6)  # ISO 9236-1
    assert f.average_gradient == pytest.approx(2.0, abs=1e-5)  # ISO 9236-1
    assert f.gamma == pytest.approx(2.0, abs=1e-5)
    assert (f.mid_density_step, f.mid_density) == (4, pytest.approx(1.1))  # common practice
    assert (f.dd_high_step, f.dd_low_step, f.density_difference) == (8, 2, pytest.approx(1.8))  # common practice
    assert f.dmax == pytest.approx(6.2)  # not the bogus 9.99


def test_dmax_not_stated_when_denser_steps_are_beyond_the_range():
    # DESIGN §1: beyond the calibrated range the program must flag, not guess.
    x = step_log_exposures(21)
    od = 0.20 + 0.15 * np.arange(21)
    f = figures_of(x, od, usable=[k < 17 for k in range(21)], base_fog=0.20, beyond_range_denser=True)
    assert f.dmax is None
    assert any("Dmax" in n and "calibrated range" in n for n in f.notes)


def test_base_fog_missing_counts_net_densities_from_the_lightest_step_with_a_note():
    # Net densities are then taken from the lightest usable step; the note says so.
    x = step_log_exposures(21)
    f = figures_of(x, 0.25 + 2.0 * x, base_fog=None)
    assert f.base_fog is None and f.net_reference == pytest.approx(0.25)  # not read, so not stated
    assert f.speed_log_exposure == pytest.approx(0.5, abs=1e-6)  # net 1.00 above 0.25: log E 0.5 (arithmetic)
    assert any("base+fog" in n and "lightest step" in n for n in f.notes)


def test_non_monotone_noisy_steps():
    # A dip at step 6 (1.30 then 1.22).  Base+fog 0.20.
    x = step_log_exposures(11)
    od = [0.20, 0.28, 0.45, 0.80, 1.30, 1.22, 1.70, 2.20, 2.55, 2.70, 2.78]
    f = figures_of(x, od, base_fog=0.20)
    # Gross 1.20 is first reached between step 4 (0.80) and step 5 (1.30): log E in (0.45, 0.60).
    assert 0.45 < f.speed_log_exposure < 0.60  # ISO 9236-1 speed point, first crossing
    # A monotone-limited piece (Fritsch & Carlson 1980) never leaves its interval's range.
    curve = CharacteristicCurve(x, od)
    inside = curve(np.linspace(0.60, 0.75, 200))
    assert inside.min() >= 1.22 - 1e-9 and inside.max() <= 1.30 + 1e-9
    assert f.gradient_low_log_exposure == pytest.approx(0.30, abs=1e-9)  # gross 0.45 is step 3 exactly
    assert f.gradient_high_log_exposure == pytest.approx(1.05, abs=1e-9)  # gross 2.20 is step 8 exactly
    assert f.mid_density_step == 6  # common practice: 1.22 (0.02 away) beats 1.30 (0.10 away)
    assert (f.dd_high_step, f.dd_low_step) == (8, 3)  # common practice
    assert f.density_difference == pytest.approx(1.75)
    assert f.gamma >= 0.50 / 0.15 - 1e-3  # mean value theorem on the 0.80 -> 1.30 step


def test_strip_read_in_reverse_order_gives_no_speed_gradient_or_dd():
    # Densities falling with the step number: the figures that need the
    # direction are withheld and a note asks whether the strip is reversed.
    x = step_log_exposures(21)
    f = figures_of(x, logistic_film(x)[::-1], base_fog=0.20)
    assert f.speed_log_exposure is None and f.average_gradient is None and f.latitude_log_exposure is None
    assert f.density_difference is None
    assert f.gamma is None and f.gamma_log_exposure is None  # a falling curve has no maximum slope to state
    assert any("reversed" in n for n in f.notes)


# --------------------------------------------------------------------------
# ISO speed and relative speed


def kerma_for(x, k_at_speed_ugy, speed_log_e):
    """Air kerma per step consistent with the relative log exposures (K ∝ 10**log E)."""
    return tuple(k_at_speed_ugy * 10.0 ** (np.asarray(x) - speed_log_e))


def test_iso_speed_400_at_25_microgray():
    # ISO 9236-1 (from memory, high confidence): S = 1 mGy / K_S, so K_S = 2.5 µGy gives S = 400.
    x = step_log_exposures(21)
    od = 0.20 + 2.0 * x  # net 1.00 at log E 0.5
    f = figures_of(x, od, base_fog=0.20, air_kerma_ugy=kerma_for(x, 2.5, 0.5))
    assert f.iso_speed == pytest.approx(1000.0 / 2.5, rel=1e-6)  # ISO 9236-1: 1 mGy / 2.5 µGy = 400


def test_iso_speed_stays_at_net_100_when_the_speed_point_is_moved():
    x = step_log_exposures(21)
    od = 0.20 + 2.0 * x  # net 1.00 at log E 0.5; net 0.50 at 0.25
    f = figures_of(x, od, base_fog=0.20, air_kerma_ugy=kerma_for(x, 2.5, 0.5),
                   settings=FigureSettings(speed_net_density=0.50))
    assert f.speed_log_exposure == pytest.approx(0.25, abs=1e-6)
    assert f.iso_speed == pytest.approx(400.0, rel=1e-6)  # ISO 9236-1: K_S is read at net density 1.00


def test_relative_speed_from_a_speed_point_shift():
    # REFERENCES (arithmetic): Δlog E = -0.06 -> 10**0.06 = 1.148, 14.8 % faster.
    assert relative_speed_percent(-0.06) == pytest.approx(100.0 * (10.0 ** 0.06 - 1.0), rel=1e-12)
    assert relative_speed_percent(-0.06) == pytest.approx(14.8, abs=0.05)
    assert relative_speed_percent(+0.30) == pytest.approx(100.0 * (10.0 ** -0.30 - 1.0))  # about half as fast
    x = step_log_exposures(21)
    f = figures_of(x, 0.20 + 2.0 * x, base_fog=0.20, settings=FigureSettings(reference_speed_log_exposure=0.56))
    assert f.relative_speed_percent == pytest.approx(100.0 * (10.0 ** 0.06 - 1.0), abs=1e-3)  # speed 0.50 vs 0.56


# --------------------------------------------------------------------------
# Calibration


def test_ideal_scanner_calibration_reproduces_iso_5_2_density():
    # A linear scanner without flare reads transmittance: D = -log10 T (ISO 5-2).
    cert = tablet_certificate(21, 0.15)
    cal = fit(cert, flare_signal(cert.densities))
    assert cal.valid_od == pytest.approx((0.05, 3.05))
    d = np.linspace(0.05, 3.05, 97)
    od, ok = cal.density(10.0 ** -d)
    np.testing.assert_allclose(od, d, atol=1e-9)  # ISO 5-2: D = log10(1/T)
    assert ok.all()


def test_flare_scanner_calibration_is_within_the_goal_inside_its_range_and_flags_outside():
    # Stray light lifts dense readings; the exact inverse of the model is the truth.
    cert = tablet_certificate(21, 0.15)
    cal = fit(cert, flare_signal(cert.densities, 0.01), sd=0.002)
    lo, hi = cal.valid_od
    assert lo == pytest.approx(0.05)
    d = np.linspace(0.0, 3.3, 331)
    signal = flare_signal(d, 0.01)
    od, ok = cal.density(signal)
    truth = flare_truth(signal, 0.01)
    assert np.abs(od[ok] - truth[ok]).max() <= 0.02  # common practice: QC densitometer within ±0.02 OD
    # Everything flagged in range lies inside the stated range, everything outside is flagged.
    assert ok[(d >= lo + 1e-6) & (d <= hi - 1e-6)].all()
    assert not ok[(d < lo - 1e-3) | (d > hi + 1e-3)].any()  # DESIGN §1: beyond the tablet, flag, not guess


def test_leave_one_out_residuals_and_valid_range_against_scipy():
    # Recompute the held-out residuals with scipy's PCHIP and derive the range by hand:
    # interior steps left out one at a time, the densest step (the range's top)
    # extrapolated from all the others, the lightest (the range's start) not tested.
    cert = tablet_certificate(11, 0.30)
    signals = flare_signal(cert.densities, 0.01)
    cal = fit(cert, signals)
    x = np.log10(signals)[::-1]
    y = np.asarray(cert.densities)[::-1]
    expected = [float(PchipInterpolator(x[1:], y[1:], extrapolate=True)(x[0])) - y[0]]  # scipy reference
    for i in range(1, len(x) - 1):
        keep = np.arange(len(x)) != i
        expected.append(float(PchipInterpolator(x[keep], y[keep])(x[i])) - y[i])  # scipy reference
    expected.append(None)
    expected = expected[::-1]
    for got, want in zip(cal.residuals, expected):
        assert (got is None) == (want is None)
        if want is not None:
            assert got == pytest.approx(want, abs=1e-12)
    first_bad = next(k for k, r in enumerate(expected) if r is not None and abs(r) > 0.02)
    assert cal.valid_od[1] == pytest.approx(cert.densities[first_bad - 1])  # range ends before it


def test_eleven_step_reference_tablet_with_mild_flare_leaves_in_range_steps_usable():
    cert = tablet_certificate(11, 0.30)
    cal = fit(cert, flare_signal(cert.densities, 0.003))
    assert cal.valid_od == pytest.approx((0.05, 2.45))
    truth_in_range = np.linspace(0.05, 2.45, 200)
    od, ok = cal.density(flare_signal(truth_in_range, 0.003))
    assert ok.all() and np.abs(od - truth_in_range).max() < 0.002  # common practice: well within ±0.02
    x = step_log_exposures(21)
    film = logistic_film(x, top=2.0)
    result = strip_result(1, geometry(21), strip_readings(film, lambda d: flare_signal(d, 0.003)), None, cal,
                          AnalysisOptions(), pixel_mm=None)
    usable = [s.in_range for s in result.steps]
    assert all(u for u, d in zip(usable, film) if 0.10 <= d <= 2.40)  # DESIGN §1: inside the range, read it


def test_direct_mode_is_iso_5_2_density_with_dark_subtracted():
    # ISO 5-2: D = log10(I0 / I); with a dark level both sides lose it.
    mode = DirectMode(i0=0.80, dark=0.02, floor_sd=0.001)
    signal = 0.02 + 0.78 * 10.0 ** -1.5
    od, ok = mode.density(signal)
    assert od[0] == pytest.approx(1.5, abs=1e-12)  # ISO 5-2
    assert ok[0]
    od, ok = mode.density([0.021, 0.90])
    assert not ok.any()  # at the dark floor, and brighter than I0: flagged (DESIGN §1)


def test_lateral_response_fit_against_numpy_least_squares():
    # Schoenfeld et al. (Phys Med Biol 2016): OD(x) = c0 + c x**2 across the carriage.
    pixel_mm = 0.5
    cols = np.arange(401)
    x_mm = (cols - 200.0) * pixel_mm
    od = 0.04 + 2.0e-6 * x_mm**2
    blank = np.tile(10.0 ** -od, (30, 1))
    lateral = fit_lateral(blank, pixel_mm=pixel_mm)
    c_ref, _ = np.polyfit(x_mm**2, od, 1)  # numpy least squares, independent reference
    assert lateral.c_per_mm2 == pytest.approx(c_ref, rel=1e-6)
    assert lateral.c_per_mm2 == pytest.approx(2.0e-6, rel=1e-6)
    assert lateral.midline_px == pytest.approx(200.0)


def test_lateral_correction_sign_and_size_in_the_pipeline():
    # Tablet on the midline; a strip 100 mm off it reads c*100**2 = 0.02 OD too dense
    # (Schoenfeld et al. 2016 model), which the correction takes off (arithmetic).
    cert = tablet_certificate(21, 0.15)
    lateral = LateralCorrection(c_per_mm2=2.0e-6, midline_px=500.0, axis="col")
    cal = fit(cert, flare_signal(cert.densities), dpi=254.0, centre=(10.0, 500.0), lateral=lateral)
    film = [0.30, 0.60, 1.00, 1.40, 1.80]
    readings = strip_readings(film, flare_signal, col0=1500.0)
    readings = [StepReading(r.step, (r.center_rc[0], 1500.0), r.signal, r.signal_sd, r.pixels, 0, 0.0)
                for r in readings]
    result = strip_result(1, geometry(5), readings, None, cal, AnalysisOptions(), pixel_mm=0.1)
    got = np.array([s.od for s in result.steps])
    np.testing.assert_allclose(got, np.asarray(film) - 2.0e-6 * 100.0**2, atol=1e-9)  # arithmetic


def test_lateral_correction_uses_each_scans_own_pixel_pitch():
    # Tablet and blank at 300 dpi; strip at 600 dpi, at the same physical place as the tablet
    # (col 1000 at 300 dpi = col 2000 at 600 dpi = 84.7 mm): no correction is due (arithmetic).
    cert = tablet_certificate(21, 0.15)
    lateral = LateralCorrection(c_per_mm2=3.0e-6, midline_px=1275.0, axis="col")
    cal = fit(cert, flare_signal(cert.densities), dpi=300.0, centre=(100.0, 1000.0), lateral=lateral)
    readings = [StepReading(1, (200.0, 2000.0), float(flare_signal(1.0)), 0.0005, 2000, 0, 0.0),
                StepReading(2, (210.0, 2000.0), float(flare_signal(1.5)), 0.0005, 2000, 0, 0.0)]
    result = strip_result(1, geometry(2), readings, None, cal, AnalysisOptions(), pixel_mm=25.4 / 600.0)
    np.testing.assert_allclose([s.od for s in result.steps], [1.0, 1.5], atol=1e-6)


# --------------------------------------------------------------------------
# Pipeline composition: what is out of range is flagged and never used


def test_steps_beyond_the_calibrated_range_are_flagged_and_not_used():
    cert = tablet_certificate(21, 0.15)
    cal = fit(cert, flare_signal(cert.densities, 0.003), sd=0.002)
    lo, hi = cal.valid_od
    assert hi < 3.0  # the scenario needs dense steps past the range
    x = step_log_exposures(21)
    film = logistic_film(x)  # up to 3.19 OD
    bf = StepReading(0, (220.0, 150.0), float(flare_signal(0.20, 0.003)), 0.0005, 5000, 0, 0.0)
    result = strip_result(1, geometry(21), strip_readings(film, lambda d: flare_signal(d, 0.003)), bf, cal,
                          AnalysisOptions(), pixel_mm=None)
    for s, d in zip(result.steps, film):
        if d > hi + 0.02:
            assert not s.in_range  # DESIGN §1: flag beyond the range
        elif d < hi - 0.02:
            assert s.in_range
            assert s.od == pytest.approx(d, abs=0.02)  # common practice: within ±0.02 OD
    assert result.figures.dmax is None  # the film's Dmax lies beyond the range: not stated
    assert any("outside the calibrated range" in w for w in result.warnings)
    f = result.figures
    assert f.base_fog == pytest.approx(0.20, abs=0.02)
    assert f.speed_log_exposure == pytest.approx(logistic_log_e_at(1.00), abs=0.01)  # ISO 9236-1
    lo_e, hi_e = logistic_log_e_at(0.25), logistic_log_e_at(2.00)
    assert f.average_gradient == pytest.approx(1.75 / (hi_e - lo_e), rel=0.02)  # ISO 9236-1
    # Figures read only from in-range steps: the same as from the in-range truth.
    kept = [s.in_range for s in result.steps]
    g = compute_figures(x, film, kept, base_fog=0.20)
    assert f.speed_log_exposure == pytest.approx(g.speed_log_exposure, abs=0.01)


def test_excluding_out_of_range_dense_steps_does_not_turn_them_into_a_dmax():
    cert = tablet_certificate(21, 0.15)
    cal = fit(cert, flare_signal(cert.densities, 0.003), sd=0.002)
    x = step_log_exposures(21)
    film = logistic_film(x)
    beyond = [k + 1 for k, d in enumerate(film) if d > cal.valid_od[1]]
    assert beyond and beyond[-1] == 21
    result = strip_result(1, geometry(21), strip_readings(film, lambda d: flare_signal(d, 0.003)), None, cal,
                          AnalysisOptions(), pixel_mm=None, excluded=beyond)
    # DESIGN §1: beyond the range the program flags, not guesses; the film's Dmax is unknown.
    assert result.figures.dmax is None or any("Dmax" in n for n in result.figures.notes)


def test_base_fog_outside_the_range_is_not_used():
    cert = tablet_certificate(21, 0.15)
    cal = fit(cert, flare_signal(cert.densities))
    x = step_log_exposures(11)
    film = 0.30 + 1.0 * x
    bf = StepReading(0, (220.0, 150.0), float(flare_signal(0.02)), 0.0005, 5000, 0, 0.0)  # below the 0.05 step
    result = strip_result(1, geometry(11), strip_readings(film, flare_signal), bf, cal, AnalysisOptions(),
                          pixel_mm=None)
    assert any(w.startswith("base+fog") and "outside the calibrated range" in w for w in result.warnings)
    assert result.figures.base_fog != pytest.approx(0.02, abs=0.005)  # the out-of-range reading is not used


def test_qc_reading_refuses_a_strip_without_base_fog():
    from stripscan.services import qc_recording

    cert = tablet_certificate(21, 0.15)
    cal = fit(cert, flare_signal(cert.densities))
    x = step_log_exposures(21)
    film = logistic_film(x, base_fog=0.18)
    strip = strip_result(1, geometry(21), strip_readings(film, flare_signal), None, cal, AnalysisOptions(),
                         pixel_mm=None)
    info = ScanInfo("qc.tif", "0" * 64, 400, 300, 600.0, 16, 1, "grey", "linear")
    analysis = Analysis(scan=info, calibration=cal.summary(), strips=(strip,))
    with pytest.raises(ValueError, match="base\\+fog"):
        qc_recording.read_strip(analysis, None)  # read_strip's own contract: "no base+fog" raises


# --------------------------------------------------------------------------
# Processor QC


def test_operating_levels_are_the_mean_of_the_first_five_days():
    # common practice / FDA guidance for MQSA: mean of 5 consecutive days; day 6 does not count.
    rows = [(0.18, 1.21, 1.80), (0.19, 1.18, 1.83), (0.18, 1.22, 1.79), (0.17, 1.20, 1.81), (0.18, 1.19, 1.77),
            (0.30, 2.00, 3.00)]
    lv = establish_levels([entry(k, *r) for k, r in enumerate(rows)], n_days=5)
    means = np.mean(np.array(rows[:5]), axis=0)
    assert (lv.base_fog, lv.mid_density, lv.density_difference) == pytest.approx(tuple(means), abs=1e-9)
    assert lv.established == day(4)


@pytest.mark.parametrize("md, dd, bf, verdict", [
    (1.20 + 0.15, 1.80, 0.18, "warning"),  # 21 CFR 900.12(e)(1): ±0.15 is still within; ±0.10 tier passed
    (1.20 - 0.15, 1.80 + 0.15, 0.18, "warning"),
    (1.20 + 0.16, 1.80, 0.18, "action"),  # 21 CFR 900.12(e)(1): beyond ±0.15
    (1.20, 1.80 - 0.16, 0.18, "action"),
    (1.20 + 0.11, 1.80, 0.18, "warning"),  # common practice: ±0.10 warning tier (from memory)
    (1.20 + 0.10, 1.80 - 0.10, 0.18, "ok"),
    (1.20, 1.80, 0.18 + 0.03, "ok"),  # 21 CFR 900.12(e)(1): base+fog within +0.03
    (1.20, 1.80, 0.18 + 0.04, "action"),  # 21 CFR 900.12(e)(1): beyond +0.03
    (1.20, 1.80, 0.18 - 0.08, "ok"),  # 21 CFR 900.12(e)(1) limits only a rise of base+fog
])
def test_daily_verdict_against_the_regulation_limits(md, dd, bf, verdict):
    result = evaluate_day(QCValues(bf, md, dd), levels(), QCLimits())
    assert result.verdict == verdict
    assert result.deviations.mid_density == pytest.approx(md - 1.20, abs=1e-9)
    assert result.deviations.density_difference == pytest.approx(dd - 1.80, abs=1e-9)


def test_qc_step_choice_on_a_hand_strip():
    # common practice: MD = step closest to 1.20; DD = closest to 2.20 minus closest to 0.45.
    d = [0.19, 0.22, 0.31, 0.48, 0.79, 1.14, 1.58, 2.05, 2.41, 2.78, 3.01]
    steps = choose_qc_steps(d)
    assert steps.mid_step == 6  # |1.14-1.20| = 0.06 beats |1.58-1.20| = 0.38
    assert steps.dd_high_step == 8  # |2.05-2.20| = 0.15 beats |2.41-2.20| = 0.21
    assert steps.dd_low_step == 4  # |0.48-0.45| = 0.03 beats |0.31-0.45| = 0.14
    # Some procedures bound the low step only (from memory): high closest to 2.20, low closest to 0.45 but
    # not below it.
    bounded = choose_qc_steps([0.19, 0.22, 0.31, 0.44, 0.79, 1.14, 1.58, 2.25, 2.41], rule="bounded")
    assert (bounded.dd_high_step, bounded.dd_low_step) == (8, 5)  # 2.25 (0.05 off 2.20); 0.79 (0.44 < 0.45)


def test_crossover_moves_levels_by_the_mean_difference():
    # common practice (mammography QC manuals, from memory): 5 old + 5 new strips;
    # new level = old level + (mean new - mean old).
    old = [QCValues(0.18, m, d) for m, d in [(1.22, 1.81), (1.20, 1.79), (1.21, 1.80), (1.19, 1.82), (1.23, 1.78)]]
    new = [QCValues(0.20, m, d) for m, d in [(1.30, 1.90), (1.31, 1.88), (1.29, 1.91), (1.32, 1.89), (1.28, 1.92)]]
    lv = levels(bf=0.17, md=1.20, dd=1.80)
    result = crossover(old, new, lv, date=day(40))
    md_shift = np.mean([v.mid_density for v in new]) - np.mean([v.mid_density for v in old])
    dd_shift = np.mean([v.density_difference for v in new]) - np.mean([v.density_difference for v in old])
    assert result.new_levels.mid_density == pytest.approx(1.20 + md_shift, abs=1e-9)  # 1.20 + 0.09
    assert result.new_levels.density_difference == pytest.approx(1.80 + dd_shift, abs=1e-9)  # 1.80 + 0.10
    assert result.new_levels.base_fog == pytest.approx(0.20, abs=1e-9)  # the new film's own base+fog
    shifted = crossover(old, new, lv, date=day(40), base_fog_rule="shift")
    assert shifted.new_levels.base_fog == pytest.approx(0.17 + 0.02, abs=1e-9)  # old level + difference
    with pytest.raises(ValueError):
        crossover(old[:4], new[:4], lv, date=day(40))  # common practice: five strips of each


def _history(mds):
    return [entry(k, 0.18, md, 1.80) for k, md in enumerate(mds)]


def test_trend_rule_run_of_seven_on_one_side():
    # common practice in control charting (from memory): 7 strips in a row on one side.
    found = apply_trend_rules(_history([1.21, 1.22, 1.21, 1.23, 1.21, 1.22, 1.21]), levels(),
                              TrendRules(rules=("run",)))
    assert [(f.rule, f.quantity, len(f.dates)) for f in found] == [("run", "mid_density", 7)]
    six = apply_trend_rules(_history([1.21, 1.22, 1.21, 1.23, 1.21, 1.22, 1.19]), levels(),
                            TrendRules(rules=("run",)))
    assert six == ()


def test_trend_rule_drift_of_five():
    # common practice (from memory): five strips each lower than the one before.
    found = apply_trend_rules(_history([1.20, 1.24, 1.22, 1.20, 1.18, 1.16]), levels(), TrendRules(rules=("drift",)))
    assert [(f.rule, f.quantity, f.dates) for f in found] == [("drift", "mid_density", tuple(day(k) for k in range(1, 6)))]
    flat = apply_trend_rules(_history([1.24, 1.22, 1.22, 1.20, 1.18]), levels(), TrendRules(rules=("drift",)))
    assert flat == ()  # an unchanged value breaks the drift


def test_trend_rule_two_of_three_beyond_the_warning_tier():
    # common practice (from memory): 2 of 3 consecutive strips past the ±0.10 tier on one side.
    found = apply_trend_rules(_history([1.20, 1.31, 1.25, 1.32, 1.20]), levels(), TrendRules(rules=("two_warnings",)))
    assert [(f.rule, f.dates) for f in found] == [("two_warnings", (day(1), day(3)))]
    apart = apply_trend_rules(_history([1.31, 1.20, 1.20, 1.32]), levels(), TrendRules(rules=("two_warnings",)))
    assert apart == ()  # three strips apart: not within one window of 3
    sides = apply_trend_rules(_history([1.31, 1.09, 1.20]), levels(), TrendRules(rules=("two_warnings",)))
    assert sides == ()  # one above, one below: not on the same side


# --------------------------------------------------------------------------
# Lot comparison


@pytest.mark.parametrize("a, b", [
    ([1.00, 1.02, 0.99, 1.01], [0.94, 0.95, 0.93, 0.96, 0.95]),
    ([2.10, 2.40, 1.90], [2.00, 2.02, 2.01]),
    ([0.18, 0.18, 0.19, 0.18, 0.17, 0.18], [0.21, 0.25, 0.19]),
])
def test_welch_interval_against_scipy(a, b):
    got = welch_interval(a, b)
    ref = stats.ttest_ind(b, a, equal_var=False)  # scipy: Welch, mean(b) - mean(a)
    ci = ref.confidence_interval(0.95)
    assert got.difference == pytest.approx(np.mean(b) - np.mean(a), abs=1e-12)
    assert (got.low, got.high) == (pytest.approx(ci.low, abs=1e-10), pytest.approx(ci.high, abs=1e-10))
    assert got.df == pytest.approx(ref.df, rel=1e-10)  # Welch–Satterthwaite degrees of freedom
    assert welch_interval(a, b[:1]) is None  # one strip: no scatter, no interval


@pytest.mark.parametrize("interval, bounds, expected", [
    ((-0.02, 0.03), (-0.05, 0.05), "same"),  # wholly inside the band
    ((-0.09, -0.06), (-0.05, 0.05), "differs"),  # wholly outside
    ((-0.07, -0.01), (-0.05, 0.05), "unclear"),  # across an edge
    ((-0.20, 0.03), (-math.inf, 0.03), "same"),  # rise only (base+fog, 21 CFR 900.12(e)(1) +0.03)
    ((0.031, 0.05), (-math.inf, 0.03), "differs"),
])
def test_verdict_puts_the_whole_interval_against_the_band(interval, bounds, expected):
    # Equivalence logic (common practice of acceptance testing): the whole interval must lie inside.
    assert judge(sum(interval) / 2.0, interval, bounds) == expected


def _line_strips(shifts, gradients, base_fog=0.20, start=1):
    # Straight-line films D = bf + g (log E - shift): speed point at shift + 1/g exactly (ISO 9236-1).
    x = step_log_exposures(21)
    return tuple(make_strip(x, base_fog + g * (x - s), base_fog=base_fog, index=start + k)
                 for k, (s, g) in enumerate(zip(shifts, gradients)))


def test_lot_comparison_against_scipy_and_hand_arithmetic():
    a_shift, a_grad = [0.00, 0.01, -0.01, 0.005], [2.00, 2.02, 1.98, 2.00]
    b_shift, b_grad = [-0.06, -0.05, -0.07, -0.055], [2.05, 2.03, 2.06, 2.04]
    a = StripSet("lot A", _line_strips(a_shift, a_grad))
    b = StripSet("lot B", _line_strips(b_shift, b_grad))
    (cmp,) = compare_sets([a, b])
    speed_a = [s + 1.0 / g for s, g in zip(a_shift, a_grad)]  # ISO 9236-1 speed points, by hand
    speed_b = [s + 1.0 / g for s, g in zip(b_shift, b_grad)]
    row = cmp.row("speed_log_exposure")
    ref = stats.ttest_ind(speed_b, speed_a, equal_var=False).confidence_interval(0.95)  # scipy Welch
    assert row.difference == pytest.approx(np.mean(speed_b) - np.mean(speed_a), abs=1e-6)
    assert (row.interval.low, row.interval.high) == (pytest.approx(ref.low, abs=1e-6), pytest.approx(ref.high, abs=1e-6))
    # Default band ±0.05 log E; the interval lies wholly below -0.05 -> differs.
    assert ref.high < -0.05 and row.verdict == "differs"
    # Relative speed: 100 (10**-Δ - 1), B faster (REFERENCES, arithmetic); interval ends map and swap.
    rel = cmp.row("relative_speed_percent")
    delta = np.mean(speed_b) - np.mean(speed_a)
    assert rel.difference == pytest.approx(100.0 * (10.0 ** -delta - 1.0), abs=1e-3)
    assert rel.difference > 0
    assert rel.interval.low == pytest.approx(100.0 * (10.0 ** -ref.high - 1.0), abs=1e-3)
    assert rel.interval.high == pytest.approx(100.0 * (10.0 ** -ref.low - 1.0), abs=1e-3)
    # Average gradient: each strip's gradient g exactly (ISO 9236-1); Welch against scipy.
    grad = cmp.row("average_gradient")
    gref = stats.ttest_ind(b_grad, a_grad, equal_var=False).confidence_interval(0.95)
    assert grad.difference == pytest.approx(np.mean(b_grad) - np.mean(a_grad), abs=1e-5)
    assert (grad.interval.low, grad.interval.high) == (pytest.approx(gref.low, abs=1e-5), pytest.approx(gref.high, abs=1e-5))
    # ±5 % of A's mean gradient (2.00) = ±0.10; the interval lies inside -> same.
    assert grad.bounds == pytest.approx((-0.10, 0.10), abs=1e-6)
    assert gref.low > -0.10 and gref.high < 0.10 and grad.verdict == "same"
    # The Δlog E curve at net 1.00 is the speed-point difference.
    assert cmp.shift_at(1.00) == pytest.approx(row.difference, abs=1e-6)


def test_lot_comparison_reads_md_and_dd_at_the_steps_of_set_a():
    # common practice: the same steps on every strip, chosen on the reference film.
    x = step_log_exposures(21)
    a = StripSet("A", _line_strips([0.0, 0.01, -0.01], [2.0, 2.0, 2.0]))
    b = StripSet("B", _line_strips([-0.10, -0.10, -0.11], [2.0, 2.0, 2.0]))
    (cmp,) = compare_sets([a, b])
    mean_a = np.mean([0.20 + 2.0 * (x - s) for s in (0.0, 0.01, -0.01)], axis=0)
    mid = int(np.argmin(np.abs(mean_a - 1.20))) + 1
    high = int(np.argmin(np.abs(mean_a - 2.20))) + 1
    low = int(np.argmin(np.abs(mean_a - 0.45))) + 1
    assert (cmp.qc_steps.mid_step, cmp.qc_steps.dd_high_step, cmp.qc_steps.dd_low_step) == (mid, high, low)
    md_b = [0.20 + 2.0 * (x[mid - 1] - s) for s in (-0.10, -0.10, -0.11)]
    assert cmp.row("mid_density").b.mean == pytest.approx(np.mean(md_b), abs=1e-9)
    assert cmp.row("density_difference").b.mean == pytest.approx(2.0 * (x[high - 1] - x[low - 1]), abs=1e-9)
