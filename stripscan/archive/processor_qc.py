"""Processor QC: the day's entries with repeats and corrections, events, settings and crossovers.

Part of :class:`stripscan.archive.service.Archive`, which adds the plumbing these rules use
(``_writing``, ``read_together``, ``_c``, ``_query``, ``_rows``, ``_chain``, ``_missing``, ``_checked``).
"""

from __future__ import annotations

import dataclasses
import json
from collections.abc import Sequence
from typing import Any, Callable


from stripscan.archive.backend import Connection
from stripscan.archive.entry_checks import check_qc_entry
from stripscan.archive.errors import (
    ArchiveConflictError,
    ArchiveError,
    DuplicateDayError,
    OutOfOrderError,
)
from stripscan.archive.records import NewSnapshot, Processor
from stripscan.archive.values import canonical_json, utc_now
from stripscan.archive.qc_records import Crossover, QcEntry, QcEvent, QcSettings, qc_entry_states
from stripscan.archive.tables import (
    insert_sql,
    QC_DENSITIES,
    QC_CORRECTABLE,
    QC_LATEST_DAY,
)


class ProcessorQc:
    """Processor QC: the day's entries with repeats and corrections, events, settings and crossovers. A part of :class:`~stripscan.archive.service.Archive`."""

    # ------------------------------------------------------ processor QC

    def _check_qc_processor(self, processor: str) -> None:
        if not self._exists("processors", "name", processor):
            raise self._missing("processor", processor)

    def _qc_day(self, conn: Connection, processor: str, date: str) -> list[QcEntry]:
        rows = self._backend.rows(conn, "SELECT * FROM qc_entries WHERE processor = ? AND date = ? ORDER BY id",
                                  (processor, date))
        return [QcEntry(**dict(row)) for row in rows]

    @staticmethod
    def _qc_in_use(day: list[QcEntry]) -> QcEntry:
        """The entry that counts for a day: its latest strip's latest correction."""
        states = qc_entry_states(day)
        return next(e for e in day if states[e.id].in_use)  # type: ignore[index]

    @staticmethod
    def _qc_latest_day(conn: Connection, processor: str, leaving: int | None = None) -> str | None:
        """The latest day of a processor's log, as it stands inside the caller's transaction.

        ``leaving`` is an entry about to be corrected: it no longer holds its day.
        """
        return conn.execute(QC_LATEST_DAY, (processor, leaving)).fetchone()[0]

    def _check_not_back_dated(self, conn: Connection, processor: str, date: str, what: str) -> None:
        """Refuse an event or crossover dated before the latest QC day: it would re-judge days already reported."""
        latest = self._qc_latest_day(conn, processor)
        if latest is not None and date < latest:
            raise OutOfOrderError(f"{self.path}: dates out of order: the {what} of {date} is before processor "
                                  f"{processor!r}'s latest QC entry ({latest}); it would re-judge days already "
                                  "reported")

    def _qc_target(self, entry: QcEntry, day: list[QcEntry], link: int, doing: str) -> QcEntry:
        """The entry of ``entry``'s own processor and day that ``link`` names."""
        target = next((e for e in day if e.id == link), None)
        if target is None:
            raise ArchiveConflictError(f"{self.path}: QC entry {link} is not an entry of processor "
                                       f"{entry.processor!r} on {entry.date}; {doing} names an entry of its own day")
        return target

    def _check_qc_correction(self, conn: Connection, entry: QcEntry, day: list[QcEntry]) -> QcEntry:
        """The entry ``entry`` corrects, checked: same processor, not corrected yet, a moved day left whole."""
        target = next((e for e in day if e.id == entry.corrects), None)
        if target is None:
            rows = self._rows("SELECT * FROM qc_entries WHERE id = ?", (entry.corrects,))
            target = QcEntry(**dict(rows[0])) if rows else None
            if target is None or target.processor != entry.processor:
                raise ArchiveConflictError(f"{self.path}: QC entry {entry.corrects} is not an entry of processor "
                                           f"{entry.processor!r}; a correction names an entry of its own processor")
        old_day = day if target.date == entry.date else self._qc_day(conn, target.processor, target.date)
        states = qc_entry_states(old_day)
        corrected_by = states[target.id].corrected_by  # type: ignore[index]
        if corrected_by is not None:
            raise ArchiveConflictError(f"{self.path}: QC entry {target.id} was already corrected by entry "
                                       f"{corrected_by}; correct that one instead")
        if target.date != entry.date:
            strip = states[target.id].strip  # type: ignore[index]
            if any(s.strip != strip for s in states.values()):
                raise ArchiveConflictError(
                    f"{self.path}: {target.date} of processor {entry.processor!r} holds a repeat strip; only a "
                    "day's single strip can be moved to another date")
            if any(e.id not in {x.corrects for x in day} for e in day):
                raise DuplicateDayError(
                    f"{self.path}: processor {entry.processor!r} already has a QC entry for {entry.date}; a "
                    "correction moves an entry only to a day without one")
        return target

    def _insert_qc_entry(self, conn: Connection, entry: QcEntry, *, late: str = "refuse") -> QcEntry:
        """Check ``entry`` against its processor's log and write it, in the caller's transaction.

        The date-order rule is checked here, inside the write transaction, so
        that two writers at once cannot both pass it.

        Parameters
        ----------
        late : str
            What to do with an entry dated before the log's latest day and not
            marked entered late: ``"refuse"`` it, ``"allow"`` it (a missed day
            entered late on purpose) or ``"mark"`` it (an import); both of the
            latter store it marked as entered late.  A correction that keeps
            its entry's date is not late.
        """
        check_qc_entry(self.path, entry)
        self._check_qc_processor(entry.processor)
        if entry.snapshot_id is not None and not self._exists("snapshots", "id", entry.snapshot_id):
            raise self._missing("snapshot", entry.snapshot_id)
        day = self._qc_day(conn, entry.processor, entry.date)
        holders = [e for e in day if e.id not in {x.corrects for x in day}]
        latest = self._qc_latest_day(conn, entry.processor, entry.corrects)
        back_dated = not entry.entered_late and latest is not None and entry.date < latest
        if back_dated and late != "mark" and entry.repeat_of is not None:
            raise OutOfOrderError(
                f"{self.path}: dates out of order: a repeat strip of {entry.date} would re-judge the days after it; "
                f"only the latest day ({latest}) of processor {entry.processor!r} takes a repeat")
        if back_dated and late == "refuse" and entry.corrects is None:
            raise OutOfOrderError(
                f"{self.path}: dates out of order: {entry.date} is before processor {entry.processor!r}'s latest QC "
                f"entry ({latest}); a missed day is entered late on purpose (stored marked as entered late, "
                "and the days after it are judged again)")
        if entry.kind == "first strip" and holders:
            raise DuplicateDayError(
                f"{self.path}: processor {entry.processor!r} already has a QC entry for {entry.date} (duplicate "
                "day); a second strip of that day is stored as a repeat strip (which then counts for the day), a "
                "wrongly entered value as a correction")
        if entry.repeat_of is not None:
            target = self._qc_target(entry, day, entry.repeat_of, "a repeat")
            in_use = self._qc_in_use(day)
            if target.id != in_use.id:
                raise ArchiveConflictError(f"{self.path}: QC entry {target.id} is no longer the one in use for "
                                           f"{entry.date} (entry {in_use.id} is); a repeat follows the entry in use")
        same_day_fix = False
        if entry.corrects is not None:
            same_day_fix = self._check_qc_correction(conn, entry, day).date == entry.date
        if back_dated and not same_day_fix:
            entry = dataclasses.replace(entry, entered_late=True)
        if entry.id is None:
            entry = dataclasses.replace(entry, id=self._next_id(conn, "qc_entries"))
        row = entry.to_dict()
        conn.execute(insert_sql("qc_entries", tuple(row)), tuple(row.values()))
        self._chain(conn, "qc_entry", entry.id)
        return entry

    def _new_qc_entry(self, conn: Connection, entry: QcEntry, repeat: bool) -> QcEntry:
        """A caller's new entry as it is stored: recorded now and, for a repeat, linked to the day's entry in use."""
        if entry.id is not None or entry.recorded_at is not None or entry.corrects is not None:
            raise ArchiveError(f"{self.path}: cannot add the QC entry of {entry.date}: the archive gives a new entry "
                               "its id and time; a correction is stored with add_qc_correction")
        if not repeat:
            return dataclasses.replace(entry, recorded_at=utc_now())
        self._check_qc_processor(entry.processor)
        day = self._qc_day(conn, entry.processor, entry.date)
        if not day:
            raise ArchiveConflictError(f"{self.path}: processor {entry.processor!r} has no QC entry for {entry.date} "
                                       "to repeat; store the day's first strip without calling it a repeat")
        return dataclasses.replace(entry, recorded_at=utc_now(), repeat_of=self._qc_in_use(day).id)

    def add_qc_entry(self, entry: QcEntry, *, repeat: bool = False, late: bool = False) -> QcEntry:
        """Store one QC strip's densities for a processor and day; return the entry as stored.

        Parameters
        ----------
        entry : QcEntry
            The densities, without id, time or links (the archive sets them).
        repeat : bool
            A second (third...) strip of a day that has an entry already: it is
            linked to the day's entry in use and replaces it as the day's value.
            Without it a second entry on the same day is refused.
        late : bool
            A missed day entered after later days: stored marked as entered
            late.  Without it an entry dated before the log's latest day is
            refused.

        Raises
        ------
        DuplicateDayError
            A second entry for the day not declared a repeat.
        OutOfOrderError
            An entry dated before the log's latest day, without ``late``.
        ArchiveConflictError
            A repeat of a day with no entry.
        """
        with self._writing(f"add the QC entry of {entry.date}") as conn:
            return self._insert_qc_entry(conn, self._new_qc_entry(conn, entry, repeat),
                                         late="allow" if late else "refuse")

    def add_qc_day(self, entry: QcEntry, *, repeat: bool = False, new_processor: Processor | None = None,
                   snapshot: NewSnapshot | None = None, settings: dict[str, Any] | None = None,
                   settings_reason: str = "", late: bool = False) -> QcEntry:
        """Store one day's QC entry together with what belongs to it, in one transaction.

        Parameters
        ----------
        entry : QcEntry
            The day's densities.
        repeat : bool
            The entry is a repeat strip of a day that has an entry already
            (see :meth:`add_qc_entry`).
        new_processor : Processor, optional
            A processor to add first, for its first QC day.
        snapshot : NewSnapshot, optional
            The strip the densities were read from, kept for the audit trail;
            the entry is linked to it (``source="scan"``).  A lot it names
            that is not stored yet is added bare.
        settings : dict, optional
            The processor's QC settings to store with the day (for instance
            the QC steps chosen on this strip); a new settings row.
        settings_reason : str
            Why the settings changed, kept with them.
        late : bool
            A missed day entered late (see :meth:`add_qc_entry`).

        Returns
        -------
        QcEntry
            The entry as stored.  If any part fails, nothing is stored.
        """
        with self._writing(f"add the QC entry of {entry.date}") as conn:
            if new_processor is not None:
                self._insert_reference(conn, new_processor)
            if snapshot is not None:
                entry = QcEntry(**{**entry.to_dict(), "source": "scan",
                                   "snapshot_id": self._store_new(conn, snapshot, create_missing=True)})
            entry = self._insert_qc_entry(conn, self._new_qc_entry(conn, entry, repeat),
                                          late="allow" if late else "refuse")
            if settings is not None:
                self._replace_qc_settings(conn, entry.processor, settings, settings_reason)
        return entry

    def add_qc_correction(self, entry_id: int, reason: str, **changes: Any) -> QcEntry:
        """Correct a wrongly entered QC entry: store a new entry that replaces its values.

        The corrected entry stays as it was, readable and marked corrected;
        the correction names it.  A correction can itself be corrected (a
        chain); an entry is corrected once.

        Parameters
        ----------
        entry_id : int
            The entry to correct.
        reason : str
            Why (needed).
        **changes
            New ``base_fog``, ``mid_density``, ``density_difference``,
            ``date``, ``note`` or ``action``; what is not given is kept.  A
            changed density makes the correction a typed value (source
            ``"manual"``, no snapshot).  A new ``date`` moves a day's single
            strip to a day that has no entry (a year typed wrong, say); moved
            before the log's latest day, it is marked entered late.

        Returns
        -------
        QcEntry
            The correction as stored.

        Raises
        ------
        ArchiveError
            An empty reason, a field that cannot be corrected, a bad value, or
            nothing changed.
        ArchiveLookupError
            No entry ``entry_id``.
        ArchiveConflictError
            The entry was corrected already, or the new date has an entry.
        """
        unknown = sorted(set(changes) - set(QC_CORRECTABLE))
        if unknown:
            raise ArchiveError(f"{self.path}: a correction changes {', '.join(QC_CORRECTABLE)} only, "
                               f"not {', '.join(unknown)} (a wrong processor is not corrected this way)")
        if not isinstance(reason, str) or not reason.strip():
            raise ArchiveError(f"{self.path}: QC entry {entry_id} is corrected only with a reason")
        with self._writing(f"correct QC entry {entry_id}") as conn:
            old = self._load_qc_entry(entry_id)
            changed = {k: v for k, v in changes.items() if v != getattr(old, k)}
            if not changed:
                raise ArchiveError(f"{self.path}: the correction of QC entry {entry_id} changes nothing")
            typed = {"source": "manual", "snapshot_id": None} if changed.keys() & set(QC_DENSITIES) else {}
            correction = self._checked(f"correct QC entry {entry_id}", QcEntry, **{
                **old.to_dict(), **changed, **typed, "id": None, "recorded_at": utc_now(), "repeat_of": None,
                "corrects": old.id, "reason": reason.strip(), "entered_late": False})
            return self._insert_qc_entry(conn, correction, late="allow")

    def _load_qc_entry(self, entry_id: int) -> QcEntry:
        rows = self._rows("SELECT * FROM qc_entries WHERE id = ?", (entry_id,))
        if not rows:
            raise self._missing("QC entry", entry_id)
        return QcEntry(**dict(rows[0]))

    def get_qc_entry(self, entry_id: int) -> QcEntry:
        """The QC entry with this id, whatever became of it (see :func:`~.records.qc_entry_states`)."""
        return self._load_qc_entry(entry_id)

    def list_qc_entries(self, processor: str | None = None, *, since: str | None = None,
                        until: str | None = None) -> list[QcEntry]:
        """Every QC entry (repeats and corrections too) by processor, date and id, optionally from ``since`` to
        ``until`` (inclusive); :func:`~.records.qc_entry_states` tells which one counts for each day."""
        clauses, params = [], []
        for clause, value in (("processor = ?", processor), ("date >= ?", since), ("date <= ?", until)):
            if value is not None:
                clauses.append(clause)
                params.append(value)
        where = " WHERE " + " AND ".join(clauses) if clauses else ""
        return [QcEntry(**dict(row)) for row in
                self._rows(f"SELECT * FROM qc_entries{where} ORDER BY processor, date, id", params)]

    def add_qc_event(self, processor: str, date: str, kind: str, note: str = "") -> QcEvent:
        """Record something that happened to a processor (chemistry change, service, ...).

        Raises
        ------
        OutOfOrderError
            When dated before the processor's latest QC entry: it would
            re-judge days already reported.  Checked inside the write.
        """
        with self._writing(f"add a QC event for {processor!r}") as conn:
            event = self._checked("add QC event", QcEvent, self._next_id(conn, "qc_events"), processor, date,
                                  kind, note)
            self._check_not_back_dated(conn, processor, date, "event")
            self._insert_qc_event(conn, event)
            return event

    def _insert_qc_event(self, conn: Connection, event: QcEvent) -> None:
        self._check_qc_processor(event.processor)
        conn.execute("INSERT INTO qc_events (id, processor, date, kind, note) VALUES (?, ?, ?, ?, ?)",
                     (event.id, event.processor, event.date, event.kind, event.note))
        self._chain(conn, "qc_event", event.id)

    def list_qc_events(self, processor: str | None = None) -> list[QcEvent]:
        where, params = (" WHERE processor = ?", (processor,)) if processor is not None else ("", ())
        return [QcEvent(**dict(row)) for row in
                self._rows(f"SELECT * FROM qc_events{where} ORDER BY processor, date, id", params)]

    def set_qc_settings(self, processor: str, settings: dict[str, Any], reason: str = "") -> QcSettings:
        """Store a processor's new QC settings (operating levels, limits, steps) as a new row.

        The rows before stay: :meth:`qc_settings_history` lists them.  Settings
        equal to those in force store nothing and return the row in force.

        Parameters
        ----------
        processor : str
        settings : dict
            JSON-ready settings.
        reason : str
            Why they change, kept with them.
        """
        with self._writing(f"store QC settings for {processor!r}") as conn:
            return self._replace_qc_settings(conn, processor, settings, reason)

    def _replace_qc_settings(self, conn: Connection, processor: str, settings: dict[str, Any],
                             reason: str = "") -> QcSettings:
        record = self._checked("store QC settings", QcSettings, processor, settings, utc_now(), reason.strip())
        current = self.get_qc_settings(processor)
        if current is not None and canonical_json(current.settings) == canonical_json(record.settings):
            return current
        return self._insert_qc_settings(conn, record)

    def _insert_qc_settings(self, conn: Connection, record: QcSettings) -> QcSettings:
        self._check_qc_processor(record.processor)
        if record.id is None:
            record = dataclasses.replace(record, id=self._next_id(conn, "qc_settings"))
        conn.execute("INSERT INTO qc_settings (id, processor, settings_json, updated_at, reason) VALUES (?, ?, ?, ?, ?)",
                     (record.id, record.processor, canonical_json(record.settings), record.updated_at, record.reason))
        self._chain(conn, "qc_settings", record.id)
        return record

    _SETTINGS_SELECT = "SELECT processor, settings_json, updated_at, reason, id FROM qc_settings"

    def _settings(self, where: str = "", params: Sequence[Any] = ()) -> list[QcSettings]:
        return [QcSettings(p, json.loads(s), u, r, i) for p, s, u, r, i in
                self._query(f"{self._SETTINGS_SELECT}{where} ORDER BY processor, id", params)]

    def get_qc_settings(self, processor: str) -> QcSettings | None:
        """A processor's QC settings in force (its latest row), or None when none are stored."""
        rows = self._settings(" WHERE id = (SELECT max(id) FROM qc_settings WHERE processor = ?)", (processor,))
        return rows[0] if rows else None

    def list_qc_settings(self) -> list[QcSettings]:
        """The settings in force for each processor that has any, by processor."""
        return self._settings(" WHERE id IN (SELECT max(id) FROM qc_settings GROUP BY processor)")

    def qc_settings_history(self, processor: str | None = None) -> list[QcSettings]:
        """Every settings row ever stored (of one processor, or all), oldest first per processor."""
        return self._settings(" WHERE processor = ?", (processor,)) if processor is not None else self._settings()

    def add_crossover(self, processor: str, date: str, record: dict[str, Any]) -> Crossover:
        """Store a crossover (old lot against new lot) as plain JSON.

        Refused (:class:`OutOfOrderError`) when dated before the processor's latest QC entry.
        """
        with self._writing(f"add a crossover for {processor!r}") as conn:
            crossover = self._checked("add crossover", Crossover, self._next_id(conn, "crossovers"), processor,
                                      date, record)
            self._check_not_back_dated(conn, processor, date, "crossover")
            self._insert_crossover(conn, crossover)
            return crossover

    def add_crossover_with_event(self, processor: str, date: str, record: dict[str, Any],
                                 note: Callable[[int], str]) -> tuple[Crossover, QcEvent]:
        """Store a crossover and the ``crossover`` QC event that moves the levels, in one transaction.

        Parameters
        ----------
        processor, date : str
        record : dict
            The crossover as JSON-ready data.
        note : callable
            Makes the event's note from the crossover's new id.

        Returns
        -------
        (Crossover, QcEvent)
            As stored; if anything fails, neither is.
        """
        with self._writing(f"store the crossover of {date} for {processor!r}") as conn:
            crossover = self._checked("add crossover", Crossover, self._next_id(conn, "crossovers"), processor,
                                      date, record)
            self._check_not_back_dated(conn, processor, date, "crossover")
            self._insert_crossover(conn, crossover)
            event = self._checked("add QC event", QcEvent, self._next_id(conn, "qc_events"), processor, date,
                                  "crossover", note(crossover.id))
            self._insert_qc_event(conn, event)
            return crossover, event

    def _insert_crossover(self, conn: Connection, crossover: Crossover) -> None:
        self._check_qc_processor(crossover.processor)
        conn.execute("INSERT INTO crossovers (id, processor, date, record_json) VALUES (?, ?, ?, ?)",
                     (crossover.id, crossover.processor, crossover.date, canonical_json(crossover.record)))
        self._chain(conn, "crossover", crossover.id)

    def list_crossovers(self, processor: str | None = None) -> list[Crossover]:
        where, params = (" WHERE processor = ?", (processor,)) if processor is not None else ("", ())
        return [Crossover(i, p, d, json.loads(r)) for i, p, d, r in
                self._query(f"SELECT id, processor, date, record_json FROM crossovers{where} "
                            "ORDER BY processor, date, id", params)]
