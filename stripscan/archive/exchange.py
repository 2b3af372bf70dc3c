"""Moving archive contents in and out: JSON export/import and CSV tables.

Files are written next to their destination under a temporary name and
renamed into place only when complete, so a crash never leaves a
half-written export under the real name.
"""

from __future__ import annotations

import csv
import dataclasses
import json
import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import IO, TYPE_CHECKING, Any

from stripscan import __version__

from stripscan.archive.entry_checks import check_imported_figures, check_note
from stripscan.archive.errors import ArchiveConflictError, ArchiveError, ArchiveLookupError, OutOfOrderError
from stripscan.archive.records import (
    FIGURE_UNITS,
    FIGURES,
    Crossover,
    EmulsionLot,
    FilmType,
    ImportReport,
    Processor,
    QcEntry,
    QcEvent,
    QcSettings,
    Sensitometer,
    Snapshot,
    SnapshotNote,
    calibration_hash,
)

if TYPE_CHECKING:
    from stripscan.archive.backend import Connection
    from stripscan.archive.service import Archive

__all__ = ["EXPORT_FORMAT", "EXPORT_FORMAT_VERSION", "export_data", "export_json", "import_json",
           "export_csv"]

EXPORT_FORMAT = "stripscan lot archive"
#: Version 2 gives QC entries their id, recording time and repeat/correction
#: links.  Version 1 files (QC entries without ids) are still read: their
#: entries are each a day's first strip and get new ids.  Version 3 adds
#: ``entered_late`` to QC entries, lets a correction carry another date, and
#: lists every QC settings row (with ``id`` and ``reason``), not only the
#: latest.
EXPORT_FORMAT_VERSION = 3
_READABLE_VERSIONS = (1, 2, 3)

# Sections in the order they must be stored: everything a row refers to
# comes before the row (lots need film types, snapshots need lots...).
_SECTIONS: tuple[tuple[str, type | None], ...] = (
    ("film_types", FilmType),
    ("emulsion_lots", EmulsionLot),
    ("processors", Processor),
    ("sensitometers", Sensitometer),
    ("calibrations", None),
    ("snapshots", Snapshot),
    ("snapshot_notes", SnapshotNote),
    ("qc_settings", QcSettings),
    ("qc_entries", QcEntry),
    ("qc_events", QcEvent),
    ("crossovers", Crossover),
)


def _plain_file_mode() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return 0o666 & ~mask


@contextmanager
def _replacing(path: Path, *, binary: bool = False) -> Iterator[IO[Any]]:
    """Open a temporary file beside ``path``; rename it to ``path`` only if all went well."""
    path = path.expanduser().absolute()
    try:
        handle = tempfile.NamedTemporaryFile(
            "wb" if binary else "w", dir=path.parent, prefix=f".{path.name}.", suffix=".partial",
            delete=False, **({} if binary else {"encoding": "utf-8", "newline": ""}))
    except OSError as exc:
        raise ArchiveError(f"{path}: cannot write: {exc.strerror or exc}") from None
    try:
        with handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        # Temporary files are private (0600); give the result the mode a
        # plainly created file would have.
        os.chmod(handle.name, _plain_file_mode())
        os.replace(handle.name, path)
    except BaseException as exc:
        try:
            os.unlink(handle.name)
        except OSError:
            pass
        if isinstance(exc, OSError):
            raise ArchiveError(f"{path}: cannot write: {exc.strerror or exc}") from None
        raise


def export_data(archive: "Archive") -> dict[str, Any]:
    """Everything in the archive as JSON-ready data (one consistent state)."""
    with archive._reading():
        calibrations = [{"hash": digest, "calibration": archive.get_calibration(digest)}
                        for digest in archive.list_calibrations()]
        return {
            "format": EXPORT_FORMAT,
            "format_version": EXPORT_FORMAT_VERSION,
            "schema_version": archive.schema_version,
            "program_version": __version__,
            "film_types": [r.to_dict() for r in archive.list_film_types()],
            "emulsion_lots": [summary.lot.to_dict() for summary in archive.list_lots()],
            "processors": [r.to_dict() for r in archive.list_processors()],
            "sensitometers": [r.to_dict() for r in archive.list_sensitometers()],
            "calibrations": calibrations,
            "snapshots": [r.to_dict() for r in archive.all_snapshots()],
            "snapshot_notes": [r.to_dict() for r in archive.list_notes()],
            "qc_settings": [r.to_dict() for r in archive.qc_settings_history()],
            "qc_entries": [r.to_dict() for r in archive.list_qc_entries()],
            "qc_events": [r.to_dict() for r in archive.list_qc_events()],
            "crossovers": [r.to_dict() for r in archive.list_crossovers()],
        }


def export_json(archive: "Archive", path: Path) -> Path:
    """Write :func:`export_data` to ``path`` as UTF-8 JSON; return the path."""
    data = export_data(archive)
    with _replacing(path) as handle:
        _write_lines(handle, data)
    return path.expanduser().absolute()


def _write_lines(handle: IO[str], data: dict[str, Any]) -> None:
    """JSON with one list item per line: readable, diff-friendly, and fast.

    ``json.dump`` with ``indent`` runs the pure-Python encoder, five times
    slower than ``json.dumps`` without it on a large archive.
    """
    def dumps(value: Any) -> str:
        return json.dumps(value, ensure_ascii=False, allow_nan=False)

    handle.write("{\n")
    for number, (key, value) in enumerate(data.items()):
        handle.write(f" {dumps(key)}: ")
        if isinstance(value, list) and value:
            handle.write("[\n")
            handle.write(",\n".join(f"  {dumps(item)}" for item in value))
            handle.write("\n ]")
        else:
            handle.write(dumps(value))
        handle.write(",\n" if number < len(data) - 1 else "\n")
    handle.write("}\n")


def _read_export(path: Path) -> dict[str, Any]:
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise ArchiveError(f"{path}: cannot read: {exc.strerror or exc}") from None
    except UnicodeDecodeError as exc:
        raise ArchiveError(f"{path} is not UTF-8 text (byte {exc.start})") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ArchiveError(f"{path} is not valid JSON: {exc.msg} at line {exc.lineno} column {exc.colno}") from None
    except RecursionError:
        raise ArchiveError(f"{path} is not a stripscan archive export (JSON nested too deeply)") from None
    if not isinstance(data, dict) or data.get("format") != EXPORT_FORMAT:
        raise ArchiveError(f"{path} is not a stripscan archive export")
    if data.get("format_version") not in _READABLE_VERSIONS:
        raise ArchiveError(f"{path} uses export format version {data.get('format_version')!r}; "
                           f"this stripscan reads versions {', '.join(map(str, _READABLE_VERSIONS))}")
    return data


def _parse_sections(path: Path, data: dict[str, Any]) -> dict[str, list[Any]]:
    """Every item of the file as a record, checked before anything is stored."""
    parsed: dict[str, list[Any]] = {}
    for section, record_class in _SECTIONS:
        items = data.get(section, [])
        if not isinstance(items, list):
            raise ArchiveError(f"{path}: {section} must be a list")
        records: list[Any] = []
        for number, item in enumerate(items, start=1):
            try:
                if record_class is None:
                    digest, calibration = item["hash"], item["calibration"]
                    if calibration_hash(calibration) != digest:
                        raise ValueError(f"its content does not match its hash {digest!r} (edited or damaged)")
                    records.append((digest, calibration))
                else:
                    records.append(record_class.from_dict(item))
            except (KeyError, TypeError, ValueError) as exc:
                detail = f"lacks {exc}" if isinstance(exc, KeyError) else str(exc)
                raise ArchiveError(f"{path}: {section} item {number}: {detail}") from None
        parsed[section] = records
    return parsed


def _stored_twin(archive: "Archive", section: str, record: Any) -> tuple[str, Any]:
    """A name for ``record`` in messages, and the stored item with the same key (or None)."""
    from stripscan.archive.service import _REFERENCE  # the store's table map, shared so both stay in step

    if section in ("film_types", "emulsion_lots", "processors", "sensitometers"):
        _, column, word = _REFERENCE[type(record)]
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


def import_json(archive: "Archive", path: Path) -> ImportReport:
    """Add the contents of an export file to ``archive``, all in one transaction."""
    path = path.expanduser().absolute()
    data = _read_export(path)
    old_format = data.get("format_version") != EXPORT_FORMAT_VERSION
    parsed = _parse_sections(path, data)
    added = {section: 0 for section, _ in _SECTIONS}
    unchanged = dict(added)
    late: list[int] = []
    with archive._writing(f"import {path}") as conn:
        # The log's latest day before the import, for the file's events and crossovers.
        latest = {p.name: archive._qc_latest_day(conn, p.name) for p in archive.list_processors()}
        for section, _ in _SECTIONS:
            records = parsed[section]
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
                        _check_not_back_dated(path, latest, section, record)
                    try:
                        result = _insert(archive, conn, section, record)
                    except ArchiveError as exc:
                        raise type(exc)(f"{path}: cannot import {what}: {exc}; nothing was imported") from None
                    if section == "qc_entries" and result.entered_late and not record.entered_late:
                        late.append(result.id)
                    added[section] += 1
                elif _comparable(stored, section, old_format) == _comparable(record, section, old_format):
                    unchanged[section] += 1
                else:
                    raise ArchiveConflictError(
                        f"{path}: {what} differs from the one already in {archive.path}; nothing was imported")
    return ImportReport(str(path), added, unchanged, tuple(late))


def _cell(value: Any) -> Any:
    # A text cell starting like a formula would run as one in a spreadsheet
    # (common practice: prefix such cells with an apostrophe).
    if isinstance(value, str) and value[:1] in ("=", "+", "-", "@", "\t", "\r"):
        return "'" + value
    return "" if value is None else value


def export_csv(archive: "Archive", path: Path, *, lot: str | None = None, processor: str | None = None,
               include_retired: bool = False, include_superseded: bool = False) -> Path:
    """Write snapshot figures as CSV: one row per snapshot, a header row with units.

    The file is UTF-8 with a byte order mark, which spreadsheet programs
    need to read accented and non-Latin letters right.
    """
    rows = archive.list_snapshots(lot, processor, include_retired=include_retired,
                                  include_superseded=include_superseded)
    header = ["snapshot", "date (YYYY-MM-DD)", "stored at (UTC)", "lot", "processor", "operator", "strip",
              *(f"{name} [{FIGURE_UNITS[name]}]" for name in FIGURES), "revises", "status", "scan"]
    with _replacing(path) as handle:
        handle.write("\ufeff")
        writer = csv.writer(handle, lineterminator="\r\n")
        writer.writerow(header)
        for row in rows:
            if row.retired_at is not None:
                status = f"retired {row.retired_at[:10]}: {row.retired_reason}"
            elif row.superseded_by is not None:
                status = f"revised by {row.superseded_by}"
            else:
                status = "current"
            writer.writerow([_cell(v) for v in (
                row.id, row.date, row.created_at, row.lot_id, row.processor, row.operator, row.strip_index,
                *(getattr(row, name) for name in FIGURES), row.revises, status, row.scan_path)])
    return path.expanduser().absolute()
