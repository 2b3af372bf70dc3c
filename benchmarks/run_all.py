"""Every figure the performance work is judged on, measured in one run and printed as one table.

Usage::

    python3 benchmarks/run_all.py [--quick] [--skip-gui] [--json PATH]

Generates its own scans and archive in temporary folders and measures, each
as a ratio to a reference taken in the same run (the machines are shared and
noisy: the seconds vary, the ratios less):

1. analysis time of a 600-dpi A4 16-bit grey scan with six strips ÷ the
   time tifffile takes to read that file, for uncompressed, zlib and LZW
   files (target ≤ 2); and the same analysis ÷ the analysis without the
   stray-light correction (target ≤ 1.3);
2. the same at 1200 dpi;
3. peak traced memory (tracemalloc) while analysing ÷ the decoded image's
   bytes, for each of those files (target ≤ 3);
4. one density-level drag step in the curve view, recompute + redraw, as
   the median ÷ a 16 ms frame (target ≤ 1), Qt offscreen;
5. the archive's listing and trend queries over 10,000 snapshots, best
   time ÷ 100 ms (target ≤ 1).
6. the start-up of ``stripscan --help`` ÷ the start-up of
   ``python -c "import numpy"``, each the best of 5 fresh processes taken
   in turn (target ≤ 2): building the command line must not import the
   heavy libraries.
7. the page floor (issue 18, ``bench_floor.py``): the whole
   ``stripscan analyze PAGE --json`` of a 600-dpi A4 16-bit uncompressed
   page with six strips ÷ a process that reads the file with tifffile and
   computes its SHA-256, the fastest of 5 each (target ≤ 2); how that grows
   from 600 to 1200 dpi, (analysis 1200 − 600) ÷ (read + hash 1200 − 600)
   from the medians of 5 (target ≤ 1.5); and the peak resident memory of
   analysing a 1200-dpi A4 48-bit RGB page ÷ its decoded bytes (target
   ≤ 1.5).  These replace the uncompressed rows of figure 1, which are now
   shown without a target: the analysis must hash the file it reads.
8. a folder of 50 scans through ``stripscan analyze FOLDER -o OUTDIR``:
   throughput on every core ÷ throughput on one core, the whole command
   each time, best of 3 runs each (target ≥ 1.7 on 2 cores).
9. a shared archive on a PostgreSQL server over a Unix socket
   (``bench_server.py``, issue 17): the window's listing and trend queries
   over 10,000 snapshots ÷ the same on SQLite (target ≤ 2) and against
   100 ms (target ≤ 1); a lot's listing and trend among 1,000,000
   snapshots generated on the server against 200 ms; copying the 10,000
   snapshots from a file to the server against 30 s.  Left out, with a
   line saying why, where PostgreSQL's server tools are not installed.

The table gives each figure's measured value, target, ratio and whether it
meets the target.  ``--quick`` takes fewer repeats and only 600 dpi, for a
smoke run; ``--skip-gui`` leaves out the drag; ``--json PATH`` also writes
the figures as JSON.  The exit status is 0 whether or not the targets are
met (this is a measurement, not a test) and 1 only if a benchmark crashed;
the others still run and are reported.

The pieces come from the single benchmarks beside this file
(``bench_large.py``, ``bench_archive.py``, ``bench_gui_drag.py``), which
also run on their own.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
import traceback
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

# Run as a script this folder is already on sys.path; loaded by path (the test) it is not.
HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import bench_archive  # noqa: E402
import bench_floor  # noqa: E402
import bench_batch  # noqa: E402
import bench_large  # noqa: E402
import bench_server  # noqa: E402
from bench_analyze import COMPRESSIONS  # noqa: E402

ANALYSE_PER_READ = 2.0
STRAY_LIGHT_COST = 1.3
PEAK_PER_IMAGE = 3.0
FRAME_MS = 16.0
ARCHIVE_MS = 1000 * bench_archive.TARGET_S
ARCHIVE_SNAPSHOTS = 10_000
STARTUP_PER_NUMPY = 2.0
STARTUP_RUNS = 5
ANALYSE_PER_FLOOR = 2.0
GROWTH_PER_FLOOR = 1.5
RGB_PEAK_PER_IMAGE = 1.5
FLOOR_RUNS = 5
BATCH_SCANS = 50
BATCH_SPEEDUP = 1.7
COMPRESSION_NAMES = {"none": "uncompressed", "zlib": "zlib", "lzw": "LZW"}


@dataclass(frozen=True)
class Figure:
    """One figure: ``value / reference`` must be at most ``limit`` (None: shown, not judged).

    ``value`` and ``reference`` share ``unit``; the reference is measured in
    the same run (a read time, the image's bytes) or fixed (a frame, 100 ms).
    With ``at_least`` the ratio must be at least ``limit`` (a speed-up).
    """

    figure: str
    value: float
    unit: str
    reference: float
    reference_name: str
    limit: float | None
    note: str = ""
    at_least: bool = False

    @property
    def ratio(self) -> float:
        return self.value / self.reference

    @property
    def meets(self) -> bool | None:
        if self.limit is None:
            return None
        return self.ratio >= self.limit if self.at_least else self.ratio <= self.limit

    @property
    def target(self) -> str:
        if self.limit is None:
            return "none (shown only)"
        if self.at_least:
            return f"≥ {self.limit:g} × {self.reference:.2f} {self.unit} {self.reference_name}"
        if self.limit == 1.0:
            return f"≤ {self.reference:g} {self.unit}"
        return f"≤ {self.limit:g} × {self.reference:.1f} {self.unit} {self.reference_name}"

    def to_dict(self) -> dict[str, Any]:
        return {**asdict(self), "target": self.target, "ratio": self.ratio, "meets": self.meets}


def analysis_figures(dpis: Sequence[float], repeat: int, compressions: Sequence[str] = COMPRESSIONS,
                     progress: Callable[[str], None] = lambda _: None) -> list[Figure]:
    """Figures 1-3: A4, six strips, each resolution and compression; speed rows first, then memory rows."""
    speed, memory, stray = [], [], []
    for t in bench_large.measure(dpis, compressions, repeat):
        scan = f"{t.dpi:g} dpi A4, {COMPRESSION_NAMES[t.compression]}"
        # An uncompressed page is judged against reading and hashing it (figure 7) instead.
        speed.append(Figure(f"analysis ÷ read, {scan}", 1000 * t.analyse_s, "ms", 1000 * t.read_s,
                            "read", None if t.compression == "none" else ANALYSE_PER_READ,
                            note=f"sha256 of the file alone {1000 * t.hash_s:.0f} ms"
                                 + ("; judged by the page-floor rows" if t.compression == "none" else "")))
        if t.analyse_plain_s:
            stray.append(Figure(f"stray-light correction: analysis ÷ analysis without it, {scan}",
                                1000 * t.analyse_s, "ms", 1000 * t.analyse_plain_s, "without", STRAY_LIGHT_COST))
        assert t.peak_bytes is not None  # bench_large always traces memory
        memory.append(Figure(f"peak memory ÷ image, {scan}", t.peak_bytes / 1e6, "MB", t.image_bytes / 1e6,
                             "image", PEAK_PER_IMAGE))
        progress(f"{scan}: analyse {1000 * t.analyse_s:.0f} ms, read {1000 * t.read_s:.0f} ms")
    return speed + stray + memory


def drag_figures(repeats: int) -> list[Figure]:
    """Figure 4: median drag step of each repaint kind against one 60 Hz frame."""
    # Qt reads the platform when it is first imported, so set it before bench_gui_drag imports Qt;
    # a figure taken on a real display would not compare with the offscreen ones.
    os.environ["QT_QPA_PLATFORM"] = "offscreen"
    import bench_gui_drag

    return [Figure(f"drag step of {t.strips} strips, {t.label}", t.median_ms, "ms", FRAME_MS, "frame", 1.0,
                   note=f"p90 {t.p90_ms:.1f} ms")
            for t in bench_gui_drag.measure(repeats)]


def archive_figures(snapshots: int, repeat: int) -> list[Figure]:
    """Figure 5: best time of each query the GUI runs over the archive, against 100 ms."""
    timing = bench_archive.measure(snapshots, repeat)
    # The target is for listing and trending; opening (once a session, with a
    # full integrity check) is shown beside them without one.
    return [Figure(f"archive of {snapshots} snapshots: {q.name}", 1000 * q.best_s, "ms", ARCHIVE_MS, "",
                   None if q.name.startswith("open") else 1.0,
                   note="" if q.rows is None else f"{q.rows} row{'' if q.rows == 1 else 's'}")
            for q in timing.queries]


def startup_figures(runs: int = STARTUP_RUNS) -> list[Figure]:
    """Figure 6: best start-up of ``stripscan --help`` against the best of ``python -c "import numpy"``.

    Both run as fresh processes of this interpreter, taken in turn so that
    both see the same load; the checkout's own ``stripscan`` comes first on
    the path.
    """
    root = HERE.parent
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, (str(root), os.environ.get("PYTHONPATH")))))
    commands = {"help": [sys.executable, "-m", "stripscan", "--help"], "numpy": [sys.executable, "-c", "import numpy"]}
    best = {name: float("inf") for name in commands}
    for _ in range(runs):
        for name, command in commands.items():
            start = time.perf_counter()
            subprocess.run(command, check=True, stdout=subprocess.DEVNULL, env=env, cwd=root)
            best[name] = min(best[name], time.perf_counter() - start)
    return [Figure("start-up of 'stripscan --help' ÷ 'python -c \"import numpy\"'", 1000 * best["help"], "ms",
                   1000 * best["numpy"], "import numpy", STARTUP_PER_NUMPY, note=f"best of {runs} runs each")]


def floor_figures(runs: int = FLOOR_RUNS, quick: bool = False,
                  progress: Callable[[str], None] = lambda _: None) -> list[Figure]:
    """Figure 7: the whole analyze command against reading and hashing the page, its growth, the RGB page's memory."""
    t = bench_floor.measure((600.0,) if quick else (600.0, 1200.0), runs, rgb=not quick, progress=progress)
    page = "600-dpi A4 16-bit uncompressed, six strips"
    figures = [Figure(f"'stripscan analyze PAGE --json' ÷ read + sha256 process, {page}",
                      1000 * t.best("analyse", 600.0), "ms", 1000 * t.best("floor", 600.0), "read + hash",
                      ANALYSE_PER_FLOOR, note=f"best of {runs} fresh processes each")]
    if t.growth is not None:
        grown = 1000 * (t.median("analyse", 1200.0) - t.median("analyse", 600.0))
        floor = 1000 * (t.median("floor", 1200.0) - t.median("floor", 600.0))
        figures.append(Figure("growth 600 → 1200 dpi: analyze (1200 − 600) ÷ read + sha256 (1200 − 600)", grown, "ms",
                              floor, "read + hash growth", GROWTH_PER_FLOOR,
                              note=f"medians of {runs}; analyze {1000 * t.median('analyse', 1200.0):.0f} ms at 1200 dpi"))
    if t.rgb_peak_bytes is not None and t.rgb_image_bytes:
        figures.append(Figure("peak memory of analyze ÷ image, 1200-dpi A4 48-bit RGB", t.rgb_peak_bytes / 1e6, "MB",
                              t.rgb_image_bytes / 1e6, "image", RGB_PEAK_PER_IMAGE,
                              note="resident, whole process"))
    return figures


def batch_figures(scans: int = BATCH_SCANS, runs: int = 3, dpi: float = 600.0) -> list[Figure]:
    """Figure 8: scans per second of ``stripscan analyze FOLDER`` on every core against one core."""
    t = bench_batch.measure(scans, runs, dpi)
    note = (f"{t.scans} scans at {t.dpi:g} dpi: {t.one_core_s:.1f} s on 1 core, {t.all_cores_s:.1f} s on {t.cores}; "
            f"--workers 1 not held to one core {t.one_worker_s:.1f} s (ratio {t.one_worker_s / t.all_cores_s:.2f}); "
            f"processor time {t.one_core_cpu_s:.1f} s on 1 core, {t.all_cores_cpu_s:.1f} s on {t.cores}; "
            f"best of {runs} runs each")
    return [Figure(f"folder of {t.scans} scans, 'stripscan analyze FOLDER -o OUTDIR': throughput on {t.cores} "
                   "cores ÷ on 1", t.scans / t.all_cores_s, "scans/s", t.scans / t.one_core_s, "on 1 core",
                   BATCH_SPEEDUP if t.cores >= 2 else None, note=note, at_least=True)]


def server_figures(snapshots: int = ARCHIVE_SNAPSHOTS, repeat: int = 7, big: int = 1_000_000) -> list[Figure]:
    """Figure 9: the archive's queries on a server against the same on SQLite and 100 ms; a million; the copy."""
    t = bench_server.measure(snapshots, repeat, big)
    figures = [Figure(f"copy of {t.snapshots} snapshots, file → server", t.copy_s, "s", bench_server.COPY_S, "",
                      1.0, note=t.copy_how)]
    for c in t.compared:
        judged = not c.name.startswith("open")  # opening (once a read, with the chain check) is shown only
        rows = "" if c.rows is None else f"{c.rows} row{'' if c.rows == 1 else 's'}; "
        figures.append(Figure(f"server archive of {t.snapshots} snapshots ÷ SQLite: {c.name}", 1000 * c.server_s,
                              "ms", 1000 * c.sqlite_s, "SQLite", bench_server.PER_SQLITE if judged else None,
                              note=f"{rows}Unix socket"))
        figures.append(Figure(f"server archive of {t.snapshots} snapshots: {c.name}", 1000 * c.server_s, "ms",
                              1000 * bench_server.LIST_S, "", 1.0 if judged else None, note=rows.rstrip("; ")))
    for q in t.big_queries:
        # The brief's figure is a lot's listing and trend; all the lots at once is shown beside them.
        figures.append(Figure(f"server archive of {t.big_snapshots} snapshots (generated): {q.name}",
                              1000 * q.best_s, "ms", 1000 * bench_server.BIG_S, "",
                              None if q.name.startswith("list_lots") else 1.0,
                              note=f"{q.rows} rows; {bench_server.BIG_LOTS} lots"))
    return figures


def format_table(figures: Sequence[Figure]) -> str:
    """Figure, measured value, target, ratio, meets/misses, note: one aligned row each."""
    rows = [("figure", "measured", "target", "ratio", "verdict", "note")]
    verdicts = {True: "meets", False: "misses", None: "—"}
    rows += [(f.figure, f"{f.value:.1f} {f.unit}", f.target, f"{f.ratio:.2f}", verdicts[f.meets], f.note)
             for f in figures]
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    right = {1, 3}  # numbers line up on their right
    lines = ["  ".join(cell.rjust(w) if i in right else cell.ljust(w) for i, (cell, w) in enumerate(zip(row, widths)))
             .rstrip() for row in rows]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats and only 600 dpi (a smoke run)")
    parser.add_argument("--skip-gui", action="store_true", help="leave out the density-level drag")
    parser.add_argument("--json", type=Path, metavar="PATH", help="also write the figures as JSON to PATH")
    args = parser.parse_args(argv)

    started = time.perf_counter()

    def progress(message: str) -> None:
        # Progress goes to stderr so stdout carries only the table; a full run takes minutes.
        print(f"[{time.perf_counter() - started:6.1f} s] {message}", file=sys.stderr, flush=True)

    pieces: list[tuple[str, Callable[[], list[Figure]]]] = [
        ("start-up", startup_figures),
        ("analysis", lambda: analysis_figures((600.0,) if args.quick else (600.0, 1200.0), 1 if args.quick else 3,
                                              progress=progress)),
        ("archive", lambda: archive_figures(ARCHIVE_SNAPSHOTS, 3 if args.quick else 7)),
        ("page floor", lambda: floor_figures(3 if args.quick else FLOOR_RUNS, args.quick, progress=progress)),
        ("batch", lambda: batch_figures(BATCH_SCANS, 1 if args.quick else 3)),
    ]
    no_server = bench_server.unavailable_reason()
    if no_server is None:
        pieces.append(("shared archive", lambda: server_figures(ARCHIVE_SNAPSHOTS, 3 if args.quick else 7,
                                                                 100_000 if args.quick else 1_000_000)))
    else:
        progress(f"shared archive left out: {no_server}")
    if not args.skip_gui:
        # Last: the Qt application it starts stays alive to the end of the process.
        pieces.append(("gui drag", lambda: drag_figures(50 if args.quick else 200)))

    figures: list[Figure] = []
    crashed: list[str] = []
    for name, piece in pieces:
        progress(f"{name} ...")
        try:
            figures += piece()
        except Exception:  # one broken benchmark must not cost the figures of the others
            traceback.print_exc()
            crashed.append(name)
            progress(f"{name} crashed")
    wall = time.perf_counter() - started

    print(format_table(figures))
    judged = [f for f in figures if f.meets is not None]
    met = sum(bool(f.meets) for f in judged)
    print(f"\n{met} of {len(judged)} figures meet their targets; wall time {wall:.0f} s"
          f"{'; crashed: ' + ', '.join(crashed) if crashed else ''}")
    if args.json is not None:
        args.json.write_text(json.dumps({
            "quick": args.quick, "skip_gui": args.skip_gui, "wall_time_s": wall, "crashed": crashed,
            "figures": [f.to_dict() for f in figures],
        }, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    return 1 if crashed else 0


if __name__ == "__main__":
    sys.exit(main())
