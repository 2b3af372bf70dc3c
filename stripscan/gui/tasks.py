"""Long work off the UI thread: a QThreadPool runner with progress and results.

Results come back on the UI thread through queued signals.  Work started
under a key supersedes earlier work under the same key: opening a second
scan before the first is read drops the first one's result.
"""

from __future__ import annotations

import itertools
import logging
from typing import Any, Callable

from PySide6.QtCore import QObject, QRunnable, QThreadPool, Signal, Slot

from stripscan.render import qtguard  # noqa: F401  (before any signal is emitted)

__all__ = ["TaskRunner"]

log = logging.getLogger(__name__)


class _Signals(QObject):
    progress = Signal(int, float, str)
    done = Signal(int, object)
    failed = Signal(int, object)


class _Task(QRunnable):
    def __init__(self, task_id: int, signals: _Signals, fn: Callable[..., Any], args: tuple, kwargs: dict) -> None:
        super().__init__()
        self.task_id, self.signals, self.fn, self.args, self.kwargs = task_id, signals, fn, args, kwargs
        self.setAutoDelete(True)

    def run(self) -> None:
        def progress(fraction: float, text: str) -> None:
            self.signals.progress.emit(self.task_id, float(fraction), str(text))

        try:
            result = self.fn(*self.args, progress=progress, **self.kwargs)
        except Exception as exc:  # reported to the user on the UI thread
            log.info("background task %s failed: %s", getattr(self.fn, "__name__", self.fn), exc)
            self.signals.failed.emit(self.task_id, exc)
        else:
            self.signals.done.emit(self.task_id, result)


class TaskRunner(QObject):
    """Runs callables in the global thread pool and calls back on the UI thread.

    Signals
    -------
    busy_changed(bool)
    progress(float, str)
        Fraction done and what is being done, of the latest task.
    failed(str, object)
        A task started under this key raised this exception (also one whose
        result was dropped); the window watches for a lost connection to a
        server archive.
    """

    busy_changed = Signal(bool)
    progress = Signal(float, str)
    failed = Signal(str, object)

    def __init__(self, parent: QObject | None = None) -> None:
        super().__init__(parent)
        self._signals = _Signals(self)
        self._signals.done.connect(self._done)
        self._signals.failed.connect(self._failed)
        self._signals.progress.connect(self._progress)
        self._ids = itertools.count(1)
        self._pending: dict[int, tuple[str, Callable[[Any], None], Callable[[BaseException], None]]] = {}
        self._latest: dict[str, int] = {}

    @property
    def busy(self) -> bool:
        return bool(self._pending)

    def start(
        self,
        fn: Callable[..., Any],
        *args: Any,
        on_done: Callable[[Any], None],
        on_error: Callable[[BaseException], None],
        key: str = "",
        **kwargs: Any,
    ) -> int:
        """Run ``fn(*args, progress=callback, **kwargs)`` in a worker thread.

        ``on_done(result)`` or ``on_error(exception)`` is called on the UI
        thread, unless newer work was started under the same ``key``.
        """
        task_id = next(self._ids)
        was_busy = self.busy
        self._pending[task_id] = (key, on_done, on_error)
        self._latest[key] = task_id
        QThreadPool.globalInstance().start(_Task(task_id, self._signals, fn, args, kwargs))
        if not was_busy:
            self.busy_changed.emit(True)
        return task_id

    def wait(self, msecs: int = -1) -> bool:
        """Block until every started task has finished (for closing and tests)."""
        return QThreadPool.globalInstance().waitForDone(msecs)

    def _finish(self, task_id: int) -> tuple[Callable[[Any], None], Callable[[BaseException], None]] | None:
        key, on_done, on_error = self._pending.pop(task_id, ("", None, None))
        current = self._latest.get(key) == task_id
        if not self.busy:
            self.busy_changed.emit(False)
        return (on_done, on_error) if current and on_done is not None else None  # type: ignore[return-value]

    @Slot(int, object)
    def _done(self, task_id: int, result: object) -> None:
        callbacks = self._finish(task_id)
        if callbacks:
            callbacks[0](result)

    @Slot(int, object)
    def _failed(self, task_id: int, error: object) -> None:
        key = self._pending.get(task_id, ("",))[0]
        callbacks = self._finish(task_id)
        self.failed.emit(key, error)
        if callbacks:
            callbacks[1](error)  # type: ignore[arg-type]

    @Slot(int, float, str)
    def _progress(self, task_id: int, fraction: float, text: str) -> None:
        if task_id in self._pending and self._latest.get(self._pending[task_id][0]) == task_id:
            self.progress.emit(fraction, text)
