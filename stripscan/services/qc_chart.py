"""What the processor QC chart shows, as plain data: points, limits, periods, events and findings.

The PNG chart (:mod:`stripscan.render.qc_chart`), the monthly report and
the window's QC page all draw from :func:`chart_data`, so they show the
same days with the same verdicts.  No Qt.
"""

from __future__ import annotations

import datetime
from collections.abc import Sequence
from dataclasses import dataclass

from stripscan.core.qc.names import LABELS, QUANTITIES
from stripscan.core.qc.records import OperatingLevels, ProcessorStatus, QCLimits, QCValues, TrendFinding
from stripscan.core.qc.rules import evaluate_day
from stripscan.services.qc_log import LoggedEntry, ProcessorLog

__all__ = ["SET_ASIDE_KINDS", "ChartPoint", "ChartSeries", "ChartPeriod", "ChartData", "chart_data",
           "chart_legend", "describe_rule"]

#: Why an entry is kept but not used, in the order a legend lists them.
SET_ASIDE_KINDS = ("repeated", "corrected")


@dataclass(frozen=True)
class ChartPoint:
    """One entry on one plot.  ``deviation`` and ``verdict`` are None while the baseline is incomplete.

    ``set_aside`` is ``"repeated"`` or ``"corrected"`` for an entry kept but
    not used, None for the day's entry in use.
    """

    date: datetime.date
    value: float
    deviation: float | None
    verdict: str | None
    baseline: bool
    entry_id: int | None = None
    set_aside: str | None = None


@dataclass(frozen=True)
class ChartSeries:
    """One quantity's plot: each day's point in use, the entries set aside, and limit lines (None where none), OD."""

    quantity: str
    label: str
    points: tuple[ChartPoint, ...]
    action: tuple[float | None, float | None]
    warning: tuple[float | None, float | None]
    set_aside: tuple[ChartPoint, ...] = ()


@dataclass(frozen=True)
class ChartPeriod:
    """A stretch of constant operating levels within the chart's dates."""

    first: datetime.date
    last: datetime.date
    levels: OperatingLevels | None
    baseline_dates: tuple[datetime.date, ...]
    label: str


@dataclass(frozen=True)
class ChartData:
    """Everything a QC chart shows, without any drawing (shared by the PNG and the panel)."""

    processor: str
    first: datetime.date
    last: datetime.date
    series: tuple[ChartSeries, ...]
    events: tuple[tuple[datetime.date, str], ...]
    findings: tuple[TrendFinding, ...]
    periods: tuple[ChartPeriod, ...]
    status: ProcessorStatus
    title: str
    set_aside_notes: tuple[str, ...] = ()

    @property
    def set_aside_kinds(self) -> tuple[str, ...]:
        """Which kinds of set-aside entries the chart shows (``"repeated"``, ``"corrected"``), for its legend."""
        shown = {p.set_aside for s in self.series for p in s.set_aside}
        return tuple(k for k in SET_ASIDE_KINDS if k in shown)


def _quantity_verdict(q: str, value: float, levels: OperatingLevels, limits: QCLimits) -> str:
    # The core judges a whole strip; judging a strip that is at its levels
    # except for q gives q's own tier by exactly the same arithmetic.
    alone = QCValues(**{**{k: getattr(levels, k) for k in QUANTITIES}, q: value})
    return evaluate_day(alone, levels, limits).verdict


def _month_span(month: str | None) -> tuple[datetime.date, datetime.date]:
    if month is None:
        return datetime.date.min, datetime.date.max
    try:
        first = datetime.date.fromisoformat(f"{month}-01")
    except ValueError:
        raise ValueError(f"month {month!r} is not written YYYY-MM") from None
    return first, (first.replace(day=28) + datetime.timedelta(days=4)).replace(day=1) - datetime.timedelta(days=1)


def _point(item: LoggedEntry, q: str, levels: OperatingLevels | None, limits: QCLimits, *,
           baseline: bool = False) -> ChartPoint:
    value = getattr(item.entry, q)
    dev = getattr(item.verdict.deviations, q) if item.verdict else None
    tier = _quantity_verdict(q, value, levels, limits) if levels and item.verdict else None
    return ChartPoint(item.date, value, dev, tier, baseline, item.entry.id, item.set_aside)


def chart_data(plog: ProcessorLog, *, month: str | None = None) -> ChartData:
    """The three deviation plots' data over the whole log, or one month (``YYYY-MM``).

    Raises
    ------
    ValueError
        An unreadable month, or no entry in the dates asked for.
    """
    first, last = _month_span(month)
    limits = plog.setup.limits
    logged = [item for item in plog.logged(first, last) if item.values is not None]
    in_use = {item.date: item for item in logged if item.state.in_use}
    points: dict[str, list[ChartPoint]] = {q: [] for q in QUANTITIES}
    periods = []
    for period in plog.log.periods:
        days = [d for d in period.days if first <= d.entry.date <= last]
        if not days:
            continue
        # Only strips that really set the levels: none when a crossover brought them.
        baseline = tuple(d.entry.date for d in period.setting_days)
        label = (period.levels.reason if period.levels else
                 f"baseline in progress ({len(period.days)} of {plog.log.n_days} days)")
        periods.append(ChartPeriod(days[0].entry.date, days[-1].entry.date, period.levels, baseline, label))
        for d in days:
            for q in QUANTITIES:
                points[q].append(_point(in_use[d.entry.date], q, period.levels, limits,
                                        baseline=d.entry.date in baseline))
    if not periods:
        span = f"in {month}" if month else "at all"
        raise ValueError(f"processor {plog.processor!r} has no QC entries {span}")
    aside = [item for item in logged if item.set_aside]
    series = []
    for q in QUANTITIES:
        if q == "base_fog":
            action, warning = (limits.base_fog_action, None), (limits.base_fog_warning, None)
        else:
            a, w = limits.md_dd_action, limits.md_dd_warning
            action, warning = (a, -a), (w, -w if w is not None else None)
        kept = tuple(_point(item, q, plog.levels_on(item.date), limits) for item in aside)
        series.append(ChartSeries(q, LABELS[q], tuple(points[q]), action, warning, kept))
    shown_first, shown_last = periods[0].first, periods[-1].last
    events = tuple((e.date, e.label) for e in plog.log.events if shown_first <= e.date <= shown_last)
    findings = tuple(f for f in plog.log.findings if any(shown_first <= d <= shown_last for d in f.dates))
    span = (first.strftime("%B %Y") if month else f"{shown_first.isoformat()} to {shown_last.isoformat()}")
    status = plog.status(shown_last)
    notes = tuple(f"{item.entry.date}: {item.describe()}" for item in aside)
    return ChartData(plog.processor, shown_first, shown_last, tuple(series), events, findings, tuple(periods),
                     status, f"{plog.processor}: processor QC, {span}", notes)


def describe_rule(finding: TrendFinding) -> str:
    """A short name for a trend finding, for chart labels."""
    return {"run": "run", "drift": "drift", "two_warnings": "repeated warnings"}.get(finding.rule, finding.rule)


def chart_legend(data: ChartData) -> Sequence[str]:
    """Lines under the chart: the levels of each period and the caution."""
    lines = []
    for p in data.periods:
        if p.levels is None:
            lines.append(f"{p.first.isoformat()} to {p.last.isoformat()}: {p.label}; no operating levels yet")
        else:
            lv = p.levels
            lines.append(f"{p.first.isoformat()} to {p.last.isoformat()}: levels from {lv.reason} "
                         f"(set {lv.established.isoformat()}): "
                         + ", ".join(f"{LABELS[q]} {getattr(lv, q):.3f}" for q in QUANTITIES))
    return lines
