"""Large scans: analysis time / tifffile read time, and peak memory / image bytes.

Usage: ``python benchmarks/bench_large.py [--dpi 600 1200] [--compression none zlib lzw]``

Simulates an A4 (210 x 297 mm) 16-bit grey scan with six strips for each
resolution, writes it with each compression, and prints, measured in the
same run (best of ``--repeat``):

* analysis time of ``stripscan.core.pipeline.analyze_scan`` (which reads
  the file itself) divided by the time tifffile takes to read the file;
* peak memory traced while analysing, divided by the decoded image's bytes.

The targets are analysis <= 2x the read time at 600 dpi and peak memory
<= 3x the image.  Reading includes nothing but decoding the pixels; the
analysis also hashes the file (sha256, for provenance), which on an
uncompressed file costs more than reading it.
"""

from __future__ import annotations

import argparse
import gc
import hashlib
import tempfile
import time
import tracemalloc
from pathlib import Path

import tifffile

from stripscan.core.calibration import Certificate
from stripscan.core.pipeline import analyze_scan, calibrate_tablet
from stripscan.core.simulate import FilmModel, ScannerModel, StripSpec, TabletSpec, simulate_scan, write_tiff

A4 = (210.0, 297.0)


def best_of(repeat: int, func) -> float:
    times = []
    for _ in range(repeat):
        gc.collect()
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--dpi", type=float, nargs="+", default=[600.0, 1200.0])
    parser.add_argument("--compression", nargs="+", default=["none", "zlib"], choices=("none", "zlib", "lzw"))
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()

    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        for dpi in args.dpi:
            tablet = TabletSpec(step_length_mm=10.0, center_mm=(105.0, 148.5), angle_deg=90.0)
            write_tiff(tmp / "tablet.tif", simulate_scan([tablet], platen_mm=A4, dpi=dpi, scanner=ScannerModel(seed=3)))
            cal, _, _ = calibrate_tablet(tmp / "tablet.tif", Certificate(tuple(range(1, 22)), tablet.densities))
            strips = [
                StripSpec(film=FilmModel(log_e_mid=1.5 + 0.03 * k), center_mm=(21.0 + 33.6 * k, 148.5),
                          angle_deg=90.0 + (0.6 if k % 2 else -0.4), film_width_mm=26.0, band_width_mm=11.0)
                for k in range(6)
            ]
            sim = simulate_scan(strips, platen_mm=A4, dpi=dpi, scanner=ScannerModel(seed=4))
            image_bytes = sim.image.nbytes
            rows, cols = sim.image.shape
            for compression in args.compression:
                path = tmp / f"a4_{int(dpi)}_{compression}.tif"
                write_tiff(path, sim, compression=None if compression == "none" else compression)
                read = best_of(args.repeat, lambda: tifffile.imread(path))
                digest = best_of(1, lambda: hashlib.sha256(path.read_bytes()).hexdigest())
                result = {}

                def run():
                    result["analysis"] = analyze_scan(path, calibration=cal)

                analyse = best_of(args.repeat, run)
                assert len(result["analysis"].strips) == 6, "not every strip was found"
                gc.collect()
                tracemalloc.start()
                analyze_scan(path, calibration=cal)
                _, peak = tracemalloc.get_traced_memory()
                tracemalloc.stop()
                print(
                    f"{dpi:5.0f} dpi {cols} x {rows} px, {image_bytes / 1e6:6.1f} MB, {compression:4s}: "
                    f"read {read * 1000:7.1f} ms, sha256 {digest * 1000:6.1f} ms, analyse {analyse * 1000:7.1f} ms, "
                    f"analyse/read {analyse / read:5.2f}, peak memory/image {peak / image_bytes:4.2f}"
                )
            del sim


if __name__ == "__main__":
    main()
