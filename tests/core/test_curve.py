"""Characteristic curve figures: hand-worked strips, standard definitions, model films."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from stripscan.core.curve import (
    CharacteristicCurve,
    FigureSettings,
    compute_figures,
    relative_speed_percent,
    step_log_exposures,
)
from stripscan.sim.objects import FilmModel


def figures(log_e, od, **kwargs):
    usable = kwargs.pop("usable", [True] * len(od))
    return compute_figures(log_e, od, usable, **kwargs)


def test_step_increment_is_log10_root_two():
    # common practice: a sqrt(2) tablet steps by log10 sqrt(2) = 0.1505, quoted as 0.15
    assert math.log10(math.sqrt(2)) == pytest.approx(0.15, abs=0.001)
    np.testing.assert_allclose(step_log_exposures(21)[[0, 1, 20]], [0.0, 0.15, 3.0])
    assert np.diff(step_log_exposures(21)).min() == pytest.approx(0.15)


def test_hand_worked_straight_line_strip():
    # A strip without toe or shoulder: D = 0.20 + 2.0 log E at 21 steps of 0.15.
    # Base+fog 0.20 (read beside the steps).  By hand:
    #   net 0.25 at log E 0.125, net 1.00 at 0.500, net 2.00 at 1.000
    #   average gradient (ISO 9236-1) = (2.00 - 0.25) / (1.000 - 0.125) = 2.000
    #   latitude = 1.000 - 0.125 = 0.875 log E; gamma = 2.0 everywhere
    #   step densities 0.2, 0.5, 0.8, 1.1, 1.4, ...: closest to 1.20 is step 4 (1.1);
    #   closest to 2.20 is step 8 (2.3, 0.1 away, vs step 7 at 2.0); closest to 0.45 is
    #   step 2 (0.5); density difference = 2.3 - 0.5 = 1.8 (common practice rule)
    log_e = step_log_exposures(21)
    od = 0.20 + 2.0 * log_e
    f = figures(log_e, od, base_fog=0.20)
    assert f.speed_log_exposure == pytest.approx(0.5, abs=1e-9)
    assert f.gradient_low_log_exposure == pytest.approx(0.125, abs=1e-9)
    assert f.gradient_high_log_exposure == pytest.approx(1.0, abs=1e-9)
    assert f.average_gradient == pytest.approx(2.0, abs=1e-6)
    assert f.latitude_log_exposure == pytest.approx(0.875, abs=1e-9)
    assert f.gamma == pytest.approx(2.0, abs=1e-6)
    assert (f.mid_density_step, f.mid_density) == (4, pytest.approx(1.1))
    assert (f.dd_high_step, f.dd_low_step) == (8, 2)
    assert f.density_difference == pytest.approx(1.8)
    assert f.dmax == pytest.approx(6.2)


def test_bounded_density_difference_rule():
    # Same strip; bounded rule (some QC procedures, from memory): high step closest to 2.20 -> step 8
    # (2.3); low step the lightest not below 0.45 -> step 2 (0.5); DD = 1.8.
    log_e = step_log_exposures(21)
    f = figures(log_e, 0.20 + 2.0 * log_e, base_fog=0.20, settings=FigureSettings(dd_rule="bounded"))
    assert (f.dd_high_step, f.dd_low_step, f.density_difference) == (8, 2, pytest.approx(1.8))
    # Densities 0.14, 0.44, 0.74, ...: closest to 0.45 is step 2 (0.44, below it); bounded takes step 3 (0.74).
    f = figures(log_e, 0.14 + 2.0 * log_e, base_fog=0.14, settings=FigureSettings(dd_rule="bounded"))
    assert (f.dd_high_step, f.dd_low_step) == (8, 3)  # 2.24 is closest to 2.20, above it


def test_two_step_gradient_is_delta_d_over_log10_two():
    # arithmetic: with exact sqrt(2) steps, two steps span log10 2, so the gradient is
    # delta D / log10 2 = 3.3219 delta D
    increment = math.log10(math.sqrt(2))
    log_e = step_log_exposures(11, increment)
    od = 0.2 + 1.5 * log_e
    curve = CharacteristicCurve(log_e, od)
    delta_d = od[6] - od[4]
    assert (od[6] - od[4]) / (log_e[6] - log_e[4]) == pytest.approx(delta_d / math.log10(2))
    assert 1 / math.log10(2) == pytest.approx(3.3219, abs=1e-4)
    assert float(curve.gradient(log_e[5])) == pytest.approx(delta_d / math.log10(2), rel=1e-9)


def test_movable_density_points():
    log_e = step_log_exposures(21)
    od = 0.20 + 2.0 * log_e
    f = figures(log_e, od, base_fog=0.20, settings=FigureSettings(gradient_low=0.5, gradient_high=1.5))
    # (1.5 - 0.5) / (0.75 - 0.25) = 2.0 over a latitude of 0.5 log E
    assert f.average_gradient == pytest.approx(2.0) and f.latitude_log_exposure == pytest.approx(0.5)


def test_unreached_density_is_said_not_invented():
    log_e = step_log_exposures(21)
    od = np.minimum(0.20 + 2.0 * log_e, 1.70)  # never reaches net 2.00
    f = figures(log_e, od, base_fog=0.20)
    assert f.average_gradient is None and f.latitude_log_exposure is None and f.gradient_high_log_exposure is None
    # the cap's kink two steps away bends the cubic a little: 0.005 log E
    assert f.speed_log_exposure == pytest.approx(0.5, abs=0.005)
    assert any("never reach net density 2.00" in n for n in f.notes)


def test_unusable_steps_are_left_out_and_dmax_beyond_range():
    log_e = step_log_exposures(21)
    od = 0.20 + 2.0 * log_e
    usable = od <= 2.9
    f = figures(log_e, od, usable=list(usable), base_fog=0.20, beyond_range_denser=True)
    assert f.dmax is None and any("beyond the calibrated range" in n for n in f.notes)
    assert f.average_gradient == pytest.approx(2.0, abs=1e-6)


def test_missing_base_fog_is_not_stated_and_net_densities_count_from_the_lightest_step():
    log_e = step_log_exposures(21)
    f = figures(log_e, 0.30 + 2.0 * log_e, base_fog=None)
    # A base+fog that was not read is never stored as if it had been (the QC log judges it
    # against the +0.03 limit of 21 CFR 900.12(e)(1)); the net reference is said instead.
    assert f.base_fog is None and f.net_reference == pytest.approx(0.30)
    assert any("lightest step" in n and "base+fog is not stated" in n for n in f.notes)
    assert f.speed_log_exposure == pytest.approx(0.5, abs=1e-6)  # net 1.00 above 0.30 (arithmetic)


def test_iso_speed_from_air_kerma():
    # ISO 9236-1: S = K0 / K_S with K0 = 1 mGy and K_S the air kerma at net density 1.00;
    # speed 400 corresponds to K_S = 2.5 uGy (from memory, high confidence).
    log_e = step_log_exposures(21)
    od = 0.20 + 2.0 * log_e  # net 1.00 at log E 0.5
    kerma = 2.5 * 10.0 ** (log_e - 0.5)  # uGy: 2.5 uGy exactly at log E 0.5
    f = figures(log_e, od, base_fog=0.20, air_kerma_ugy=kerma)
    assert f.iso_speed == pytest.approx(400.0, rel=1e-6)


def test_relative_speed_from_a_shift():
    # arithmetic: a speed-point shift of -0.06 log E is 10**0.06 = 1.148, 14.8 % faster
    assert relative_speed_percent(-0.06) == pytest.approx(14.8, abs=0.05)
    assert relative_speed_percent(0.0) == 0.0
    log_e = step_log_exposures(21)
    f = figures(log_e, 0.20 + 2.0 * log_e, base_fog=0.20,
                settings=FigureSettings(reference_speed_log_exposure=0.56))
    assert f.relative_speed_percent == pytest.approx(14.8, abs=0.05)


MODEL_FILMS = [
    FilmModel(),
    FilmModel(base_fog=0.22, dmax=3.3, log_e_mid=1.3, slope=3.5, asymmetry=1.2),
    FilmModel(base_fog=0.16, dmax=4.0, log_e_mid=1.9, slope=7.5, asymmetry=0.45),
]


@pytest.mark.parametrize("film", MODEL_FILMS)
def test_figures_of_noiseless_model_films(film):
    # The continuous model's figures follow the ISO 9236-1 definitions exactly; sampled
    # at 0.15 log E steps the curve must give them back closely.
    log_e = step_log_exposures(21)
    truth = film.truth()
    f = figures(log_e, film.density(log_e), base_fog=film.base_fog)
    assert f.speed_log_exposure == pytest.approx(truth["speed_log_exposure"], abs=0.005)
    assert f.average_gradient == pytest.approx(truth["average_gradient"], rel=0.01)
    assert f.gamma == pytest.approx(truth["gamma"], rel=0.02)
    assert f.gamma_log_exposure == pytest.approx(truth["gamma_log_exposure"], abs=0.05)
    assert f.latitude_log_exposure == pytest.approx(truth["latitude_log_exposure"], abs=0.01)


def test_exposure_table_must_match_and_increase():
    with pytest.raises(ValueError, match="3 entries for 4 steps"):
        step_log_exposures(4, table=[0, 0.1, 0.2])
    with pytest.raises(ValueError, match="increase"):
        step_log_exposures(3, table=[0, 0.2, 0.1])


@settings(max_examples=150, deadline=None)
@given(
    st.lists(st.floats(min_value=0.0, max_value=0.6), min_size=3, max_size=21),
    st.floats(min_value=0.05, max_value=0.4),
)
def test_any_monotone_strip_gives_finite_figures_or_says_not_reached(increments, base_fog):
    od = base_fog + np.cumsum(increments)
    log_e = step_log_exposures(len(od))
    f = figures(log_e, od, base_fog=base_fog)
    for name in ("speed_log_exposure", "average_gradient", "gamma", "latitude_log_exposure", "dmax",
                 "mid_density", "density_difference"):
        value = getattr(f, name)
        assert value is None or math.isfinite(value)
    net_top = od.max() - base_fog
    missing = f.gradient_low_log_exposure is None or f.gradient_high_log_exposure is None
    assert (f.average_gradient is None) == missing
    if net_top < 2.0 - 1e-9:
        assert f.average_gradient is None and any("net density 2.00" in n for n in f.notes)
    if f.average_gradient is not None:
        assert f.average_gradient > 0 and f.latitude_log_exposure > 0
    if net_top < 1.0:
        assert f.speed_log_exposure is None and any("speed point" in n for n in f.notes)
    else:
        assert f.speed_log_exposure is not None
    if f.gamma is not None:
        assert f.gamma >= -1e-9
