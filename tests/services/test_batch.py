"""The batch engine: every file's outcome in order, one bad file skipped, progress, cancel.

Work in worker processes must be importable by the workers, so those tests
use the pipeline itself (``analyze_scan``) on small simulated scans; the
rest use plain functions in this process.
"""

from __future__ import annotations

import io
import threading
from pathlib import Path

import pytest

from stripscan.core.pipeline import analyze_scan
from stripscan.sim.objects import ScannerModel, StripSpec
from stripscan.sim.simulate import simulate_scan, write_tiff
from stripscan.services.batch import (
    BatchItem,
    BatchProgress,
    BatchSummary,
    WorkerProcesses,
    collect_scans,
    failure_reason,
    run_batch,
)
from stripscan.services.progress_line import ProgressLine, duration_text, progress_text, summary_lines


@pytest.fixture(scope="module")
def scans(tmp_path_factory) -> list[Path]:
    """Five small scans of one strip each, the third a damaged file; the first larger (slower) than the rest."""
    folder = tmp_path_factory.mktemp("batch")
    paths = []
    for k in range(5):
        path = folder / f"scan_{k}.tif"
        if k == 2:
            path.write_bytes(b"II*\x00 this is not an image")
        else:
            dpi = 200.0 if k == 0 else 100.0
            write_tiff(path, simulate_scan([StripSpec(center_mm=(30.0, 60.0), angle_deg=90.0)],
                                           platen_mm=(60.0, 120.0), dpi=dpi, scanner=ScannerModel(seed=k)))
        paths.append(path)
    return paths


def test_processes_give_every_outcome_in_the_order_given(scans):
    handed = []
    summary = run_batch(scans, analyze_scan, workers=2, on_result=handed.append)
    assert [item.path for item in summary.items] == scans
    assert [item.index for item in summary.items] == list(range(5))
    assert sorted(item.index for item in handed) == list(range(5))  # each once, as it finished
    # Read in another process, a scan gives the very analysis this process gives.
    for item in summary.done:
        assert item.result.to_dict() == analyze_scan(item.path).to_dict()
    assert summary.workers == 2


def test_processes_started_ahead_serve_one_batch_after_another(scans):
    with WorkerProcesses(2, preload=("stripscan.core.pipeline",)) as workers:
        first = run_batch(scans[:2], analyze_scan, workers=workers)
        second = run_batch(scans[3:], analyze_scan, workers=workers)  # the first batch left them running
    assert len(first.done) == len(second.done) == 2 and first.workers == second.workers == 2
    with pytest.raises(RuntimeError, match="after shutdown"):  # closed by its owner, at the end
        workers.pool.submit(print)


def test_one_damaged_file_is_reported_and_skipped(scans):
    summary = run_batch(scans, analyze_scan, workers=2)
    assert [item.path for item in summary.failed] == [scans[2]]
    reason = summary.failed[0].error
    assert str(scans[2]) in reason and "holds no image" in reason and "\n" not in reason
    assert [item.path.name for item in summary.done] == ["scan_0.tif", "scan_1.tif", "scan_3.tif", "scan_4.tif"]
    assert all(len(item.result.strips) == 1 for item in summary.done)
    assert not summary.cancelled


def test_ordered_results_wait_for_the_files_before_them(scans):
    handed = []
    run_batch(scans, analyze_scan, workers=2, ordered=True, on_result=lambda item: handed.append(item.index))
    assert handed == [0, 1, 2, 3, 4]


def test_a_write_that_fails_fails_that_file_only(tmp_path):
    files = [tmp_path / f"{k}.txt" for k in range(4)]

    def store(item: BatchItem) -> None:
        if item.index == 1:
            raise ValueError(f"{item.path}: the archive refused it")

    summary = run_batch(files, lambda p: p.name, on_result=store)
    assert [i.index for i in summary.failed] == [1]
    assert summary.failed[0].error == f"{files[1]}: the archive refused it"
    assert [i.result for i in summary.done] == ["0.txt", "2.txt", "3.txt"]


def test_progress_counts_every_file_and_the_failures():
    events: list[BatchProgress] = []
    files = [Path(f"f{k}.tif") for k in range(4)]

    def work(path: Path) -> str:
        if path.name == "f1.tif":
            raise ValueError("f1.tif: no strip found")
        return path.stem

    run_batch(files, work, on_progress=events.append)
    assert [(e.done, e.total, e.failed) for e in events] == [(0, 4, 0), (1, 4, 0), (2, 4, 1), (3, 4, 1), (4, 4, 1)]
    assert events[0].path is None and events[0].remaining_s is None
    assert [e.path for e in events[1:]] == files
    assert events[-1].remaining_s == 0.0 and events[-1].fraction == 1.0


def test_cancel_stops_before_the_next_file():
    cancel = threading.Event()
    seen = []

    def work(path: Path) -> str:
        seen.append(path.name)
        if len(seen) == 2:
            cancel.set()  # as the window's Cancel button does, from another thread
        return path.name

    handed = []
    summary = run_batch([Path(f"f{k}") for k in range(5)], work, cancel=cancel, on_result=handed.append)
    assert seen == ["f0", "f1"]
    assert [i.path.name for i in summary.done] == ["f0", "f1"]
    assert [i.path.name for i in summary.cancelled] == ["f2", "f3", "f4"]
    assert [i.path.name for i in handed] == ["f0", "f1"]  # nothing is written for a file not read


def test_cancel_in_processes_finishes_the_files_under_way(scans):
    cancel = threading.Event()
    handed = []
    ten = scans * 2  # the same files twice: a file named again is still work to do here
    summary = run_batch(ten, analyze_scan, workers=2, on_result=handed.append,
                        on_progress=lambda e: e.done == 1 and cancel.set(), cancel=cancel)
    assert summary.cancelled, "no file was left out after the cancel"
    assert len(summary.done) + len(summary.failed) + len(summary.cancelled) == 10
    assert {i.index for i in handed} == {i.index for i in summary.items if not i.cancelled}


def test_ordered_cancel_never_hands_over_a_file_after_a_gap():
    cancel = threading.Event()
    handed = []

    def work(path: Path) -> str:
        if path.name == "f2":
            cancel.set()
        return path.name

    summary = run_batch([Path(f"f{k}") for k in range(5)], work, ordered=True, cancel=cancel,
                        on_result=lambda i: handed.append(i.index))
    assert handed == [0, 1, 2]
    assert [i.index for i in summary.cancelled] == [3, 4]


def test_a_fault_in_the_program_is_said_as_such():
    reason = failure_reason(Path("a/b.tif"), KeyError("strips"))
    assert reason.startswith("a/b.tif: KeyError") and "a fault in stripscan" in reason
    assert failure_reason(Path("b.tif"), ValueError("b.tif: no strip found")) == "b.tif: no strip found"


def test_errors_the_caller_expects_are_the_files_own():
    class Refused(Exception):
        pass

    def store(item: BatchItem) -> None:
        raise Refused(f"{item.path}: stored already")

    summary = run_batch([Path("a.tif")], lambda p: 1, on_result=store, expected=(Refused,))
    assert summary.failed[0].error == "a.tif: stored already"


def test_folders_give_their_scans_by_name(tmp_path):
    for name in ("b.TIF", "a.tif", "c.png", "notes.txt", ".hidden.tif", "d.tif.partial"):
        (tmp_path / name).write_bytes(b"x")
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "e.tif").write_bytes(b"x")
    other = tmp_path / "z.tif"
    assert [p.name for p in collect_scans([tmp_path, other, tmp_path / "a.tif"])] == ["a.tif", "b.TIF", "c.png",
                                                                                     "z.tif"]
    assert collect_scans(["missing.tif"]) == [Path("missing.tif")]  # reported when it is read
    (tmp_path / "empty").mkdir()
    with pytest.raises(ValueError, match="empty: the folder holds no scan"):
        collect_scans([tmp_path / "a.tif", tmp_path / "empty"])


def test_progress_line_text():
    start = BatchProgress(0, 50, 0, None, 0.0)
    assert progress_text(start) == "[0/50] starting"
    mid = BatchProgress(10, 50, 2, Path("/scans/daily_2026-11-03.tif"), 20.0)
    assert progress_text(mid) == "[10/50] 2 failed, 1:20 left  daily_2026-11-03.tif"
    short = progress_text(mid, 40)
    assert len(short) == 40 and short.endswith("…-11-03.tif")
    assert duration_text(0.2) == "0:01" and duration_text(3725) == "1:02:05"


def test_progress_line_only_on_a_terminal():
    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    event = BatchProgress(1, 3, 0, Path("x.tif"), 1.0)
    for stream, quiet, shown in ((io.StringIO(), False, False), (Terminal(), True, False), (Terminal(), False, True)):
        line = ProgressLine(stream, quiet=quiet)
        line(event)
        line.clear()
        assert bool(stream.getvalue()) is shown
    terminal = Terminal()
    line = ProgressLine(terminal)
    line(event)
    line.clear()
    assert terminal.getvalue() == "\r[1/3] 0:02 left  x.tif" + "\r" + " " * 22 + "\r"


def test_summary_names_each_failure():
    items = (BatchItem(0, Path("a.tif"), result=1), BatchItem(1, Path("b.tif"), error="b.tif: no strip found"),
             BatchItem(2, Path("c.tif"), cancelled=True))
    lines = summary_lines(BatchSummary(items, 61.5, 2), done_word="analysed")
    assert lines == ["1 of 3 scans analysed, 1 failed, 1 not read (cancelled) (1:02, 2 workers)",
                     "failed: b.tif: no strip found"]
