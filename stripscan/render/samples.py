"""Sample report pages of the demo scenario, as small PNG pictures for the documentation.

Run ``python -m stripscan.render.samples [FOLDER]`` (default
``docs/report-pages``).  It builds the demo lot archive and the demo QC
month in a temporary folder (the real pipeline on the invented scenario's
simulated scans, about a minute), then draws one page of each report kind
with the very code that draws the PDFs:

* ``strip-report.png``: an archived snapshot of lot M-2610-A;
* ``lot-comparison.png``: lot M-2702-B against M-2610-A, the bundled
  three-strip scans of each, processed together;
* ``qc-month-charts.png`` and ``qc-month-days.png``: Processor 1 in
  November 2026.

Pictures are drawn at 100 dpi in 24-bit colour, which keeps each under
250 KB.  The date in their footers is fixed, so
the pictures change only when the drawing does.
"""

from __future__ import annotations

import datetime as dt
import sys
import tempfile
from pathlib import Path
from typing import Any, Sequence

from stripscan.render.canvas import render_page
from stripscan.render.qt import replacing

__all__ = ["SAMPLE_DATE", "save_sample", "make_samples", "main"]

#: The footers' "made" date of the sample pages.
SAMPLE_DATE = dt.datetime(2026, 12, 1, 9, 0, tzinfo=dt.timezone.utc)
_DPI = 100.0


def save_sample(page: Any, path: Path, *, page_no: int = 1, page_count: int = 1) -> Path:
    """Draw ``page`` at 100 dpi and save it as a palette PNG; return the path."""
    from PySide6.QtGui import QImage

    image = render_page(page, dpi=_DPI, page_no=page_no, page_count=page_count, generated=SAMPLE_DATE)
    # 24-bit colour: a 256-colour palette would drop the faint grid lines and the shaded bands.
    small = image.convertToFormat(QImage.Format.Format_RGB888)
    with replacing(path) as temp:
        if not small.save(str(temp), "PNG"):
            raise OSError(f"{path}: Qt could not write the PNG picture")
    return path


def make_samples(folder: Path, *, work: Path) -> list[Path]:
    """Build the demo data in ``work`` and save the sample pages into ``folder``."""
    from stripscan.archive import Archive
    from stripscan.services.demo_archive import build_demo_archive
    from stripscan.core.calibration_files import load_calibration
    from stripscan.core.compare.comparison import compare_sets
    from stripscan.core.compare.sets import StripSet
    from stripscan.core.pipeline import analyze_scan
    from stripscan.sim.demo_data import SCENARIO, demo_files
    from stripscan.services.qc_demo import build_demo_qc
    from stripscan.render.comparison import CalibrationUse, ComparisonPage
    from stripscan.render.qcmonth import qc_month
    from stripscan.render.snapshot import report_from_snapshot

    folder.mkdir(parents=True, exist_ok=True)
    files = demo_files()
    site = str(SCENARIO["site"])
    written = []
    path = build_demo_archive(work / "demo.sqlite3", files)
    with Archive.open(path) as archive:
        build_demo_qc(archive, files)
        lot_a = [s for s in archive.list_snapshots("M-2610-A") if s.current]
        snapshot = archive.get_snapshot(lot_a[-1].id)
        written.append(save_sample(report_from_snapshot(snapshot, archive=archive, site=site),
                                   folder / "strip-report.png"))
        month = qc_month(archive, SCENARIO["processor"]["name"], "2026-11", site=site)
        for number, (page, name) in enumerate(zip(month.pages(), ("qc-month-charts", "qc-month-days")), start=1):
            written.append(save_sample(page, folder / f"{name}.png", page_no=number, page_count=2))
    calibration = load_calibration(files.calibration)
    sets = [StripSet(f"lot {lot}", analyze_scan(scan, calibration=calibration).strips, source=f"scan {scan.name}")
            for lot, scan in (("M-2610-A", files.lot_a_scan), ("M-2702-B", files.lot_b_scan))]
    use = CalibrationUse(tuple(s.name for s in sets), calibration.to_dict(), calibration.sha256)
    page = ComparisonPage(compare_sets(sets)[0], (use,), site=site)
    written.append(save_sample(page, folder / "lot-comparison.png"))
    return written


def main(argv: Sequence[str] | None = None) -> int:
    """Write the sample pages into the folder given (default ``docs/report-pages``)."""
    args = list(sys.argv[1:] if argv is None else argv)
    folder = Path(args[0] if args else "docs/report-pages")
    with tempfile.TemporaryDirectory(prefix="stripscan-samples-") as work:
        for path in make_samples(folder, work=Path(work)):
            print(f"{path} ({path.stat().st_size // 1024} KB)")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
