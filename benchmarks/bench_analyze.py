"""Analysis time of a large scan as a ratio to reading the same file with tifffile.

Usage: ``python benchmarks/bench_analyze.py [--dpi 600] [--width-mm 110] [--height-mm 175] [--strips 2] [--memory]``

The scan is simulated (16-bit grey, linear) into a temporary folder; both
timings are taken in the same run, best of ``--repeat``, so the ratio is
meaningful on a shared, noisy machine even when the seconds are not.
``--memory`` also traces the peak Python-heap memory of one more analysis
and divides it by the decoded image's bytes.

:func:`measure_scan` does the work for any layout of strips and returns the
figures as :class:`ScanTiming` records; ``bench_large.py`` (and through
it ``run_all.py``) uses it too.
"""

from __future__ import annotations

import argparse
import dataclasses
import gc
import hashlib
import tempfile
import time
import tracemalloc
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import tifffile

from stripscan.core.certificate import Certificate
from stripscan.core.pipeline import analyze_scan
from stripscan.core.tablet import calibrate_tablet
from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec, TabletSpec
from stripscan.sim.simulate import simulate_scan, write_tiff

COMPRESSIONS = ("none", "zlib", "lzw")


@dataclass(frozen=True)
class ScanTiming:
    """One scan file read and analysed; times in seconds, sizes in bytes."""

    dpi: float
    compression: str
    width_px: int
    height_px: int
    strips: int
    image_bytes: int
    read_s: float
    hash_s: float
    analyse_s: float
    peak_bytes: int | None  # None when memory was not traced
    analyse_plain_s: float | None = None  # the same analysis with the calibration's stray-light model taken out

    @property
    def stray_light_cost(self) -> float | None:
        """Analysis time with the stray-light correction ÷ without it."""
        return None if not self.analyse_plain_s else self.analyse_s / self.analyse_plain_s

    @property
    def analyse_per_read(self) -> float:
        return self.analyse_s / self.read_s

    @property
    def peak_per_image(self) -> float | None:
        return None if self.peak_bytes is None else self.peak_bytes / self.image_bytes


def best_of(repeat: int, func: Callable[[], object]) -> float:
    """Shortest of ``repeat`` runs: the run least disturbed by other work on the machine."""
    times = []
    for _ in range(repeat):
        gc.collect()  # garbage of the previous run must not be collected on this one's clock
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return min(times)


def measure_scan(
    folder: Path,
    strips: Sequence[StripSpec],
    *,
    tablet: TabletSpec,
    platen_mm: tuple[float, float],
    dpi: float,
    compressions: Sequence[str] = ("none",),
    repeat: int = 3,
    memory: bool = True,
) -> Iterator[ScanTiming]:
    """Simulate ``strips`` on the platen, write one file per compression into ``folder`` and time each.

    The tablet is scanned alone first to calibrate, as a user would.  Yields
    as each file is done, so a caller can report progress on long runs.
    """
    write_tiff(folder / "tablet.tif", simulate_scan([tablet], platen_mm=platen_mm, dpi=dpi, scanner=ScannerModel(seed=3)))
    cal, _, _ = calibrate_tablet(folder / "tablet.tif", Certificate(tuple(range(1, 22)), tablet.densities))
    sim = simulate_scan(strips, platen_mm=platen_mm, dpi=dpi, scanner=ScannerModel(seed=4))
    image_bytes = sim.image.nbytes
    rows, cols = sim.image.shape
    for compression in compressions:
        path = folder / f"strips_{dpi:g}dpi_{compression}.tif"
        write_tiff(path, sim, compression=None if compression == "none" else compression)
        read = best_of(repeat, lambda: tifffile.imread(path))
        # Every analysis hashes its file for provenance; on an uncompressed
        # file that alone costs more than tifffile's read, so it is reported.
        digest = best_of(1, lambda: hashlib.sha256(path.read_bytes()).hexdigest())
        found: list[int] = []
        analyse = best_of(repeat, lambda: found.append(len(analyze_scan(path, calibration=cal).strips)))
        # The same work without the stray-light correction (the map alone): what the correction costs.
        plain_cal = dataclasses.replace(cal, stray_light=None, tablet_spread=None)
        plain = best_of(repeat, lambda: analyze_scan(path, calibration=plain_cal))
        if set(found) != {len(strips)}:
            raise RuntimeError(f"{path.name}: found {sorted(set(found))} strips, expected {len(strips)}")
        peak = None
        if memory:
            gc.collect()
            tracemalloc.start()
            try:
                analyze_scan(path, calibration=cal)
                _, peak = tracemalloc.get_traced_memory()
            finally:
                tracemalloc.stop()
        yield ScanTiming(dpi, compression, cols, rows, len(strips), image_bytes, read, digest, analyse, peak, plain)
        path.unlink()  # at 1200 dpi each file is hundreds of MB


def measure(dpi: float = 600.0, width_mm: float = 110.0, height_mm: float = 175.0, strips: int = 2,
            repeat: int = 3, memory: bool = False) -> ScanTiming:
    """Uncompressed scan of ``strips`` strips side by side, each turned a little more than the last."""
    tablet = TabletSpec(step_length_mm=7.0, center_mm=(width_mm / 2, height_mm / 2), angle_deg=90.0)
    pitch = width_mm / strips
    specs = [
        StripSpec(film=FilmModel(), center_mm=(pitch * (k + 0.5), height_mm / 2), angle_deg=90.0 + 2.0 * k)
        for k in range(strips)
    ]
    with tempfile.TemporaryDirectory() as tmp:
        (timing,) = measure_scan(Path(tmp), specs, tablet=tablet, platen_mm=(width_mm, height_mm), dpi=dpi,
                                 repeat=repeat, memory=memory)
    return timing


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--dpi", type=float, default=600.0)
    parser.add_argument("--width-mm", type=float, default=110.0)
    parser.add_argument("--height-mm", type=float, default=175.0)
    parser.add_argument("--strips", type=int, default=2)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--memory", action="store_true", help="also measure peak Python-heap memory (slower)")
    args = parser.parse_args()

    t = measure(args.dpi, args.width_mm, args.height_mm, args.strips, args.repeat, args.memory)
    print(f"scan: {t.width_px} x {t.height_px} px, {t.dpi:g} dpi, 16-bit grey, {t.strips} strips, "
          f"{t.image_bytes / 1e6:.1f} MB")
    print(f"read with tifffile:  {t.read_s * 1000:8.1f} ms")
    print(f"stripscan analyze:   {t.analyse_s * 1000:8.1f} ms")
    print(f"ratio analyse / read: {t.analyse_per_read:.2f}")
    if t.peak_per_image is not None:
        print(f"peak traced memory / image bytes: {t.peak_per_image:.2f}")


if __name__ == "__main__":
    main()
