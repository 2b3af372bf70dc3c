"""Exports: CSV of steps and of figures, JSON of a snapshot in the archive's export form.

CSV files are UTF-8 with one header row; a column with a unit names it in
square brackets (``od [OD]``), and a figure that could not be read is an
empty cell.  Numbers are written as stored (densities to 0.0001 OD, log E
to 1e-6), not at the report's printed precision, so a spreadsheet gets
all the digits there are.

A snapshot's JSON is a small archive export (the same ``format`` and
sections as ``stripscan archive export --format json``) holding the
snapshot, every earlier reading it corrects, their calibration, lot, film
type, processor, sensitometer and notes, so ``stripscan archive import``
takes it into another archive as it is.

Everything is written under a temporary name and renamed into place.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from pathlib import Path, PurePath
from typing import TYPE_CHECKING, Any, Iterable, Sequence, Union

from stripscan.core.records import StripResult
from stripscan.core.figures import FIGURE_COLUMNS, step_flag
from stripscan.render.qt import ReportError, write_text_atomic

if TYPE_CHECKING:
    from stripscan.archive import Archive, Snapshot

__all__ = ["export_steps_csv", "export_figures_csv", "snapshot_export_data", "export_snapshot_json",
           "STEP_COLUMNS"]

#: Columns of the steps CSV: (name, unit).
STEP_COLUMNS: tuple[tuple[str, str], ...] = (
    ("strip", ""), ("step", ""), ("log_exposure", "log10 rel. exposure"), ("od", "OD"), ("od_sd", "OD"),
    ("pixels", ""), ("in_range", ""), ("excluded", ""), ("flag", ""),
)

Source = Union[StripResult, "Snapshot"]


def _header(name: str, unit: str) -> str:
    return f"{name} [{unit}]" if unit else name


def _number(value: Any, digits: int | None = None) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    number = float(value)
    if not math.isfinite(number):
        return ""
    return repr(round(number, digits)) if digits is not None else repr(number)


def _strips(items: Source | Iterable[Source]) -> list[tuple[StripResult, dict[str, str]]]:
    """(strip, identity columns) for strip results and archived snapshots alike."""
    if isinstance(items, StripResult) or hasattr(items, "strip"):
        items = [items]  # type: ignore[list-item]
    out = []
    for item in items:  # type: ignore[union-attr]
        if isinstance(item, StripResult):
            out.append((item, {}))
        elif hasattr(item, "strip") and isinstance(item.strip, StripResult):
            out.append((item.strip, {"snapshot": str(item.id), "lot": item.lot_id, "date": item.date,
                                     "scan": PurePath(item.scan.path).name}))
        else:
            raise ReportError(f"cannot export {type(item).__name__}: give strip results or snapshots")
    if not out:
        raise ReportError("nothing to export: no strip")
    return out


def _csv_text(header: Sequence[str], rows: Iterable[Sequence[str]]) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer)
    writer.writerow(header)
    writer.writerows(rows)
    return buffer.getvalue()


def export_steps_csv(strip: Source | Iterable[Source], path: str | os.PathLike[str]) -> Path:
    """Write the step table of one strip (or several) as CSV; return the absolute path.

    Columns: ``strip``, ``step``, ``log_exposure [log10 rel. exposure]``,
    ``od [OD]`` (gross density), ``od_sd [OD]`` (standard uncertainty),
    ``pixels``, ``in_range``, ``excluded`` (``yes``/``no``) and ``flag``
    (as the report prints it).  Snapshots add ``snapshot``, ``lot``,
    ``date`` and ``scan`` in front.
    """
    strips = _strips(strip)
    ident = list(strips[0][1])
    header = ident + [_header(name, unit) for name, unit in STEP_COLUMNS]
    rows = []
    for result, labels in strips:
        for s in result.steps:
            rows.append([labels.get(k, "") for k in ident] + [
                str(result.index), str(s.step), _number(s.log_exposure, 6), _number(s.od, 4), _number(s.od_sd, 4),
                str(s.pixels), _number(bool(s.in_range)), _number(bool(s.excluded)), step_flag(s, result.figures),
            ])
    return write_text_atomic(path, _csv_text(header, rows))


def export_figures_csv(strips: Source | Iterable[Source], path: str | os.PathLike[str]) -> Path:
    """Write the curve figures, one row per strip, as CSV; return the absolute path.

    Columns: ``strip``, every figure with its unit (see
    :data:`stripscan.core.figures.FIGURE_COLUMNS`), the targets used
    (``gradient_low_net``, ``gradient_high_net``, ``speed_net_density``,
    ``mid_density_target``, ``dd_high_target``, ``dd_low_target`` in OD)
    and ``notes`` (why a figure is missing, joined with ``; ``).
    """
    items = _strips(strips)
    ident = list(items[0][1])
    targets = (("gradient_low", "gradient_low_net"), ("gradient_high", "gradient_high_net"),
               ("speed_net_density", "speed_net_density"), ("mid_density_target", "mid_density_target"),
               ("dd_high_target", "dd_high_target"), ("dd_low_target", "dd_low_target"))
    header = ident + ["strip"] + [_header(k, u) for k, u in FIGURE_COLUMNS] + \
        [_header(name, "OD") for _, name in targets] + ["notes"]
    rows = []
    for result, labels in items:
        f = result.figures
        rows.append([labels.get(k, "") for k in ident] + [str(result.index)]
                    + [_number(getattr(f, key)) for key, _ in FIGURE_COLUMNS]
                    + [_number(f.settings.get(key)) for key, _ in targets]
                    + ["; ".join(f.notes)])
    return write_text_atomic(path, _csv_text(header, rows))


def snapshot_export_data(archive: "Archive", snapshot_id: int) -> dict[str, Any]:
    """One snapshot (with the readings it corrects) as an archive export dictionary.

    Raises
    ------
    ArchiveLookupError
        When the archive holds no such snapshot.
    """
    from stripscan import __version__
    from stripscan.archive.exchange import EXPORT_FORMAT, EXPORT_FORMAT_VERSION

    target = archive.get_snapshot(snapshot_id)
    # Earlier readings of the chain go along: a revision cannot be stored without the reading it corrects.
    chain = [s for s in archive.history(snapshot_id) if s.id <= target.id]
    lots = {s.lot_id: archive.get_lot(s.lot_id) for s in chain}
    film_types = {lot.film_type for lot in lots.values() if lot.film_type}
    processors = {s.processor for s in chain if s.processor}
    sensitometers = {s.sensitometer for s in chain if s.sensitometer}
    digests = sorted({s.calibration_hash for s in chain if s.calibration_hash})
    ids = {s.id for s in chain}
    return {
        "format": EXPORT_FORMAT,
        "format_version": EXPORT_FORMAT_VERSION,
        "schema_version": archive.schema_version,
        "program_version": __version__,
        "film_types": [archive.get_film_type(name).to_dict() for name in sorted(film_types)],
        "emulsion_lots": [lots[key].to_dict() for key in sorted(lots)],
        "processors": [archive.get_processor(name).to_dict() for name in sorted(processors)],
        "sensitometers": [archive.get_sensitometer(name).to_dict() for name in sorted(sensitometers)],
        "calibrations": [{"hash": d, "calibration": archive.get_calibration(d)} for d in digests],
        "snapshots": [s.to_dict() for s in chain],
        "snapshot_notes": [n.to_dict() for n in archive.list_notes() if n.snapshot_id in ids],
        "qc_settings": [],
        "qc_entries": [],
        "qc_events": [],
        "crossovers": [],
    }


def export_snapshot_json(archive: "Archive", snapshot_id: int, path: str | os.PathLike[str]) -> Path:
    """Write :func:`snapshot_export_data` to ``path`` as UTF-8 JSON; return the absolute path."""
    data = snapshot_export_data(archive, snapshot_id)
    text = json.dumps(data, ensure_ascii=False, allow_nan=False, indent=1) + "\n"
    return write_text_atomic(path, text)
