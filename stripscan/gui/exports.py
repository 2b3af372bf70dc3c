"""Files of what the window's pages show: CSV tables, curve pictures and PDF reports.

Each file is written by :mod:`stripscan.render`'s public functions in a
worker thread (:mod:`stripscan.gui.jobs`), so a report of many pages never
stops the window; the status bar says when it is saved.  The ``export*``
methods take the path and are what the menus' ``ask_*`` methods call after
asking for it.
"""

from __future__ import annotations

import datetime as dt
import logging
import os
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

from PySide6.QtCore import QObject, Signal
from PySide6.QtWidgets import QFileDialog

from stripscan.gui import jobs
from stripscan.gui.errors import report_error

if TYPE_CHECKING:
    from stripscan.gui.workspace import Workspace

__all__ = ["Exports"]

log = logging.getLogger(__name__)


def _month(day: dt.date) -> str:
    return f"{day.year:04d}-{day.month:02d}"


class Exports(QObject):
    """Writes files of the scan, archive, comparison and QC pages of a :class:`Workspace`.

    Signals
    -------
    file_written(str)
        A file was written there.
    """

    file_written = Signal(str)

    def __init__(self, workspace: "Workspace") -> None:
        super().__init__(workspace)
        self.ws = workspace

    def _write(self, what: str, path: str | os.PathLike[str], fn: Callable[..., Path], *args: Any,
               **kwargs: Any) -> int:
        # fn(*args, path, **kwargs) in a worker; a key per file, so two exports never drop each other's result.
        self.ws.status(f"Writing the {what} to {path}…", 0)
        return self.ws.runner.start(fn, *args, path, key=f"file:{path}", on_done=lambda p: self._written(what, p),
                                 on_error=lambda exc: report_error(self.ws.window, f"The {what} was not written", exc),
                                 **kwargs)

    def _written(self, what: str, path: Path) -> None:
        log.info("%s written to %s", what, path)
        self.ws.status(f"The {what} is saved: {path}", 12000)
        self.ws.notice.show_file(f"The {what} is saved", path)
        self.file_written.emit(str(path))

    def _analysis(self):
        analysis = self.ws.session.analysis()
        if analysis is None or not analysis.strips:
            self.ws.tell("Nothing to export", "Open a scan with strips (and a usable calibration) first.")
            return None
        return analysis

    def export(self, kind: str, path: str | os.PathLike[str]) -> bool:
        """Write a file of the open scan: ``steps`` or ``figures`` (CSV), ``png``/``svg`` (curve), ``pdf`` (report).

        The work runs in a worker thread; ``file_written`` follows.  False
        (with a message) when there is nothing to write.
        """
        analysis = self._analysis()
        if analysis is None:
            return False
        if kind == "steps":
            self._write("step table", path, jobs.save_steps_csv, analysis.strips)
        elif kind == "figures":
            self._write("figures table", path, jobs.save_figures_csv, analysis.strips)
        elif kind in ("png", "svg"):
            strip = self.ws.session.result() or analysis.strips[0]
            title = f"Characteristic curve - {Path(analysis.scan.path).name}, strip {strip.index}"
            if (analysis.calibration or {}).get("mode") == "direct":
                title += " (UNCALIBRATED direct mode)"
            self._write("curve plot", path, jobs.save_curve_picture, strip, title=title,
                        calibration=analysis.calibration)
        elif kind == "pdf":
            stored = self.ws.stored_snapshots(analysis)
            if stored:
                # Stored as it is now: the report carries what the archive holds (lot, operator, dates).
                self._write("scan report", path, jobs.save_stored_scan_report, self.ws.archive_path, stored)
            else:
                self._write("scan report", path, jobs.save_scan_report, analysis,
                            calibration=self.ws.session.calibration)
        else:
            raise ValueError(f"unknown export {kind!r}")
        return True

    def _ask_path(self, title: str, default: str, kinds: str) -> str:
        folder = Path(self.ws.settings.last_folder() or Path.home())
        path, _ = QFileDialog.getSaveFileName(self.ws.window, title, str(folder / default), kinds)
        if path:
            # The next report is offered in the same folder.
            self.ws.settings.set_last_folder(str(Path(path).parent))
        return path

    def ask_export(self, kind: str) -> None:
        analysis = self._analysis()
        if analysis is None:
            return
        stem = Path(analysis.scan.path).stem
        selected = self.ws.session.result() or analysis.strips[0]
        title, default, kinds = {
            "steps": ("Save the steps of every strip", f"{stem}_steps.csv", "CSV files (*.csv)"),
            "figures": ("Save the figures of every strip", f"{stem}_figures.csv", "CSV files (*.csv)"),
            "png": ("Save the curve plot", f"{stem}_strip{selected.index}_curve.png", "PNG pictures (*.png)"),
            "svg": ("Save the curve plot", f"{stem}_strip{selected.index}_curve.svg", "SVG drawings (*.svg)"),
            "pdf": ("Save the report of this scan's strips", f"{stem}_report.pdf", "PDF files (*.pdf)"),
        }[kind]
        path = self._ask_path(title, default, kinds)
        if path:
            self.export(kind, path)

    def _open_snapshot(self):
        record = self.ws.archive_panel.view.record
        if record is None or self.ws.archive_path is None:
            self.ws.tell("No snapshot open", "Open a snapshot on the lot archive page first.")
            return None
        return record

    def export_snapshot_report(self, path: str | os.PathLike[str]) -> bool:
        """Write the report of the snapshot open on the archive page."""
        record = self._open_snapshot()
        if record is None:
            return False
        self._write("snapshot report", path, jobs.save_snapshot_report, self.ws.archive_path, record.snapshot.id)
        return True

    def ask_snapshot_report(self) -> None:
        record = self._open_snapshot()
        if record is None:
            return
        path = self._ask_path("Save the snapshot report", f"snapshot_{record.snapshot.id}_report.pdf",
                              "PDF files (*.pdf)")
        if path:
            self.export_snapshot_report(path)

    def _shown_comparison(self) -> jobs.ComparisonResult | None:
        if self.ws.comparison is None:
            self.ws.tell("No comparison shown", "Compare two lots first (Compare menu).")
        return self.ws.comparison

    def export_comparison_report(self, path: str | os.PathLike[str]) -> bool:
        """Write the report of the comparison shown."""
        result = self._shown_comparison()
        if result is None:
            return False
        self._write("comparison report", path, jobs.save_comparison_report, result)
        return True

    def ask_comparison_report(self) -> None:
        if self._shown_comparison() is None:
            return
        first = self.ws.comparison.comparisons[0]
        names = "_".join(n.replace("lot:", "").split(" ")[0] for n in (first.a.name, first.b.name))
        path = self._ask_path("Save the comparison report", f"comparison_{names}.pdf", "PDF files (*.pdf)")
        if path:
            self.export_comparison_report(path)

    def _qc_month(self) -> tuple[str, dt.date] | None:
        panel = self.ws.qc_panel
        month, processor = panel.report_month(), panel.processor_box.currentText()
        if month is None or not processor or self.ws.archive_path is None:
            self.ws.tell("No QC log shown", "Show a processor with QC strips on the processor QC page first.")
            return None
        return processor, month

    def export_qc_report(self, path: str | os.PathLike[str]) -> bool:
        """Write the QC report of the processor shown, for the month chosen on the QC page (the latest by default)."""
        chosen = self._qc_month()
        if chosen is None:
            return False
        self._write("QC report", path, jobs.save_qc_month_report, self.ws.archive_path, *chosen)
        return True

    def ask_qc_report(self) -> None:
        chosen = self._qc_month()
        if chosen is None:
            return
        processor, day = chosen
        default = f"qc_{processor.replace(' ', '-')}_{_month(day)}.pdf"
        path = self._ask_path(f"Save the QC report of {processor}, {_month(day)}", default, "PDF files (*.pdf)")
        if path:
            self.export_qc_report(path)
