"""What the commands that take several scans share: the options, the progress line, the summary.

``stripscan analyze``, ``archive add`` and ``qc add`` take one scan as
before, or several scans and folders: a batch runs through
:func:`stripscan.services.batch.run_batch`, shows its progress on a
terminal and ends with a summary; the command then exits with status 1
when any file failed.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

__all__ = ["add_batch_arguments", "is_batch", "run_batch_command", "start_workers"]


def _workers(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{value} workers: give at least 1")
    return value


def add_batch_arguments(parser: argparse.ArgumentParser) -> None:
    """``--workers N`` and ``--quiet``, for the commands that take several scans."""
    parser.add_argument("--workers", type=_workers, metavar="N",
                        help="with several scans: how many are read at once, each in a process of its own "
                             "(default: one per core)")
    parser.add_argument("--quiet", action="store_true",
                        help="with several scans: no progress line (it is only ever shown on a terminal)")


def is_batch(names: Sequence[Any]) -> bool:
    """Several names, or one folder: the command works through a batch."""
    return len(names) > 1 or (len(names) == 1 and Path(names[0]).is_dir())


def _terminal_stream() -> Any:
    # The command line prints through a stream that writes control characters out as text
    # (main.terminal_safe); the progress line's carriage return must reach the terminal itself.
    return getattr(sys.stderr, "raw_stream", sys.stderr)


def start_workers(args: argparse.Namespace, scans: Sequence[Path]) -> Any:
    """The worker processes for ``scans``, started now: they load the analysis while this process gets ready.

    A context manager (:class:`~stripscan.services.batch.WorkerProcesses`);
    ``--workers`` of them, by default one per core, never more than scans.
    """
    from stripscan.services.batch import WorkerProcesses, available_cores

    return WorkerProcesses(min(args.workers or available_cores(), len(scans)), preload=("stripscan.core.pipeline",))


def run_batch_command(args: argparse.Namespace, scans: Sequence[Path], work: Callable[[Path], Any], *,
                      workers: Any, done_word: str, ordered: bool = False,
                      on_result: Callable[[Any], None] | None = None,
                      expected: tuple[type[BaseException], ...] = ()) -> Any:
    """Run ``work`` over ``scans`` with the progress line, then print the summary; return the BatchSummary.

    ``on_result(item)`` runs in this process for each file done (what it
    prints comes out between the progress lines); a failed file's reason
    is printed at the end on standard error, one line naming the file.
    ``expected`` adds error kinds that are a file's fault (to ValueError
    and OSError).  ``workers`` comes from :func:`start_workers`.
    """
    from stripscan.cli.main import terminal_safe
    from stripscan.services.batch import USER_ERRORS, run_batch
    from stripscan.services.progress_line import ProgressLine, summary_lines

    line = ProgressLine(_terminal_stream(), quiet=args.quiet, name=terminal_safe)

    def handed(item: Any) -> None:
        if item.ok and on_result is not None:
            line.clear()
            on_result(item)

    try:
        summary = run_batch(scans, work, workers=workers, ordered=ordered,
                            on_result=handed, on_progress=line, expected=USER_ERRORS + tuple(expected))
    finally:
        line.clear()
    print(summary_lines(summary, done_word=done_word)[0])
    sys.stdout.flush()
    for item in summary.failed:
        print(f"stripscan: error: {item.error}", file=sys.stderr)
    return summary
