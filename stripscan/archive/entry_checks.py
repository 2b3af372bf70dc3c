"""What the archive refuses at entry: names, values and dates nobody can mean.

The archive keeps what it is given for good, so what is plainly wrong is
refused before it is stored, with the plausible range named: a control
character in a lot name (it would clear a terminal or turn text around when
listed), a density of 50, a film processed in the year 9999 or before it was
exposed, a strip without steps, a snapshot in an import file whose figures
do not follow from its own steps.

Each check is a small function over the archive's records that raises
:class:`~stripscan.archive.errors.ArchiveError` naming the archive file; the
store calls them where it writes, so the command line, the window and an
import meet the same rules.
"""

from __future__ import annotations

import datetime as dt
import math
import os
import unicodedata
from pathlib import Path
from typing import TYPE_CHECKING, Any

from stripscan.core.records import Analysis

from stripscan.archive.errors import ArchiveError
from stripscan.archive.records import EmulsionLot, FilmType, Processor, Sensitometer, Snapshot, SnapshotNote
from stripscan.archive.qc_records import QcEntry

if TYPE_CHECKING:
    from stripscan.archive.service import Archive

__all__ = [
    "NAME_MAX_CHARS",
    "TEXT_MAX_CHARS",
    "EARLIEST_DATE",
    "DENSITY_RANGE",
    "BASE_FOG_RANGE",
    "name_problem",
    "check_name",
    "check_reference",
    "check_snapshot",
    "check_note",
    "check_qc_entry",
    "check_imported_figures",
    "already_stored",
    "describe_stored",
    "on_read_only_media",
]

#: Longest name (lot, processor, operator, film type, sensitometer, site), characters.
NAME_MAX_CHARS = 80
#: Longest free text (notes, descriptions, reasons), characters.
TEXT_MAX_CHARS = 4000
#: Earliest film date accepted: stripscan reads scans of film processed since.
EARLIEST_DATE = dt.date(1970, 1, 1)
#: Densities a typed or read QC value may have, OD: film for medical imaging
#: reaches about 4 at most (common practice); 5 leaves room.
DENSITY_RANGE = (0.0, 5.0)
#: Base+fog, OD: film base with fog lies near 0.1 to 0.3 (common practice); 1.5 leaves room.
BASE_FOG_RANGE = (0.0, 1.5)
#: How far a figure stored with a snapshot may lie from the one its own
#: stored steps give: densities are rounded to 4 decimals in the step table,
#: and curve figures may come from another interpolation of the same steps.
_FIGURE_TOLERANCE = {"mid_density": 2e-3, "density_difference": 4e-3, "dmax": 2e-3,
                     "speed_log_exposure": 0.02, "latitude_log_exposure": 0.04,
                     "average_gradient": 0.05, "gamma": 0.10}  # the last two relative

# Directional formatting (embeddings, overrides, isolates): they turn the
# text around them when shown; line and paragraph separators break lines.
_HIDDEN = frozenset("\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069\u200e\u200f\u2028\u2029\u061c")


def _forbidden(char: str, *, lines: bool) -> bool:
    if lines and char in "\n\t":
        return False
    return unicodedata.category(char) == "Cc" or char in _HIDDEN


def _shown(value: str, limit: int = 40) -> str:
    text = value if len(value) <= limit else value[:limit] + "..."
    return ascii(text)


def name_problem(value: Any, what: str, *, free_text: bool = False) -> str | None:
    """Why ``value`` cannot be stored as ``what``, or None when it can.

    Names may hold any letters, digits, signs and spaces, up to
    :data:`NAME_MAX_CHARS` characters; free text also line breaks and tabs,
    up to :data:`TEXT_MAX_CHARS`.  Control characters (escape sequences that
    clear a terminal or set its title) and directional marks (which turn
    the text around them) are refused in both.
    """
    if value is None:
        return None
    if not isinstance(value, str):
        return f"{what} must be text, not {type(value).__name__}"
    limit = TEXT_MAX_CHARS if free_text else NAME_MAX_CHARS
    if len(value) > limit:
        return f"{what} {_shown(value)} is {len(value)} characters long; at most {limit} are kept"
    bad = next((c for c in value if _forbidden(c, lines=free_text)), None)
    if bad is not None:
        kind = "a control character" if unicodedata.category(bad) == "Cc" else "a hidden directional mark"
        return (f"{what} {_shown(value)} holds {kind} (U+{ord(bad):04X}); type it again with letters, digits, "
                "signs and spaces only")
    return None


def check_name(value: Any, what: str, *, free_text: bool = False) -> None:
    """Raise ``ValueError`` with :func:`name_problem`'s reason (for command-line options that are not stored)."""
    problem = name_problem(value, what, free_text=free_text)
    if problem is not None:
        raise ValueError(problem)


def _refuse(path: Path, doing: str, problems: list[str | None]) -> None:
    problem = next((p for p in problems if p is not None), None)
    if problem is not None:
        raise ArchiveError(f"{path}: cannot {doing}: {problem}")


def check_reference(path: Path, record: Any) -> None:
    """Names and texts of a film type, lot, processor or sensitometer."""
    if isinstance(record, FilmType):
        problems = [name_problem(record.name, "film type name"),
                    name_problem(record.description, "film type description", free_text=True)]
    elif isinstance(record, EmulsionLot):
        problems = [name_problem(record.lot_id, "lot id"), name_problem(record.film_type, "film type"),
                    name_problem(record.notes, "lot notes", free_text=True)]
    elif isinstance(record, Processor):
        problems = [name_problem(record.name, "processor name"),
                    *(name_problem(getattr(record, f), f"processor {f}", free_text=True)
                      for f in ("place", "chemistry", "notes"))]
    elif isinstance(record, Sensitometer):
        problems = [name_problem(record.sensitometer_id, "sensitometer id"),
                    name_problem(record.description, "sensitometer description", free_text=True)]
    else:
        problems = []
    _refuse(path, "store it", problems)


def _date_problem(value: str | None, what: str) -> str | None:
    if value is None:
        return None
    day = dt.date.fromisoformat(value)  # the record checked the form already
    latest = dt.date.today() + dt.timedelta(days=1)  # a day's grace for time zones
    if not EARLIEST_DATE <= day <= latest:
        return f"{what} {value} lies outside {EARLIEST_DATE.isoformat()} .. {latest.isoformat()} (today)"
    return None


def check_snapshot(path: Path, snapshot: Snapshot) -> None:
    """Names, notes, film dates and steps of a snapshot about to be stored.

    Film dates must lie from :data:`EARLIEST_DATE` to today and follow each
    other: exposed, then processed, then scanned.
    """
    problems = [name_problem(snapshot.lot_id, "lot id"), name_problem(snapshot.processor, "processor"),
                name_problem(snapshot.sensitometer, "sensitometer"), name_problem(snapshot.operator, "operator"),
                name_problem(snapshot.notes, "notes", free_text=True)]
    dates = (("exposed", snapshot.exposed_on), ("processed", snapshot.processed_on),
             ("scanned", snapshot.scanned_on))
    problems += [_date_problem(value, f"{word} date") for word, value in dates]
    given = [(word, value) for word, value in dates if value is not None]
    for (first, early), (then, late) in zip(given, given[1:]):
        if late < early:
            problems.append(f"the film was {then} on {late}, before it was {first} on {early}")
    if not snapshot.strip.steps:
        problems.append(f"strip {snapshot.strip.index} has no steps")
    _refuse(path, f"store the snapshot of {snapshot.scan.path}", problems)


def check_note(path: Path, note: SnapshotNote) -> None:
    """Author and text of a note on a snapshot."""
    _refuse(path, f"add a note to snapshot {note.snapshot_id}",
            [name_problem(note.author, "author"), name_problem(note.text, "note", free_text=True)])


def _density_problem(value: float | None, what: str, bounds: tuple[float, float]) -> str | None:
    if value is None or bounds[0] <= value <= bounds[1]:
        return None
    return f"{what} {value!r} OD lies outside the plausible {bounds[0]:g} .. {bounds[1]:g} OD"


def check_qc_entry(path: Path, entry: QcEntry) -> None:
    """Densities, date and texts of a QC entry.

    Base+fog must lie within :data:`BASE_FOG_RANGE`, mid-density and the
    density difference within :data:`DENSITY_RANGE`; the date from
    :data:`EARLIEST_DATE` to today.
    """
    problems = [name_problem(entry.processor, "processor"),
                _density_problem(entry.base_fog, "base+fog", BASE_FOG_RANGE),
                _density_problem(entry.mid_density, "mid-density", DENSITY_RANGE),
                _density_problem(entry.density_difference, "density difference", DENSITY_RANGE),
                _date_problem(entry.date, "QC date"),
                name_problem(entry.note, "note", free_text=True), name_problem(entry.action, "action", free_text=True),
                name_problem(entry.reason, "reason", free_text=True)]
    _refuse(path, f"store the QC entry of {entry.date}", problems)


def check_imported_figures(path: Path, snapshot: Snapshot) -> None:
    """A snapshot from an import file: its figures must follow from its own steps.

    Every figure must be a finite number or absent, and the strip must have
    steps.  Mid-density, density difference and Dmax are densities of
    stated steps and must equal them within the step table's rounding;
    speed point, average gradient, gamma and latitude are read again from
    the curve through the usable steps (the same code as a new reading) and
    must agree within what another interpolation of the same steps can
    give.  An edited file that moves a figure is refused; nothing stored is
    ever judged by a figure its own steps do not give.
    """
    from stripscan.core.curve import compute_figures
    from stripscan.core.figure_settings import FigureSettings

    doing = f"import snapshot {snapshot.id}"
    steps = snapshot.strip.steps
    if not steps:
        _refuse(path, doing, [f"strip {snapshot.strip.index} has no steps"])
    stated = snapshot.strip.figures
    for name in _FIGURE_TOLERANCE:
        value = getattr(stated, name)
        if value is not None and (isinstance(value, bool) or not isinstance(value, (int, float))
                                  or not math.isfinite(value)):
            _refuse(path, doing, [f"its {name.replace('_', ' ')} is {value!r}, not a finite number"])
    _refuse(path, doing, [_density_problem(stated.base_fog, "base+fog", BASE_FOG_RANGE)])

    def edited(what: str, value: Any, expected: Any) -> None:
        _refuse(path, doing, [f"its {what} {value!r} is not what its own steps give ({expected}); "
                              "the file was edited or damaged"])

    od = {s.step: s.od for s in steps}
    usable = [s.in_range and not s.excluded and math.isfinite(s.od) for s in steps]
    read = {
        "mid_density": (stated.mid_density_step,),
        "density_difference": (stated.dd_high_step, stated.dd_low_step),
    }
    for name, picked in read.items():
        value = getattr(stated, name)
        if value is None:
            continue
        if any(step not in od or not math.isfinite(od[step]) for step in picked):
            edited(name.replace("_", " "), value, f"no readable step {picked}")
        expected = od[picked[0]] - (od[picked[1]] if len(picked) == 2 else 0.0)
        if abs(value - expected) > _FIGURE_TOLERANCE[name]:
            edited(name.replace("_", " "), value, round(expected, 4))
    if stated.dmax is not None:
        densest = max((s.od for s, ok in zip(steps, usable) if ok), default=None)
        if densest is None or abs(stated.dmax - densest) > _FIGURE_TOLERANCE["dmax"]:
            edited("Dmax", stated.dmax, "no usable step" if densest is None else round(densest, 4))
    known = {f: v for f, v in stated.settings.items() if f in FigureSettings.__dataclass_fields__}
    try:
        again = compute_figures([s.log_exposure for s in steps], [s.od for s in steps], usable,
                                base_fog=stated.net_reference, settings=FigureSettings(**known))
    except (TypeError, ValueError) as exc:
        _refuse(path, doing, [f"its figures cannot be read again from its steps ({exc})"])
        return
    for name in ("speed_log_exposure", "average_gradient", "gamma", "latitude_log_exposure"):
        value, expected = getattr(stated, name), getattr(again, name)
        if value is None or expected is None:
            continue  # whether a figure is reached at all can hang on a rounded step
        tolerance = _FIGURE_TOLERANCE[name] * (abs(expected) if name in ("average_gradient", "gamma") else 1.0)
        if abs(value - expected) > tolerance:
            edited(name.replace("_", " "), value, round(expected, 4))


def already_stored(archive: "Archive", analysis: Analysis) -> list[tuple[int, int]]:
    """``(snapshot id, strip index)`` of the analysis' strips the archive holds already.

    The same scan file (same sha256) and strip: adding a scan twice, or a
    retry after a lost acknowledgement, would count its strips twice in
    every trend and comparison, so both the command line (``--again``) and
    the window ask before storing them once more.
    """
    read = {strip.index for strip in analysis.strips}
    rows = archive._query("SELECT id, strip_index FROM snapshots WHERE scan_sha256 = ? ORDER BY id",
                          (analysis.scan.sha256,))
    return [(int(i), int(k)) for i, k in rows if k in read]


def describe_stored(stored: list[tuple[int, int]], shown: int = 5) -> str:
    """``strip 1 as snapshot 4, strip 2 as snapshot 5`` (the first few, and how many more)."""
    text = ", ".join(f"strip {k} as snapshot {i}" for i, k in stored[:shown])
    return text + (f" and {len(stored) - shown} more" if len(stored) > shown else "")


def on_read_only_media(path: Path) -> bool:
    """Whether ``path`` lies on a file system mounted read-only (a CD, a locked card, a read-only share).

    Such a file cannot change while it is open, so SQLite may read it
    without the lock files it could not create there (``immutable``).
    """
    try:
        return bool(os.statvfs(path).f_flag & os.ST_RDONLY)
    except (OSError, AttributeError):  # no such file yet, or no statvfs (Windows)
        return False
