"""Time one density-level drag step in the workbench: recompute the figures and redraw.

A drag moves a level line; the session recomputes every strip's figures
with the core and the curve, figures table and strip list redraw.  This
times that whole step (the line's move handler and a forced repaint of the
curve view) on the demo's three-strip scan, over many repeats, and prints
the median against the 50 ms target (interactive) and 16 ms (one frame at
60 Hz).

Usage::

    python benchmarks/bench_gui_drag.py [--repeats 200]

:func:`measure` returns the times as :class:`DragTiming` records for
``run_all.py``.  Qt runs offscreen unless ``QT_QPA_PLATFORM`` says otherwise.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path
from unittest import mock

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from PySide6.QtWidgets import QApplication  # noqa: E402

from stripscan.gui.app import make_app, open_demo  # noqa: E402
from stripscan.gui.main_window import MainWindow  # noqa: E402
from stripscan.gui.settings import AppSettings  # noqa: E402

TARGET_MS = 50.0
FRAME_MS = 16.0


@dataclass(frozen=True)
class DragTiming:
    """Drag steps of one kind, in milliseconds each."""

    label: str
    strips: int
    repeats: int
    median_ms: float
    p90_ms: float


def measure(repeats: int = 200) -> list[DragTiming]:
    """Open the demo scan with every strip drawn, then sweep the lower level ``repeats`` times per kind of repaint."""
    app = make_app()
    with tempfile.TemporaryDirectory(prefix="stripscan-bench-") as folder:
        # The window opens the default lot archive; the user's own must neither be touched nor slow the run.
        with mock.patch.dict(os.environ, {"STRIPSCAN_ARCHIVE": str(Path(folder) / "archive.sqlite3")}):
            window = MainWindow(settings=AppSettings(Path(folder) / "s.ini"))
            try:
                return _sweep(app, window, repeats)
            finally:
                window.close()
                app.processEvents()


def _sweep(app: QApplication, window: MainWindow, repeats: int) -> list[DragTiming]:
    window.resize(1440, 900)
    window.show()
    open_demo(window)
    end = time.monotonic() + 60
    while window.busy and time.monotonic() < end:
        app.processEvents()
        time.sleep(0.01)
    app.processEvents()
    session, curve = window.session, window.curve_view
    for k in range(1, len(session.strips)):
        session.set_overlay(k, True)  # the heavier case: every strip drawn
    base_fog = session.result().figures.base_fog
    line = curve.low_line
    timings = []
    for full in (False, True):
        times = []
        for k in range(repeats):
            net = 0.20 + 0.30 * (k % 31) / 30.0  # sweep the lower level up and down like a hand would
            start = time.perf_counter()
            line.setValue(base_fog + net)  # emits sigPositionChanged, as a mouse drag does
            if full:
                curve.plot_widget.viewport().repaint()  # worst case: the whole plot, not just what changed
            app.processEvents()  # the repaints Qt queued for every widget that changed
            times.append((time.perf_counter() - start) * 1000.0)
        label = "full repaint of the plot" if full else "repaint of what changed"
        timings.append(DragTiming(label, len(session.strips), repeats, statistics.median(times),
                                  sorted(times)[int(0.9 * len(times))]))
    return timings


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=200, help="drag steps to time (default 200)")
    args = parser.parse_args(argv)
    timings = measure(args.repeats)
    print(f"density-level drag step: recompute the figures of {timings[0].strips} strips and redraw, "
          f"{args.repeats} repeats")
    for t in timings:
        print(f"  {t.label:26s} median {t.median_ms:6.1f} ms (p90 {t.p90_ms:.1f} ms)"
              f"   / {TARGET_MS:.0f} ms = {t.median_ms / TARGET_MS:.2f}   / {FRAME_MS:.0f} ms = {t.median_ms / FRAME_MS:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
