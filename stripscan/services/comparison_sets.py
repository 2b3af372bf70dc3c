"""Sets of strips named in plain text, read from scans or the archive, for comparisons and crossovers.

A set is written ``scan:PATH[#STRIPS]``, ``snapshot:ID[,ID...]`` or
``lot:LOT`` (see :mod:`stripscan.cli.compare` for the user's view);
:func:`parse_set` reads the text and :class:`SetLoader` turns it into a
:class:`stripscan.core.compare.sets.StripSet`, analysing scans and reading the
archive.  The command line, the window and the reports share these.
"""

from __future__ import annotations

import os
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any


if TYPE_CHECKING:
    from stripscan.core.compare.sets import StripSet


__all__ = ["SetError", "SetSpec", "parse_set", "SetLoader", "MOST_IN_A_SET"]


class SetError(ValueError):
    """A set named on the command line cannot be read; the message names the set."""


# --------------------------------------------------------------------------
# Naming sets

_KINDS = ("scan", "snapshot", "lot")
_NUMBERS = re.compile(r"^\d+(-\d+)?(,\d+(-\d+)?)*$")
_SYNTAX = "write scan:PATH[#1,3], snapshot:ID[,ID...] or lot:LOT"


#: Most strips or snapshots one set may name: a comparison of more is a
#: slip of the keyboard (``1-100000``), not a set of strips.
MOST_IN_A_SET = 1000


def _short_list(numbers: Sequence[int], shown: int = 10) -> str:
    """``1, 2, 3`` or, for a long list, its first numbers and how many more."""
    text = ", ".join(map(str, numbers[:shown]))
    return text + (f" and {len(numbers) - shown} more" if len(numbers) > shown else "")


def _numbers(text: str, what: str, spec: str) -> tuple[int, ...]:
    """``1,3-5`` -> (1, 3, 4, 5), in the order written, each once; at most :data:`MOST_IN_A_SET`."""
    if not _NUMBERS.match(text):
        raise SetError(f"set {spec!r}: {text!r} is not a list of {what} numbers (e.g. 1,3 or 2-4)")
    out: list[int] = []
    seen: set[int] = set()
    for part in text.split(","):
        first, _, last = part.partition("-")
        lo, hi = int(first), int(last or first)
        if hi < lo:
            raise SetError(f"set {spec!r}: the range {part} runs backwards")
        if hi - lo + 1 > MOST_IN_A_SET - len(out):
            raise SetError(f"set {spec!r}: {part} names {hi - lo + 1} {what}s; a set holds at most "
                           f"{MOST_IN_A_SET}")
        fresh = [n for n in range(lo, hi + 1) if n not in seen]
        seen.update(fresh)
        out += fresh
    if 0 in seen:
        raise SetError(f"set {spec!r}: {what} numbers start at 1")
    return tuple(out)


@dataclass(frozen=True)
class SetSpec:
    """A set as written on the command line.

    Attributes
    ----------
    text : str
        What was written (the set's name).
    kind : str
        ``"scan"``, ``"snapshot"`` or ``"lot"``.
    target : str
        The scan path or lot id (empty for snapshots).
    numbers : tuple of int
        Picked strip numbers (scan) or snapshot ids; empty for all strips.
    """

    text: str
    kind: str
    target: str
    numbers: tuple[int, ...] = ()


def _split_picks(text: str) -> tuple[str, str | None]:
    """``a.tif#1,3`` -> (``a.tif``, ``1,3``); a ``#`` not followed by numbers belongs to the path."""
    path, hash_, picks = text.rpartition("#")
    return (path, picks) if hash_ and _NUMBERS.match(picks) else (text, None)


def parse_set(text: str) -> SetSpec:
    """Read a set written as described in this module's docstring.

    Raises
    ------
    SetError
        When the text names none of the three kinds.
    """
    kind, sep, rest = text.partition(":")
    if sep and kind in _KINDS:
        if not rest.strip():
            raise SetError(f"set {text!r}: nothing after '{kind}:'; {_SYNTAX}")
        if kind == "snapshot":
            return SetSpec(text, kind, "", _numbers(rest.strip(), "snapshot", text))
        if kind == "lot":
            return SetSpec(text, kind, rest.strip())
    else:
        # Not prefixed: only an existing file makes sense (a scan).
        rest = text
        if not Path(_split_picks(text)[0]).is_file():
            raise SetError(f"set {text!r}: no such file, and not a set; {_SYNTAX}")
    path, picks = _split_picks(rest)
    return SetSpec(text, "scan", path, _numbers(picks, "strip", text) if picks else ())


# --------------------------------------------------------------------------
# Reading sets


class SetLoader:
    """Turns set specs into :class:`StripSet` records, analysing scans and reading the archive.

    Parameters
    ----------
    archive_path : path-like or None
        The archive (default: :func:`stripscan.archive.default_archive_path`);
        opened only when a set needs it.
    calibration_path : path-like or None
        Calibration for scans (none: uncalibrated direct mode).
    n_steps : int or None
        Steps per strip on scans (None: counted).
    archive : Archive, optional
        An archive already open (the crossover writes to it).
    """

    def __init__(self, archive_path: str | os.PathLike[str] | None = None, *,
                 calibration_path: str | os.PathLike[str] | None = None, n_steps: int | None = None,
                 archive: Any = None) -> None:
        self.archive_path = archive_path
        self.calibration_path = calibration_path
        self.n_steps = n_steps
        self.notes: list[str] = []
        self._archive = archive
        self._own_archive = False
        self._calibration: Any = None
        self._analyses: dict[str, Any] = {}
        #: Film dates and lots of each set read from the archive, by set name (the crossover checks them).
        self.archived: dict[str, tuple[frozenset[str], frozenset[str]]] = {}

    def close(self) -> None:
        if self._own_archive and self._archive is not None:
            self._archive.close()
            self._archive = None

    def __enter__(self) -> "SetLoader":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _open_archive(self) -> Any:
        if self._archive is None:
            from stripscan.archive import Archive

            self._archive = Archive.open(self.archive_path, read_only=True)
            self._own_archive = True
        return self._archive

    def load(self, spec: SetSpec, *, processor: str | None = None, date: str | None = None) -> StripSet:
        """The strips a spec names.

        ``processor`` and ``date`` (YYYY-MM-DD) narrow ``lot:`` sets to the
        snapshots of that processor and film date (used by the crossover).
        """
        from stripscan.archive import ArchiveError

        try:
            if spec.kind == "scan":
                return self._scan(spec)
            if spec.kind == "snapshot":
                return self._snapshots(spec, list(spec.numbers))
            return self._lot(spec, processor, date)
        except ArchiveError as exc:
            raise SetError(f"set {spec.text!r}: {exc}") from None

    def _scan(self, spec: SetSpec) -> StripSet:
        from stripscan.core.calibration_files import load_calibration
        from stripscan.core.compare.sets import StripSet
        from stripscan.core.pipeline import analyze_scan
        from stripscan.core.reading import AnalysisOptions

        if self.calibration_path is not None and self._calibration is None:
            self._calibration = load_calibration(self.calibration_path)
        key = os.path.realpath(spec.target)
        if key not in self._analyses:
            # A scan named twice (different strips of it) is read once.
            self._analyses[key] = analyze_scan(spec.target, calibration=self._calibration,
                                               options=AnalysisOptions(n_steps=self.n_steps))
        analysis = self._analyses[key]
        strips = {s.index: s for s in analysis.strips}
        picks = spec.numbers or tuple(strips)
        missing = [n for n in picks if n not in strips]
        if missing:
            raise SetError(f"set {spec.text!r}: the scan {spec.target} has {len(strips)} strip(s), "
                           f"no strip {_short_list(missing)}")
        if analysis.calibration is None or analysis.calibration.get("mode") != "tablet":
            self.notes.append(f"set {spec.text!r}: uncalibrated (direct mode); give --calibration")
        chosen = tuple(strips[n] for n in picks)
        source = f"scan {spec.target}, strips {', '.join(str(s.index) for s in chosen)}"
        return StripSet(spec.text, chosen, tuple(f"strip {s.index}" for s in chosen), source)

    def _snapshots(self, spec: SetSpec, ids: Sequence[int]) -> StripSet:
        from stripscan.core.compare.sets import StripSet

        archive = self._open_archive()
        snapshots = [archive.get_snapshot(i) for i in ids]
        for s in snapshots:
            if s.retired_at is not None:
                self.notes.append(f"set {spec.text!r}: snapshot {s.id} was retired ({s.retired_reason})")
        lots = sorted({s.lot_id for s in snapshots})
        self.archived[spec.text] = (frozenset(s.date for s in snapshots), frozenset(lots))
        source = f"archive {archive.path}, lot {', '.join(lots)}, snapshots {', '.join(str(i) for i in ids)}"
        return StripSet(spec.text, tuple(s.strip for s in snapshots), tuple(f"snapshot {s.id}" for s in snapshots),
                        source, tuple(s.processed_on for s in snapshots))

    def _lot(self, spec: SetSpec, processor: str | None, date: str | None) -> StripSet:
        archive = self._open_archive()
        archive.get_lot(spec.target)  # an unknown lot is an error, not an empty set
        rows = archive.list_snapshots(lot=spec.target, processor=processor)
        if date is not None:
            rows = [r for r in rows if r.date == date]
        if not rows:
            where = "".join((f" on processor {processor!r}" if processor else "",
                             f" dated {date}" if date else ""))
            raise SetError(f"set {spec.text!r}: lot {spec.target!r} has no current snapshots{where} in "
                           f"{archive.path}; store the strips first (stripscan archive add) or name them "
                           "with snapshot:ID")
        return self._snapshots(spec, [r.id for r in rows])
