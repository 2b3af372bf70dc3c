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

:func:`measure` returns the figures as ``bench_analyze.ScanTiming`` records
for ``run_all.py``.
"""

from __future__ import annotations

import argparse
import tempfile
from collections.abc import Iterator, Sequence
from pathlib import Path

from bench_analyze import COMPRESSIONS, ScanTiming, measure_scan

from stripscan.sim.objects import FilmModel, StripSpec, TabletSpec

A4 = (210.0, 297.0)
STRIPS = 6


def a4_layout() -> tuple[TabletSpec, list[StripSpec]]:
    """The calibration tablet, and six strips side by side across the page, slightly askew as laid by hand."""
    tablet = TabletSpec(step_length_mm=10.0, center_mm=(105.0, 148.5), angle_deg=90.0)
    strips = [
        StripSpec(film=FilmModel(log_e_mid=1.5 + 0.03 * k), center_mm=(21.0 + 33.6 * k, 148.5),
                  angle_deg=90.0 + (0.6 if k % 2 else -0.4), film_width_mm=26.0, band_width_mm=11.0)
        for k in range(STRIPS)
    ]
    return tablet, strips


def measure(dpis: Sequence[float] = (600.0, 1200.0), compressions: Sequence[str] = ("none", "zlib"),
            repeat: int = 3) -> Iterator[ScanTiming]:
    """Time every resolution and compression, yielding each file's figures as soon as they are measured."""
    tablet, strips = a4_layout()
    with tempfile.TemporaryDirectory() as tmp:
        for dpi in dpis:
            yield from measure_scan(Path(tmp), strips, tablet=tablet, platen_mm=A4, dpi=dpi,
                                    compressions=compressions, repeat=repeat, memory=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--dpi", type=float, nargs="+", default=[600.0, 1200.0])
    parser.add_argument("--compression", nargs="+", default=["none", "zlib"], choices=COMPRESSIONS)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()

    for t in measure(args.dpi, args.compression, args.repeat):
        print(
            f"{t.dpi:5.0f} dpi {t.width_px} x {t.height_px} px, {t.image_bytes / 1e6:6.1f} MB, {t.compression:4s}: "
            f"read {t.read_s * 1000:7.1f} ms, sha256 {t.hash_s * 1000:6.1f} ms, analyse {t.analyse_s * 1000:7.1f} ms, "
            f"analyse/read {t.analyse_per_read:5.2f}, peak memory/image {t.peak_per_image:4.2f}"
        )


if __name__ == "__main__":
    main()
