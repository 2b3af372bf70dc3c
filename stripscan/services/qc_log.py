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

import dataclasses
import datetime
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from stripscan import CAUTION
from stripscan.archive import Archive, ArchiveLookupError, DuplicateDayError, NewSnapshot, Processor
from stripscan.archive import QcEntry as StoredEntry
from stripscan.archive.qc_records import QcEntryState, qc_entry_states
from stripscan.core.qc.levels import choose_qc_steps, qc_values_from_steps
from stripscan.core.qc.names import EVENT_KINDS, LABELS, QUANTITIES, VERDICT_WORDS
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
from stripscan.core.records import Analysis, StripResult

__all__ = [
    "StepChoice",
    "QcSetup",
    "LoggedEntry",
    "ProcessorLog",
    "DuplicateDayError",
    "StripReading",
    "AddedDay",
    "parse_day",
    "load_setup",
    "load_processor_log",
    "uncalibrated_refusal",
    "read_strip",
    "add_day",
    "correct_entry",
    "add_event",
    "set_limits",
    "status_json",
    "status_text",
    "latest_words",
    "signed",
]


# Marks "leave as it is" in set_limits, where None means "no warning tier".
_KEEP: Any = object()


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


# --------------------------------------------------------------------------
# Reading a strip


@dataclass(frozen=True)
class StripReading:
    """A day's three numbers read off one strip of a scan.

    Attributes
    ----------
    values : QCValues
    steps : QCSteps
        The steps read (kept from the baseline, or chosen now).
    chosen_now : bool
        True when this strip is the one the steps were chosen on.
    strip : StripResult
    source : str
        Where it came from, in plain words (file, strip, sha256).
    """

    values: QCValues
    steps: QCSteps
    chosen_now: bool
    strip: StripResult
    source: str


def _pick_strip(analysis: Analysis, number: int | None) -> StripResult:
    name = Path(analysis.scan.path).name
    if not analysis.strips:
        raise ValueError(f"{name}: no strip was found on the scan; nothing was stored")
    if number is None:
        if len(analysis.strips) > 1:
            raise ValueError(f"{name} holds {len(analysis.strips)} strips; say which one is the QC strip "
                             "with --strip N (numbered as 'stripscan analyze' prints them)")
        return analysis.strips[0]
    for strip in analysis.strips:
        if strip.index == number:
            return strip
    raise ValueError(f"{name} has no strip {number}; its strips are numbered 1 to {len(analysis.strips)}")


def uncalibrated_refusal(name: str) -> str:
    """Why a scan read without a calibration is not stored in the QC log, and what to do instead.

    Parameters
    ----------
    name : str
        The scan's file name, to start the message with.
    """
    return (f"{name} was read without a calibration (direct mode: log10(I0/I) straight from the scanner, "
            "capped by its flare), so its densities are not densitometer readings and would judge the scanner, "
            "not the processor, in a log that cannot be changed; nothing was stored. Calibrate the scanner with "
            "a reference step tablet ('stripscan calibrate') and give the calibration (--calibration CAL.json), "
            "or type the densitometer's values (--base-fog, --mid-density, --density-difference)")


def read_strip(analysis: Analysis, steps: QCSteps | None, *, strip: int | None = None) -> StripReading:
    """Base+fog, mid-density and density difference of the QC strip on an analysed scan.

    Every scanned day passes through here, so this is where an uncalibrated
    read is refused: the operating levels and control limits are in
    densitometer density, and a scan in direct mode is not.

    Parameters
    ----------
    analysis : Analysis
        The pipeline's result for the scan.
    steps : QCSteps or None
        The steps kept from the baseline; None to choose them on this strip
        (steps outside the calibrated range or excluded are never chosen).
    strip : int or None
        Strip number (1-based) when the scan holds more than one.

    Raises
    ------
    ValueError
        A scan read in direct mode (no calibration), no strip, an unknown
        strip number, no base+fog, a kept step missing or not usable on
        this strip.
    """
    # An analysis with no calibration summary at all was not calibrated either.
    if analysis.calibration is None or analysis.calibration.get("mode") == "direct":
        raise ValueError(uncalibrated_refusal(Path(analysis.scan.path).name))
    picked = _pick_strip(analysis, strip)
    where = f"{Path(analysis.scan.path).name}, strip {picked.index}"
    densities = [s.od if s.in_range and not s.excluded else math.nan for s in picked.steps]
    if picked.figures.base_fog is None:
        raise ValueError(f"{where}: no base+fog was read (see 'stripscan analyze'); nothing was stored")
    chosen_now = steps is None
    if steps is None:
        try:
            steps = choose_qc_steps(densities)
        except ValueError as exc:
            raise ValueError(f"{where}: the QC steps cannot be chosen: {exc}") from None
    for name, step in (("mid-density", steps.mid_step), ("density difference high", steps.dd_high_step),
                       ("density difference low", steps.dd_low_step)):
        if step > len(densities):
            raise ValueError(f"{where} has {len(densities)} steps; the {name} step kept from the baseline "
                             f"is step {step}; nothing was stored")
        if not math.isfinite(densities[step - 1]):
            raise ValueError(f"{where}: the {name} step kept from the baseline (step {step}) is outside the "
                             "calibrated range or excluded; nothing was stored")
    values = qc_values_from_steps(densities, steps, picked.figures.base_fog)
    return StripReading(values, steps, chosen_now, picked, f"{where}, sha256 {analysis.scan.sha256[:12]}")


# --------------------------------------------------------------------------
# Writing


@dataclass(frozen=True)
class AddedDay:
    """What :func:`add_day` or :func:`correct_entry` stored, and the processor's status afterwards."""

    entry: StoredEntry
    reading: StripReading | None
    plog: ProcessorLog
    status: ProcessorStatus
    notes: tuple[str, ...] = ()


def _processor_known(archive: Archive, processor: str) -> bool:
    return any(p.name == processor for p in archive.list_processors())


def _require_processor(archive: Archive, processor: str, new_processor: bool) -> Processor | None:
    """The Processor to add first, None when already known; an error when unknown and not allowed."""
    if not isinstance(processor, str) or not processor.strip():
        raise ValueError("a processor name is needed (--processor NAME)")
    if _processor_known(archive, processor):
        return None
    if not new_processor:
        known = ", ".join(repr(p.name) for p in archive.list_processors()) or "none yet"
        raise ArchiveLookupError(f"processor {processor!r} is not in the archive (known: {known}); "
                                 "give --new-processor to start its QC log")
    return Processor(processor)




def _provenance(note: str, source: str) -> str:
    # The scan itself is not kept unless a lot is given; say where the numbers came from.
    return f"{note} [read from {source}]" if note else f"[read from {source}]"


def add_day(
    archive: Archive,
    processor: str,
    day: datetime.date,
    *,
    values: QCValues | None = None,
    analysis: Analysis | None = None,
    strip: int | None = None,
    calibration: dict[str, Any] | None = None,
    lot: str | None = None,
    note: str = "",
    action: str = "",
    new_processor: bool = False,
    repeat: bool = False,
    late: bool = False,
) -> AddedDay:
    """Store one day's QC entry, typed in or read off a scan, in one transaction.

    Parameters
    ----------
    archive : Archive
    processor : str
    day : datetime.date
        Day the strip was processed; after the latest entry.
    values : QCValues, optional
        Typed-in values (densitometer readings); exclusive with ``analysis``.
    analysis : Analysis, optional
        The pipeline's result for the day's scan; read at the kept steps.
    strip : int, optional
        Which strip of the scan, when it holds several.
    calibration : dict, optional
        The full calibration used, stored with the strip when ``lot`` is given.
    lot : str, optional
        Emulsion lot of the QC film: keeps the strip as a snapshot linked to the entry.
    note, action : str
        Remark, and corrective action taken that day.
    new_processor : bool
        Add the processor if it is not in the archive yet.
    repeat : bool
        A repeat strip of the latest day: stored beside the day's entry,
        which is kept, and used as the day's value from now on.
    late : bool
        A missed day entered after later days: stored marked as entered
        late; the days after it are judged again in date order.

    Raises
    ------
    DuplicateDayError
        A second strip of a day not declared a repeat.
    OutOfOrderError
        A day before the latest one without ``late``.
    ValueError, ArchiveError
        With a one-line message; nothing is stored.
    """
    if (values is None) == (analysis is None):
        raise ValueError("give either a scan or the three typed values (base+fog, mid-density, density difference)")
    if lot is not None and analysis is None:
        raise ValueError("--lot keeps the scanned strip in the archive; it needs a scan")
    add_processor = _require_processor(archive, processor, new_processor)
    plog = None if add_processor else load_processor_log(archive, processor)
    setup = plog.setup if plog else QcSetup()
    settings, reading, snapshot, notes = None, None, None, []
    settings_reason = "QC log started"
    if analysis is not None:
        reading = read_strip(analysis, plog.steps_on(day) if plog else None, strip=strip)
        values = reading.values
        if reading.chosen_now:
            since = plog.step_restart(day) if plog else None
            choice = StepChoice(day, reading.steps, reading.source)
            settings = dataclasses.replace(setup, step_choices=(*setup.step_choices, choice)).to_settings()
            settings_reason = f"QC steps chosen on {reading.source}"
            notes.append(f"QC steps chosen on this strip{' (after the ' + since.isoformat() + ' event)' if since else ''} "
                         f"and kept from now on: mid-density step {reading.steps.mid_step}, density difference "
                         f"step {reading.steps.dd_high_step} - step {reading.steps.dd_low_step}")
        if lot is not None:
            snapshot = NewSnapshot(lot_id=lot, scan=analysis.scan, strip=reading.strip, processor=processor,
                                   calibration=calibration if calibration is not None else analysis.calibration,
                                   processed_on=day.isoformat(), settings=dict(analysis.settings),
                                   warnings=tuple(analysis.warnings), program_version=analysis.program_version,
                                   notes=note)
            if not any(s.lot.lot_id == lot for s in archive.list_lots()):
                notes.append(f"lot {lot!r} was not in the archive; added it with no further details")
        else:
            note = _provenance(note, reading.source)
    elif add_processor is not None:
        settings = setup.to_settings()
    assert values is not None
    # The core's own record checks the numbers before anything is written.
    QCEntry(day, values, "scan" if analysis is not None else "manual", note, action)
    entry = StoredEntry(processor, day.isoformat(), values.base_fog, values.mid_density, values.density_difference,
                        "scan" if analysis is not None else "manual", note=note, action=action)
    stored = archive.add_qc_day(entry, repeat=repeat, new_processor=add_processor, snapshot=snapshot,
                                settings=settings, settings_reason=settings_reason, late=late)
    after = load_processor_log(archive, processor)
    if add_processor is not None:
        notes.insert(0, f"processor {processor!r} was not in the archive; added it and started its QC log")
    if stored.repeat_of is not None:
        notes.append(f"stored as a repeat strip of {stored.date}: entry {stored.repeat_of} is kept and shown, and "
                     "this strip is the day's value from now on")
    if stored.entered_late:
        notes.append(f"stored marked as entered late ({stored.recorded_at}): the days after {stored.date} are "
                     "judged again with it, in date order")
    return AddedDay(stored, reading, after, after.status(), tuple(notes))


def correct_entry(archive: Archive, entry_id: int, *, reason: str, base_fog: float | None = None,
                  mid_density: float | None = None, density_difference: float | None = None,
                  note: str | None = None, action: str | None = None,
                  date: datetime.date | None = None) -> AddedDay:
    """Correct a wrongly entered QC entry, keeping the wrong one for the audit trail.

    A new entry of the same processor is stored that names the entry it
    corrects and why; from then on it counts instead of that entry, and
    every day is judged again.  With ``date`` it moves the entry to the
    right day (a day's single strip, to a day without an entry).

    Parameters
    ----------
    archive : Archive
    entry_id : int
        The entry to correct (``stripscan qc list`` shows the numbers).
    reason : str
        Why the entry was wrong (needed).
    base_fog, mid_density, density_difference : float, optional
        The right values, OD; those not given are kept.
    note, action : str, optional
        A new remark or corrective action; kept when not given.
    date : datetime.date, optional
        The right date, when the entry's date was wrong.

    Raises
    ------
    ValueError, ArchiveError
        With a one-line message; nothing is stored.
    """
    if not isinstance(reason, str) or not reason.strip():
        raise ValueError(f"QC entry {entry_id} is corrected only with a reason: say why it was wrong")
    changes = {k: v for k, v in (("base_fog", base_fog), ("mid_density", mid_density),
                                 ("density_difference", density_difference), ("note", note), ("action", action),
                                 ("date", date.isoformat() if date is not None else None))
               if v is not None}
    if not changes:
        raise ValueError(f"give the right value(s) for QC entry {entry_id}: base+fog, mid-density, density "
                         "difference, date, note or action")
    old = archive.get_qc_entry(entry_id)
    numbers = {q: changes.get(q, getattr(old, q)) for q in QUANTITIES}
    if None not in numbers.values():
        try:
            QCValues(**numbers)  # the core's own checks on the numbers, before anything is written
        except ValueError as exc:
            raise ValueError(f"QC entry {entry_id} of {old.date}: {exc}; nothing was stored") from None
    stored = archive.add_qc_correction(entry_id, reason, **changes)
    after = load_processor_log(archive, stored.processor)
    notes = [f"entry {entry_id} of {old.date} is kept and shown as corrected by entry {stored.id}; it no longer counts"]
    if stored.date != old.date:
        notes.append(f"the strip now counts for {stored.date}; {old.date} has no entry of it any more"
                     + (" (marked as entered late: the days after it are judged again)" if stored.entered_late else ""))
    if not after.states[stored.id].in_use:  # type: ignore[index]
        notes.append(f"entry {entry_id}'s strip was repeated the same day: the repeat still counts for {old.date}")
    return AddedDay(stored, None, after, after.status(), tuple(notes))


def add_event(archive: Archive, processor: str, day: datetime.date, kind: str, note: str = "", *,
              new_processor: bool = False) -> ProcessorLog:
    """Record an event that restarts the baseline (new chemistry, service, crossover...).

    Raises
    ------
    ValueError
        Unknown kind, or a date before the latest entry (it would re-judge
        days already reported).
    """
    if kind not in EVENT_KINDS:
        raise ValueError(f"unknown event kind {kind!r}; expected one of: {', '.join(EVENT_KINDS)}")
    add_processor = _require_processor(archive, processor, new_processor)
    if add_processor is not None:
        archive.add_processor(add_processor)
    # The archive refuses a date before the latest entry inside the write (it would re-judge days already reported).
    archive.add_qc_event(processor, day.isoformat(), kind, note)
    return load_processor_log(archive, processor)


def set_limits(archive: Archive, processor: str, *, md_dd_action: Any = _KEEP, md_dd_warning: Any = _KEEP,
               base_fog_action: Any = _KEEP, base_fog_warning: Any = _KEEP, baseline_days: Any = _KEEP,
               run_length: Any = _KEEP, drift_length: Any = _KEEP, new_processor: bool = False,
               reason: str = "") -> QcSetup:
    """Change a processor's limits, baseline length or trend-rule sizes; arguments not given stay.

    ``md_dd_warning=None`` or ``base_fog_warning=None`` removes that warning
    tier.  Every stored day is judged again with the new settings.  The
    settings before are kept (``Archive.qc_settings_history``): the change is
    a new row with its time and ``reason`` (when none is given, the changes
    themselves in words).
    """
    add_processor = _require_processor(archive, processor, new_processor)
    setup = QcSetup() if add_processor else load_setup(archive, processor)
    limits = {k: v for k, v in (("md_dd_action", md_dd_action), ("md_dd_warning", md_dd_warning),
                                ("base_fog_action", base_fog_action), ("base_fog_warning", base_fog_warning))
              if v is not _KEEP}
    sizes = {k: v for k, v in (("run_length", run_length), ("drift_length", drift_length)) if v is not _KEEP}
    setup = dataclasses.replace(
        setup, limits=dataclasses.replace(setup.limits, **limits), rules=dataclasses.replace(setup.rules, **sizes),
        baseline_days=setup.baseline_days if baseline_days is _KEEP else baseline_days)
    if add_processor is not None:
        archive.add_processor(add_processor)
    changed = ", ".join(f"{k} {v}" for k, v in {**limits, **sizes}.items())
    if baseline_days is not _KEEP:
        changed = ", ".join(filter(None, (changed, f"baseline_days {baseline_days}")))
    archive.set_qc_settings(processor, setup.to_settings(), reason.strip() or f"changed: {changed or 'nothing'}")
    return setup


# --------------------------------------------------------------------------
# Reporting


def _values_dict(values: QCValues | None) -> dict[str, float] | None:
    return None if values is None else {q: round(getattr(values, q), 4) for q in QUANTITIES}


def status_json(plog: ProcessorLog, status: ProcessorStatus | None = None) -> dict[str, Any]:
    """The status as JSON-ready data (``stripscan qc status --json``).

    Keys: ``processor``; ``operating_levels`` (``base_fog``, ``mid_density``,
    ``density_difference``, ``established``, ``reason``, or null during a
    baseline); ``latest`` (``date``, ``values``, ``deviations``, ``verdict``
    one of ok / warning / action, ``rules``, ``reasons``, ``advice``,
    ``entries``: every entry stored for that day with ``entry`` id,
    ``kind``, ``in_use``, ``entered_late``, ``verdict`` and ``standing`` in words);
    ``baseline`` (``in_progress``, ``days``, ``needed``, ``set_by``: see
    :func:`_baseline_json`); ``limits``; ``steps``; ``caution``.
    """
    status = status or plog.status()
    levels = status.levels
    reasons: tuple[str, ...] = ()
    if status.values is not None and levels is not None:
        reasons = evaluate_day(status.values, levels, plog.setup.limits).reasons
    steps = plog.steps_on(status.latest_date) if status.latest_date else None
    return {
        "processor": plog.processor,
        "operating_levels": None if levels is None else {
            **_values_dict(levels.values),  # type: ignore[arg-type]
            "established": levels.established.isoformat(), "n_days": levels.n_days, "reason": levels.reason},
        "latest": {
            "date": status.latest_date.isoformat() if status.latest_date else None,
            "values": _values_dict(status.values),
            "deviations": _values_dict(status.deviations),
            "verdict": status.verdict,
            "rules": list(status.rules_fired),
            "rule_messages": [f.message for f in status.findings],
            "reasons": list(reasons),
            "advice": status.advice,
            "entries": [{"entry": item.entry.id, "kind": item.entry.kind, "in_use": item.state.in_use,
                         "entered_late": item.entry.entered_late,
                         # A value corrected as a slip is not a reading to judge.
                         "verdict": item.verdict.verdict if item.verdict and item.set_aside != "corrected" else None,
                         "standing": item.standing()}
                        for item in _day_entries(plog, status.latest_date)],
        },
        "baseline": _baseline_json(plog, status),
        "limits": plog.setup.limits.to_dict(),
        "steps": steps.to_dict() if steps else None,
        "notes": list(plog.notes),
        "caution": CAUTION,
    }


def _baseline_json(plog: ProcessorLog, status: ProcessorStatus) -> dict[str, Any]:
    """The baseline of the levels in force: strips so far or strips that set them, and what set them.

    ``days`` counts the strips of the baseline in progress, or, once the
    levels are set, the strips averaged for them (0 when a crossover set
    them); ``set_by`` is ``"baseline"``, ``"crossover"`` or null while in progress.
    """
    if status.baseline_in_progress or not plog.log.periods:
        return {"in_progress": True, "days": status.baseline_days, "needed": plog.setup.baseline_days,
                "set_by": None}
    period = plog.log.periods[-1]
    set_by = "crossover" if period.event is not None and period.event.levels is not None else "baseline"
    return {"in_progress": False, "days": len(period.setting_days), "needed": plog.setup.baseline_days,
            "set_by": set_by}


def _day_entries(plog: ProcessorLog, day: datetime.date | None) -> tuple[LoggedEntry, ...]:
    return plog.logged(day, day) if day is not None else ()


def signed(value: float) -> str:
    """A deviation as +0.012 (a rounded -0.000 shows as +0.000)."""
    # Adding 0.0 turns a rounded -0.0 into 0.0: no "-0.000" for a point on its level.
    return f"{round(value, 3) + 0.0:+.3f}"


def latest_words(status: ProcessorStatus) -> str:
    """``"latest strip YYYY-MM-DD"``, or ``"no strip yet"`` when no strip is recorded."""
    return f"latest strip {status.latest_date.isoformat()}" if status.latest_date else "no strip yet"


def status_text(plog: ProcessorLog, status: ProcessorStatus | None = None) -> str:
    """The status in plain lines: verdict, numbers, rules fired, advice (ending with the caution)."""
    status = status or plog.status()
    head = "BASELINE IN PROGRESS" if status.baseline_in_progress else VERDICT_WORDS[status.verdict]
    lines = [f"{plog.processor}: {head} ({latest_words(status)})"]
    if status.levels is not None:
        lv = status.levels
        lines.append(f"  operating levels ({lv.reason}, set {lv.established.isoformat()}): "
                     + ", ".join(f"{LABELS[q]} {getattr(lv, q):.3f}" for q in QUANTITIES))
    if status.values is not None:
        dev = status.deviations
        lines.append("  latest: " + ", ".join(
            f"{LABELS[q]} {getattr(status.values, q):.3f}"
            + (f" ({signed(getattr(dev, q))})" if dev is not None else "") for q in QUANTITIES))
    day = _day_entries(plog, status.latest_date)
    if len(day) > 1:
        # A repeated or corrected day: say which entry counts and which are kept.
        lines.extend(f"  {item.describe()}" for item in day)
    if status.rules_fired:
        lines.append("  trend rules fired: " + ", ".join(status.rules_fired))
    lines.extend(f"  note: {n}" for n in plog.notes)
    lines.append(f"  {status.advice}")
    return "\n".join(lines)
