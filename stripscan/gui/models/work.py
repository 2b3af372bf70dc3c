"""How a page model has storage work run: a runner handed in by the page, never Qt here.

A page model decides what to read or store and what follows; the page
gives it a runner (the window's :meth:`TaskRunner.start
<stripscan.gui.tasks.TaskRunner.start>`, which runs the work in a worker
thread and calls back on the UI thread), so that a slow or locked archive
never freezes the window.  :func:`run_now` runs the same work at once, for
scripts and for tests of a model without Qt.
"""

from __future__ import annotations

from typing import Any, Callable, Protocol

__all__ = ["Run", "run_now"]


class Run(Protocol):
    """``run(fn, *args, on_done=..., on_error=..., key=..., **kwargs)``.

    Calls ``fn(*args, progress=callback, **kwargs)`` somewhere, then
    ``on_done(result)`` or ``on_error(exception)`` where the model lives.
    Work started under a ``key`` supersedes earlier work under the same key
    (its result is dropped); the return value is not used.
    """

    def __call__(self, fn: Callable[..., Any], *args: Any, on_done: Callable[[Any], None],
                 on_error: Callable[[BaseException], None], key: str = "", **kwargs: Any) -> Any: ...


def _no_progress(fraction: float, text: str) -> None:
    """Progress sink of :func:`run_now`."""


def run_now(fn: Callable[..., Any], *args: Any, on_done: Callable[[Any], None],
            on_error: Callable[[BaseException], None], key: str = "", **kwargs: Any) -> None:
    """Run ``fn`` in the caller's thread and call back at once (a :class:`Run` without threads)."""
    try:
        result = fn(*args, progress=_no_progress, **kwargs)
    except Exception as exc:  # handed to the model, as a worker thread would
        on_error(exc)
    else:
        on_done(result)
