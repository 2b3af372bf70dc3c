"""A status-bar progress bar that follows a :class:`~stripscan.gui.tasks.TaskRunner`."""

from __future__ import annotations

from PySide6.QtWidgets import QProgressBar, QWidget

from stripscan.gui.tasks import TaskRunner

__all__ = ["TaskProgress"]


class TaskProgress(QProgressBar):
    """Shown while ``runner`` works, with the latest task's words and per cent; hidden otherwise.

    Parameters
    ----------
    runner : TaskRunner
    width : int
        Widest it may get, in pixels.
    parent : QWidget, optional
    """

    def __init__(self, runner: TaskRunner, width: int = 260, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setRange(0, 100)
        self.setMaximumWidth(width)
        # Room for the task's words on one line: a narrow bar wrapped and clipped them.
        self.setMinimumWidth(min(width, 220))
        self.hide()
        runner.busy_changed.connect(self._busy)
        runner.progress.connect(self._progress)

    def _busy(self, busy: bool) -> None:
        self.setVisible(busy)
        if busy:
            # A moving bar until the work says how far it is (opening a server archive says nothing for a while).
            self.setRange(0, 0)

    def _progress(self, fraction: float, text: str) -> None:
        self.setToolTip(text)
        if fraction <= 0.0:
            return  # started, no share done yet: the bar keeps moving
        self.setRange(0, 100)
        self.setValue(int(round(100 * fraction)))
        self.setFormat(f"{text} %p%")
