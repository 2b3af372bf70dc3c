"""Storing the records of an export file, all in one transaction (:meth:`Importing.import_records`).

:mod:`stripscan.archive.exchange` reads and checks the file; this part of
:class:`stripscan.archive.service.Archive` stores what the archive lacks,
finds what it already holds unchanged, and refuses the whole file when one
item differs from the stored one or would break the rules of entry.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path
from typing import TYPE_CHECKING, Any

from stripscan.archive.entry_checks import check_imported_figures, check_note
from stripscan.archive.errors import ArchiveConflictError, ArchiveError, ArchiveLookupError, OutOfOrderError
from stripscan.archive.records import ImportReport
from stripscan.archive.qc_records import QcEntry
from stripscan.archive.tables import REFERENCE

if TYPE_CHECKING:
    from stripscan.archive.backend import Connection
    from stripscan.archive.service import Archive

__all__ = ["Importing"]


def _stored_twin(archive: "Archive", section: str, record: Any) -> tuple[str, Any]:
    """A name for ``record`` in messages, and the stored item with the same key (or None)."""
    if section in ("film_types", "emulsion_lots", "processors", "sensitometers"):
        _, column, word = REFERENCE[type(record)]
        key = getattr(record, column)
        try:
            return f"{word} {key!r}", archive._get_reference(type(record), key)
        except ArchiveLookupError:
            return f"{word} {key!r}", None
    if section == "calibrations":
        digest = record[0]
        return f"calibration {digest}", record if archive._exists("calibrations", "hash", digest) else None
    if section == "snapshots":
        try:
            return f"snapshot {record.id}", archive._load_snapshot(record.id)
        except ArchiveLookupError:
            return f"snapshot {record.id}", None
    if section == "snapshot_notes":
        return f"note {record.id}", next((n for n in archive.list_notes() if n.id == record.id), None)
    if section == "qc_settings":
        if record.id is None:  # a file of format 2 or older: the settings in force
            return f"QC settings of {record.processor!r}", archive.get_qc_settings(record.processor)
        return (f"QC settings row {record.id} of {record.processor!r}",
                next((r for r in archive.qc_settings_history(record.processor) if r.id == record.id), None))
    if section == "qc_entries":
        return _stored_qc_twin(archive, record)
    if section == "qc_events":
        return f"QC event {record.id}", next((e for e in archive.list_qc_events() if e.id == record.id), None)
    return f"crossover {record.id}", next((c for c in archive.list_crossovers() if c.id == record.id), None)


def _stored_qc_twin(archive: "Archive", record: QcEntry) -> tuple[str, Any]:
    """The stored entry with the same id; for an entry without one (a version 1 file), the day's first strip."""
    if record.id is not None:
        what = f"QC entry {record.id} ({record.processor!r}, {record.date})"
        try:
            return what, archive.get_qc_entry(record.id)
        except ArchiveLookupError:
            return what, None
    same_day = archive.list_qc_entries(record.processor, since=record.date, until=record.date)
    first = next((e for e in same_day if e.kind == "first strip"), None)
    # What a version 1 file can say about an entry: no id, no time, no links.
    return (f"QC entry of {record.processor!r} on {record.date}",
            None if first is None else dataclasses.replace(first, id=None, recorded_at=None))


def _insert(archive: "Archive", conn: "Connection", section: str, record: Any) -> Any:
    if section in ("film_types", "emulsion_lots", "processors", "sensitometers"):
        archive._insert_reference(conn, record)
    elif section == "calibrations":
        archive._insert_calibration(conn, record[1])
    elif section == "snapshots":
        check_imported_figures(archive.path, record)
        archive._insert_snapshot(conn, record)
    elif section == "snapshot_notes":
        if not archive._exists("snapshots", "id", record.snapshot_id):
            raise archive._missing("snapshot", record.snapshot_id)
        check_note(archive.path, record)
        archive._insert_note(conn, record)
    elif section == "qc_settings":
        archive._insert_qc_settings(conn, record)
    elif section == "qc_entries":
        # The same date-order rule as entry, checked as the file's entries are stored in id order; an entry
        # dated before a day already in the log is stored marked as entered late, never silently.
        return archive._insert_qc_entry(conn, record, late="mark")
    elif section == "qc_events":
        archive._insert_qc_event(conn, record)
    else:
        archive._insert_crossover(conn, record)
    return record


# What a file of an older format cannot say, left out when comparing with what is stored.
_NOT_IN_OLD_FORMATS = {"qc_entries": ("entered_late",), "qc_settings": ("id", "reason")}


def _comparable(item: Any, section: str = "", old_format: bool = False) -> Any:
    # JSON form: NaN densities read back as NaN, which never equals itself.
    data = item.to_dict() if hasattr(item, "to_dict") else item
    if old_format and section in _NOT_IN_OLD_FORMATS:
        data = {k: v for k, v in data.items() if k not in _NOT_IN_OLD_FORMATS[section]}
    return data


def _check_not_back_dated(path: Path, latest: dict[str, str | None], section: str, record: Any) -> None:
    """An event or crossover of the file dated before the latest QC day already stored would re-judge it."""
    day = latest.get(record.processor)
    if day is not None and record.date < day:
        what = "QC event" if section == "qc_events" else "crossover"
        raise OutOfOrderError(f"{path}: cannot import {what} {record.id} of {record.date}: it is dated before "
                              f"processor {record.processor!r}'s latest QC entry ({day}) and would re-judge days "
                              "already reported; nothing was imported")


class Importing:
    """Import of an export file's records.  A part of :class:`~stripscan.archive.service.Archive`."""

    def import_records(self, source: Path, parsed: dict[str, list[Any]], *, old_format: bool = False) -> ImportReport:
        """Store the records of an export file that the archive lacks, all or none.

        Parameters
        ----------
        source : Path
            The file, for messages and the report.
        parsed : dict
            Section name -> its records in the export's section order (as
            :mod:`stripscan.archive.exchange` reads them; calibrations as
            ``(hash, content)`` pairs).
        old_format : bool
            The file is of an older export format: fields it cannot hold
            are not compared.

        Raises
        ------
        ArchiveConflictError
            An item differs from the stored one with the same key.
        OutOfOrderError, ArchiveError
            An item breaks a rule of entry; nothing is stored.
        """
        archive: Archive = self  # type: ignore[assignment]
        added = {section: 0 for section in parsed}
        unchanged = dict(added)
        late: list[int] = []
        with archive._writing(f"import {source}") as conn:
            # The log's latest day before the import, for the file's events and crossovers.
            latest = {p.name: archive._qc_latest_day(conn, p.name) for p in archive.list_processors()}
            for section, records in parsed.items():
                if section == "snapshots":
                    # A revision refers to an earlier id, so id order stores parents first.
                    records = sorted(records, key=lambda r: r.id)
                elif section == "qc_entries":
                    # Likewise repeats and corrections; entries without an id (version 1) come last.
                    records = sorted(records, key=lambda r: (r.id is None, r.id or 0))
                for record in records:
                    what, stored = _stored_twin(archive, section, record)
                    if stored is None:
                        if section in ("qc_events", "crossovers"):
                            _check_not_back_dated(source, latest, section, record)
                        try:
                            result = _insert(archive, conn, section, record)
                        except ArchiveError as exc:
                            raise type(exc)(f"{source}: cannot import {what}: {exc}; nothing was imported") from None
                        if section == "qc_entries" and result.entered_late and not record.entered_late:
                            late.append(result.id)
                        added[section] += 1
                    elif _comparable(stored, section, old_format) == _comparable(record, section, old_format):
                        unchanged[section] += 1
                    else:
                        raise ArchiveConflictError(
                            f"{source}: {what} differs from the one already in {archive.path}; nothing was imported")
        return ImportReport(str(source), added, unchanged, tuple(late))
