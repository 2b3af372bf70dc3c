"""Many scans in one go: the same work on each file, on every core, one bad file skipped.

:func:`run_batch` calls ``work(path)`` for each file, in worker processes
when more than one worker is asked for (``spawn`` processes: the same on
every platform, and safe beside the threads a caller may run).  Each
outcome is handed to ``on_result`` in the calling process as soon as it
is known, so a caller writes results as they come (files through atomic
writes; archive rows in the calling process, one transaction per scan).
A file whose work raises is reported with a one-line reason and skipped;
the others go on.  Nothing here imports Qt or sqlite3.
"""

from __future__ import annotations

import concurrent.futures as futures
import importlib
import multiprocessing
import os
import signal
import threading
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = [
    "SCAN_SUFFIXES",
    "BatchItem",
    "BatchProgress",
    "BatchSummary",
    "USER_ERRORS",
    "WorkerProcesses",
    "available_cores",
    "collect_scans",
    "failure_reason",
    "run_batch",
]

#: File name endings taken as scans when a folder is named (as the window's open dialog lists them).
SCAN_SUFFIXES = (".tif", ".tiff", ".png", ".jpg", ".jpeg")


@dataclass(frozen=True)
class BatchItem:
    """What came of one file.

    Attributes
    ----------
    index : int
        Position of the file in the batch (0-based, the order given).
    path : Path
    result : object
        What ``work`` returned; None when it failed or was not run.
    error : str or None
        One-line reason when the work failed.
    cancelled : bool
        The batch was cancelled before this file was done.
    """

    index: int
    path: Path
    result: Any = None
    error: str | None = None
    cancelled: bool = False

    @property
    def ok(self) -> bool:
        return self.error is None and not self.cancelled


@dataclass(frozen=True)
class BatchProgress:
    """Where a batch stands, after a file was finished (or at the start, ``done == 0``).

    Attributes
    ----------
    done : int
        Files finished, failed ones included.
    total : int
    failed : int
    path : Path or None
        The file just finished (None at the start).
    elapsed_s : float
        Seconds since the batch started.
    """

    done: int
    total: int
    failed: int
    path: Path | None
    elapsed_s: float

    @property
    def fraction(self) -> float:
        return self.done / self.total if self.total else 1.0

    @property
    def remaining_s(self) -> float | None:
        """Seconds left at the pace so far; None before the first file is done."""
        if self.done == 0:
            return None
        return self.elapsed_s / self.done * (self.total - self.done)


@dataclass(frozen=True)
class BatchSummary:
    """Every file's outcome, in the order the files were given."""

    items: tuple[BatchItem, ...]
    elapsed_s: float
    workers: int

    @property
    def done(self) -> tuple[BatchItem, ...]:
        return tuple(i for i in self.items if i.ok)

    @property
    def failed(self) -> tuple[BatchItem, ...]:
        return tuple(i for i in self.items if i.error is not None)

    @property
    def cancelled(self) -> tuple[BatchItem, ...]:
        return tuple(i for i in self.items if i.cancelled)


def available_cores() -> int:
    """Cores this process may run on (its CPU affinity where the system tells it)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on every platform
        return max(1, os.cpu_count() or 1)


def collect_scans(names: Iterable[str | os.PathLike[str]]) -> list[Path]:
    """The files a batch reads: files as given, folders as the scans in them.

    A folder gives its files ending in :data:`SCAN_SUFFIXES` (any case),
    sorted by name, not looking into subfolders; hidden files and the
    ``.partial`` files of unfinished writes are left out.  A file named
    twice is read once.  A name that does not exist is kept: the work
    reports it as that file's failure.

    Raises
    ------
    ValueError
        A folder that holds no scan, or no name at all.
    """
    paths: list[Path] = []
    for name in names:
        path = Path(name)
        if path.is_dir():
            found = sorted((p for p in path.iterdir() if p.suffix.lower() in SCAN_SUFFIXES
                            and not p.name.startswith(".") and p.is_file()), key=lambda p: p.name)
            if not found:
                raise ValueError(f"{path}: the folder holds no scan ({', '.join(SCAN_SUFFIXES)} files)")
            paths.extend(found)
        else:
            paths.append(path)
    if not paths:
        raise ValueError("no scan named")
    seen: set[Path] = set()
    unique = []
    for path in paths:
        key = path.resolve() if path.exists() else path.absolute()
        if key not in seen:
            seen.add(key)
            unique.append(path)
    return unique


#: Errors whose message tells the user what is wrong with a file (the core's errors are ValueErrors).
USER_ERRORS: tuple[type[BaseException], ...] = (ValueError, OSError)


def failure_reason(path: Path, error: BaseException, expected: tuple[type[BaseException], ...] = USER_ERRORS) -> str:
    """One line that names the file and says what went wrong with it.

    Errors of the ``expected`` kinds carry a message for the user (ours
    name the file already); anything else is a fault of the program, said
    as such.
    """
    text = " ".join(str(error).split()) or type(error).__name__
    if not isinstance(error, expected):
        text = f"{type(error).__name__}: {text} (a fault in stripscan, not in the file)"
    if str(path) not in text and path.name not in text:
        text = f"{path}: {text}"
    return text


def run_batch(
    paths: Sequence[str | os.PathLike[str]],
    work: Callable[[Path], Any],
    *,
    workers: int | WorkerProcesses = 1,
    ordered: bool = False,
    on_result: Callable[[BatchItem], None] | None = None,
    on_progress: Callable[[BatchProgress], None] | None = None,
    cancel: threading.Event | None = None,
    expected: tuple[type[BaseException], ...] = USER_ERRORS,
) -> BatchSummary:
    """Run ``work(path)`` for every file; return every outcome in the order given.

    Parameters
    ----------
    paths : sequence of path-like
        The files, in the order their outcomes are listed.
    work : callable
        ``work(path) -> result``.  With more than one worker it runs in
        another process: it must be a module-level function (or a
        ``functools.partial`` of one) whose arguments and result pickle.
        An exception it raises fails that file only.
    workers : int or WorkerProcesses
        Processes to run at once; 1 runs every file in this process, one
        after the other.  Never more than there are files.  Processes
        started ahead (:class:`WorkerProcesses`) are used as they are and
        left running for their owner to close.
    ordered : bool
        Hand results to ``on_result`` in the order given (a finished file
        waits for the ones before it), for callers whose writes must follow
        that order (a QC log's days); otherwise as each file finishes.
    on_result : callable, optional
        ``on_result(item)`` in this process for each finished file, failed
        ones included.  An exception it raises fails that file (its reason
        is reported), unless it is a KeyboardInterrupt.
    on_progress : callable, optional
        ``on_progress(progress)`` at the start and after each file.
    cancel : threading.Event, optional
        Set from another thread to stop: no further file is started; files
        under way are finished and reported; the rest are listed as
        cancelled.
    expected : tuple of exception classes
        Errors that are the file's (or the write's) fault, reported with
        their message; any other is reported as a fault of the program.

    Returns
    -------
    BatchSummary
    """
    files = [Path(p) for p in paths]
    total = len(files)
    cancel = cancel or threading.Event()
    started = time.monotonic()
    outcomes: dict[int, BatchItem] = {}
    waiting: dict[int, BatchItem] = {}  # finished, held back for ``ordered``
    next_out = 0
    failed = 0

    def report(progress_path: Path | None) -> None:
        if on_progress is not None:
            on_progress(BatchProgress(len(outcomes), total, failed, progress_path, time.monotonic() - started))

    def hand_over(item: BatchItem) -> BatchItem:
        if on_result is None or item.cancelled:
            return item
        try:
            on_result(item)
        except Exception as exc:  # the caller's writing failed for this file only
            if item.error is not None:
                raise
            return BatchItem(item.index, item.path, error=failure_reason(item.path, exc, expected))
        return item

    def finished(item: BatchItem) -> None:
        nonlocal next_out, failed
        if ordered:
            waiting[item.index] = item
            ready = []
            while next_out in waiting:
                ready.append(waiting.pop(next_out))
                next_out += 1
        else:
            ready = [item]
        for one in ready:
            one = hand_over(one)
            outcomes[one.index] = one
            failed += one.error is not None
        # A file held back for ``ordered`` counts once it is handed over.
        report(item.path)

    report(None)
    if isinstance(workers, WorkerProcesses):
        processes, own = workers, False
    else:
        processes, own = WorkerProcesses(min(int(workers), total or 1)), True
    try:
        if processes.pool is None:
            for index, path in enumerate(files):
                if cancel.is_set():
                    break
                finished(_run_one(work, index, path, expected))
        else:
            _run_in_processes(files, work, processes.pool, cancel, finished, expected)
    finally:
        if own:
            processes.close()
    for index, path in enumerate(files):
        # Not started, or (``ordered``) finished after a file that never came: never handed over.
        outcomes.setdefault(index, BatchItem(index, path, cancelled=True))
    return BatchSummary(tuple(outcomes[i] for i in range(total)), time.monotonic() - started, processes.count)


def _run_one(work: Callable[[Path], Any], index: int, path: Path,
             expected: tuple[type[BaseException], ...]) -> BatchItem:
    try:
        return BatchItem(index, path, result=work(path))
    except Exception as exc:
        return BatchItem(index, path, error=failure_reason(path, exc, expected))


class WorkerProcesses:
    """Worker processes started ahead of the work: they load their libraries while the caller gets ready.

    A context manager; pass it to :func:`run_batch` as ``workers``.  With a
    count of 1 no process is started and the work runs in the caller's.

    Parameters
    ----------
    count : int
        Processes to start.
    preload : sequence of str
        Modules each process imports as it starts (those the work needs).
    """

    def __init__(self, count: int, *, preload: Sequence[str] = ()) -> None:
        self.count = max(1, int(count))
        self.pool: futures.ProcessPoolExecutor | None = None
        if self.count > 1:
            self.pool = futures.ProcessPoolExecutor(max_workers=self.count, mp_context=multiprocessing.get_context(
                "spawn"), initializer=_start_worker, initargs=(tuple(preload),))
            for _ in range(self.count):
                self.pool.submit(_ready)  # the processes start on a first task, not before

    def close(self, *, wait: bool = True) -> None:
        """Stop the processes once their work is done (``wait=False``: drop what was not started)."""
        if self.pool is not None:
            self.pool.shutdown(wait=wait, cancel_futures=not wait)

    def __enter__(self) -> WorkerProcesses:
        return self

    def __exit__(self, kind: type[BaseException] | None, *_: object) -> None:
        self.close(wait=kind is None)


def _start_worker(preload: tuple[str, ...]) -> None:
    # Ctrl+C is the calling process's to handle: the workers finish the file in hand and stop.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    for name in preload:
        importlib.import_module(name)


def _ready() -> None:
    """A first task, that makes a worker process start."""


def _run_in_processes(files: list[Path], work: Callable[[Path], Any], pool: futures.ProcessPoolExecutor,
                      cancel: threading.Event, finished: Callable[[BatchItem], None],
                      expected: tuple[type[BaseException], ...]) -> None:
    try:
        pending = {pool.submit(work, path): (index, path) for index, path in enumerate(files)}
        while pending:
            # Wake now and then to see a cancel asked for from another thread.
            done, _ = futures.wait(pending, timeout=0.2, return_when=futures.FIRST_COMPLETED)
            if cancel.is_set():
                for future in pending:
                    future.cancel()  # those not started yet; the running ones finish
            for future in done:
                index, path = pending.pop(future)
                finished(_outcome(future, index, path, expected))
            if cancel.is_set():
                pending = {f: v for f, v in pending.items() if not f.cancelled()}
    except BaseException:
        pool.shutdown(wait=False, cancel_futures=True)
        raise


def _outcome(future: futures.Future, index: int, path: Path, expected: tuple[type[BaseException], ...]) -> BatchItem:
    error = future.exception()
    if error is None:
        return BatchItem(index, path, result=future.result())
    if isinstance(error, futures.process.BrokenProcessPool):
        return BatchItem(index, path, error=f"{path}: not read: a worker process ended without an answer while "
                                            "this or another scan was read (out of memory, or killed)")
    return BatchItem(index, path, error=failure_reason(path, error, expected))
