"""Builders and readers for the report tests: the demo scenario, hand-made strips, PDF and picture readers.

All names, lots and places come from the invented demo scenario
(``stripscan.sim.demo_data``).  PDFs are read back with the general-purpose
library pypdf and, when installed, poppler's ``pdftotext``.  Kept apart
from ``conftest.py`` so that test modules can import it by name.
"""

from __future__ import annotations

import os

# Before Qt is imported anywhere: no display needed.
os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import math  # noqa: E402
import shutil  # noqa: E402
import subprocess  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any  # noqa: E402

import pytest  # noqa: E402

from stripscan.core.calibration import Calibration  # noqa: E402
from stripscan.core.curve import compute_figures
from stripscan.core.figure_settings import FigureSettings
from stripscan.core.records import Analysis, ScanInfo, StepDensity, StripGeometry, StripResult  # noqa: E402
from stripscan.sim.demo_data import SCENARIO  # noqa: E402

SITE = SCENARIO["site"]
LOT_A, LOT_B = tuple(SCENARIO["lots"])
PROCESSOR = SCENARIO["processor"]["name"]


def logistic_strip(*, base_fog: float = 0.19, top: float = 3.2, slope: float = 5.0, centre: float = 1.6,
                   n_steps: int = 21, index: int = 1, warnings: tuple[str, ...] = ()) -> StripResult:
    """A strip whose densities follow a logistic curve; figures by the core's ``compute_figures``."""
    log_e = [0.15 * k for k in range(n_steps)]
    od = [base_fog + (top - base_fog) / (1.0 + math.exp(-slope * (x - centre))) for x in log_e]
    steps = tuple(StepDensity(k + 1, x, d, 0.003, 1200, True, (100.0 + 40.0 * k, 60.0))
                  for k, (x, d) in enumerate(zip(log_e, od)))
    figures = compute_figures(log_e, od, [True] * n_steps, base_fog=base_fog, settings=FigureSettings())
    geometry = StripGeometry((80.0, 40.0), (1.0, 0.0), (0.0, 1.0), 40.0, n_steps, 40.0, (44.0, 52.0))
    return StripResult(index, geometry, steps, None, figures, warnings=tuple(warnings) + figures.notes)


def scan_info(name: str = "fernhill_processor-1_2026-11-05.tif") -> ScanInfo:
    return ScanInfo(f"/data/fernhill/{name}", "ab" * 32, 768, 1181, 150.0, 16, 1, "grey", "linear")


def analysis_of(*strips: StripResult, calibration: Calibration | None = None,
                warnings: tuple[str, ...] = ()) -> Analysis:
    summary = calibration.summary() if calibration is not None else {"sha256": None, "mode": "direct"}
    return Analysis(scan_info(), summary, tuple(strips), warnings=warnings, program_version="0.1.0",
                    settings={"increment": 0.15})


def pdf_pages(path: Path) -> list[str]:
    """Text of each page as pypdf extracts it, whitespace runs made single spaces."""
    from pypdf import PdfReader

    return [" ".join(page.extract_text().split()) for page in PdfReader(path).pages]


def pdf_words(path: Path) -> list[tuple[int, float, float, float, float, float, float, str]]:
    """Every word's box as poppler's ``pdftotext -bbox`` gives it: (page, width, height, x0, y0, x1, y1, word)."""
    import xml.etree.ElementTree as ET

    out = subprocess.run(["pdftotext", "-bbox", str(path), "-"], check=True, capture_output=True, text=True).stdout
    root = ET.fromstring(out.replace('xmlns="http://www.w3.org/1999/xhtml"', ""))
    words = []
    for number, page in enumerate(root.iter("page"), start=1):
        w, h = float(page.get("width")), float(page.get("height"))
        for word in page.iter("word"):
            words.append((number, w, h, float(word.get("xMin")), float(word.get("yMin")),
                          float(word.get("xMax")), float(word.get("yMax")), word.text or ""))
    return words


needs_poppler = pytest.mark.skipif(shutil.which("pdftotext") is None or shutil.which("pdftoppm") is None,
                                   reason="poppler-utils (pdftotext, pdftoppm) not installed")


def image_array(image: Any) -> Any:
    """A QImage (32-bit RGB) as a numpy array (rows, columns, 3) of R, G, B."""
    import numpy as np
    from PySide6.QtGui import QImage

    image = image.convertToFormat(QImage.Format.Format_RGB888)
    raw = np.frombuffer(image.constBits(), dtype=np.uint8, count=image.sizeInBytes())
    return raw.reshape(image.height(), image.bytesPerLine())[:, :image.width() * 3].reshape(
        image.height(), image.width(), 3).copy()


#: A month of Processor 1's QC in the demo's story, typed in like densitometer readings:
#: day -> (base+fog, mid-density, density difference, note, action).  A five-day baseline
#: in late October, the developer tiring through November (fog up, contrast down), a
#: limit broken on the 12th and acted on, new chemistry on the 17th and a new baseline.
QC_DAYS: dict[str, tuple[float, float, float, str, str]] = {
    "2026-10-26": (0.190, 0.99, 1.87, "", ""), "2026-10-27": (0.189, 0.98, 1.86, "", ""),
    "2026-10-28": (0.191, 0.99, 1.88, "", ""), "2026-10-29": (0.190, 1.00, 1.87, "", ""),
    "2026-10-30": (0.190, 0.99, 1.86, "", ""),
    "2026-11-03": (0.193, 0.96, 1.84, "", ""), "2026-11-04": (0.195, 0.95, 1.81, "", ""),
    "2026-11-05": (0.197, 0.93, 1.79, "", ""), "2026-11-06": (0.199, 0.91, 1.77, "", ""),
    "2026-11-09": (0.203, 0.89, 1.75, "", ""), "2026-11-10": (0.207, 0.87, 1.73, "", ""),
    "2026-11-11": (0.212, 0.86, 1.72, "", ""),
    "2026-11-12": (0.224, 0.83, 1.69, "repeat strip gave the same",
                   "clinical processing stopped; replenishment rate checked and raised"),
    "2026-11-13": (0.221, 0.88, 1.76, "", "developer temperature 34.6 degC, set back to 35.0 degC"),
    "2026-11-16": (0.219, 0.87, 1.75, "fresh chemistry ordered", ""),
    "2026-11-17": (0.190, 1.01, 1.89, "first strip on new chemistry", ""),
    "2026-11-18": (0.191, 1.00, 1.88, "", ""), "2026-11-19": (0.190, 1.00, 1.90, "", ""),
    "2026-11-20": (0.189, 1.01, 1.89, "", ""), "2026-11-23": (0.190, 0.99, 1.88, "", ""),
    "2026-11-24": (0.191, 1.00, 1.89, "", ""), "2026-11-25": (0.192, 0.99, 1.87, "", ""),
    "2026-11-26": (0.191, 1.02, 1.90, "", ""), "2026-11-27": (0.193, 0.98, 1.86, "", ""),
    "2026-11-30": (0.192, 1.00, 1.88, "", ""),
}


def fill_qc_month(archive: Any, *, scan_day: Any = None, calibration: Calibration | None = None,
                  keep_strip: bool = True) -> None:
    """Store :data:`QC_DAYS` and the chemistry change of 17 November for Processor 1.

    With ``scan_day`` (the analysis of the demo's daily strip of 2 November) that
    day is read off the scan, so the month has a scanned day as well as typed ones;
    ``keep_strip`` keeps that strip as a snapshot of lot A (with its calibration).
    """
    import datetime as dt

    from stripscan.core.qc.records import QCValues
    from stripscan.services.qc_recording import add_day, add_event

    days = dict(QC_DAYS)
    if scan_day is not None:
        days["2026-11-02"] = None  # type: ignore[assignment]
    for day in sorted(days):
        if day == "2026-11-17":
            add_event(archive, PROCESSOR, dt.date(2026, 11, 17), "new_chemistry", "developer and fixer renewed")
        if days[day] is None:
            add_day(archive, PROCESSOR, dt.date.fromisoformat(day), analysis=scan_day,
                    lot=LOT_A if keep_strip else None, calibration=calibration.to_dict() if calibration else None,
                    note="daily strip, scanned")
            continue
        bf, md, dd, note, action = days[day]
        add_day(archive, PROCESSOR, dt.date.fromisoformat(day), values=QCValues(bf, md, dd), note=note,
                action=action)
