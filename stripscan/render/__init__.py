"""Reports and exports: PDF pages drawn with Qt, CSV tables, PNG and SVG plots, snapshot JSON.

The pages are drawn with ``QPainter`` on a ``QPdfWriter`` (PDF), a
``QImage`` (PNG) or a ``QSvgGenerator`` (SVG); no browser, TeX or plotting
library is involved.  The core stays Qt-free: this package reads its
records and draws them.  Qt is imported only when something is drawn (a
``QGuiApplication`` is made then if none exists, offscreen when there is
no display), so importing this package is cheap.

Functions for the desktop program
---------------------------------
``snapshot_report_pdf(snapshot, path, archive=...)``
    One-page report of an archived snapshot.
``scan_report_pdf(analysis, path, calibration=...)``
    One page per strip of a scan analysis, no archive needed.
``comparison_report_pdf(comparisons, path, calibrations=...)``
    One page per compared pair of sets (from ``core.compare.compare_sets``).
``qc_month_report_pdf(archive, processor, "YYYY-MM", path)``
    A processor's month of QC: charts, then days and actions.
``export_steps_csv(strip, path)``, ``export_figures_csv(strips, path)``
    CSV tables (UTF-8, header row with units).
``export_snapshot_json(archive, snapshot_id, path)``
    One snapshot in the archive's export form.
``curve_plot(strip)`` then ``save_plot_png(plot, path)`` / ``save_plot_svg(plot, path)``
    Pictures of any plot.

Every report carries :data:`stripscan.CAUTION` and its calibration's
provenance; every file is written under a temporary name and renamed into
place when complete.
"""

from __future__ import annotations

import importlib
from typing import Any

__all__ = [
    "ReportError",
    "snapshot_report_pdf",
    "scan_report_pdf",
    "comparison_report_pdf",
    "qc_month_report_pdf",
    "reports_from_analysis",
    "report_from_snapshot",
    "StripContext",
    "curve_plot",
    "export_steps_csv",
    "export_figures_csv",
    "export_snapshot_json",
    "save_plot_png",
    "save_plot_svg",
    "Plot",
    "write_pdf",
    "render_page",
]

_HOMES = {
    "ReportError": "qt",
    "snapshot_report_pdf": "snapshot",
    "scan_report_pdf": "snapshot",
    "comparison_report_pdf": "comparison",
    "qc_month_report_pdf": "qcmonth",
    "reports_from_analysis": "snapshot",
    "report_from_snapshot": "snapshot",
    "StripContext": "snapshot",
    "curve_plot": "snapshot",
    "export_steps_csv": "export",
    "export_figures_csv": "export",
    "export_snapshot_json": "export",
    "save_plot_png": "pictures",
    "save_plot_svg": "pictures",
    "Plot": "plot",
    "write_pdf": "canvas",
    "render_page": "canvas",
}


def __getattr__(name: str) -> Any:
    # Lazy: the command line imports stripscan.cli.report at start-up, and
    # the drawing modules (numpy, scipy, then Qt when used) need not load then.
    home = _HOMES.get(name)
    if home is None:
        raise AttributeError(f"module 'stripscan.render' has no attribute {name!r}")
    return getattr(importlib.import_module(f"{__name__}.{home}"), name)
