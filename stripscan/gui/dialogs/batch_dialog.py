"""Several scans analysed in the background: a progress bar, a Cancel button, then every file's outcome.

The work runs through the window's :class:`~stripscan.gui.tasks.TaskRunner`
(a worker thread, so the window knows work is under way), which hands the
scans to worker processes on every core
(:func:`stripscan.services.batch.run_batch`); each scan's result is written
to ``NAME.results.json`` in the folder chosen, whole or not at all.  A scan
that cannot be read is listed with its reason; the others go on.
"""

from __future__ import annotations

import threading
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QColor
from PySide6.QtWidgets import (
    QAbstractItemView,
    QDialog,
    QDialogButtonBox,
    QHeaderView,
    QLabel,
    QProgressBar,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from stripscan.gui.errors import report_error
from stripscan.gui.tasks import TaskRunner
from stripscan.services.batch import BatchSummary

__all__ = ["BatchDialog", "analyse_scans", "start_batch"]


def analyse_scans(scans: Sequence[Path], folder: Path, calibration: Any, options: Any, *, progress: Any,
                  cancel: threading.Event, report: Any = None, workers: int | None = None) -> BatchSummary:
    """Analyse ``scans`` into ``folder`` on every core (the worker thread's job); every outcome, in order.

    ``progress(fraction, text)`` (the runner's, for the status bar) and
    ``report(fraction, text)`` (the dialog's own) get the share done and
    the line a terminal would show (time left, the file just finished).
    """
    import functools

    from stripscan.services.batch import available_cores, run_batch
    from stripscan.services.progress_line import progress_text
    from stripscan.services.scan_results import analyse_into_folder

    work = functools.partial(analyse_into_folder, folder=folder, calibration=calibration, options=options)

    def tell(event: Any) -> None:
        text = progress_text(event, 120)
        progress(event.fraction, text)
        if report is not None:
            report(event.fraction, text)

    return run_batch(scans, work, workers=workers or available_cores(), cancel=cancel, on_progress=tell)


class BatchDialog(QDialog):
    """Analyse several scans with the window's calibration and settings, and say what came of each.

    Parameters
    ----------
    runner : TaskRunner
        The window's: the window waits for the work before it closes.
    scans : sequence of Path
    folder : Path
        Where the results go.
    calibration : Calibration or None
        None reads in direct mode (uncalibrated), as the window would.
    options : AnalysisOptions
    parent : QWidget, optional

    Signals
    -------
    finished_batch(object)
        The :class:`~stripscan.services.batch.BatchSummary`, once the work has ended.
    """

    finished_batch = Signal(object)
    # The worker thread's progress, queued to this dialog (the runner's own signal follows its latest task).
    _reported = Signal(float, str)

    def __init__(self, runner: TaskRunner, scans: Sequence[Path], folder: Path, calibration: Any, options: Any, *,
                 workers: int | None = None, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Analyse several scans")
        self.scans, self.folder = [Path(s) for s in scans], Path(folder)
        self._calibration, self._options, self._workers = calibration, options, workers
        self._cancel = threading.Event()
        self.summary: BatchSummary | None = None
        self.runner = runner
        self._task: int | None = None
        self._reported.connect(self._progress)

        mode = "direct mode, UNCALIBRATED" if calibration is None else "the window's calibration"
        intro = QLabel(f"{len(self.scans)} scans, read with {mode} and the analysis settings. Each result is "
                       f"written to {self.folder} as NAME.results.json.")
        intro.setWordWrap(True)
        self.bar = QProgressBar()
        self.bar.setRange(0, len(self.scans))
        self.bar.setValue(0)
        self.bar.setFormat(f"%v of {len(self.scans)}")
        self.status = QLabel("Starting…")
        self.status.setWordWrap(True)
        self.table = QTableWidget(0, 2)
        self.table.setHorizontalHeaderLabels(["Scan", "Outcome"])
        self.table.horizontalHeader().setSectionResizeMode(0, QHeaderView.ResizeMode.ResizeToContents)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.verticalHeader().hide()
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.hide()
        from stripscan.gui.dialogs.lot_choice import caution_label

        self.buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Cancel)
        self.buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addWidget(intro)
        layout.addWidget(self.bar)
        layout.addWidget(self.status)
        layout.addWidget(self.table, 1)
        layout.addWidget(caution_label())
        layout.addWidget(self.buttons)
        self.resize(640, 260)

    @property
    def running(self) -> bool:
        return self._task is not None

    def start(self) -> None:
        """Start the work in the background (the dialog shows it as it goes)."""
        # A key of its own: a second batch started meanwhile must not drop this one's outcome.
        self._task = self.runner.start(analyse_scans, self.scans, self.folder, self._calibration, self._options,
                                       cancel=self._cancel, report=self._reported.emit, workers=self._workers,
                                       key=f"batch-{id(self)}", on_done=self._done, on_error=self._failed)

    def cancel(self) -> None:
        """Start no further scan; those under way are finished and kept."""
        if self.running and not self._cancel.is_set():
            self._cancel.set()
            self.status.setText("Cancelling: the scans under way are finished, no other is started…")
            self.buttons.button(QDialogButtonBox.StandardButton.Cancel).setEnabled(False)

    def reject(self) -> None:  # Cancel, Esc, the title bar's close
        if self.running:
            self.cancel()
            return  # what was done and what was not stays in view, to be read before closing
        super().reject()

    def _progress(self, fraction: float, text: str) -> None:
        self.bar.setValue(int(round(fraction * len(self.scans))))
        if not self._cancel.is_set():
            self.status.setText(text)

    def _done(self, summary: BatchSummary) -> None:
        self._task = None
        self.summary = summary
        self.bar.setValue(len(summary.done) + len(summary.failed))
        from stripscan.services.progress_line import summary_lines

        head, *_ = summary_lines(summary, done_word="analysed")
        self.status.setText(head + ("" if not summary.failed else "; the reasons are listed below"))
        self._fill(summary)
        self._finish()
        self.finished_batch.emit(summary)

    def _failed(self, error: BaseException) -> None:
        self._task = None
        self.status.setText("The batch stopped: see the message.")
        self._finish()
        report_error(self, "The scans could not be analysed", error)

    def _finish(self) -> None:
        self.buttons.clear()
        close = self.buttons.addButton(QDialogButtonBox.StandardButton.Close)
        close.clicked.connect(self.accept)

    def _fill(self, summary: BatchSummary) -> None:
        self.table.setRowCount(len(summary.items))
        red, grey = QColor("#b71c1c"), QColor("#6b6b6b")
        for row, item in enumerate(summary.items):
            name = QTableWidgetItem(item.path.name)
            name.setToolTip(str(item.path))
            if item.cancelled:
                outcome, colour = QTableWidgetItem("not read (cancelled)"), grey
            elif item.error is not None:
                outcome, colour = QTableWidgetItem(item.error), red
            else:
                written = item.result
                warned = f"; {len(written.warnings)} warning(s), in the file" if written.warnings else ""
                outcome = QTableWidgetItem(f"{written.strips} strip(s) → {written.output.name}{warned}")
                colour = None
            outcome.setToolTip(outcome.text())
            if colour is not None:
                outcome.setForeground(colour)
            self.table.setItem(row, 0, name)
            self.table.setItem(row, 1, outcome)
        self.table.show()
        self.table.resizeRowsToContents()
        self.resize(max(self.width(), 760), 460)
        self.table.setTextElideMode(Qt.TextElideMode.ElideMiddle)


def start_batch(runner: TaskRunner, scans: Sequence[str | Path], folder: str | Path, calibration: Any, options: Any,
                *, parent: QWidget | None = None, workers: int | None = None) -> BatchDialog | None:
    """Open the dialog and start the work; None (after saying why) when the batch cannot start.

    Two scans that would write the same result file are refused before
    anything is read.
    """
    from stripscan.gui.errors import show_message
    from stripscan.services.scan_results import check_result_names

    scans = [Path(s) for s in scans]
    try:
        if not Path(folder).is_dir():
            raise ValueError(f"{folder}: the folder for the results does not exist")
        check_result_names(scans, folder)
    except ValueError as exc:
        show_message(parent, "The scans were not analysed", str(exc))
        return None
    dialog = BatchDialog(runner, scans, Path(folder), calibration, options, workers=workers, parent=parent)
    dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
    dialog.show()
    dialog.start()
    return dialog
