"""Moving archive contents in and out: JSON export/import and CSV tables.

Files are written next to their destination under a temporary name and
renamed into place only when complete, so a crash never leaves a
half-written export under the real name.
"""

from __future__ import annotations

import csv
import json
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import IO, TYPE_CHECKING, Any

from stripscan import __version__
from stripscan._shared.atomic import replacing

from stripscan.archive.errors import ArchiveError
from stripscan.archive.records import (
    FIGURE_UNITS,
    FIGURES,
    EmulsionLot,
    FilmType,
    ImportReport,
    Processor,
    Sensitometer,
    Snapshot,
    SnapshotNote,
    snapshot_status,
)
from stripscan.archive.values import calibration_hash
from stripscan.archive.qc_records import Crossover, QcEntry, QcEvent, QcSettings

if TYPE_CHECKING:
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


@contextmanager
def _replacing(path: Path, *, binary: bool = False) -> Iterator[IO[Any]]:
    """Open a temporary file beside ``path``; rename it to ``path`` only if all went well."""
    path = path.expanduser().absolute()
    try:
        with replacing(path) as temp:
            with open(temp, "wb" if binary else "w", **({} if binary else {"encoding": "utf-8", "newline": ""})) \
                    as handle:
                yield handle
    except OSError as exc:
        raise ArchiveError(f"{path}: cannot write: {exc.strerror or exc}") from None


def export_data(archive: "Archive") -> dict[str, Any]:
    """Everything in the archive as JSON-ready data (one consistent state)."""
    with archive.read_together():
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


def import_json(archive: "Archive", path: Path) -> ImportReport:
    """Add the contents of an export file to ``archive``, all in one transaction."""
    path = path.expanduser().absolute()
    data = _read_export(path)
    old_format = data.get("format_version") != EXPORT_FORMAT_VERSION
    parsed = _parse_sections(path, data)
    return archive.import_records(path, parsed, old_format=old_format)


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
            writer.writerow([_cell(v) for v in (
                row.id, row.date, row.created_at, row.lot_id, row.processor, row.operator, row.strip_index,
                *(getattr(row, name) for name in FIGURES), row.revises, snapshot_status(row), row.scan_path)])
    return path.expanduser().absolute()
