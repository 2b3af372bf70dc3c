"""Processor QC records kept in the archive: the day's entries (repeats, corrections), their states,
events, settings and crossovers.  Frozen, checked in ``__post_init__``, JSON round trip."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any, NamedTuple

from stripscan.archive.values import (
    canonical_json,
    check_day,
    check_time,
    check_name,
    check_text,
    check_number,
    check_id,
    set_field,
    PlainRecord,
)

__all__ = ["QcEntry", "QcEntryState", "qc_entry_states", "QcEvent", "QcSettings", "Crossover", "QC_SOURCES"]

QC_SOURCES: tuple[str, ...] = ("scan", "manual")


@dataclass(frozen=True)
class QcEntry(PlainRecord):
    """One processor QC strip of a day: the three control densities.

    A day normally has one entry.  A second strip processed the same day
    (after a result past a limit, say) is stored as a *repeat* linked to the
    entry it follows; a wrongly entered value is fixed by a *correction*, a
    new entry of the same processor and day that names the entry it
    corrects and why.  Nothing stored is ever changed.

    Attributes
    ----------
    source : str
        ``"scan"`` when read from an archived strip (see ``snapshot_id``),
        ``"manual"`` when typed in from a densitometer.
    action : str
        What was done about it, if anything.
    id : int or None
        Archive-wide number of the entry; None before it is stored.
    recorded_at : str or None
        When it was stored (UTC).  None for entries stored before the
        archive kept that time (schema version 2 and earlier).
    repeat_of : int or None
        For a repeat strip: the entry of the same day it follows.
    corrects : int or None
        For a correction: the entry whose values it replaces.
    reason : str or None
        Why the correction was made (set exactly when ``corrects`` is).
        A correction may also fix the date: it then carries the right date
        and the corrected entry's day is free again.
    entered_late : bool
        Stored after a later day of the same processor was already in the
        log (a missed day entered late, or a date corrected backwards);
        ``recorded_at`` says when.  Levels, limits and trend rules take the
        days in date order all the same.
    """

    processor: str
    date: str
    base_fog: float | None
    mid_density: float | None
    density_difference: float | None
    source: str = "manual"
    snapshot_id: int | None = None
    note: str = ""
    action: str = ""
    id: int | None = None
    recorded_at: str | None = None
    repeat_of: int | None = None
    corrects: int | None = None
    reason: str | None = None
    entered_late: bool = False

    def __post_init__(self) -> None:
        check_name(self.processor, "processor")
        if self.entered_late not in (True, False):  # 0 and 1 as SQLite returns them are fine
            raise ValueError(f"entered_late must be true or false, not {self.entered_late!r}")
        set_field(self, "entered_late", bool(self.entered_late))
        if self.date is None:
            raise ValueError("a QC entry needs a date")
        check_day(self.date, "QC date")
        for name in ("base_fog", "mid_density", "density_difference"):
            check_number(getattr(self, name), name)
        if self.source not in QC_SOURCES:
            raise ValueError(f"QC source {self.source!r} is not one of {', '.join(QC_SOURCES)}")
        check_text(self.note, "note")
        check_text(self.action, "action")
        check_id(self.id, "QC entry id")
        check_time(self.recorded_at, "recorded_at")
        self._check_links()

    def _check_links(self) -> None:
        for name in ("repeat_of", "corrects"):
            link = getattr(self, name)
            check_id(link, name)
            if link is not None and self.id is not None and link >= self.id:
                raise ValueError(f"QC entry {self.id} cannot name entry {link} in {name}: only an earlier entry")
        if self.repeat_of is not None and self.corrects is not None:
            raise ValueError("a QC entry is a repeat strip or a correction, not both")
        if (self.corrects is None) != (self.reason is None):
            raise ValueError("a correction names the entry it corrects and a reason, both or neither")
        if self.reason is not None:
            check_name(self.reason, "reason for the correction")

    @property
    def kind(self) -> str:
        """``"first strip"``, ``"repeat"`` or ``"correction"``."""
        if self.corrects is not None:
            return "correction"
        return "first strip" if self.repeat_of is None else "repeat"


class QcEntryState(NamedTuple):
    """What became of a stored QC entry, from the entries of its day.

    Attributes
    ----------
    in_use : bool
        True for the one entry per processor and day that counts for
        operating levels, control limits and trend rules: the latest
        correction of the day's latest strip.
    corrected_by : int or None
        The correction that replaces this entry's values.
    repeated_by : int or None
        The first entry of the later strip of the same day that replaces
        this entry's strip.
    strip : int
        The entry this one's chain of corrections starts from (its own id
        when it is no correction).
    """

    in_use: bool
    corrected_by: int | None
    repeated_by: int | None
    strip: int


def qc_entry_states(entries: Iterable[QcEntry]) -> dict[int, QcEntryState]:
    """The state of every stored entry, by id.

    A day's strips are taken in the order they were stored; a correction
    belongs to the strip of the entry it corrects, and the strip belongs to
    the day of its latest correction (a correction may fix a wrong date).  The day's value is the
    latest strip's latest correction (common practice: a repeat strip
    confirms or clears the first result).

    Parameters
    ----------
    entries : iterable of QcEntry
        Stored entries (with ids), including every entry of each day they
        cover; any order.
    """
    by_id = {e.id: e for e in entries}
    if None in by_id:
        raise ValueError("only stored QC entries (with an id) have a state")
    corrected_by = {e.corrects: e.id for e in by_id.values() if e.corrects is not None}

    def strip_of(entry: QcEntry) -> int:
        while entry.corrects is not None and entry.corrects in by_id:
            entry = by_id[entry.corrects]
        return entry.id  # type: ignore[return-value]

    strips = {i: strip_of(e) for i, e in by_id.items()}
    later: dict[int, int] = {}
    days: dict[tuple[str, str], set[int]] = {}
    for i, e in by_id.items():
        if i not in corrected_by:  # the chain's latest entry says which day the strip is of
            days.setdefault((e.processor, e.date), set()).add(strips[i])
    for firsts in days.values():
        ordered = sorted(firsts)
        later.update(zip(ordered, ordered[1:]))
    return {i: QcEntryState(i not in corrected_by and strips[i] not in later, corrected_by.get(i),
                            later.get(strips[i]), strips[i])
            for i in by_id}


@dataclass(frozen=True)
class QcEvent(PlainRecord):
    """Something that happened to a processor (chemistry change, service...)."""

    id: int
    processor: str
    date: str
    kind: str
    note: str = ""

    def __post_init__(self) -> None:
        check_name(self.processor, "processor")
        check_day(self.date, "event date")
        check_name(self.kind, "event kind")
        check_text(self.note, "note")


@dataclass(frozen=True)
class QcSettings(PlainRecord):
    """A processor's QC settings (operating levels, control limits, steps) as plain JSON.

    Settings are never changed in place: every change is a new row with its
    time and reason, and a processor's latest row is in force.

    Attributes
    ----------
    reason : str
        Why the settings were changed ('' for rows from before the archive
        kept a reason).
    id : int or None
        Archive-wide number of the row; None before it is stored.
    """

    processor: str
    settings: dict[str, Any]
    updated_at: str
    reason: str = ""
    id: int | None = None

    def __post_init__(self) -> None:
        check_name(self.processor, "processor")
        check_text(self.reason, "reason for the settings change")
        check_id(self.id, "QC settings id")
        if not isinstance(self.settings, dict):
            raise ValueError("QC settings must be a JSON object (dict)")
        canonical_json(self.settings)
        check_time(self.updated_at, "updated_at")


@dataclass(frozen=True)
class Crossover(PlainRecord):
    """A stored crossover (old lot against new lot) for a processor, as plain JSON."""

    id: int
    processor: str
    date: str
    record: dict[str, Any]

    def __post_init__(self) -> None:
        check_name(self.processor, "processor")
        check_day(self.date, "crossover date")
        if not isinstance(self.record, dict):
            raise ValueError("a crossover record must be a JSON object (dict)")
        canonical_json(self.record)
