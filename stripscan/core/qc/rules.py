"""Processor QC's judgement: each strip against its operating levels, and the trend rules over a series.

21 CFR 900.12(e)(1) sets the control limits: MD and DD within ±0.15 of
their operating levels, base+fog no more than 0.03 above its level.  Many
programmes add a ±0.10 warning tier for MD and DD.  All limits are site
settings (:class:`~stripscan.core.qc.records.QCLimits`).

A deviation exactly at a limit is within it (see
:mod:`stripscan.core.qc.records` for the decimal terms).  The run and
drift rules also ignore deviations and changes smaller than
:data:`TREND_DEAD_BAND` (half a densitometer's 0.01 OD reading step).
"""

from __future__ import annotations

import dataclasses
import datetime
from collections.abc import Sequence

from stripscan.core.qc.names import LABELS, QUANTITIES, TREND_RULE_NAMES, VERDICTS
from stripscan.core.qc.records import (
    _DIGITS,
    _TOL,
    DayVerdict,
    OperatingLevels,
    QCEntry,
    QCLimits,
    QCValues,
    TrendFinding,
    TrendRules,
    _check_days,
    _combine,
)

__all__ = ["TREND_DEAD_BAND", "evaluate_day", "apply_trend_rules"]

#: Dead band of the run and drift rules, OD.  Densitometers read to 0.01 OD
#: (common practice), so a deviation, or a change from one strip to the
#: next, smaller than half of that is not a side of the level or a step in
#: any direction: such a strip is on its level and breaks a run; such a
#: change is flat and breaks a drift.  Without it a deviation of -0.001 OD
#: (a level that is the mean of five strips rarely falls on a reading)
#: counts as "below" and keeps a run alive after the processor is repaired.
TREND_DEAD_BAND = 0.005


def _beyond(size: float, limit: float) -> bool:
    """True when ``size`` is strictly past ``limit`` in decimal terms."""
    return size > limit + _TOL


def _side(value: float) -> int:
    """+1 or -1 for a deviation or change of at least :data:`TREND_DEAD_BAND`, 0 for a smaller one."""
    edge = TREND_DEAD_BAND - _TOL
    return 1 if value >= edge else -1 if value <= -edge else 0


def _worse(a: str, b: str) -> str:
    return a if VERDICTS.index(a) >= VERDICTS.index(b) else b


def _fmt_limit(value: float) -> str:
    # Limits are usually set to 0.01 OD; show "0.10", not "0.1", but keep
    # finer site settings such as 0.125 whole.
    text = f"{value:.2f}"
    return text if float(text) == value else f"{value:g}"


def _deviations(values: QCValues, levels: OperatingLevels) -> QCValues:
    return _combine(lambda value, level: round(value - level, _DIGITS), values, levels)



def evaluate_day(
    values: QCValues, levels: OperatingLevels, limits: QCLimits = QCLimits()
) -> DayVerdict:
    """Compare one strip with the operating levels.

    A deviation exactly at a limit is within it: with the default limits,
    mid-density 0.15 off is a warning, 0.151 off is an action; base+fog 0.03
    up is within, 0.031 up is an action.

    Parameters
    ----------
    values : QCValues
        The day's values, OD.
    levels : OperatingLevels
        Levels in force.
    limits : QCLimits
        The site's limits.

    Returns
    -------
    DayVerdict
    """
    deviations = _deviations(values, levels)
    verdict, reasons = "ok", []
    for q in QUANTITIES:
        d = getattr(deviations, q)
        if q == "base_fog":
            size, action, warning, sign = d, limits.base_fog_action, limits.base_fog_warning, "+"
        else:
            size, action, warning, sign = abs(d), limits.md_dd_action, limits.md_dd_warning, "±"
        if _beyond(size, action):
            tier, limit, word = "action", action, "control limit"
        elif warning is not None and _beyond(size, warning):
            tier, limit, word = "warning", warning, "warning tier"
        else:
            continue
        verdict = _worse(verdict, tier)
        reasons.append(
            f"{LABELS[q].capitalize()} is {abs(d):.3f} {'above' if d > 0 else 'below'} "
            f"its operating level (beyond the {word} of {sign}{_fmt_limit(limit)})."
        )
    return DayVerdict(deviations=deviations, verdict=verdict, reasons=tuple(reasons))


# --------------------------------------------------------------------------
# Trend rules


def _streaks(flags: Sequence[bool]) -> list[tuple[int, int]]:
    """(first, last) indices of each maximal stretch of True."""
    spans, start = [], None
    for i, flag in enumerate([*flags, False]):
        if flag and start is None:
            start = i
        elif not flag and start is not None:
            spans.append((start, i - 1))
            start = None
    return spans


def _run_spans(devs: Sequence[float], side: int, length: int) -> list[list[int]]:
    spans = _streaks([_side(d) == side for d in devs])
    return [list(range(a, b + 1)) for a, b in spans if b - a + 1 >= length]


def _drift_spans(devs: Sequence[float], side: int, length: int) -> list[list[int]]:
    steps = [False] + [_side(devs[i] - devs[i - 1]) == side for i in range(1, len(devs))]
    # A stretch of steps a..b covers the strips a-1..b.
    return [list(range(a - 1, b + 1)) for a, b in _streaks(steps) if b - a + 2 >= length]


def _warning_spans(
    devs: Sequence[float], side: int, warning: float, count: int, window: int
) -> list[list[int]]:
    flagged = [_beyond(side * d, warning) for d in devs]
    spans: list[list[int]] = []
    for i, flag in enumerate(flagged):
        hits = [j for j in range(max(0, i - window + 1), i + 1) if flagged[j]]
        if not flag or len(hits) < count:
            continue
        # Windows that share a strip describe one episode: merge them.
        if spans and hits[0] <= spans[-1][-1]:
            spans[-1] = sorted(set(spans[-1]) | set(hits))
        else:
            spans.append(hits)
    return spans


def _rule_spans(
    rule: str, devs: Sequence[float], side: int, rules: TrendRules, warning: float | None
) -> list[list[int]]:
    if rule == "run":
        return _run_spans(devs, side, rules.run_length)
    if rule == "drift":
        return _drift_spans(devs, side, rules.drift_length)
    if warning is None:
        return []
    return _warning_spans(devs, side, warning, rules.warning_count, rules.warning_window)


def _trend_message(rule: str, quantity: str, side: int, dates: Sequence[datetime.date],
                   rules: TrendRules, warning: float | None) -> str:
    label = LABELS[quantity].capitalize()
    first, last = dates[0].isoformat(), dates[-1].isoformat()
    where = "above" if side > 0 else "below"
    if rule == "run":
        return f"{label} was {where} its operating level on {len(dates)} strips in a row ({first} to {last})."
    if rule == "drift":
        how = "rose" if side > 0 else "fell"
        return f"{label} {how} on each of {len(dates)} strips in a row ({first} to {last})."
    listed = ", ".join(d.isoformat() for d in dates)
    return (
        f"{label} was more than {_fmt_limit(warning or 0.0)} {where} its operating level on "
        f"{listed}: at least {rules.warning_count} of {rules.warning_window} consecutive strips."
    )


def apply_trend_rules(
    history: Sequence[QCEntry],
    levels: OperatingLevels,
    rules: TrendRules = TrendRules(),
    *,
    limits: QCLimits = QCLimits(),
) -> tuple[TrendFinding, ...]:
    """Look for runs, drifts and repeated warnings in a series of strips.

    Parameters
    ----------
    history : sequence of QCEntry
        Strips in date order, one per day, all judged against ``levels``.
    levels : OperatingLevels
        Levels in force over the whole series.
    rules : TrendRules
        Which rules to apply and their sizes (see :class:`TrendRules`).
    limits : QCLimits
        Supplies the warning tiers for ``two_warnings``; with no warning
        tier for a quantity that rule stays silent on it.

    Returns
    -------
    tuple of TrendFinding
        One finding per episode (overlapping windows are merged), ordered by
        first date.
    """
    history = tuple(history)
    _check_days(history)
    dates = [e.date for e in history]
    all_devs = [_deviations(e.values, levels) for e in history]
    findings = []
    for q in rules.quantities:
        devs = [getattr(d, q) for d in all_devs]
        warning = limits.base_fog_warning if q == "base_fog" else limits.md_dd_warning
        for side in (1,) if q == "base_fog" else (1, -1):
            for rule in rules.rules:
                for span in _rule_spans(rule, devs, side, rules, warning):
                    span_dates = tuple(dates[i] for i in span)
                    message = _trend_message(rule, q, side, span_dates, rules, warning)
                    findings.append(TrendFinding(rule, q, span_dates, message))
    findings.sort(key=lambda f: (f.dates[0], TREND_RULE_NAMES.index(f.rule), QUANTITIES.index(f.quantity)))
    return tuple(findings)


def _ending_streak(flags: Sequence[bool]) -> list[int]:
    """Length of the stretch of True that ends at each index (0 where False)."""
    lengths, count = [], 0
    for flag in flags:
        count = count + 1 if flag else 0
        lengths.append(count)
    return lengths


def _fires_on(rule: str, devs: Sequence[float], side: int, rules: TrendRules, warning: float | None) -> list[bool]:
    """Whether ``rule`` fires on each strip over the strips up to it, as the status said on its day.

    The same arithmetic as :func:`_rule_spans` seen from each strip's day: a
    run or drift that has reached its length on this strip, or this strip
    past the warning tier with enough others in its window.  The first strips
    of a run are therefore not warnings after the fact.
    """
    if rule == "run":
        return [n >= rules.run_length for n in _ending_streak([_side(d) == side for d in devs])]
    if rule == "drift":
        moves = [False] + [_side(devs[i] - devs[i - 1]) == side for i in range(1, len(devs))]
        # n moves in a row cover n + 1 strips.
        return [n > 0 and n + 1 >= rules.drift_length for n in _ending_streak(moves)]
    if warning is None:
        return [False] * len(devs)
    flagged = [_beyond(side * d, warning) for d in devs]
    window = rules.warning_window
    return [flag and sum(flagged[max(0, i - window + 1): i + 1]) >= rules.warning_count
            for i, flag in enumerate(flagged)]


def _fired_each_day(
    history: Sequence[QCEntry], levels: OperatingLevels, rules: TrendRules, limits: QCLimits
) -> list[tuple[str, ...]]:
    """``"rule:quantity"`` of the trend rules that fire on each strip (see :func:`_fires_on`)."""
    all_devs = [_deviations(e.values, levels) for e in history]
    fired: list[list[str]] = [[] for _ in history]
    for rule in rules.rules:
        for q in rules.quantities:
            devs = [getattr(d, q) for d in all_devs]
            warning = limits.base_fog_warning if q == "base_fog" else limits.md_dd_warning
            for side in (1,) if q == "base_fog" else (1, -1):
                for i, fires in enumerate(_fires_on(rule, devs, side, rules, warning)):
                    if fires and f"{rule}:{q}" not in fired[i]:
                        fired[i].append(f"{rule}:{q}")
    return [tuple(f) for f in fired]


def _with_trends(verdict: DayVerdict, fired: tuple[str, ...]) -> DayVerdict:
    """A strip's verdict raised by the trend rules that fired on its day: at least a warning, rules named."""
    if not fired:
        return verdict
    return dataclasses.replace(verdict, verdict=_worse(verdict.verdict, "warning"), rules=fired)

