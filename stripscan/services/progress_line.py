"""A batch's progress as one line on a terminal, and its summary at the end.

The line is rewritten in place (carriage return) and only on a terminal:
a log file or a pipe gets the summary alone.
"""

from __future__ import annotations

import shutil
from collections.abc import Callable
from typing import TextIO

from stripscan.services.batch import BatchProgress, BatchSummary

__all__ = ["ProgressLine", "duration_text", "progress_text", "summary_lines"]


def duration_text(seconds: float) -> str:
    """``seconds`` as ``M:SS`` or ``H:MM:SS`` (rounded up: a wait is never shown shorter than it is)."""
    whole = max(0, int(-(-seconds // 1)))
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}" if hours else f"{minutes}:{secs:02d}"


def progress_text(progress: BatchProgress, width: int = 80, *, name: Callable[[str], str] = str) -> str:
    """One line: count done of total, failures, time left, the file just finished.

    Parameters
    ----------
    progress : BatchProgress
    width : int
        Characters the line may take; the file's name is shortened from its
        start to fit (its end tells files apart).
    name : callable
        Makes the file's name printable (a terminal-safe form).
    """
    head = f"[{progress.done}/{progress.total}]"
    if progress.failed:
        head += f" {progress.failed} failed,"
    left = progress.remaining_s
    head += " starting" if progress.path is None else (
        f" {duration_text(left)} left" if left is not None else " estimating time left")
    if progress.path is None:
        return head[:width]
    room = width - len(head) - 2
    file = name(progress.path.name)
    if room < 8:
        return head[:width]
    if len(file) > room:
        file = "…" + file[-(room - 1):]
    return f"{head}  {file}"


def summary_lines(summary: BatchSummary, *, done_word: str = "done", name: Callable[[str], str] = str) -> list[str]:
    """The end of a batch: how many were done, failed or cancelled, and why each failed.

    The failures' lines are the :func:`~stripscan.services.batch.failure_reason`
    of each (they name the file).
    """
    total = len(summary.items)
    parts = [f"{len(summary.done)} of {total} {'scan' if total == 1 else 'scans'} {done_word}"]
    if summary.failed:
        parts.append(f"{len(summary.failed)} failed")
    if summary.cancelled:
        parts.append(f"{len(summary.cancelled)} not read (cancelled)")
    lines = [", ".join(parts) + f" ({duration_text(summary.elapsed_s)}, "
             f"{summary.workers} worker{'s' if summary.workers != 1 else ''})"]
    lines += [f"failed: {name(item.error or '')}" for item in summary.failed]
    return lines


class ProgressLine:
    """Writes :func:`progress_text` over itself on a terminal; says nothing elsewhere or when quiet.

    Call it with each :class:`BatchProgress`; :meth:`clear` before printing
    anything else and at the end.

    Parameters
    ----------
    stream : text stream
        Where the line goes (the caller's standard error, as it is: the
        carriage return must reach the terminal).
    quiet : bool
        Write nothing.
    name : callable
        Makes a file's name printable.
    """

    def __init__(self, stream: TextIO, *, quiet: bool = False, name: Callable[[str], str] = str) -> None:
        try:
            terminal = stream.isatty()
        except (AttributeError, ValueError):  # a closed or bare stream
            terminal = False
        self.enabled = terminal and not quiet
        self._stream, self._name, self._shown = stream, name, 0

    def __call__(self, progress: BatchProgress) -> None:
        if not self.enabled:
            return
        width = shutil.get_terminal_size((80, 24)).columns - 1  # the last column would wrap on some terminals
        text = progress_text(progress, width, name=self._name)
        self._stream.write("\r" + text.ljust(self._shown))
        self._stream.flush()
        self._shown = len(text)

    def clear(self) -> None:
        """Rub the line out, leaving the cursor at the start of it."""
        if self.enabled and self._shown:
            self._stream.write("\r" + " " * self._shown + "\r")
            self._stream.flush()
            self._shown = 0
