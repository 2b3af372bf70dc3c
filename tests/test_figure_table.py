"""The one table of figure names, units and definitions that the window, the reports and the CSV share."""

from __future__ import annotations

import dataclasses
import math

import pytest

from stripscan.archive.records import FIGURE_UNITS, FIGURES
from stripscan.core.figure_settings import FigureSettings
from stripscan.core.records import CurveFigures, StepDensity
from stripscan.core.figures import (ABOVE_RANGE, FIGURE_COLUMNS, FIGURE_KEYS, NO_VALUE, NOT_REACHED, figure_rows,
                                    format_value, step_flag)


def figures(**changes) -> CurveFigures:
    """Figures of a plain strip read at the default targets; ``changes`` replace fields."""
    base = CurveFigures(
        base_fog=0.19, dmax=3.4, speed_log_exposure=1.5012, average_gradient=3.0456,
        gradient_low_log_exposure=1.2, gradient_high_log_exposure=1.7903, gamma=4.5, gamma_log_exposure=1.55,
        latitude_log_exposure=0.5903, mid_density_step=11, mid_density=1.234, density_difference=1.9,
        dd_high_step=13, dd_low_step=9, settings=FigureSettings().to_dict(),
    )
    return dataclasses.replace(base, **changes)


def by_key(rows) -> dict:
    return {row.key: row for row in rows}


def test_definitions_state_the_iso_9236_1_net_densities_from_the_settings():
    rows = by_key(figure_rows(figures()))
    # ISO 9236-1: speed point at net density 1.00; average gradient between net densities 0.25 and 2.00
    assert "base+fog + 1.00" in rows["speed_log_exposure"].definition
    assert "net densities 0.25 and 2.00 (ISO 9236-1)" in rows["average_gradient"].definition
    assert "net densities 0.25 and 2.00" in rows["latitude_log_exposure"].definition
    # common practice: mid-density near 1.20 OD, density difference between the steps near 2.20 and 0.45 OD
    assert "closest to 1.20 OD (step 11)" in rows["mid_density"].definition
    assert "closest to 2.20 OD minus step closest to 0.45 OD (step 13 \u2212 step 9)" in \
        rows["density_difference"].definition


def test_other_targets_are_stated_as_used_beside_the_standard():
    settings = dataclasses.replace(FigureSettings(), gradient_low=0.60, gradient_high=1.70, mid_density_target=1.0)
    rows = by_key(figure_rows(figures(settings=settings.to_dict()), keys=FIGURE_KEYS))
    # ISO 9236-1's levels are 0.25 and 2.00 (from memory); these figures were read elsewhere.
    assert "net densities 0.60 and 1.70 (ISO 9236-1 uses 0.25 and 2.00)" in rows["average_gradient"].definition
    assert rows["gradient_low_log_exposure"].label == "Log E at net 0.60"
    assert rows["gradient_high_log_exposure"].label == "Log E at net 1.70"
    assert "closest to 1.00 OD" in rows["mid_density"].definition
    # With no strip, the caller's levels are named.
    empty = by_key(figure_rows(None, keys=FIGURE_KEYS, settings={"gradient_low": 0.5, "gradient_high": 1.5}))
    assert empty["gradient_low_log_exposure"].label == "Log E at net 0.50"
    assert all(row.text == NO_VALUE for row in empty.values())


@pytest.mark.parametrize("missing", [None, math.nan, math.inf])  # IEEE 754 non-numbers via Python's math
def test_a_figure_that_was_not_read_prints_not_reached(missing):
    assert format_value(missing, 2) == NOT_REACHED == "not reached"  # common practice: say it, never print 0
    rows = by_key(figure_rows(figures(speed_log_exposure=missing)))
    assert rows["speed_log_exposure"].text == NOT_REACHED
    assert rows["speed_log_exposure"].value is missing


def test_values_are_rounded_to_the_figures_precision():
    rows = by_key(figure_rows(figures(relative_speed_percent=12.34, iso_speed=401.6)))
    # Python's format rounds half to even on the binary value; these values are far from a tie.
    assert rows["base_fog"].text == "0.190"
    assert rows["speed_log_exposure"].text == "1.501"
    assert rows["average_gradient"].text == "3.05"
    assert rows["mid_density"].text == "1.23"
    assert rows["iso_speed"].text == "402"
    assert rows["relative_speed_percent"].text == "+12.3"  # common practice: + is faster
    assert format_value(-12.34, 1, signed=True) == "-12.3"


def test_dmax_above_the_calibrated_range_says_so():
    above = figures(dmax=None, notes=("Dmax is beyond the calibrated range (above 3.05)",))
    row = by_key(figure_rows(above))["dmax"]
    assert row.text == ABOVE_RANGE and "denser than that range" in row.definition
    # Other notes do not make a missing Dmax "above range".
    other = by_key(figure_rows(figures(dmax=None, notes=("speed point: not reached",))))["dmax"]
    assert other.text == NOT_REACHED and "denser" not in other.definition


def test_the_two_unit_styles():
    long = by_key(figure_rows(figures(), keys=FIGURE_KEYS))
    short = by_key(figure_rows(figures(), keys=FIGURE_KEYS, units="short"))
    # The archive's CSV headers name the long units; the reports and exports must agree with them.
    for key, unit in FIGURE_UNITS.items():
        assert long[key].unit == unit
    assert dict(FIGURE_COLUMNS)["gamma_log_exposure"] == "log10 rel. exposure"
    # common practice: OD for optical density, log E for log10 relative exposure.
    assert {short[k].unit for k in ("base_fog", "dmax", "mid_density", "density_difference")} == {"OD"}
    assert {short[k].unit for k in ("speed_log_exposure", "latitude_log_exposure", "gamma_log_exposure")} == {"log E"}
    assert short["average_gradient"].unit == short["gamma"].unit == "OD/log E"
    # Only the units differ between the styles.
    for key in FIGURE_KEYS:
        assert dataclasses.replace(short[key], unit=long[key].unit) == long[key]


def test_reports_print_the_archive_figures_and_the_optional_ones_only_when_computed():
    assert [row.key for row in figure_rows(figures())] == list(FIGURES)  # the archive's order
    rows = figure_rows(figures(iso_speed=400.0))
    assert [row.key for row in rows] == [*FIGURES, "iso_speed"]
    shown = by_key(figure_rows(figures(), keys=FIGURE_KEYS))
    assert shown["iso_speed"].text == NO_VALUE  # not asked for: no air kerma per step
    # The CSV keeps the archive's figures first, then ISO speed, relative speed and the detail.
    assert [key for key, _ in FIGURE_COLUMNS[:len(FIGURES)]] == list(FIGURES)
    assert sorted(key for key, _ in FIGURE_COLUMNS[:len(FIGURE_KEYS)]) == sorted(FIGURE_KEYS)


def step(number: int, od: float, *, in_range: bool = True, excluded: bool = False) -> StepDensity:
    return StepDensity(step=number, log_exposure=0.15 * (number - 1), od=od, od_sd=0.002, pixels=400,
                       in_range=in_range, center_rc=(0.0, 0.0), excluded=excluded)


def test_step_flags_say_why_a_step_is_off_the_curve_and_mark_the_qc_steps():
    f = figures()
    assert step_flag(step(3, 0.2, excluded=True), f) == "excluded"
    assert step_flag(step(21, math.nan, in_range=False), f) == "not read"
    assert step_flag(step(20, 3.4, in_range=False), f) == "not used"
    # The reading's own reason follows, in the table's short words.
    flagged = dataclasses.replace(step(20, 3.4, in_range=False), flag="stray_light")
    assert step_flag(flagged, f) == "not used: stray light"
    assert step_flag(dataclasses.replace(flagged, flag="too_noisy"), f) == "not used: too noisy"
    # common practice: the mid-density (MD) step and the two density difference (DD) steps are marked
    assert step_flag(step(11, 1.23), f) == "MD"
    assert step_flag(step(13, 2.2), f) == "DD high"
    assert step_flag(step(9, 0.45), f) == "DD low"
    assert step_flag(step(5, 0.2), f) == step_flag(step(11, 1.23)) == ""
