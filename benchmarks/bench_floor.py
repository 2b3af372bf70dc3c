"""The whole ``stripscan analyze PAGE --json`` against the floor of the job: a process that reads the file and hashes it.

Usage: ``python benchmarks/bench_floor.py [--runs 5] [--quick]``

Simulates A4 (210 x 297 mm) pages with six strips, 16-bit grey at 600 and
1200 dpi and 48-bit RGB at 1200 dpi, written uncompressed, and runs fresh
processes of this interpreter, taken in turn so that all see the same load:

* the floor: ``python -c`` that reads the page with tifffile and computes
  the file's SHA-256 (what any program that records where its numbers came
  from must at least do);
* ``python -m stripscan analyze PAGE --json`` (no calibration), the
  checkout's ``stripscan`` first on the path.

Both keep their compiled bytecode between runs, as installed packages do
(see :func:`_environment`); one round is run first and not counted.

It prints, measured in the same run:

* the analysis ÷ the floor at 600 dpi, each the fastest of ``--runs``
  (target ≤ 2, issue 18);
* how the cost grows with the pixels: (analysis at 1200 dpi − at 600 dpi) ÷
  (floor at 1200 dpi − at 600 dpi), from the median of ``--runs`` of each
  (target ≤ 1.5);
* the analysis of the 1200-dpi RGB page: the process's peak resident memory
  ÷ the decoded image's bytes (target ≤ 1.5; a float copy of the page alone
  would add 0.67).

:func:`measure` returns the figures as a :class:`FloorTiming` for ``run_all.py``.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from bench_large import A4, a4_layout

from stripscan.sim.objects import ScannerModel
from stripscan.sim.simulate import simulate_scan, write_tiff

ROOT = Path(__file__).resolve().parent.parent

#: The floor: read the page as any TIFF reader would and hash the file, nothing else.
FLOOR_CODE = (
    "import hashlib, sys, tifffile\n"
    "tifffile.imread(sys.argv[1])\n"
    "with open(sys.argv[1], 'rb') as fh:\n"
    "    hashlib.file_digest(fh, 'sha256').hexdigest()\n"
)


@dataclass(frozen=True)
class FloorTiming:
    """Seconds of each run of each process, and the RGB page's peak memory."""

    runs: int
    floor_s: dict[float, list[float]] = field(default_factory=dict)  # by dpi
    analyse_s: dict[float, list[float]] = field(default_factory=dict)
    rgb_peak_bytes: int | None = None
    rgb_image_bytes: int | None = None
    pixels: dict[float, tuple[int, int]] = field(default_factory=dict)  # (rows, cols) by dpi

    def best(self, which: str, dpi: float) -> float:
        return min(getattr(self, f"{which}_s")[dpi])

    def median(self, which: str, dpi: float) -> float:
        return statistics.median(getattr(self, f"{which}_s")[dpi])

    @property
    def growth(self) -> float | None:
        """(analysis 1200 − 600) ÷ (floor 1200 − 600), medians; None without both resolutions."""
        if 1200.0 not in self.floor_s or 600.0 not in self.floor_s:
            return None
        return ((self.median("analyse", 1200.0) - self.median("analyse", 600.0))
                / (self.median("floor", 1200.0) - self.median("floor", 600.0)))


def _environment(pycache: Path) -> dict[str, str]:
    """The checkout first on the path; compiled bytecode kept between processes, as an installed package's is.

    Some environments (this one among them) set PYTHONDONTWRITEBYTECODE,
    which would compile every stripscan module again in every process, a
    cost no installed copy pays; the bytecode goes to the run's own
    temporary folder, for both processes alike.
    """
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, (str(ROOT), os.environ.get("PYTHONPATH")))),
               PYTHONPYCACHEPREFIX=str(pycache))
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    return env


def _timed(command: Sequence[str], env: dict[str, str]) -> float:
    """Wall time of one fresh process; it must succeed."""
    start = time.perf_counter()
    subprocess.run(command, stdout=subprocess.DEVNULL, env=env, cwd=ROOT, check=True)
    return time.perf_counter() - start


#: Runs a command and prints its peak resident memory in kilobytes.  A small
#: process of its own starts it: Linux counts the memory of the process that
#: forked a child into the child's peak, and this benchmark holds a simulated page.
PEAK_CODE = (
    "import os, subprocess, sys\n"
    "child = subprocess.Popen(sys.argv[1:], stdout=subprocess.DEVNULL)\n"
    "_, status, usage = os.wait4(child.pid, 0)\n"
    "sys.exit(os.waitstatus_to_exitcode(status) or print(usage.ru_maxrss))\n"
)


def _peak(command: Sequence[str], env: dict[str, str]) -> int:
    """Peak resident memory of one fresh process, bytes; it must succeed."""
    done = subprocess.run([sys.executable, "-c", PEAK_CODE, *command], capture_output=True, text=True, env=env,
                          cwd=ROOT, check=True)
    return int(done.stdout.split()[-1]) * 1024  # Linux reports kilobytes


def _page(folder: Path, dpi: float, channels: int = 1) -> tuple[Path, int, tuple[int, int]]:
    _, strips = a4_layout()
    sim = simulate_scan(strips, platen_mm=A4, dpi=dpi, scanner=ScannerModel(seed=4, channels=channels))
    path = folder / f"a4_{dpi:g}dpi_{'rgb' if channels == 3 else 'grey'}.tif"
    write_tiff(path, sim, compression=None)
    return path, sim.image.nbytes, sim.image.shape[:2]


def measure(dpis: Sequence[float] = (600.0, 1200.0), runs: int = 5, rgb: bool = True,
            progress: Callable[[str], None] = lambda _: None) -> FloorTiming:
    """Time the floor and the analysis at each resolution, ``runs`` rounds taken in turn; then the RGB page's memory."""
    timing = FloorTiming(runs)
    with tempfile.TemporaryDirectory() as tmp:
        env = _environment(Path(tmp) / "pycache")
        pages = {}
        for dpi in dpis:
            pages[dpi], _, timing.pixels[dpi] = _page(Path(tmp), dpi)
            timing.floor_s[dpi], timing.analyse_s[dpi] = [], []
        commands = {dpi: ([sys.executable, "-c", FLOOR_CODE, str(path)],
                          [sys.executable, "-m", "stripscan", "analyze", str(path), "--json"])
                    for dpi, path in pages.items()}
        for _ in range(1):  # the page cache and the interpreter's bytecode warm, as for a user's second scan
            for floor, analyse in commands.values():
                _timed(floor, env), _timed(analyse, env)
        for k in range(runs):
            for dpi, (floor, analyse) in commands.items():
                timing.floor_s[dpi].append(_timed(floor, env))
                timing.analyse_s[dpi].append(_timed(analyse, env))
            progress(f"page floor: round {k + 1} of {runs}")
        for path in pages.values():
            path.unlink()
        if rgb:
            path, image_bytes, _ = _page(Path(tmp), 1200.0, channels=3)
            _timed([sys.executable, "-c", FLOOR_CODE, str(path)], env)  # into the page cache
            peak = _peak([sys.executable, "-m", "stripscan", "analyze", str(path), "--json"], env)
            timing = FloorTiming(timing.runs, timing.floor_s, timing.analyse_s, peak, image_bytes, timing.pixels)
    return timing


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5)
    parser.add_argument("--quick", action="store_true", help="600 dpi only, no RGB page")
    args = parser.parse_args()
    t = measure((600.0,) if args.quick else (600.0, 1200.0), args.runs, rgb=not args.quick,
                progress=lambda m: print(m, file=sys.stderr))
    for dpi in t.floor_s:
        print(f"{dpi:5.0f} dpi: floor best {1000 * t.best('floor', dpi):6.0f} ms, median {1000 * t.median('floor', dpi):6.0f} ms;"
              f" analyze best {1000 * t.best('analyse', dpi):6.0f} ms, median {1000 * t.median('analyse', dpi):6.0f} ms;"
              f" best ÷ best {t.best('analyse', dpi) / t.best('floor', dpi):.2f}")
    if t.growth is not None:
        print(f"growth 1200 vs 600 dpi (medians): {t.growth:.2f}")
    if t.rgb_peak_bytes is not None:
        print(f"RGB 1200 dpi: peak {t.rgb_peak_bytes / 1e6:.0f} MB ÷ image {t.rgb_image_bytes / 1e6:.0f} MB = "
              f"{t.rgb_peak_bytes / t.rgb_image_bytes:.2f}")


if __name__ == "__main__":
    main()
