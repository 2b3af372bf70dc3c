"""The workspace's long work, as plain functions a worker thread runs.

Each function takes ``progress(fraction, text)`` as :class:`TaskRunner
<stripscan.gui.tasks.TaskRunner>` passes it and opens the archive itself:
an SQLite connection belongs to the thread that made it, so nothing opened
on the UI thread is handed over.  Only immutable records (analyses,
comparisons, calibrations) cross between threads.
"""

from __future__ import annotations

import datetime as dt
import os
import threading
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from stripscan.archive import Archive
from stripscan.core.compare.comparison import Comparison, compare_sets
from stripscan.core.compare.sets import StripSet
from stripscan.core.records import Analysis, StripResult

__all__ = [
    "Cancelled",
    "ComparisonResult",
    "demo_archive_path",
    "build_demo_workspace",
    "scan_set",
    "compare_lots",
    "save_steps_csv",
    "save_figures_csv",
    "save_curve_picture",
    "save_scan_report",
    "save_snapshot_report",
    "save_stored_scan_report",
    "save_comparison_report",
    "save_qc_month_report",
]

Progress = Callable[[float, str], None]

# The lot archive is most of the demo's work (a pipeline run per weekly scan); the QC month the rest.
_ARCHIVE_SHARE = 0.85


class Cancelled(Exception):
    """The window was closed while the work ran; nothing half-made is kept."""


def demo_archive_path(folder: str | os.PathLike[str]) -> Path:
    """The demo archive's file in the demo's own folder."""
    from stripscan.services.demo_archive import DEMO_ARCHIVE_NAME

    return Path(folder) / DEMO_ARCHIVE_NAME


def _remove_database(path: Path) -> None:
    for leftover in (path, Path(f"{path}-wal"), Path(f"{path}-shm"), Path(f"{path}-journal")):
        leftover.unlink(missing_ok=True)


def build_demo_workspace(folder: str | os.PathLike[str], files: Any, *, progress: Progress,
                         cancel: threading.Event | None = None) -> Path:
    """Build the demo lot archive, then the demo QC month into it; return the archive file.

    Parameters
    ----------
    folder : path-like
        The demo's own folder (never the user's archive folder: the
        builder refuses it).
    files : DemoFiles
        The demo's files, so the archive holds readings made with the very
        calibration the window uses.
    progress : callable
    cancel : threading.Event, optional
        Set to stop the build (between two scans of the lot archive, before
        and after the QC month); :class:`Cancelled` is raised then.

    Notes
    -----
    Everything is written to a staging file beside the archive, which is
    renamed to the archive's name only when the lots and the QC month are
    all in it: the archive file is complete or absent, never half built,
    whether the work is cancelled, fails or the program is killed.  An
    archive left by an earlier run in the same folder is kept and only
    completed (the QC month added to a copy when missing): a second
    ``stripscan demo`` in a folder opens at once instead of refusing the
    existing file.
    """
    from stripscan.services.demo_archive import build_demo_archive
    from stripscan.services.qc_demo import DEMO_PROCESSOR, build_demo_qc

    target = demo_archive_path(folder)

    def stop_if_cancelled(what: str) -> None:
        if cancel is not None and cancel.is_set():
            raise Cancelled(f"{what}: the window was closed")

    def archive_progress(fraction: float, text: str) -> None:
        stop_if_cancelled("the demo archive was not built")
        progress(_ARCHIVE_SHARE * fraction, text)

    if target.is_file():
        with Archive.open(target, read_only=True) as archive:
            if archive.list_qc_entries(DEMO_PROCESSOR):
                progress(1.0, "Demo archive ready")
                return target
    staging = target.with_name(f".{target.name}.building")
    _remove_database(staging)  # an earlier run's, interrupted
    try:
        if target.is_file():
            with Archive.open(target, read_only=True) as existing:
                existing.backup(staging)
        else:
            build_demo_archive(staging, files, progress=archive_progress)
        stop_if_cancelled("the demo QC month was not added")
        progress(_ARCHIVE_SHARE, "Adding a month of processor QC")
        with Archive.open(staging, create=False) as archive:
            if not archive.list_qc_entries(DEMO_PROCESSOR):
                build_demo_qc(archive, files)
        stop_if_cancelled("the demo archive was not kept")
        os.replace(staging, target)
    except BaseException:
        _remove_database(staging)
        raise
    progress(1.0, "Demo archive ready")
    return target


# --------------------------------------------------------------------------
# Comparing lots


@dataclass(frozen=True)
class ComparisonResult:
    """Comparisons with what a report of them needs.

    Attributes
    ----------
    comparisons : tuple of Comparison
        From :func:`compare_sets`, set k against the first set.
    notes : tuple of str
        What reading the sets noticed (retired snapshots and the like).
    calibrations : tuple
        :class:`stripscan.render.comparison.CalibrationUse` per calibration.
    """

    comparisons: tuple[Comparison, ...]
    notes: tuple[str, ...] = ()
    calibrations: tuple[Any, ...] = field(default_factory=tuple)


def scan_set(analysis: Analysis) -> StripSet:
    """The strips of the open scan as one set, read as the window shows them (exclusions kept)."""
    name = f"this scan ({Path(analysis.scan.path).name})"
    numbers = ", ".join(str(s.index) for s in analysis.strips)
    return StripSet(name, analysis.strips, source=f"scan {analysis.scan.path}, strips {numbers}")


def _lot_calibrations(archive: Archive, lot: str, name: str) -> list[tuple[str, str, dict[str, Any] | None]]:
    # The same snapshots SetLoader reads for ``lot:LOT``: the lot's current ones.
    digests = sorted({archive.get_snapshot(row.id).calibration_hash or "" for row in archive.list_snapshots(lot=lot)})
    return [(digest, name, archive.get_calibration(digest) if digest else None) for digest in digests]


def compare_lots(archive_path: str | os.PathLike[str], lots: Sequence[str], extra: StripSet | None = None,
                 extra_calibration: dict[str, Any] | None = None, *, progress: Progress) -> ComparisonResult:
    """Compare lots of the archive (the first is A), and optionally the open scan's strips after them.

    The lots are read as ``stripscan compare lot:LOT`` reads them (every
    current snapshot, :class:`stripscan.services.comparison_sets.SetLoader`) and compared
    by :func:`compare_sets` with the default tolerances.
    """
    from stripscan.services.comparison_sets import SetLoader, parse_set
    from stripscan.render.comparison import CalibrationUse

    progress(0.1, "Reading the lots' strips")
    with SetLoader(archive_path) as loader:
        sets = [loader.load(parse_set(f"lot:{lot}")) for lot in lots]
        notes = tuple(loader.notes)
    if extra is not None:
        sets.append(extra)
    progress(0.5, "Comparing")
    comparisons = compare_sets(sets)
    groups: dict[str, tuple[list[str], dict[str, Any] | None]] = {}
    with Archive.open(archive_path, read_only=True) as archive:
        for lot, s in zip(lots, sets):
            for digest, name, record in _lot_calibrations(archive, lot, s.name):
                groups.setdefault(digest or "unknown", ([], record))[0].append(name)
    if extra is not None:
        digest = (extra_calibration or {}).get("sha256") or "direct"
        groups.setdefault(str(digest), ([], extra_calibration or {"mode": "direct"}))[0].append(extra.name)
    uses = tuple(CalibrationUse(tuple(names), record, None if key in ("unknown", "direct") else key)
                 for key, (names, record) in groups.items())
    progress(1.0, "Compared")
    return ComparisonResult(tuple(comparisons), notes, uses)


# --------------------------------------------------------------------------
# Files


def save_steps_csv(strips: Sequence[StripResult], path: str | os.PathLike[str], *, progress: Progress) -> Path:
    """The step tables of ``strips`` as one CSV (:func:`stripscan.render.export_steps_csv`)."""
    from stripscan.render import export_steps_csv

    progress(0.2, "Writing the steps")
    return export_steps_csv(list(strips), path)


def save_figures_csv(strips: Sequence[StripResult], path: str | os.PathLike[str], *, progress: Progress) -> Path:
    """The figures of ``strips``, one row each (:func:`stripscan.render.export_figures_csv`)."""
    from stripscan.render import export_figures_csv

    progress(0.2, "Writing the figures")
    return export_figures_csv(list(strips), path)


def save_curve_picture(strip: StripResult, path: str | os.PathLike[str], *, title: str,
                       calibration: dict[str, Any] | None, progress: Progress) -> Path:
    """A strip's curve as PNG or SVG (by the file's suffix), as the report pages draw it."""
    from stripscan.render import curve_plot, save_plot_png, save_plot_svg
    from stripscan.render.provenance import valid_range

    progress(0.2, "Drawing the curve")
    plot = curve_plot(strip, valid_od=valid_range(calibration), title=title)
    if Path(path).suffix.lower() == ".svg":
        return save_plot_svg(plot, path)
    return save_plot_png(plot, path)


def save_scan_report(analysis: Analysis, path: str | os.PathLike[str], *, calibration: Any,
                     progress: Progress) -> Path:
    """One report page per strip of the open scan (:func:`stripscan.render.scan_report_pdf`)."""
    from stripscan.render import scan_report_pdf

    progress(0.2, "Drawing the report")
    return scan_report_pdf(analysis, path, calibration=calibration)


def save_snapshot_report(archive_path: str | os.PathLike[str], snapshot_id: int, path: str | os.PathLike[str], *,
                         progress: Progress) -> Path:
    """The one-page report of an archived snapshot (:func:`stripscan.render.snapshot_report_pdf`)."""
    from stripscan.render import snapshot_report_pdf

    progress(0.2, "Drawing the report")
    with Archive.open(archive_path, read_only=True) as archive:
        return snapshot_report_pdf(snapshot_id, path, archive=archive)


def save_stored_scan_report(archive_path: str | os.PathLike[str], snapshot_ids: Sequence[int],
                            path: str | os.PathLike[str], *, progress: Progress) -> Path:
    """One report page per strip of a scan just stored, each as its snapshot (lot, operator, processor, dates).

    The pages are those :func:`stripscan.render.snapshot_report_pdf` draws,
    in one file, so the scan's report names what the archive holds.
    """
    import dataclasses
    from pathlib import PurePath

    from stripscan.render import report_from_snapshot, write_pdf

    progress(0.2, "Drawing the report")
    with Archive.open(archive_path, read_only=True) as archive:
        snapshots = [archive.get_snapshot(i) for i in snapshot_ids]
        pages = [dataclasses.replace(report_from_snapshot(s, archive=archive), n_strips=len(snapshots))
                 for s in snapshots]
    name = PurePath(snapshots[0].scan.path).name if snapshots else ""
    return write_pdf(pages, path, title=f"stripscan strip report - {name}")


def save_comparison_report(result: ComparisonResult, path: str | os.PathLike[str], *, progress: Progress) -> Path:
    """One page per compared pair (:func:`stripscan.render.comparison_report_pdf`)."""
    from stripscan.render import comparison_report_pdf

    progress(0.2, "Drawing the report")
    return comparison_report_pdf(result.comparisons, path, calibrations=result.calibrations, notes=result.notes)


def save_qc_month_report(archive_path: str | os.PathLike[str], processor: str, month: dt.date,
                         path: str | os.PathLike[str], *, progress: Progress) -> Path:
    """A processor's month of QC (:func:`stripscan.render.qc_month_report_pdf`)."""
    from stripscan.render import qc_month_report_pdf

    progress(0.2, "Drawing the report")
    with Archive.open(archive_path, read_only=True) as archive:
        return qc_month_report_pdf(archive, processor, f"{month.year:04d}-{month.month:02d}", path)
