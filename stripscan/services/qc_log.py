"""The processor QC log: the archive's stored days and settings, judged by the pure core.

The archive (:mod:`stripscan.archive`) keeps what was measured: one entry a
day per processor, the events that restart a baseline, crossover records and
a JSON settings object per processor.  The core (:mod:`stripscan.core.qc`)
decides what it means: operating levels, verdicts, trend rules, status.
This module joins the two and adds the rules that need both:

* a day read off a scan uses the QC steps kept from the baseline on: they
  are chosen (:func:`~stripscan.core.qc.levels.choose_qc_steps`) on the first
  scanned strip after the latest event that restarts the baseline, stored
  in the settings with that day's entry, and used unchanged afterwards;
* entries go in date order, one first strip per day, and an event may not
  be dated before the latest entry (it would silently re-judge days
  already reported).  A missed day may be entered later on purpose
  (``late=True``): it is stored marked as entered late, with the time it
  was entered, and levels, limits and trend rules take the days in date
  order.  The archive checks the order inside the write transaction, so
  two writers at once cannot both pass it;
* a second strip of the latest day is stored as a *repeat*; the day's
  value is then the repeat's (common practice: the repeat confirms or
  clears the first result), and the first strip is kept and shown, not
  used.  A wrongly entered value is fixed by a *correction* (same
  processor, with a reason; it may also fix a wrong date); the corrected
  entry is kept and shown, not used.  Only each day's entry in use reaches the core;
* a ``crossover`` event takes the new operating levels of the crossover
  record stored for that processor and day, when there is one.

Settings JSON (``Archive.set_qc_settings``), keys this module owns::

    {"limits": QCLimits.to_dict(), "trend_rules": TrendRules.to_dict(),
     "baseline_days": 5, "steps": QCSteps.to_dict() (the latest choice),
     "step_choices": [{"since": "YYYY-MM-DD", "steps": {...}, "chosen_on": "..."}]}

Other keys found in the settings are kept as they are.
"""

from __future__ import annotations

import datetime
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from stripscan.archive import Archive, DuplicateDayError
from stripscan.archive import QcEntry as StoredEntry
from stripscan.archive.qc_records import QcEntryState, qc_entry_states
from stripscan.core.qc.names import EVENT_KINDS, QUANTITIES, VERDICT_WORDS
from stripscan.core.qc.records import (
    DayVerdict,
    OperatingLevels,
    ProcessorStatus,
    QCEntry,
    QCEvent,
    QCLimits,
    QCSteps,
    QCValues,
    TrendRules,
)
from stripscan.core.qc.rules import evaluate_day
from stripscan.core.qc.status import QCLog

__all__ = [
    "StepChoice",
    "QcSetup",
    "LoggedEntry",
    "ProcessorLog",
    "DuplicateDayError",
    "parse_day",
    "load_setup",
    "load_processor_log",
]




def parse_day(text: str, what: str = "date") -> datetime.date:
    """A ``YYYY-MM-DD`` date, or a ValueError that says what was wrong."""
    try:
        if len(text) != 10:
            raise ValueError
        return datetime.date.fromisoformat(text)
    except (TypeError, ValueError):
        raise ValueError(f"{what} {text!r} is not a calendar date written YYYY-MM-DD") from None


# --------------------------------------------------------------------------
# Settings


@dataclass(frozen=True)
class StepChoice:
    """The QC steps chosen for a baseline, from ``since`` on, and the strip they were chosen on."""

    since: datetime.date
    steps: QCSteps
    chosen_on: str

    def to_dict(self) -> dict[str, Any]:
        return {"since": self.since.isoformat(), "steps": self.steps.to_dict(), "chosen_on": self.chosen_on}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> StepChoice:
        return cls(parse_day(data["since"], "step choice date"), QCSteps.from_dict(data["steps"]),
                   str(data.get("chosen_on", "")))


@dataclass(frozen=True)
class QcSetup:
    """A processor's QC settings: limits, trend rules, baseline length and QC steps.

    Attributes
    ----------
    limits : QCLimits
        Control limits and warning tiers (21 CFR 900.12(e)(1) by default).
    rules : TrendRules
        Trend rules and their sizes.
    baseline_days : int
        Strips averaged for the operating levels (5).
    step_choices : tuple of StepChoice
        Every choice of QC steps, oldest first.
    extra : dict
        Settings kept by other parts of the program, stored back untouched.
    """

    limits: QCLimits = field(default_factory=QCLimits)
    rules: TrendRules = field(default_factory=TrendRules)
    baseline_days: int = 5
    step_choices: tuple[StepChoice, ...] = ()
    extra: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        days = self.baseline_days
        if isinstance(days, bool) or not isinstance(days, int) or not 1 <= days <= 60:
            raise ValueError(f"baseline days must be a whole number from 1 to 60, got {days!r}")

    _OWN = ("limits", "trend_rules", "baseline_days", "steps", "step_choices")

    def to_settings(self) -> dict[str, Any]:
        """The JSON object stored in the archive."""
        data = {k: v for k, v in self.extra.items() if k not in self._OWN}
        data.update(limits=self.limits.to_dict(), trend_rules=self.rules.to_dict(),
                    baseline_days=self.baseline_days,
                    step_choices=[c.to_dict() for c in self.step_choices])
        if self.step_choices:
            # Read by the crossover command as the steps in use.
            data["steps"] = self.step_choices[-1].steps.to_dict()
        return data

    @classmethod
    def from_settings(cls, data: Mapping[str, Any] | None, processor: str = "") -> QcSetup:
        """Read stored settings; missing keys take the defaults."""
        data = dict(data or {})
        try:
            return cls(
                limits=QCLimits.from_dict(data["limits"]) if "limits" in data else QCLimits(),
                rules=TrendRules.from_dict(data["trend_rules"]) if "trend_rules" in data else TrendRules(),
                baseline_days=data.get("baseline_days", 5),
                step_choices=tuple(StepChoice.from_dict(c) for c in data.get("step_choices", ())),
                extra={k: v for k, v in data.items() if k not in cls._OWN},
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise ValueError(f"processor {processor!r}: the stored QC settings cannot be read ({exc})") from None


def load_setup(archive: Archive, processor: str) -> QcSetup:
    """The processor's stored QC settings, or the defaults when none are stored."""
    stored = archive.get_qc_settings(processor)
    return QcSetup.from_settings(stored.settings if stored else None, processor)


# --------------------------------------------------------------------------
# The log as the core sees it


@dataclass(frozen=True)
class LoggedEntry:
    """A stored QC entry, what became of it, and how it compares with the levels in force on its day.

    Attributes
    ----------
    entry : StoredEntry
        As the archive keeps it, with its id and links.
    state : QcEntryState
        In use for its day, or repeated / corrected and kept.
    verdict : DayVerdict or None
        Against the operating levels in force on its day (for an entry not
        in use too: what its strip showed); None during a baseline or when
        a number is lacking.
    """

    entry: StoredEntry
    state: QcEntryState
    verdict: DayVerdict | None

    @property
    def date(self) -> datetime.date:
        return parse_day(self.entry.date)

    @property
    def values(self) -> QCValues | None:
        numbers = [getattr(self.entry, q) for q in QUANTITIES]
        return None if None in numbers else QCValues(*numbers)

    @property
    def set_aside(self) -> str | None:
        """``"corrected"`` or ``"repeated"`` for an entry kept but not used; None for the day's entry in use."""
        if self.state.corrected_by is not None:
            return "corrected"
        return None if self.state.in_use else "repeated"

    def standing(self) -> str:
        """What the entry is and what became of it, in words ('' for a plain day's strip in use)."""
        e, state = self.entry, self.state
        words = []
        if e.entered_late:
            words.append(f"entered late{' on ' + e.recorded_at[:10] if e.recorded_at else ''}")
        if e.repeat_of is not None:
            words.append(f"repeat of entry {e.repeat_of}")
        if e.corrects is not None:
            words.append(f"correction of entry {e.corrects} ({e.reason})")
        if state.corrected_by is not None:
            words.append(f"corrected by entry {state.corrected_by}, not used")
        elif state.repeated_by is not None:
            words.append(f"repeated by entry {state.repeated_by}, not used")
        return "; ".join(words)

    def describe(self) -> str:
        """One line: the entry, its verdict (none for a value corrected as a slip), what became of it."""
        judged = ""
        if self.set_aside != "corrected":
            judged = f" ({VERDICT_WORDS[self.verdict.verdict] if self.verdict else 'baseline'})"
        use = "; counts for the day" if self.state.in_use else ""
        return f"entry {self.entry.id}{judged}: {self.standing() or 'first strip'}{use}"


@dataclass(frozen=True)
class ProcessorLog:
    """One processor's QC log, read from the archive and ready for the core.

    Attributes
    ----------
    processor : str
    setup : QcSetup
    log : QCLog
        Each day's entry in use, events (crossovers with their levels) and
        the site's settings.
    notes : tuple of str
        What was read but not used, in plain words.
    entries : tuple of StoredEntry
        Every stored entry, repeats and corrections included, by date and id.
    states : mapping of int to QcEntryState
        What became of each stored entry, by id.
    """

    processor: str
    setup: QcSetup
    log: QCLog
    notes: tuple[str, ...] = ()
    entries: tuple[StoredEntry, ...] = ()
    states: Mapping[int, QcEntryState] = field(default_factory=dict)

    @property
    def latest_entry(self) -> QCEntry | None:
        return self.log.entries[-1] if self.log.entries else None

    @property
    def latest_day(self) -> datetime.date | None:
        """The latest day with a stored entry that nothing corrects (a correction may have moved a wrong date)."""
        return max((parse_day(e.date) for e in self.entries
                    if self.states[e.id].corrected_by is None), default=None)  # type: ignore[index]

    def status(self, today: datetime.date | None = None) -> ProcessorStatus:
        """Today's status (the core's :meth:`QCLog.status`)."""
        return self.log.status(today)

    def levels_on(self, day: datetime.date) -> OperatingLevels | None:
        """The operating levels in force on ``day``; None during a baseline."""
        found = None
        for period in self.log.periods:
            if period.event is None or period.event.date <= day:
                found = period
        return found.levels if found is not None else None

    def logged(self, first: datetime.date | None = None, last: datetime.date | None = None) -> tuple[LoggedEntry, ...]:
        """Every stored entry from ``first`` to ``last`` (inclusive) with its state and verdict, by date and id."""
        verdicts = {d.entry.date: d.verdict for d in self.log.days}
        out = []
        for entry in self.entries:
            day = parse_day(entry.date)
            if (first is not None and day < first) or (last is not None and day > last):
                continue
            state = self.states[entry.id]  # type: ignore[index]
            verdict = verdicts.get(day) if state.in_use else self._judge(entry, day)
            out.append(LoggedEntry(entry, state, verdict))
        return tuple(out)

    def _judge(self, entry: StoredEntry, day: datetime.date) -> DayVerdict | None:
        # An entry not in use is judged by the same rule as the day's entry, against the same levels.
        numbers = [getattr(entry, q) for q in QUANTITIES]
        levels = self.levels_on(day)
        if levels is None or None in numbers:
            return None
        return evaluate_day(QCValues(*numbers), levels, self.setup.limits)

    def step_restart(self, day: datetime.date) -> datetime.date | None:
        """Date of the latest event on or before ``day`` after which the QC steps are chosen again.

        Every event but a crossover restarts the choice: a new box of the
        same film keeps its steps (None before the first such event).
        """
        dates = [e.date for e in self.log.events if e.date <= day and e.kind != "crossover"]
        return dates[-1] if dates else None

    def steps_on(self, day: datetime.date) -> QCSteps | None:
        """The QC steps a strip of ``day`` is read at; None when they are still to be chosen."""
        since = self.step_restart(day)
        for choice in reversed(self.setup.step_choices):
            if choice.since <= day and (since is None or choice.since >= since):
                return choice.steps
        for event in reversed(self.log.events):
            # A crossover record keeps the steps its levels were read at.
            if since is not None and event.date < since:
                break
            if event.date <= day and event.levels is not None and event.levels.steps is not None:
                return event.levels.steps
        return None


def _crossover_levels(archive: Archive, processor: str) -> dict[str, OperatingLevels]:
    levels = {}
    for record in archive.list_crossovers(processor):
        data = record.record.get("result", {}).get("new_levels") or record.record.get("new_levels")
        if data is not None:
            try:
                levels[record.date] = OperatingLevels.from_dict(data)
            except (KeyError, TypeError, ValueError) as exc:
                raise ValueError(f"processor {processor!r}: crossover record {record.id} of {record.date} "
                                 f"has unreadable levels ({exc})") from None
    return levels


# Words of free-text kinds other tools store (e.g. "chemistry change"), and the core's kind for them.
_KIND_WORDS = (("chemistry", "new_chemistry"), ("service", "service"), ("crossover", "crossover"),
               ("sensitometer", "new_sensitometer"), ("film", "new_film_type"))


def _core_kind(kind: str) -> str:
    if kind in EVENT_KINDS:
        return kind
    words = kind.lower().replace("_", " ")
    return next((core for word, core in _KIND_WORDS if word in words), "other")


def load_processor_log(archive: Archive, processor: str) -> ProcessorLog:
    """Read a processor's entries, events, crossovers and settings into a :class:`ProcessorLog`.

    Raises
    ------
    ArchiveLookupError
        When the processor is not in the archive.
    ValueError
        When stored settings or crossover levels cannot be read.
    """
    archive.get_processor(processor)
    setup = load_setup(archive, processor)
    notes = []
    entries = []
    stored = tuple(archive.list_qc_entries(processor))
    states = qc_entry_states(stored)
    for e in stored:
        if not states[e.id].in_use:  # type: ignore[index]
            continue
        if None in (e.base_fog, e.mid_density, e.density_difference):
            notes.append(f"the entry of {e.date} lacks a number and is not judged")
            continue
        entries.append(QCEntry(parse_day(e.date), QCValues(e.base_fog, e.mid_density, e.density_difference),
                               e.source, e.note, e.action))
    levels = _crossover_levels(archive, processor)
    events = []
    for e in archive.list_qc_events(processor):
        kind = _core_kind(e.kind)
        note = f"{e.kind}: {e.note}".rstrip(": ") if kind == "other" and e.kind != "other" else e.note
        events.append(QCEvent(parse_day(e.date), kind, note, levels.get(e.date) if kind == "crossover" else None))
    log = QCLog(entries=tuple(entries), events=tuple(events), limits=setup.limits, rules=setup.rules,
                n_days=setup.baseline_days)
    return ProcessorLog(processor, setup, log, tuple(notes), stored, states)
