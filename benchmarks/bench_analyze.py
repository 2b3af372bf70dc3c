"""Analysis time of a large scan as a ratio to reading the same file with tifffile.

Usage: ``python benchmarks/bench_analyze.py [--dpi 600] [--width-mm 110] [--height-mm 175] [--strips 2]``

The scan is simulated (16-bit grey, linear) into a temporary folder; both
timings are taken in the same run, best of ``--repeat``, so the ratio is
meaningful on a shared, noisy machine even when the seconds are not.
"""

from __future__ import annotations

import argparse
import tempfile
import time
import tracemalloc
from pathlib import Path

import tifffile

from stripscan.core.pipeline import analyze_scan, calibrate_tablet
from stripscan.core.calibration import Certificate
from stripscan.core.simulate import FilmModel, ScannerModel, StripSpec, TabletSpec, simulate_scan, write_tiff


def best_of(repeat: int, func) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--dpi", type=float, default=600.0)
    parser.add_argument("--width-mm", type=float, default=110.0)
    parser.add_argument("--height-mm", type=float, default=175.0)
    parser.add_argument("--strips", type=int, default=2)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--memory", action="store_true", help="also measure peak Python-heap memory (slower)")
    args = parser.parse_args()

    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        scanner = ScannerModel(seed=3)
        tablet = TabletSpec(step_length_mm=7.0, center_mm=(args.width_mm / 2, args.height_mm / 2), angle_deg=90.0)
        write_tiff(tmp / "tablet.tif", simulate_scan([tablet], platen_mm=(args.width_mm, args.height_mm), dpi=args.dpi, scanner=scanner))
        cal, _, _ = calibrate_tablet(tmp / "tablet.tif", Certificate(tuple(range(1, 22)), tablet.densities))
        pitch = args.width_mm / args.strips
        strips = [
            StripSpec(film=FilmModel(), center_mm=(pitch * (k + 0.5), args.height_mm / 2), angle_deg=90.0 + 2.0 * k)
            for k in range(args.strips)
        ]
        scan = simulate_scan(strips, platen_mm=(args.width_mm, args.height_mm), dpi=args.dpi, scanner=ScannerModel(seed=4))
        path = tmp / "strips.tif"
        write_tiff(path, scan, compression=None)
        image_bytes = scan.image.nbytes
        del scan

        read = best_of(args.repeat, lambda: tifffile.imread(path))
        result = None

        def run():
            nonlocal result
            result = analyze_scan(path, calibration=cal)

        analyse = best_of(args.repeat, run)
        assert result is not None and len(result.strips) == args.strips
        rows, cols = tifffile.imread(path).shape
        print(f"scan: {cols} x {rows} px, {args.dpi:g} dpi, 16-bit grey, {args.strips} strips, {image_bytes / 1e6:.1f} MB")
        print(f"read with tifffile:  {read * 1000:8.1f} ms")
        print(f"stripscan analyze:   {analyse * 1000:8.1f} ms")
        print(f"ratio analyse / read: {analyse / read:.2f}")
        if args.memory:
            tracemalloc.start()
            analyze_scan(path, calibration=cal)
            _, peak = tracemalloc.get_traced_memory()
            tracemalloc.stop()
            print(f"peak traced memory / image bytes: {peak / image_bytes:.2f}")


if __name__ == "__main__":
    main()
