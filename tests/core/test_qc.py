"""Tests for daily processor QC and QC-film crossover (stripscan.core.qc).

Invented scenario: the breast imaging unit of Larkspur Hill Clinic runs one
QC strip a day through its "processor 2", starting Monday 3 March 2025.
"""

from __future__ import annotations

import datetime
import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from stripscan import CAUTION
from stripscan.core.qc.crossover import crossover
from stripscan.core.qc.levels import choose_qc_steps, establish_levels, qc_values_from_steps
from stripscan.core.qc.records import (
    CrossoverResult,
    OperatingLevels,
    ProcessorStatus,
    QCEntry,
    QCEvent,
    QCLimits,
    QCSteps,
    QCValues,
    TrendFinding,
    TrendRules,
)
from stripscan.core.qc.rules import TREND_DEAD_BAND, apply_trend_rules, evaluate_day
from stripscan.core.qc.status import ADVICE, QCLog

START = datetime.date(2025, 3, 3)


def day(n: int) -> datetime.date:
    return START + datetime.timedelta(days=n)


def entry(n: int, bf: float = 0.18, md: float = 1.20, dd: float = 1.80, **kw) -> QCEntry:
    return QCEntry(day(n), QCValues(bf, md, dd), kw.pop("source", "scan"), **kw)


LEVELS = OperatingLevels(
    base_fog=0.18, mid_density=1.20, density_difference=1.80,
    established=day(4), n_days=5, reason="initial baseline",
)


def verdict_of(bf: float = 0.18, md: float = 1.20, dd: float = 1.80, **limits) -> str:
    return evaluate_day(QCValues(bf, md, dd), LEVELS, QCLimits(**limits)).verdict


# --------------------------------------------------------------------------
# Control limits and warning tier


@pytest.mark.parametrize(
    "md, expected",
    [
        (1.35, "warning"),  # +0.150: on the control limit, so within it
        (1.351, "action"),  # +0.151: past it
        (1.05, "warning"),  # -0.150
        (1.049, "action"),  # -0.151
        (1.30, "ok"),  # +0.100: on the warning tier
        (1.301, "warning"),
        (1.10, "ok"),
        (1.099, "warning"),
    ],
)
def test_mid_density_limits(md, expected):
    # 21 CFR 900.12(e)(1): mid-density within ±0.15 of its operating level;
    # ±0.10 warning tier: common practice in mammography QC, from memory.
    assert verdict_of(md=md) == expected


@pytest.mark.parametrize(
    "dd, expected",
    [(1.95, "warning"), (1.951, "action"), (1.65, "warning"), (1.649, "action"),
     (1.90, "ok"), (1.901, "warning"), (1.70, "ok"), (1.699, "warning")],
)
def test_density_difference_limits(dd, expected):
    # 21 CFR 900.12(e)(1): density difference within ±0.15; warning ±0.10
    # (common practice, from memory).
    assert verdict_of(dd=dd) == expected


@pytest.mark.parametrize(
    "bf, expected",
    [(0.21, "ok"), (0.211, "action"), (0.05, "ok")],  # a fall is never a fault
)
def test_base_fog_limit_is_one_sided(bf, expected):
    # 21 CFR 900.12(e)(1): base+fog no more than +0.03 above its operating level.
    assert verdict_of(bf=bf) == expected


@pytest.mark.parametrize("bf, expected", [(0.20, "ok"), (0.201, "warning"), (0.21, "warning"), (0.211, "action")])
def test_base_fog_warning_tier_when_the_site_sets_one(bf, expected):
    # 21 CFR 900.12(e)(1) for the +0.03 action limit; the +0.02 tier is a
    # site choice of the invented clinic.
    assert verdict_of(bf=bf, base_fog_warning=0.02) == expected


def test_boundaries_are_decided_in_decimal_not_binary():
    # The trap is real: in binary these differences exceed the limits.
    assert 1.35 - 1.20 == 0.15000000000000013
    assert 1.65 - 1.80 < -0.15
    assert 0.33 - 0.30 > 0.03
    levels = OperatingLevels(0.30, 1.20, 1.80, day(4), 5, "initial baseline")
    result = evaluate_day(QCValues(0.33, 1.35, 1.65), levels)
    assert result.deviations == QCValues(0.03, 0.15, -0.15)
    # 21 CFR 900.12(e)(1): exactly 0.15 (MD, DD) and +0.03 (base+fog) are within.
    assert result.verdict == "warning"
    assert all("warning tier" in reason for reason in result.reasons)


def test_reasons_name_the_quantity_the_size_and_the_limit():
    result = evaluate_day(QCValues(0.211, 1.351, 1.80), LEVELS)
    assert result.verdict == "action"
    assert result.reasons == (
        "Base+fog is 0.031 above its operating level (beyond the control limit of +0.03).",
        "Mid-density is 0.151 above its operating level (beyond the control limit of ±0.15).",
    )


def test_site_limits_are_configurable():
    # A site wider than 21 CFR 900.12(e)(1) is its own choice; the code must obey it.
    assert verdict_of(md=1.38, md_dd_action=0.20, md_dd_warning=None) == "ok"
    assert verdict_of(md=1.401, md_dd_action=0.20, md_dd_warning=None) == "action"


# --------------------------------------------------------------------------
# Choosing the steps

# Hand-made processed strip of a 21-step tablet (0.15 log E per step:
# common practice), step 1 first.
STRIP = [0.18, 0.19, 0.20, 0.22, 0.26, 0.33, 0.44, 0.58, 0.76, 0.98, 1.23,
         1.50, 1.78, 2.04, 2.27, 2.48, 2.66, 2.80, 2.91, 2.99, 3.05]


def test_closest_steps_on_a_21_step_strip():
    # common practice: MD = step closest to 1.20 -> step 11 (1.23, 0.03 off;
    # step 10 is 0.22 off); DD high closest to 2.20 -> step 15 (2.27, 0.07 off;
    # step 14 is 0.16 off); DD low closest to 0.45 -> step 7 (0.44).
    assert choose_qc_steps(STRIP) == QCSteps(mid_step=11, dd_high_step=15, dd_low_step=7)


def test_bounded_steps_on_a_21_step_strip():
    # Some procedures (from memory): DD high still the closest to 2.20 -> step 15
    # (2.27; no cap at 2.20); lightest not below 0.45 -> step 8 (0.58, where the
    # closest is step 7, 0.44). MD stays step 11.
    assert choose_qc_steps(STRIP, rule="bounded") == QCSteps(11, 15, 8)


def test_bounded_steps_include_a_density_exactly_on_the_bound():
    strip = list(STRIP)
    strip[14], strip[6] = 2.20, 0.45  # steps 15 and 7 exactly on the bounds
    assert choose_qc_steps(strip, rule="bounded") == QCSteps(11, 15, 7)


def test_decimal_tie_goes_to_the_lower_step():
    strip = list(STRIP)
    strip[9], strip[10] = 1.05, 1.35  # both 0.15 from 1.20 in decimal terms
    assert abs(1.05 - 1.20) != abs(1.35 - 1.20)  # but not in binary
    assert choose_qc_steps(strip).mid_step == 10


def test_unread_steps_are_never_chosen():
    strip = list(STRIP)
    strip[10] = float("nan")  # step 11 (1.23) out of the calibrated range
    assert choose_qc_steps(strip).mid_step == 10  # 0.98 is the next closest


def test_qc_values_read_the_chosen_steps():
    values = qc_values_from_steps(STRIP, QCSteps(11, 15, 7), base_fog=0.18)
    # MD = step 11 = 1.23; DD = 2.27 - 0.44 = 1.83
    assert values == QCValues(0.18, 1.23, 1.83)


@pytest.mark.parametrize(
    "densities, kwargs, match",
    [
        (STRIP, {"rule": "nearest"}, "unknown step rule 'nearest'"),
        ([], {}, "at least 2 readable steps"),
        ([0.2, float("inf")], {}, "step 2 is infinite"),
        ([0.1, 0.2, 0.3], {"rule": "bounded"}, "no step has a density at or above 0.45"),
        ([2.3, 2.5, 2.7], {"rule": "bounded"}, "cannot form a density difference"),
        (STRIP[::-1], {}, "cannot form a density difference"),
    ],
)
def test_step_choice_rejects_bad_input(densities, kwargs, match):
    with pytest.raises(ValueError, match=match):
        choose_qc_steps(densities, **kwargs)


def test_qc_values_reject_a_step_beyond_the_strip():
    with pytest.raises(ValueError, match="dd_high_step 15 is beyond the strip's 11 steps"):
        qc_values_from_steps(STRIP[:11], QCSteps(11, 15, 7), base_fog=0.18)


# --------------------------------------------------------------------------
# Operating levels

BASELINE = [
    entry(0, bf=0.18, md=1.19, dd=1.80),
    entry(1, bf=0.19, md=1.21, dd=1.83),
    entry(2, bf=0.18, md=1.20, dd=1.81),
    entry(3, bf=0.18, md=1.22, dd=1.79),
    entry(4, bf=0.17, md=1.23, dd=1.82),
]


def test_levels_are_the_mean_of_the_first_five_days():
    # common practice (FDA guidance for MQSA): mean of 5 days. By hand:
    # BF (0.18+0.19+0.18+0.18+0.17)/5 = 0.90/5 = 0.18
    # MD (1.19+1.21+1.20+1.22+1.23)/5 = 6.05/5 = 1.21
    # DD (1.80+1.83+1.81+1.79+1.82)/5 = 9.05/5 = 1.81
    # A sixth day (MD 1.50) must not count.
    levels = establish_levels([*BASELINE, entry(5, md=1.50)])
    assert (levels.base_fog, levels.mid_density, levels.density_difference) == (0.18, 1.21, 1.81)
    assert levels.established == day(4)
    assert levels.n_days == 5


def test_levels_over_another_number_of_days():
    # (1.19 + 1.21 + 1.20) / 3 = 1.20
    assert establish_levels(BASELINE, n_days=3).mid_density == 1.20


def test_too_few_or_no_baseline_days_is_an_error():
    with pytest.raises(ValueError, match="need 5 days to establish operating levels, have 3"):
        establish_levels(BASELINE[:3])
    with pytest.raises(ValueError, match="empty baseline"):
        establish_levels([])


# --------------------------------------------------------------------------
# Trend rules


def series(mds: list[float], start: int = 0, dd: float = 1.80) -> list[QCEntry]:
    return [entry(start + i, md=md, dd=dd) for i, md in enumerate(mds)]


def findings_of(mds: list[float], **rules) -> tuple[TrendFinding, ...]:
    return apply_trend_rules(series(mds), LEVELS, TrendRules(**rules))


def test_run_of_seven_on_one_side_fires():
    # common practice in control charting: 7 in a row on one side (from memory)
    (finding,) = findings_of([1.22] * 7)
    assert (finding.rule, finding.quantity) == ("run", "mid_density")
    assert finding.dates == tuple(day(i) for i in range(7))
    assert finding.message == (
        "Mid-density was above its operating level on 7 strips in a row (2025-03-03 to 2025-03-09)."
    )


def test_run_of_six_or_broken_by_a_strip_on_the_level_is_silent():
    assert findings_of([1.22] * 6) == ()
    assert findings_of([1.22] * 3 + [1.20] + [1.22] * 3) == ()


def test_run_below_the_level():
    (finding,) = findings_of([1.17] * 8)
    assert "below its operating level on 8 strips" in finding.message


def test_base_fog_run_fires_only_upwards():
    # 21 CFR 900.12(e)(1) limits base+fog upwards only; a lower fog is no fault.
    low = [entry(i, bf=0.17) for i in range(7)]
    high = [entry(i, bf=0.19) for i in range(7)]
    assert apply_trend_rules(low, LEVELS) == ()
    (finding,) = apply_trend_rules(high, LEVELS)
    assert (finding.rule, finding.quantity) == ("run", "base_fog")
    assert finding.message.startswith("Base+fog was above")


def test_drift_of_five_fires():
    # control charting: steady rise over 5 strips (common practice, from memory)
    (finding,) = findings_of([1.16, 1.18, 1.20, 1.22, 1.24])
    assert (finding.rule, finding.quantity) == ("drift", "mid_density")
    assert finding.message == "Mid-density rose on each of 5 strips in a row (2025-03-03 to 2025-03-07)."
    (falling,) = findings_of([1.24, 1.22, 1.20, 1.18, 1.16])
    assert "fell" in falling.message


def test_drift_of_four_or_with_a_pause_is_silent():
    assert findings_of([1.18, 1.20, 1.22, 1.24]) == ()
    assert findings_of([1.16, 1.18, 1.20, 1.20, 1.22]) == ()


def test_a_deviation_smaller_than_half_a_densitometer_reading_is_on_the_level():
    # Densitometers read to 0.01 OD (common practice): a deviation under half a reading, 0.005,
    # is no side of the level, so it breaks a run; 0.005 itself is a reading away and counts.
    assert TREND_DEAD_BAND == 0.005
    assert findings_of([1.19] * 3 + [1.199] + [1.19] * 3) == ()
    assert findings_of([1.19] * 3 + [1.2049] + [1.19] * 3) == ()
    (run,) = findings_of([1.19] * 3 + [1.195] + [1.19] * 3)
    assert run.rule == "run" and len(run.dates) == 7
    # Seven strips a hair below their level are on it: no run, no warning after a repair.
    assert findings_of([1.199] * 7) == ()


def test_a_change_smaller_than_half_a_densitometer_reading_breaks_a_drift():
    # A step of 0.004 OD reads as no change on a densitometer reading to 0.01 OD (common practice).
    assert findings_of([1.16, 1.18, 1.184, 1.20, 1.22]) == ()
    (drift,) = findings_of([1.16, 1.18, 1.185, 1.20, 1.22])
    assert drift.rule == "drift" and len(drift.dates) == 5


def test_a_strip_on_its_level_after_a_repair_clears_the_run_warning():
    # Levels MD 1.21 (hand mean); seven strips 0.03 low fire the run of 7 (common practice, from memory);
    # after the repair the strip reads 1.209, on its level within half a 0.01 OD reading.
    low = series([1.18] * 7, start=5, dd=1.81)
    assert QCLog([*BASELINE, *low]).status().rules_fired == ("run:mid_density",)
    status = QCLog([*BASELINE, *low, entry(12, md=1.209, dd=1.81)]).status()
    assert status.verdict == "ok" and status.rules_fired == ()


def test_two_of_three_beyond_the_warning_tier_fires():
    # 2 of 3 past the ±0.10 tier on one side: common practice (control
    # charting zone rules), from memory. Days 1 and 3 are +0.11 and +0.12.
    (finding,) = findings_of([1.20, 1.31, 1.25, 1.32])
    assert (finding.rule, finding.quantity) == ("two_warnings", "mid_density")
    assert finding.dates == (day(1), day(3))
    assert "more than 0.10 above its operating level on 2025-03-04, 2025-03-06" in finding.message


def test_two_warnings_just_not_enough_is_silent():
    assert findings_of([1.31, 1.25, 1.25, 1.32]) == ()  # 2 of 4, not of 3
    assert findings_of([1.31, 1.09]) == ()  # opposite sides
    assert findings_of([1.30, 1.31]) == ()  # 0.10 exactly is not beyond the tier


def test_overlapping_warning_windows_make_one_finding():
    (finding,) = findings_of([1.31, 1.32, 1.25, 1.33])
    assert finding.dates == (day(0), day(1), day(3))


def test_rules_can_be_switched_off_and_resized():
    assert findings_of([1.22] * 7, rules=("drift",)) == ()
    (finding,) = findings_of([1.22] * 4, run_length=4)
    assert finding.rule == "run"


def test_unknown_trend_rule_is_an_error():
    with pytest.raises(ValueError, match="unknown trend rule 'zigzag'"):
        TrendRules(rules=("run", "zigzag"))


# --------------------------------------------------------------------------
# The log and the processor's status


def test_status_ok_after_a_complete_baseline():
    status = QCLog(BASELINE).status()
    assert status.verdict == "ok"
    assert not status.baseline_in_progress
    assert status.latest_date == day(4)
    assert status.advice == f"{ADVICE['ok']} {CAUTION}"


def test_status_action_repeats_the_reason_and_the_caution():
    # Levels MD 1.21 (hand mean above); 1.37 is 0.16 off: 21 CFR 900.12(e)(1).
    status = QCLog([*BASELINE, entry(5, md=1.37)]).status()
    assert status.verdict == "action"
    assert status.deviations.mid_density == pytest.approx(0.16)
    assert status.advice.startswith(ADVICE["action"])
    assert "Mid-density is 0.160 above" in status.advice
    assert status.advice.endswith(CAUTION)


def test_a_trend_on_the_latest_strip_makes_it_a_warning():
    # Levels MD 1.21, DD 1.81; days 5..11 at MD 1.23 are within ±0.10 yet,
    # with baseline days 3 and 4 (1.22, 1.23), 9 in a row above: past the
    # run of 7 (common practice in control charting, from memory). DD sits
    # on its level, so it has no run.
    log = QCLog([*BASELINE, *series([1.23] * 7, start=5, dd=1.81)])
    # One verdict, computed once: the day's own verdict counts the trend rules as the status does.
    assert log.days[-1].verdict.verdict == "warning" and log.days[-1].verdict.rules == ("run:mid_density",)
    assert log.days[-1].verdict.reasons == ()  # the strip alone is within the warning tier
    status = log.status()
    assert status.verdict == "warning"
    assert status.rules_fired == ("run:mid_density",)
    assert "above its operating level on 9 strips in a row (2025-03-06 to 2025-03-14)" in status.advice
    assert status.advice.endswith(CAUTION)


def warning_headline(log: QCLog) -> str:
    status = log.status()
    assert status.verdict == "warning" and status.advice.endswith(CAUTION)
    return status.advice.split(". ")[0]


def test_a_warning_says_which_rule_raised_it():
    # Levels MD 1.21, DD 1.81 (hand means above). The ±0.10 warning tier and the trend rules (run of 7,
    # drift of 5, 2 of 3 past the tier) are common practice in control charting, from memory.
    tier = warning_headline(QCLog([*BASELINE, entry(5, md=1.32, dd=1.81)]))
    assert tier == "Warning, within the control limits, raised by the warning tier (this strip is past it)"
    run = warning_headline(QCLog([*BASELINE, *series([1.17] * 7, start=5, dd=1.81)]))
    assert run.endswith("raised by the run rule (7 or more strips in a row on one side of the operating level)")
    drift = QCLog([*BASELINE, *series([1.22, 1.18, 1.16, 1.14, 1.12], start=5, dd=1.81)])
    assert warning_headline(drift).endswith("raised by the drift rule (5 or more strips in a row, each moving the "
                                            "same way)")
    twice = QCLog([*BASELINE, *series([1.32, 1.25, 1.33], start=5, dd=1.81)])
    assert warning_headline(twice).endswith("raised by the warning tier (this strip is past it) and the "
                                            "repeated-warnings rule (2 of 3 consecutive strips past the warning tier)")
    # Only a trend says the processor may be shifting; the tier alone asks for a watch and a repeat if in doubt.
    assert ADVICE["trend"] in drift.status().advice and ADVICE["trend"] not in QCLog(
        [*BASELINE, entry(5, md=1.32, dd=1.81)]).status().advice
    resized = QCLog([*BASELINE, *series([1.17] * 4, start=5, dd=1.81)], rules=TrendRules(run_length=4))
    assert "the run rule (4 or more strips in a row" in warning_headline(resized)


def test_action_advice_stands_when_a_trend_fires_too():
    # 21 CFR 900.12(e)(1): 0.16 off is past ±0.15; the run of 7 below fires on the same strip.
    status = QCLog([*BASELINE, *series([1.17] * 6 + [1.05], start=5, dd=1.81)]).status()
    assert status.verdict == "action" and "run:mid_density" in status.rules_fired
    assert status.advice.startswith(ADVICE["action"]) and "stop clinical processing" in status.advice
    assert "below its operating level on 7 strips in a row" in status.advice and status.advice.endswith(CAUTION)


def test_baseline_in_progress_cannot_be_ok():
    status = QCLog(BASELINE[:3]).status()
    assert status.baseline_in_progress
    assert status.verdict != "ok"
    assert (status.baseline_days, status.baseline_needed) == (3, 5)
    assert status.advice.startswith("Baseline in progress (3 of 5 days)")
    assert status.advice.endswith(CAUTION)
    assert status.levels is None and status.deviations is None


def test_empty_log_reports_a_baseline_not_started():
    status = QCLog().status()
    assert status.baseline_in_progress and status.latest_date is None
    assert "(0 of 5 days)" in status.advice


def test_baseline_restarts_after_an_event():
    # common practice: re-establish levels on new chemistry, service and the like.
    after = [
        entry(7, bf=0.19, md=1.30, dd=1.90),
        entry(8, bf=0.19, md=1.32, dd=1.92),
        entry(9, bf=0.20, md=1.31, dd=1.91),
        entry(10, bf=0.19, md=1.29, dd=1.88),
        entry(11, bf=0.18, md=1.33, dd=1.89),
    ]
    service = QCEvent(day(7), "service", note="developer rack replaced")
    log = QCLog([*BASELINE, entry(5), *after[:3]], events=[service])
    status = log.status()
    assert status.advice.startswith(
        "Baseline in progress (3 of 5 days) since the processor service on 2025-03-10"
    )
    assert status.verdict == "warning"

    log = QCLog([*BASELINE, entry(5), *after], events=[service])
    first, second = log.periods
    assert first.levels.mid_density == 1.21 and len(first.days) == 6
    # New levels by hand over days 7..11:
    # BF (0.19+0.19+0.20+0.19+0.18)/5 = 0.95/5 = 0.19
    # MD (1.30+1.32+1.31+1.29+1.33)/5 = 6.55/5 = 1.31
    # DD (1.90+1.92+1.91+1.88+1.89)/5 = 9.50/5 = 1.90
    new = second.levels
    assert (new.base_fog, new.mid_density, new.density_difference) == (0.19, 1.31, 1.90)
    assert new.established == day(11)
    assert "processor service" in new.reason
    # Against the old MD level (1.21) day 11's 1.33 would be +0.12, past the
    # ±0.10 tier; against the new level it is +0.02.
    assert evaluate_day(log.days[-1].entry.values, first.levels).verdict == "warning"
    assert log.days[-1].verdict.deviations.mid_density == pytest.approx(0.02)
    assert log.status().verdict == "ok"


def test_an_event_on_the_day_of_a_strip_applies_to_that_strip():
    log = QCLog(BASELINE, events=[QCEvent(day(4), "new_chemistry")])
    assert len(log.periods[0].days) == 4
    assert log.status().baseline_days == 1


def test_an_event_carrying_levels_needs_no_new_baseline():
    moved = OperatingLevels(0.20, 1.25, 1.85, day(5), 5, "crossover on 2025-03-08")
    log = QCLog([*BASELINE, entry(6, bf=0.20, md=1.25, dd=1.85)],
                events=[QCEvent(day(5), "crossover", levels=moved)])
    status = log.status()
    assert status.levels == moved
    assert status.verdict == "ok"
    assert status.deviations == QCValues(0.0, 0.0, 0.0)


def test_no_strip_yet_after_a_crossover():
    moved = OperatingLevels(0.20, 1.25, 1.85, day(5), 5, "crossover")
    status = QCLog(BASELINE, events=[QCEvent(day(5), "crossover", levels=moved)]).status()
    assert status.verdict == "warning"
    assert status.advice.startswith("No QC strip since the crossover on 2025-03-08")
    assert status.advice.endswith(CAUTION)


def test_status_on_a_given_day_ignores_later_strips_and_notes_a_missing_one():
    log = QCLog([*BASELINE, entry(5, md=1.40)])
    assert log.status().verdict == "action"
    earlier = log.status(today=day(4))
    assert earlier.verdict == "ok" and earlier.latest_date == day(4)
    later = log.status(today=day(9))
    assert "none is recorded for 2025-03-12" in later.advice


def test_out_of_order_entries_are_an_error_unless_sorting_is_allowed():
    shuffled = [BASELINE[1], BASELINE[0], *BASELINE[2:]]
    with pytest.raises(ValueError, match="out of date order: 2025-03-03 comes after 2025-03-04"):
        QCLog(shuffled)
    assert QCLog(shuffled, require_sorted=False).entries == tuple(BASELINE)


def test_two_strips_on_one_day_are_an_error():
    with pytest.raises(ValueError, match="two QC entries on 2025-03-05"):
        QCLog([*BASELINE[:3], entry(2, md=1.25)], require_sorted=False)


@pytest.mark.parametrize(
    "make, match",
    [
        (lambda: QCEvent(day(1), "new_developer"), "unknown event kind 'new_developer'"),
        (lambda: QCEntry(day(1), QCValues(0.18, 1.2, 1.8), "photo"), "unknown entry source"),
        (lambda: QCEntry(datetime.datetime(2025, 3, 3, 8), QCValues(0.18, 1.2, 1.8), "scan"),
         "must be a datetime.date"),
        (lambda: QCValues(0.18, float("nan"), 1.8), "mid_density must be a finite number"),
        (lambda: QCLimits(md_dd_warning=0.15), r"md_dd_warning \(0.15\) must be positive and below"),
        (lambda: QCSteps(11, 7, 15), "must be more exposed than the low step"),
        (lambda: QCLimits.from_dict({"md_dd_limit": 0.2}), "unknown field"),
    ],
)
def test_bad_records_are_rejected_with_a_clear_message(make, match):
    with pytest.raises(ValueError, match=match):
        make()


# --------------------------------------------------------------------------
# Crossover

# Hand-worked crossover (5 old + 5 new strips processed together, new level
# = old level + (mean new - mean old): common practice in mammography QC
# manuals, from memory):
#   old MD 1.21 1.22 1.20 1.22 1.22 -> 6.07/5 = 1.214
#   new MD 1.26 1.27 1.25 1.26 1.27 -> 6.31/5 = 1.262; diff 0.048
#   MD level 1.20 + 0.048 = 1.248
#   old DD 1.80 1.82 1.81 1.79 1.83 -> 9.05/5 = 1.81
#   new DD 1.85 1.87 1.86 1.84 1.88 -> 9.30/5 = 1.86; diff 0.05
#   DD level 1.80 + 0.05 = 1.85
#   old BF 0.18 0.18 0.19 0.18 0.17 -> 0.90/5 = 0.18
#   new BF 0.20 0.19 0.20 0.21 0.20 -> 1.00/5 = 0.20; diff 0.02
#   BF level "new_mean" 0.20; "shift" 0.17 + 0.02 = 0.19
OLD_FILM = [QCValues(bf, md, dd) for bf, md, dd in zip(
    [0.18, 0.18, 0.19, 0.18, 0.17], [1.21, 1.22, 1.20, 1.22, 1.22], [1.80, 1.82, 1.81, 1.79, 1.83])]
NEW_FILM = [QCValues(bf, md, dd) for bf, md, dd in zip(
    [0.20, 0.19, 0.20, 0.21, 0.20], [1.26, 1.27, 1.25, 1.26, 1.27], [1.85, 1.87, 1.86, 1.84, 1.88])]
OLD_LEVELS = OperatingLevels(0.17, 1.20, 1.80, day(4), 5, "initial baseline", steps=QCSteps(11, 15, 7))


def test_crossover_against_the_hand_worked_example():
    result = crossover(OLD_FILM, NEW_FILM, OLD_LEVELS, date=day(20))
    assert result.old_means == QCValues(0.18, 1.214, 1.81)
    assert result.new_means == QCValues(0.20, 1.262, 1.86)
    assert result.differences == QCValues(0.02, 0.048, 0.05)
    new = result.new_levels
    assert (new.base_fog, new.mid_density, new.density_difference) == (0.20, 1.248, 1.85)
    assert new.established == day(20) and new.n_days == 5
    assert new.steps == OLD_LEVELS.steps
    assert (result.n_old, result.n_new, result.rule) == (5, 5, "new_mean")
    assert result.notes == ()


def test_crossover_base_fog_by_shift():
    result = crossover(OLD_FILM, NEW_FILM, OLD_LEVELS, date=day(20), base_fog_rule="shift")
    assert result.new_levels.base_fog == 0.19  # 0.17 + 0.02, by hand above


def test_crossover_notes_an_old_film_off_its_own_levels():
    # Old MD mean 1.214 against a level of 1.10 is +0.114, past the ±0.10 tier.
    off = OperatingLevels(0.17, 1.10, 1.80, day(4), 5, "initial baseline")
    (note,) = crossover(OLD_FILM, NEW_FILM, off, date=day(20)).notes
    assert "Mid-density is 0.114 above" in note and note.endswith(CAUTION)


def test_crossover_rejects_too_few_or_unequal_strips_and_unknown_rules():
    with pytest.raises(ValueError, match="needs 5 strips of new film, have 4"):
        crossover(OLD_FILM, NEW_FILM[:4], OLD_LEVELS, date=day(20))
    with pytest.raises(ValueError, match="as many old as new strips, have 5 and 4"):
        crossover(OLD_FILM, NEW_FILM[:4], OLD_LEVELS, date=day(20), n_required=4)
    loose = crossover(OLD_FILM, NEW_FILM[:4], OLD_LEVELS, date=day(20), n_required=4, require_equal=False)
    assert loose.n_new == 4
    with pytest.raises(ValueError, match="unknown base\\+fog rule 'average'"):
        crossover(OLD_FILM, NEW_FILM, OLD_LEVELS, date=day(20), base_fog_rule="average")


# --------------------------------------------------------------------------
# JSON


def _records():
    log = QCLog([*BASELINE, *series([1.23] * 7, start=5)],
                events=[QCEvent(day(30), "other", note="densitometer recalibrated")],
                limits=QCLimits(base_fog_warning=0.02))
    return [
        log,
        QCLog(BASELINE).status(),
        log.status(today=day(11)),
        crossover(OLD_FILM, NEW_FILM, OLD_LEVELS, date=day(20)),
        log.periods[0],
        TrendRules(rules=("run",), run_length=9),
    ]


@pytest.mark.parametrize("record", _records(), ids=lambda r: type(r).__name__)
def test_records_survive_a_json_round_trip(record):
    text = json.dumps(record.to_dict())
    assert type(record).from_dict(json.loads(text)) == record


def test_dates_are_iso_strings_in_json():
    data = QCLog(BASELINE).status().to_dict()
    assert data["latest_date"] == "2025-03-07"
    assert data["levels"]["established"] == "2025-03-07"
    assert isinstance(ProcessorStatus.from_dict(data).latest_date, datetime.date)
    assert isinstance(CrossoverResult.from_dict(_records()[3].to_dict()).new_levels.established, datetime.date)


# --------------------------------------------------------------------------
# Property: only differences from the operating level matter

milli = st.integers(min_value=0, max_value=3000)  # densities in 0.001 OD, as read


@settings(max_examples=60, deadline=None)
@given(
    levels=st.tuples(milli, milli, milli),
    strips=st.lists(st.tuples(milli, milli, milli), min_size=1, max_size=10),
    shift=st.integers(min_value=-1000, max_value=1000),
)
def test_shifting_values_and_levels_together_changes_nothing(levels, strips, shift):
    # 21 CFR 900.12(e)(1) limits are relative to the operating level, so a
    # common offset of every value and level must not change any verdict.
    def make(offset):
        lv = OperatingLevels(*((x + offset) / 1000 for x in levels), day(0), 5, "baseline")
        history = [QCEntry(day(i), QCValues(*((x + offset) / 1000 for x in s)), "manual")
                   for i, s in enumerate(strips)]
        return lv, history

    (lv0, h0), (lv1, h1) = make(0), make(shift)
    for e0, e1 in zip(h0, h1):
        assert evaluate_day(e0.values, lv0) == evaluate_day(e1.values, lv1)
    assert apply_trend_rules(h0, lv0) == apply_trend_rules(h1, lv1)
