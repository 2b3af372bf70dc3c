"""Render each view of the workbench on the invented demo, offscreen, to PNG files.

Usage::

    python tools/render_screens.py [FOLDER] [--docs]

FOLDER defaults to ``renders/``.  The window is rendered at the sizes it
must work at, a 1366 x 768 laptop screen and 1024 x 700 (one subfolder
each, ``1366x768/`` and ``1024x700/``), with each page in front (scan and
curve, lot archive, trend, lot comparison, processor QC): first as a new
user meets it, empty, on an archive that does not exist yet
(``empty-*.png``), then filled, over the demo archive built as
``stripscan demo`` builds it (in a scratch folder).  Each part and dialog
is then drawn on its own.  ``--docs`` also writes the documentation's
screenshots to ``docs/screens/`` (``main-window.png``, ``archive.png``,
``comparison.png``, ``qc.png``, at 1366 x 768, each kept under 300 KB).
No display is needed: Qt's offscreen platform is used unless one is set.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from PySide6.QtCore import Qt  # noqa: E402
from PySide6.QtGui import QImage  # noqa: E402
from PySide6.QtWidgets import QApplication, QWidget  # noqa: E402

from stripscan.gui.app import make_app, open_demo  # noqa: E402
from stripscan.gui.main_window import MainWindow  # noqa: E402
from stripscan.gui.settings import AppSettings  # noqa: E402

DOCS = ROOT / "docs" / "screens"
DOCS_LIMIT = 300_000
# Window renders that also go to the documentation, by page.
DOCS_PAGES = {"scan": "main-window.png", "archive": "archive.png", "comparison": "comparison.png", "qc": "qc.png"}


def _settle(app: QApplication, runner=None, seconds: float = 30.0) -> None:
    """Let queued work and repaints finish."""
    end = time.monotonic() + seconds
    while runner is not None and runner.busy and time.monotonic() < end:
        app.processEvents()
        time.sleep(0.01)
    for _ in range(5):
        app.processEvents()
        time.sleep(0.02)


def _save(widget: QWidget, path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    if not widget.grab().save(str(path)):
        raise OSError(f"{path}: could not be written")
    return path


def save_small(widget: QWidget, path: Path, limit: int = DOCS_LIMIT) -> Path:
    """Save a screenshot under ``limit`` bytes, reducing to 256 colours when needed."""
    _save(widget, path)
    if path.stat().st_size > limit:
        try:
            from PIL import Image
        except ImportError:
            # Without dithering, flat areas stay flat and compress well.
            flags = Qt.ImageConversionFlag.AvoidDither | Qt.ImageConversionFlag.ThresholdDither
            widget.grab().toImage().convertToFormat(QImage.Format.Format_Indexed8, flags).save(str(path), "PNG", 9)
        else:
            # A palette fitted to the picture keeps the pale shadings their own colour.
            with Image.open(path) as full:
                small = full.convert("RGB").quantize(256, method=Image.Quantize.MEDIANCUT,
                                                     dither=Image.Dither.NONE)
            small.save(path, optimize=True)
    if path.stat().st_size > limit:
        raise OSError(f"{path}: {path.stat().st_size} bytes, over the {limit}-byte limit")
    return path


#: The window sizes it must work at: a laptop screen, and the least it must stay usable at.
SIZES = ((1366, 768), (1024, 700))
PAGE_FILES = (("scan", "main-window.png"), ("archive", "archive.png"), ("trend", "trend.png"),
              ("comparison", "comparison.png"), ("qc", "qc.png"))


def _pages(app: QApplication, window: MainWindow, folder: Path, prefix: str = "") -> list[Path]:
    written = []
    for page, name in PAGE_FILES:
        window.workspace.show_page(page)
        _settle(app)
        written.append(_save(window, folder / f"{prefix}{name}"))
    window.workspace.show_page("scan")
    _settle(app)
    return written


def render_empty(folder: Path, sizes=SIZES) -> list[Path]:
    """Every page of a first start: no scan, no calibration, an archive not made yet."""
    app = make_app()
    scratch = Path(tempfile.mkdtemp(prefix="stripscan-render-empty-"))
    os.environ["STRIPSCAN_ARCHIVE"] = str(scratch / "archive.sqlite3")
    window = MainWindow(settings=AppSettings(scratch / "settings.ini"))
    window.show()
    written = []
    for width, height in sizes:
        window.resize(width, height)
        _settle(app)
        written += _pages(app, window, folder / f"{width}x{height}", "empty-")
    dialog = window.open_calibration_assistant()
    dialog.resize(*sizes[0])
    _settle(app)
    written.append(_save(dialog, folder / "calibration-assistant-empty.png"))
    dialog.reject()
    window.close()
    return written


def render(folder: Path, *, docs: bool = False, sizes=SIZES) -> list[Path]:
    """Render every view; returns the files written."""
    app = make_app()
    written = render_empty(folder, sizes)
    scratch = Path(tempfile.mkdtemp(prefix="stripscan-render-"))
    # Never the user's archive, even for a look: the window starts on the demo's own file.
    os.environ["STRIPSCAN_ARCHIVE"] = str(scratch / "no-user-archive.sqlite3")
    window = MainWindow(settings=AppSettings(scratch / "settings.ini"))
    window.resize(*sizes[0])
    window.show()
    files = open_demo(window, archive_folder=scratch / "demo")
    workspace = window.workspace
    _settle(app, window.runner)
    _settle(app, workspace, seconds=180.0)  # the demo build, then each page's reading of the archive
    session = window.session
    for width, height in reversed(sizes):  # the first size last: the parts below are drawn at it
        window.resize(width, height)
        _settle(app)
        written += _pages(app, window, folder / f"{width}x{height}")
        if docs and (width, height) == sizes[0]:
            for page, name in DOCS_PAGES.items():
                workspace.show_page(page)
                _settle(app)
                written.append(save_small(window, DOCS / name))
    workspace.show_page("scan")
    _settle(app)

    written.append(_save(window.scan_view, folder / "scan-view.png"))
    for k in range(1, len(session.strips)):
        session.set_overlay(k, True)
    window.curve_view.set_gradient_visible(True)
    _settle(app)
    written.append(_save(window.curve_view, folder / "curve-view-overlaid-gradient.png"))
    window.curve_view.set_gradient_visible(False)
    written.append(_save(window.figures, folder / "figures.png"))
    window.tabs.setCurrentWidget(window.step_table)
    _settle(app)
    written.append(_save(window.step_table, folder / "steps.png"))
    window.tabs.setCurrentWidget(window.figures)

    # A step excluded and the outline of a hand-drawn strip, as a user leaves them.
    session.set_excluded(0, 11)
    _settle(app)
    written.append(_save(window.scan_view, folder / "scan-view-step-excluded.png"))
    written.append(_save(window.strips_panel, folder / "strips.png"))

    dialog = window.open_calibration_assistant()
    dialog.resize(1200, 760)
    dialog.set_files(files.tablet_scan, files.certificate)
    dialog.start_fit()
    _settle(app, dialog.runner)
    written.append(_save(dialog, folder / "calibration-assistant.png"))
    dialog.reject()

    save = workspace.save_to_archive()
    _settle(app, save)  # the archive's lots, processors and operators are read in a worker thread
    written.append(_save(save, folder / "save-to-archive.png"))
    save.reject()
    workspace.ask_compare_lots()
    _settle(app, workspace)  # the lots are read first, then the form opens
    choice = workspace.dialog
    written.append(_save(choice, folder / "compare-two-lots.png"))
    choice.reject()

    # Without a calibration the banner says so.
    window.use_calibration(None)
    window.open_path(str(files.daily_scans[0][1]))
    _settle(app, window.runner)
    written.append(_save(window, folder / "main-window-direct-mode.png"))
    window.close()
    return written


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("folder", nargs="?", default="renders", help="where to write the PNG files (default renders/)")
    parser.add_argument("--docs", action="store_true",
                        help=f"also write the screenshots in {DOCS.relative_to(ROOT)}/: "
                             + ", ".join(DOCS_PAGES.values()))
    args = parser.parse_args(argv)
    for path in render(Path(args.folder), docs=args.docs):
        print(f"{path}  ({path.stat().st_size // 1024} KB)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
