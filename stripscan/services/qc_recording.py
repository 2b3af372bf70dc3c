"""Recording a processor's QC: a strip read for QC, a day added (repeats, late days), corrections, events and limits.

Each call is one archive transaction; the rules of order and repeats are the
archive's (:mod:`stripscan.archive.processor_qc`), the QC arithmetic the core's."""

from __future__ import annotations

import dataclasses
import datetime
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from stripscan.archive import Archive, ArchiveLookupError, NewSnapshot, Processor
from stripscan.archive import QcEntry as StoredEntry
from stripscan.core.qc.levels import choose_qc_steps, qc_values_from_steps
from stripscan.core.qc.names import EVENT_KINDS, QUANTITIES
from stripscan.core.qc.records import (
    ProcessorStatus,
    QCEntry,
    QCSteps,
    QCValues,
)
from stripscan.core.records import Analysis, StripResult

from stripscan.services.qc_log import ProcessorLog, QcSetup, StepChoice, load_processor_log, load_setup

__all__ = ["AddedDay", "StripReading", "add_day", "add_event", "correct_entry", "read_strip", "set_limits", "uncalibrated_refusal"]

# Marks "leave as it is" in set_limits, where None means "no warning tier".
_KEEP: Any = object()


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
