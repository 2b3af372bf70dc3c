"""A folder of scans through the command line: throughput on every core ÷ on one core.

Usage: ``python benchmarks/bench_batch.py [--scans 50] [--runs 3] [--dpi 600]``

Simulates a few 16-bit grey scans of three strips each (130 x 190 mm, the
size of a few strips laid on the platen, zlib-compressed as written by the
simulator), copies them into one folder of ``--scans`` files, and times the
whole command a user runs, ``stripscan analyze FOLDER -o OUTDIR``:

* on one core: ``--workers 1`` with the process held to one CPU (its
  threads too: reading a scan hashes it on a second thread and tifffile
  decodes in threads, so an unheld ``--workers 1`` already uses part of a
  second core);
* ``--workers 1`` not held, one scan after the other as before batches;
* on every core: ``--workers`` set to every core this process may use.

Each is the best of ``--runs`` fresh processes, the three taken in turn
(all see the same load on a shared machine).  The throughput ratio is the
one-core time ÷ the all-cores time: the start of the processes and the
loading of the libraries in each worker are part of it, as a user waits
for them.

:func:`measure` returns the figures for ``run_all.py``.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec
from stripscan.sim.simulate import simulate_scan, write_tiff
from stripscan.services.batch import available_cores

ROOT = Path(__file__).resolve().parent.parent
PLATEN_MM = (130.0, 190.0)
DISTINCT = 5  # distinct scans, copied to make up the folder (simulating fifty would take longer than reading them)


@dataclass(frozen=True)
class BatchTiming:
    """Best wall time of the whole command on one core and on ``cores`` cores, for ``scans`` files."""

    scans: int
    cores: int
    dpi: float
    one_core_s: float
    all_cores_s: float
    one_worker_s: float  # --workers 1, not held to one CPU

    @property
    def speedup(self) -> float:
        """Throughput on every core ÷ throughput on one core."""
        return self.one_core_s / self.all_cores_s


def make_folder(folder: Path, scans: int, dpi: float) -> Path:
    """``scans`` files of three strips each in ``folder``/scans, made from :data:`DISTINCT` simulated scans."""
    made = []
    for k in range(min(DISTINCT, scans)):
        strips = [StripSpec(film=FilmModel(log_e_mid=1.5 + 0.04 * k), center_mm=(25.0 + 40.0 * j, 95.0),
                            angle_deg=90.0 + 0.3 * (j - 1)) for j in range(3)]
        path = folder / f"made_{k}.tif"
        write_tiff(path, simulate_scan(strips, platen_mm=PLATEN_MM, dpi=dpi, scanner=ScannerModel(seed=k)))
        made.append(path)
    target = folder / "scans"
    target.mkdir()
    for n in range(scans):
        shutil.copyfile(made[n % len(made)], target / f"scan_{n + 1:03d}.tif")
    return target


def _one_cpu() -> None:
    """Hold the process about to start (and every thread it makes) to one CPU."""
    os.sched_setaffinity(0, {min(os.sched_getaffinity(0))})


def _run(scans: Path, out: Path, workers: int, *, one_cpu: bool = False) -> float:
    shutil.rmtree(out, ignore_errors=True)
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, (str(ROOT), os.environ.get("PYTHONPATH")))))
    command = [sys.executable, "-m", "stripscan", "analyze", str(scans), "-o", str(out), "--workers", str(workers),
               "--quiet"]
    start = time.perf_counter()
    done = subprocess.run(command, capture_output=True, text=True, env=env, cwd=ROOT,
                          preexec_fn=_one_cpu if one_cpu else None)
    elapsed = time.perf_counter() - start
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(command)} failed ({done.returncode}): {done.stderr.strip()[-2000:]}")
    written = len(list(out.glob("*.json")))
    expected = len(list(scans.iterdir()))
    if written != expected:
        raise RuntimeError(f"{out}: {written} results written for {expected} scans")
    return elapsed


def measure(scans: int = 50, runs: int = 3, dpi: float = 600.0) -> BatchTiming:
    """Time the folder's analysis on one core and on every core; the best of ``runs`` each."""
    cores = available_cores()
    ways = {"one core": (1, True), "one worker": (1, False), "all cores": (cores, False)}
    with tempfile.TemporaryDirectory() as tmp:
        folder = make_folder(Path(tmp), scans, dpi)
        best = dict.fromkeys(ways, float("inf"))
        for _ in range(runs):
            for name, (workers, one_cpu) in ways.items():
                best[name] = min(best[name], _run(folder, Path(tmp) / "out", workers, one_cpu=one_cpu))
    return BatchTiming(scans, cores, dpi, best["one core"], best["all cores"], best["one worker"])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scans", type=int, default=50)
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--dpi", type=float, default=600.0)
    args = parser.parse_args()
    t = measure(args.scans, args.runs, args.dpi)
    print(f"{t.scans} scans at {t.dpi:g} dpi: one core {t.one_core_s:.2f} s ({t.scans / t.one_core_s:.1f} scans/s), "
          f"{t.cores} cores {t.all_cores_s:.2f} s ({t.scans / t.all_cores_s:.1f} scans/s); "
          f"throughput ratio {t.speedup:.2f}; --workers 1 not held to one CPU {t.one_worker_s:.2f} s "
          f"(ratio {t.one_worker_s / t.all_cores_s:.2f})")


if __name__ == "__main__":
    main()
