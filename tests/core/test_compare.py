"""Lot comparison: replicate statistics checked against scipy, arithmetic and simulated ground truth."""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from scipy import stats

from stripscan.core.compare.comparison import Comparison, compare_sets
from stripscan.core.compare.sets import CompareError, StripSet
from stripscan.core.compare.statistics import judge, welch_interval
from stripscan.core.compare.table import DEFAULT_TOLERANCES, Tolerance
from stripscan.core.curve import relative_speed_percent
from stripscan.core.pipeline import analyze_scan
from stripscan.core.reading import AnalysisOptions
from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec

DPI = 120.0
SCANNER = ScannerModel(bits=16, encoding="linear", channels=1, noise_sd=0.0008, seed=21)
# Lot B is lot A moved 0.06 log E towards less exposure: a faster film, same shape.
FILM_A = FilmModel(base_fog=0.19, dmax=3.6, log_e_mid=1.62, slope=5.0, asymmetry=0.7)
FILM_B = dataclasses.replace(FILM_A, log_e_mid=FILM_A.log_e_mid - 0.06)
SHIFT = -0.06


def _strips(film: FilmModel, seed: int, n: int = 4) -> list[StripSpec]:
    rng = np.random.default_rng(seed)
    # Small strip-to-strip scatter, as in one exposure and processing run.
    return [
        StripSpec(film=dataclasses.replace(film, log_e_mid=film.log_e_mid + float(rng.normal(0, 0.005)),
                                           base_fog=film.base_fog + float(rng.normal(0, 0.002))),
                  center_mm=(25.0 + 40.0 * k, 100.0), angle_deg=90.0)
        for k in range(n)
    ]


@pytest.fixture(scope="module")
def lots(bench):
    calibration = bench.calibration(SCANNER, DPI)
    out = {}
    for name, film, seed in (("lot:M-2610-A", FILM_A, 1), ("lot:M-2702-B", FILM_B, 2)):
        specs = _strips(film, seed)
        path, sim = bench.scan(specs, scanner=dataclasses.replace(SCANNER, seed=seed), dpi=DPI,
                               platen_mm=(45.0 + 40.0 * (len(specs) - 1), 200.0))
        analysis = analyze_scan(path, calibration=calibration)
        assert len(analysis.strips) == len(specs)
        out[name] = (StripSet(name, analysis.strips, source=str(path)), specs, sim)
    return out


@pytest.fixture(scope="module")
def comparison(lots) -> Comparison:
    (result,) = compare_sets([lots["lot:M-2610-A"][0], lots["lot:M-2702-B"][0]])
    return result


# ------------------------------------------------------------------ statistics


@pytest.mark.parametrize("n_a, n_b, seed", [(2, 2, 0), (3, 5, 1), (5, 5, 2), (8, 3, 3)])
def test_welch_interval_matches_scipy(n_a, n_b, seed):
    rng = np.random.default_rng(seed)
    a, b = rng.normal(1.55, 0.01, n_a), rng.normal(1.49, 0.03, n_b)
    ours = welch_interval(a, b)
    # Reference: scipy.stats.ttest_ind(equal_var=False), Welch's t, interval of mean(b) - mean(a).
    ref = stats.ttest_ind(b, a, equal_var=False)
    ci = ref.confidence_interval(confidence_level=0.95)
    assert ours.difference == pytest.approx(b.mean() - a.mean(), abs=1e-12)
    assert (ours.low, ours.high) == pytest.approx((ci.low, ci.high), abs=1e-12)
    assert ours.df == pytest.approx(ref.df, rel=1e-12)
    # Reference: scipy.stats.t quantile with the Welch-Satterthwaite df.
    half = stats.t.ppf(0.975, ref.df) * math.sqrt(a.var(ddof=1) / n_a + b.var(ddof=1) / n_b)
    assert ours.high - ours.difference == pytest.approx(half, rel=1e-12)


def test_welch_interval_needs_two_strips_per_set():
    assert welch_interval([1.5], [1.4, 1.45]) is None
    assert welch_interval([1.5, 1.52], [1.4]) is None
    flat = welch_interval([1.5, 1.5], [1.4, 1.4])
    assert (flat.low, flat.high, flat.df) == (pytest.approx(-0.1), pytest.approx(-0.1), None)


def test_interval_covers_the_true_difference_about_95_percent_of_the_time():
    # 2000 simulated pairs of n = 5 normal samples with unequal spreads.
    rng = np.random.default_rng(20261120)
    true_difference = 0.04
    hits = 0
    for _ in range(2000):
        a = rng.normal(1.00, 0.010, 5)
        b = rng.normal(1.00 + true_difference, 0.025, 5)
        interval = welch_interval(a, b)
        hits += interval.low <= true_difference <= interval.high
    coverage = hits / 2000
    # A 95 % interval: binomial sd of the rate is 0.005 over 2000 repeats.
    assert 0.93 <= coverage <= 0.97, coverage


def test_relative_speed_arithmetic():
    # Arithmetic: a shift of -0.06 log E is 10^0.06 = 1.148, i.e. 14.8 % faster.
    assert relative_speed_percent(-0.06) == pytest.approx(14.8, abs=0.05)
    assert 10 ** 0.06 == pytest.approx(1.148, abs=5e-4)
    # Arithmetic: +0.05 log E is 1 / 10^0.05 = 0.891, 10.9 % slower.
    assert relative_speed_percent(0.05) == pytest.approx(-10.9, abs=0.05)


@pytest.mark.parametrize("interval, bounds, expected", [
    ((-0.02, 0.03), (-0.05, 0.05), "same"),
    ((-0.05, 0.05), (-0.05, 0.05), "same"),      # touching the limit counts as inside
    ((-0.09, -0.06), (-0.05, 0.05), "differs"),
    ((0.051, 0.08), (-0.05, 0.05), "differs"),
    ((-0.07, -0.03), (-0.05, 0.05), "unclear"),
    ((-0.30, -0.20), (-math.inf, 0.03), "same"),  # a lower base+fog is never a fault
    ((0.01, 0.05), (-math.inf, 0.03), "unclear"),
])
def test_verdict_puts_the_whole_interval_against_the_tolerance(interval, bounds, expected):
    assert judge(sum(interval) / 2, interval, bounds) == expected


def test_verdict_without_interval_or_tolerance():
    assert judge(0.01, None, (-0.05, 0.05), single=True) == "single"
    assert judge(0.01, (0.0, 0.02), None) == "no_tolerance"
    assert judge(None, None, (-0.05, 0.05)) == "missing"


def test_tolerance_words_and_bounds():
    assert Tolerance.parse("5%").bounds(3.8) == pytest.approx((-0.19, 0.19))
    rise = Tolerance.parse("+0.03")
    assert rise.rise_only and rise.bounds(None) == (-math.inf, 0.03)
    assert Tolerance.parse("0.05").text() == "±0.05"
    assert Tolerance.parse("5%").bounds(None) is None
    with pytest.raises(ValueError, match="'fast' is not a number"):
        Tolerance.parse("fast")
    with pytest.raises(ValueError, match="positive"):
        Tolerance(-0.1)
    # 21 CFR 900.12(e)(1): base+fog may rise 0.03; mid-density and density difference ±0.15.
    assert DEFAULT_TOLERANCES["base_fog"].bounds(0.19) == (-math.inf, 0.03)
    assert DEFAULT_TOLERANCES["mid_density"].bounds(1.2) == (-0.15, 0.15)
    assert DEFAULT_TOLERANCES["density_difference"].bounds(1.9) == (-0.15, 0.15)


# ------------------------------------------------------------------ simulated lots


def test_known_speed_shift_is_recovered(comparison, lots):
    row = comparison.row("speed_log_exposure")
    # Simulation truth: lot B's film model is lot A's moved by -0.06 log E.
    assert row.difference == pytest.approx(SHIFT, abs=0.01)
    truth = {name: np.mean([t["figures"]["speed_log_exposure"] for t in sim.truth])
             for name, (_, _, sim) in lots.items()}
    assert row.difference == pytest.approx(truth["lot:M-2702-B"] - truth["lot:M-2610-A"], abs=0.01)
    assert row.a.n == row.b.n == 4
    assert row.ci95[0] < row.difference < row.ci95[1]
    # The horizontal shift at net density 1.00 is the speed-point shift itself.
    assert comparison.shift_at(1.00) == pytest.approx(row.difference, abs=1e-6)
    # A pure shift moves the curve the same along log E at every density (truth: same film shape).
    for net in (0.5, 1.5):
        assert comparison.shift_at(net) == pytest.approx(SHIFT, abs=0.015)


def test_relative_speed_row_follows_the_speed_shift(comparison):
    speed, rel = comparison.row("speed_log_exposure"), comparison.row("relative_speed_percent")
    # Arithmetic: 100 * (10^(-Δ) - 1); positive = B faster.  About +14.8 % for -0.06.
    assert rel.difference == pytest.approx(100 * (10 ** -speed.difference - 1), rel=1e-9)
    assert rel.difference > 0
    assert rel.ci95 == pytest.approx((100 * (10 ** -speed.ci95[1] - 1), 100 * (10 ** -speed.ci95[0] - 1)))
    assert rel.a.mean == 0.0 and rel.b.mean - rel.a.mean == rel.difference
    assert rel.verdict == speed.verdict


def test_density_difference_curve_matches_the_shifted_film(comparison, lots):
    x, da, sd = comparison.a.density_curve.arrays()
    ddiff = np.asarray(comparison.delta_density)
    ok = np.isfinite(ddiff)
    assert ok.sum() > 50
    # Simulation truth: D_B(x) = D_A(x + 0.06) for the nominal films.
    expected = FILM_A.density(x[ok] - SHIFT) - FILM_A.density(x[ok])
    # Each mean curve reads within about ±0.02 OD, plus the lots' drawn scatter.
    assert np.max(np.abs(ddiff[ok] - expected)) < 0.05
    # The mean curve follows the strips' true densities; the ±1 sd band is their spread.
    specs = lots["lot:M-2610-A"][1]
    truth = np.array([s.film.density(x[np.isfinite(da)]) for s in specs])
    assert np.max(np.abs(da[np.isfinite(da)] - truth.mean(axis=0))) < 0.03
    assert np.nanmax(sd) < 0.06


def test_mid_density_and_density_difference_use_the_same_steps_on_every_strip(comparison, lots):
    steps = comparison.qc_steps
    a_set = lots["lot:M-2610-A"][0]
    mean_od = np.mean([[st.od for st in s.steps] for s in a_set.strips], axis=0)
    usable = np.all([[st.in_range for st in s.steps] for s in a_set.strips], axis=0)
    # Common practice: mid-density at the step closest to 1.20 OD, density difference
    # between the steps closest to 2.20 and 0.45 (here on set A's mean densities).
    for step, target in ((steps.mid_step, 1.20), (steps.dd_high_step, 2.20), (steps.dd_low_step, 0.45)):
        assert step == 1 + int(np.argmin(np.where(usable, np.abs(mean_od - target), np.inf)))
    for name, row_set in (("lot:M-2610-A", comparison.a), ("lot:M-2702-B", comparison.b)):
        strips = lots[name][0].strips
        mids = [s.steps[steps.mid_step - 1].od for s in strips]
        dds = [s.steps[steps.dd_high_step - 1].od - s.steps[steps.dd_low_step - 1].od for s in strips]
        assert row_set.figures["mid_density"].values == pytest.approx(mids)
        assert row_set.figures["density_difference"].values == pytest.approx(dds, abs=1e-6)


def test_table_has_every_figure_with_a_verdict(comparison):
    figures = [r.figure for r in comparison.rows]
    assert figures == ["base_fog", "speed_log_exposure", "relative_speed_percent", "average_gradient", "gamma",
                       "dmax", "latitude_log_exposure", "mid_density", "density_difference"]
    # The 0.06 shift is beyond the ±0.05 speed tolerance, the gradients are the same film's.
    assert comparison.row("speed_log_exposure").verdict in ("differs", "unclear")
    assert comparison.row("average_gradient").verdict == "same"
    assert comparison.row("gamma").verdict == "no_tolerance"
    for row in comparison.rows:
        cells = row.cells()
        assert cells["verdict"] == row.verdict_text


def test_json_round_trip(comparison):
    data = comparison.to_dict()
    text = json.dumps(data, allow_nan=False)
    again = Comparison.from_dict(json.loads(text))
    assert again.to_dict() == data
    assert data["differences"]["speed_log_exposure"]["difference"] == pytest.approx(
        data["differences"]["speed_log_exposure"]["b"] - data["differences"]["speed_log_exposure"]["a"], abs=2e-6)


def test_three_sets_each_against_the_first(lots):
    a, b = lots["lot:M-2610-A"][0], lots["lot:M-2702-B"][0]
    two = StripSet("first two of B", b.strips[:2])
    results = compare_sets([a, b, two])
    assert [(c.a.name, c.b.name) for c in results] == [(a.name, b.name), (a.name, two.name)]
    assert results[1].row("speed_log_exposure").b.n == 2


def test_single_strip_gives_no_interval_and_says_so(lots):
    a, b = lots["lot:M-2610-A"][0], lots["lot:M-2702-B"][0]
    (result,) = compare_sets([a, StripSet("one strip", b.strips[:1])])
    row = result.row("speed_log_exposure")
    assert row.interval is None and row.verdict == "single"
    assert row.difference == pytest.approx(b.strips[0].figures.speed_log_exposure - row.a.mean)
    assert any("single strip" in n and "no interval" in n for n in result.notes)


# ------------------------------------------------------------------ bad input


def _unreadable(strip):
    return dataclasses.replace(strip, steps=tuple(dataclasses.replace(s, in_range=False) for s in strip.steps))


def test_set_with_no_readable_strip_is_named(lots):
    a, b = lots["lot:M-2610-A"][0], lots["lot:M-2702-B"][0]
    dead = StripSet("scan:fogged.tif", tuple(_unreadable(s) for s in b.strips[:2]))
    with pytest.raises(CompareError, match=r"set 'scan:fogged.tif': no readable strip \(strip 1: fewer than two"):
        compare_sets([a, dead])


def test_unreadable_strips_are_left_out_with_a_note(lots):
    a, b = lots["lot:M-2610-A"][0], lots["lot:M-2702-B"][0]
    mixed = StripSet("mixed", (*b.strips[:3], _unreadable(b.strips[3])))
    (result,) = compare_sets([a, mixed])
    assert result.b.n == 3
    assert any("strip 4: fewer than two usable steps; left out" in n for n in result.notes)


def test_sets_with_different_step_counts_are_refused(bench, lots):
    calibration = bench.calibration(SCANNER, DPI)
    eleven = StripSpec(film=FILM_A, n_steps=11, increment=0.30, step_length_mm=10.0, center_mm=(25.0, 100.0),
                       angle_deg=90.0)
    path, _ = bench.scan([eleven], scanner=SCANNER, dpi=DPI, platen_mm=(50.0, 200.0))
    short = analyze_scan(path, calibration=calibration, options=AnalysisOptions(n_steps=11, increment=0.30))
    with pytest.raises(CompareError, match=r"set 'eleven' has 11-step strips but set 'lot:M-2610-A' has 21-step"):
        compare_sets([lots["lot:M-2610-A"][0], StripSet("eleven", short.strips)])
    with pytest.raises(CompareError, match=r"set 'both' mixes strips of 11 and 21 steps"):
        compare_sets([lots["lot:M-2610-A"][0], StripSet("both", (*short.strips, lots["lot:M-2702-B"][0].strips[0]))])


def test_other_bad_input(lots):
    a = lots["lot:M-2610-A"][0]
    with pytest.raises(CompareError, match="at least two sets"):
        compare_sets([a])
    with pytest.raises(CompareError, match="set 'empty' holds no strips"):
        compare_sets([a, StripSet("empty", ())])
    with pytest.raises(CompareError, match="both named 'lot:M-2610-A'"):
        compare_sets([a, a])
    with pytest.raises(CompareError, match="no tolerance can be set for speed"):
        compare_sets([a, lots["lot:M-2702-B"][0]], tolerances={"speed": Tolerance(0.05)})
