"""The processor QC page without Qt: the processor shown, its log, and what a form may store.

:class:`QcPage` holds the page's state (the archive, its processors, the
processor shown with its log and chart data) and decides what to read or
store and what follows; the reading and storing are the plain functions of
this module, run by a worker thread (each opens the archive for one look
and keeps no connection, so the command line may write meanwhile, and a
slow or locked archive never freezes the window).  The panel
(:class:`~stripscan.gui.panels.qc_panel.QcPanel`) subscribes to
:attr:`QcPage.events`, draws, and writes back through the methods.

Every number and verdict comes from :mod:`stripscan.services.qc_log` and
the pure core.
"""

from __future__ import annotations

import datetime
import os
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

from stripscan.archive import Archive, Processor
from stripscan.archive import QcEntry as StoredEntry
from stripscan.core.qc.names import QUANTITIES
from stripscan.core.qc.records import QCLimits, QCValues
from stripscan.gui.models.events import Event
from stripscan.gui.models.location import ArchiveLocation, as_location, connection_lost
from stripscan.gui.models.work import Run, run_now
from stripscan.services.qc_chart import ChartData, chart_data
from stripscan.core.qc.names import LABELS
from stripscan.services.qc_log import DuplicateDayError, ProcessorLog, QcSetup, load_processor_log
from stripscan.services.qc_recording import AddedDay, add_day, correct_entry

__all__ = ["QcPage", "QcPageEvents", "QcRead", "FILM_TYPE_KEY", "create_processor", "read_qc", "store_day",
           "store_correction", "typed_values", "correction_changes", "form_date", "entry_words", "join_words"]

#: The key of a processor's QC settings that holds the film type its QC strips are cut from.
FILM_TYPE_KEY = "qc_film_type"
#: What a refusal of a repeat-less second strip of a day adds.
REPEAT_HINT = " Tick 'Repeat strip of the day' to keep it as a repeat."


def join_words(words: list[str]) -> str:
    """'a', 'a and b', 'a, b and c'."""
    return " and ".join(words) if len(words) < 3 else f"{', '.join(words[:-1])} and {words[-1]}"


# -- reading and storing (run in a worker thread) ------------------------------------------------


@dataclass(frozen=True)
class QcRead:
    """What one look at the archive gives the page.

    Attributes
    ----------
    processors : tuple of str
        Every processor of the archive.
    processor : str or None
        The one shown: the one asked for when the archive has it, else the first.
    plog : ProcessorLog or None
    data : ChartData or None
        The plots' data (None while the processor has no day in use).
    problem : str
        Why the processor's log could not be read ("" when it was).
    """

    processors: tuple[str, ...] = ()
    processor: str | None = None
    plog: ProcessorLog | None = None
    data: ChartData | None = None
    problem: str = ""


def _with_chart(plog: ProcessorLog) -> ChartData | None:
    return chart_data(plog) if plog.log.entries else None


def read_qc(path: str | os.PathLike[str], wanted: str | None, *, progress: Any = None) -> QcRead:
    """The archive's processors and the log of ``wanted`` (or the first processor)."""
    with Archive.open(path, create=False) as archive:
        names = tuple(p.name for p in archive.list_processors())
        processor = wanted if wanted in names else (names[0] if names else None)
        if processor is None:
            return QcRead(names)
        try:
            plog = load_processor_log(archive, processor)
        except ValueError as exc:  # a log the core refuses is said on the page, never a crash
            return QcRead(names, processor, problem=f"Cannot read the QC log of {processor!r}: {exc}")
    return QcRead(names, processor, plog, _with_chart(plog))


def store_day(path: str | os.PathLike[str], processor: str, day: datetime.date, *, progress: Any = None,
              **details: Any) -> tuple[AddedDay, ChartData | None]:
    """Store one day's entry (:func:`stripscan.services.qc_recording.add_day`); the log afterwards and its chart data."""
    with Archive.open(path, create=False) as archive:
        added = add_day(archive, processor, day, **details)
    return added, _with_chart(added.plog)


def store_correction(path: str | os.PathLike[str], entry_id: int, *, reason: str, changes: Mapping[str, float],
                     progress: Any = None) -> tuple[AddedDay, ChartData | None]:
    """Store the correction of entry ``entry_id`` (:func:`stripscan.services.qc_recording.correct_entry`)."""
    with Archive.open(path, create=False) as archive:
        added = correct_entry(archive, entry_id, reason=reason, **changes)
    return added, _with_chart(added.plog)


def create_processor(path: str | os.PathLike[str], name: str, *, film_type: str = "",
                     limits: QCLimits | None = None, progress: Any = None) -> QcSetup:
    """Add a processor to the archive at ``path`` (made when missing) and start its QC log.

    Parameters
    ----------
    path : path-like
        The archive file.
    name : str
        The processor's name; it must be new.
    film_type : str
        The QC film its daily strips are cut from (kept with its QC settings).
    limits : QCLimits, optional
        Control limits and warning tiers (default 21 CFR 900.12(e)(1) with a ±0.10 warning tier).

    Raises
    ------
    ValueError, ArchiveError
        A name missing or taken, limits that do not hold; nothing is stored.
    """
    name = name.strip()
    if not name:
        raise ValueError("type the processor's name")
    # Everything is checked before the first write, so a refusal leaves the archive as it was.
    setup = QcSetup(limits=limits or QCLimits(), extra={FILM_TYPE_KEY: film_type.strip()} if film_type.strip() else {})
    record = Processor(name)
    with Archive.open(path, create=True) as archive:
        if any(p.name == name for p in archive.list_processors()):
            raise ValueError(f"processor {name!r} is in the archive already; choose it in the list")
        archive.add_processor(record)
        archive.set_qc_settings(name, setup.to_settings())
    return setup


# -- the forms' decisions ---------------------------------------------------------------------------


def typed_values(typed: Mapping[str, float | None]) -> QCValues:
    """The three densities of a typed day, each required.

    Raises
    ------
    ValueError
        Naming every missing value (the log is never given a number nobody typed).
    """
    missing = [LABELS[q] for q in QUANTITIES if typed.get(q) is None]
    if missing:
        raise ValueError(f"{join_words(missing)} {'is' if len(missing) == 1 else 'are'} missing: type all "
                         "three values read on the densitometer")
    return QCValues(*(typed[q] for q in QUANTITIES))  # type: ignore[arg-type]


def correction_changes(entry: StoredEntry, typed: Mapping[str, float | None]) -> dict[str, float]:
    """The values typed in a correction form that differ from ``entry``'s own, to the form's 0.001 OD."""
    return {q: v for q, v in typed.items() if v is not None
            and (getattr(entry, q) is None or round(v, 3) != round(getattr(entry, q), 3))}


def form_date(plog: ProcessorLog | None, *, repeat: bool, today: datetime.date) -> datetime.date:
    """The day a new strip is for: the day after the latest strip, or the latest strip's own day for a repeat."""
    latest = plog.latest_day if plog is not None else None
    if latest is None:
        return today
    return latest if repeat else latest + datetime.timedelta(days=1)


def entry_words(plog: ProcessorLog | None, entry_id: int) -> str:
    """The chosen entry in a line: its day, source, values and whether it was corrected already."""
    entry = find_entry(plog, entry_id)
    if entry is None:
        return f"No entry {entry_id} for this processor."
    state = plog.states[entry_id] if plog is not None else None
    fate = f"; corrected already by entry {state.corrected_by}" if state and state.corrected_by else ""
    return f"{entry.date}, {entry.source}: " + ", ".join(
        f"{LABELS[q]} {getattr(entry, q):.3f}" for q in QUANTITIES if getattr(entry, q) is not None) + fate


def find_entry(plog: ProcessorLog | None, entry_id: int) -> StoredEntry | None:
    """The stored entry ``entry_id`` of the log shown, or None."""
    entries = plog.entries if plog is not None else ()
    return next((e for e in entries if e.id == entry_id), None)


def refusal_words(error: BaseException) -> str:
    """Why an entry was not stored, with what to do about a second strip of a day."""
    return f"{error}.{REPEAT_HINT if isinstance(error, DuplicateDayError) else ''}"


# -- the page ------------------------------------------------------------------------------------------


class QcPageEvents:
    """The events a :class:`QcPage` emits.

    Attributes
    ----------
    shown : Event
        The processor list and the processor shown were read again; no arguments.
    message : Event
        ``(where, text, ok)``: what became of a form's store (where: "day", "scan", "correct",
        "processor") or of a reading ("page"), in words.
    stored : Event
        ``(where, processor, added)`` after a day or a correction was stored and the log read again
        (``added``: the :class:`AddedDay`; for a new processor its name).
    """

    def __init__(self) -> None:
        self.shown = Event("shown")
        self.message = Event("message")
        self.stored = Event("stored")


class QcPage:
    """A processor's QC log over one archive file.

    Parameters
    ----------
    path : path-like, optional
        The archive file (it must exist: a new processor makes one at
        :attr:`new_archive_path` on purpose, looking never does).
    run : Run
        Runs the reading and storing (the page's worker threads; default: at once).

    Attributes
    ----------
    path, new_archive_path : Path, str or None
        A file, or a server's connection string (:mod:`stripscan.gui.models.location`).
    processors : tuple of str
    processor : str or None
        The processor shown.
    plog : ProcessorLog or None
    data : ChartData or None
    """

    def __init__(self, path: str | os.PathLike[str] | None = None, *, run: Run = run_now) -> None:
        self.run = run
        self.events = QcPageEvents()
        self.path: ArchiveLocation | None = as_location(path)
        self.new_archive_path: ArchiveLocation | None = None
        self.processors: tuple[str, ...] = ()
        self.processor: str | None = None
        self.plog: ProcessorLog | None = None
        self.data: ChartData | None = None

    def read(self, processor: str | None = None, *, then: Callable[[], None] | None = None) -> None:
        """Read the processor list and ``processor``'s log (default: the one shown) again; then call ``then``."""
        wanted = processor if processor is not None else self.processor

        def shown(read: QcRead) -> None:
            self._shown(read)
            if then is not None:
                then()

        if self.path is None:
            shown(QcRead())
            return
        self.run(read_qc, self.path, wanted, key="qc-read", on_done=shown,
                 on_error=lambda exc: self._read_failed(exc))

    def _read_failed(self, error: BaseException) -> None:
        if not connection_lost(error):  # a lost connection keeps the log, its charts and the forms as they are
            self._shown(QcRead(self.processors))
        self.events.message.emit("page", f"Cannot read the archive: {error}", False)

    def _shown(self, read: QcRead) -> None:
        self.processors, self.processor = read.processors, read.processor
        self.plog, self.data = read.plog, read.data
        self.events.shown.emit()
        if read.problem:
            self.events.message.emit("page", read.problem, False)

    def clear(self) -> None:
        """Show no processor."""
        self.processor, self.plog, self.data = None, None, None
        self.events.shown.emit()

    def _after_store(self, where: str, processor: str, result: tuple[AddedDay, ChartData | None]) -> None:
        added, data = result
        self.processor, self.plog, self.data = processor, added.plog, data
        self.events.shown.emit()
        self.events.stored.emit(where, processor, added)

    def store_day(self, where: str, processor: str, day: datetime.date, **details: Any) -> None:
        """Store a day's entry (``details`` as :func:`stripscan.services.qc_recording.add_day` takes them)."""
        self.run(store_day, self.path, processor, day, key="qc-store",
                 on_done=lambda result: self._after_store(where, processor, result),
                 on_error=lambda exc: self.events.message.emit(where, refusal_words(exc), False), **details)

    def store_correction(self, processor: str, entry_id: int, *, reason: str, changes: Mapping[str, float]) -> None:
        """Store the correction of entry ``entry_id``."""
        self.run(store_correction, self.path, entry_id, reason=reason, changes=dict(changes), key="qc-store",
                 on_done=lambda result: self._after_store("correct", processor, result),
                 on_error=lambda exc: self.events.message.emit("correct", str(exc), False))

    def create_processor(self, name: str, *, film_type: str = "", limits: QCLimits | None = None) -> bool:
        """Make the processor ``name`` (and the archive file if there is none yet); False with no archive chosen."""
        path = self.path or self.new_archive_path
        if path is None:
            self.events.message.emit("processor", "choose or make a lot archive first (Archive menu)", False)
            return False
        name = name.strip()

        def made(_setup: QcSetup) -> None:
            self.path = as_location(path)
            self.read(name, then=lambda: self.events.stored.emit("processor", name, None))

        self.run(create_processor, path, name, film_type=film_type, limits=limits, key="qc-store", on_done=made,
                 on_error=lambda exc: self.events.message.emit("processor", str(exc), False))
        return True
