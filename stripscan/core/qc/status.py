"""Processor QC's log and where the processor stands: periods of constant levels, verdicts and advice.

A baseline starts again after each :class:`~stripscan.core.qc.records.QCEvent`
(new chemistry, service, new film type...); an event that carries levels
(a crossover) sets them at once.
"""

from __future__ import annotations

import dataclasses
import datetime
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import cached_property

from stripscan import CAUTION
from stripscan.core.qc.levels import establish_levels
from stripscan.core.qc.names import TREND_RULE_NAMES
from stripscan.core.qc.records import (
    LevelPeriod,
    OperatingLevels,
    ProcessorStatus,
    QCDay,
    QCEntry,
    QCEvent,
    QCLimits,
    TrendFinding,
    TrendRules,
    _check_date,
    _check_days,
    _Record,
    _set,
)
from stripscan.core.qc.rules import _fired_each_day, _with_trends, apply_trend_rules, evaluate_day

__all__ = ["ADVICE", "WARNING_CAUSES", "QCLog"]


#: What is usually done next, by verdict (common practice).  A warning's
#: advice starts with what raised it (:data:`WARNING_CAUSES`) and ends with
#: ``"warning"`` when only the warning tier did, ``"trend"`` when a trend
#: rule did.
ADVICE = {
    "ok": "Within control limits: the processor may be used.",
    "warning": "Repeat the strip if in doubt and watch the next strips.",
    "trend": (
        "The processor may be shifting: look for the cause (temperature, replenishment, chemistry) "
        "before a control limit is reached; repeat the strip if in doubt."
    ),
    "action": (
        "Outside a control limit: repeat the strip; if confirmed, stop clinical "
        "processing and correct the processor before patient films are processed."
    ),
}

#: Why a strip within the control limits is a warning, in plain words: the
#: warning tier on the strip itself (``"tier"``) or a trend rule, sized by
#: the site's :class:`TrendRules`.
WARNING_CAUSES = {
    "tier": "the warning tier (this strip is past it)",
    "run": "the run rule ({run_length} or more strips in a row on one side of the operating level)",
    "drift": "the drift rule ({drift_length} or more strips in a row, each moving the same way)",
    "two_warnings": (
        "the repeated-warnings rule ({warning_count} of {warning_window} consecutive strips past the warning tier)"
    ),
}


# --------------------------------------------------------------------------
# The log


@dataclass(frozen=True)
class QCLog(_Record):
    """A processor's QC history: entries, events and the site's settings.

    Derived results (:attr:`periods`, :attr:`days`, :attr:`findings`,
    :meth:`status`) are computed on demand; the record itself holds inputs
    only, so ``to_dict`` stores what was measured, not what was concluded.

    Attributes
    ----------
    entries : tuple of QCEntry
        One strip per day.  Out-of-order entries are an error when
        ``require_sorted`` is True, otherwise they are sorted.  Two entries
        on one day are always an error.
    events : tuple of QCEvent
        Changes that restart the baseline.  Events on the same day apply in
        the order given; the last one governs.
    limits : QCLimits
        The site's limits.
    rules : TrendRules
        The site's trend rules.
    n_days : int
        Strips a baseline needs (5).
    require_sorted : bool
        Whether out-of-order input is an error.
    """

    entries: tuple[QCEntry, ...] = ()
    events: tuple[QCEvent, ...] = ()
    limits: QCLimits = field(default_factory=QCLimits)
    rules: TrendRules = field(default_factory=TrendRules)
    n_days: int = 5
    require_sorted: bool = True

    def __post_init__(self) -> None:
        if self.n_days < 1:
            raise ValueError(f"n_days must be 1 or more, got {self.n_days}")
        entries, events = tuple(self.entries), tuple(self.events)
        if not self.require_sorted:
            entries = tuple(sorted(entries, key=lambda e: e.date))
            events = tuple(sorted(events, key=lambda e: e.date))
        _check_days(entries)
        for before, after in zip(events, events[1:]):
            if after.date < before.date:
                raise ValueError(
                    f"QC events out of date order: {after.date.isoformat()} comes after "
                    f"{before.date.isoformat()}"
                )
        _set(self, "entries", entries)
        _set(self, "events", events)

    def _period(self, event: QCEvent | None, entries: tuple[QCEntry, ...]) -> LevelPeriod:
        if event is not None and event.levels is not None:
            levels: OperatingLevels | None = event.levels
        elif len(entries) >= self.n_days:
            reason = f"baseline after {event.label}" if event else "initial baseline"
            levels = establish_levels(entries, n_days=self.n_days, reason=reason)
        else:
            levels = None
        if levels is None:
            return LevelPeriod(event, None, self.n_days, tuple(QCDay(e, None) for e in entries))
        findings = apply_trend_rules(entries, levels, self.rules, limits=self.limits)
        fired = _fired_each_day(entries, levels, self.rules, self.limits)
        days = tuple(QCDay(e, _with_trends(evaluate_day(e.values, levels, self.limits), f))
                     for e, f in zip(entries, fired))
        return LevelPeriod(event, levels, self.n_days, days, findings)

    @cached_property
    def periods(self) -> tuple[LevelPeriod, ...]:
        """Periods of constant operating levels, oldest first."""
        starts: list[QCEvent | None] = [None, *self.events]
        periods = []
        for i, event in enumerate(starts):
            begin = event.date if event else datetime.date.min
            end = starts[i + 1].date if i + 1 < len(starts) else datetime.date.max  # type: ignore[union-attr]
            entries = tuple(e for e in self.entries if begin <= e.date < end)
            if event is None and not entries:
                continue
            periods.append(self._period(event, entries))
        return tuple(periods)

    @property
    def days(self) -> tuple[QCDay, ...]:
        """Every entry with its verdict, oldest first."""
        return tuple(day for period in self.periods for day in period.days)

    @property
    def findings(self) -> tuple[TrendFinding, ...]:
        """Every trend finding, oldest first."""
        return tuple(f for period in self.periods for f in period.findings)

    def status(self, today: datetime.date | None = None) -> ProcessorStatus:
        """Where the processor stands on the latest strip up to ``today``.

        Parameters
        ----------
        today : datetime.date or None
            Ignore entries and events after this day; when the latest strip
            is older, the advice says so.  None: use everything.

        Returns
        -------
        ProcessorStatus
        """
        log = self
        if today is not None:
            _check_date("today", today)
            log = dataclasses.replace(
                self,
                entries=tuple(e for e in self.entries if e.date <= today),
                events=tuple(e for e in self.events if e.date <= today),
            )
        return log._status(today)

    def _warning_advice(self, past_tier: bool, fired: Sequence[TrendFinding]) -> str:
        """What raised a warning (the warning tier, which trend rules) and what is usually done next."""
        sizes = dataclasses.asdict(self.rules)
        rules = [rule for rule in TREND_RULE_NAMES if any(f.rule == rule for f in fired)]
        causes = [WARNING_CAUSES[c].format(**sizes) for c in (["tier"] if past_tier else []) + rules]
        raised = ", ".join(causes[:-1]) + " and " + causes[-1] if len(causes) > 1 else causes[0]
        return f"Warning, within the control limits, raised by {raised}. {ADVICE['trend' if rules else 'warning']}"

    def _status(self, today: datetime.date | None) -> ProcessorStatus:
        period = self.periods[-1] if self.periods else None
        days = period.days if period else ()
        latest = days[-1] if days else None
        extra = []
        if latest is not None and today is not None and latest.entry.date < today:
            extra.append(
                f"The latest strip is from {latest.entry.date.isoformat()}; "
                f"none is recorded for {today.isoformat()}."
            )
        common = {
            "latest_date": latest.entry.date if latest else None,
            "values": latest.entry.values if latest else None,
        }
        if period is None or period.levels is None:
            since = f" since the {period.event.label}" if period and period.event else ""
            headline = (
                f"Baseline in progress ({len(days)} of {self.n_days} days){since}: operating "
                "levels are not set yet, so strips cannot be judged against control limits; "
                "process one strip a day until the baseline is complete."
            )
            return ProcessorStatus(
                **common, deviations=None, verdict="warning", rules_fired=(),
                advice=" ".join([headline, *extra, CAUTION]), levels=None,
                baseline_in_progress=True, baseline_days=len(days), baseline_needed=self.n_days,
            )
        if latest is None or latest.verdict is None:
            # Only an event carrying levels opens a judged period with no strips.
            headline = (
                f"No QC strip since the {period.event.label if period.event else 'levels were set'}: process a strip and check it "
                "before patient films are processed."
            )
            return ProcessorStatus(
                **common, deviations=None, verdict="warning", rules_fired=(),
                advice=" ".join([headline, CAUTION]), levels=period.levels,
            )
        fired = tuple(f for f in period.findings
                      if latest.entry.date in f.dates and f"{f.rule}:{f.quantity}" in latest.verdict.rules)
        # The day's verdict already counts the trend rules (computed once, in _period);
        # a warning's tier reasons say whether the strip itself was past the warning tier.
        verdict = latest.verdict.verdict
        headline = self._warning_advice(bool(latest.verdict.reasons), fired) if verdict == "warning" \
            else ADVICE[verdict]
        advice = [headline, *latest.verdict.reasons, *(f.message for f in fired), *extra, CAUTION]
        return ProcessorStatus(
            **common, deviations=latest.verdict.deviations, verdict=verdict,
            rules_fired=tuple(f"{f.rule}:{f.quantity}" for f in fired),
            advice=" ".join(advice), levels=period.levels, findings=fired,
        )

