"""Starting the workbench: ``stripscan`` (empty window) and ``stripscan demo``."""

from __future__ import annotations

import logging
import os
import sys
import tempfile
from pathlib import Path
from typing import Sequence

from PySide6.QtWidgets import QApplication

from .errors import install_excepthook, setup_logging
from .settings import AppSettings

__all__ = ["make_app", "make_window", "run_gui", "run_demo", "open_demo"]

log = logging.getLogger(__name__)


def make_app(argv: Sequence[str] | None = None) -> QApplication:
    """The QApplication (made once), named so QSettings and the log find their places."""
    app = QApplication.instance()
    if app is None:
        app = QApplication(list(argv) if argv is not None else sys.argv[:1])
    app.setApplicationName("stripscan")
    app.setOrganizationName("stripscan")
    return app  # type: ignore[return-value]


def make_window(settings: AppSettings | None = None):
    """A main window (the QApplication must exist)."""
    from .main_window import MainWindow

    return MainWindow(settings=settings)


def _start(settings_path: str | os.PathLike[str] | None, log_dir: str | os.PathLike[str] | None):
    app = make_app()
    path = setup_logging(log_dir)
    log.info("stripscan window starting; log at %s", path)
    window = make_window(AppSettings(settings_path))
    install_excepthook(lambda: QApplication.activeWindow() or window)
    return app, window


def run_gui(
    paths: Sequence[str | os.PathLike[str]] = (),
    *,
    settings_path: str | os.PathLike[str] | None = None,
    log_dir: str | os.PathLike[str] | None = None,
) -> int:
    """Open the main window (optionally on scans) and run until it closes.

    Returns
    -------
    int
        The exit status (0).
    """
    app, window = _start(settings_path, log_dir)
    window.show()
    for path in paths:
        window.open_path(path)
    return int(app.exec())


def open_demo(window, folder: str | os.PathLike[str] | None = None):
    """Point ``window`` at the invented demo: its calibration active, lot A's scan opening.

    Returns the demo's files (:class:`stripscan.demo_data.DemoFiles`).
    """
    from ..demo_data import demo_files

    files = demo_files(folder)
    window.use_calibration_file(str(files.calibration))
    window.open_path(str(files.lot_a_scan))
    return files


def run_demo(folder: str | None = None) -> int:
    """Open the window on the bundled invented scenario, a scan analysed and a calibration active.

    Parameters
    ----------
    folder : str, optional
        Where the demo's files are (made there if missing); default the
        checkout's ``sample_scans/`` or a cache folder.
    """
    # The demo keeps its own settings, so it never changes the user's active calibration.
    settings = Path(folder) / "stripscan-demo.ini" if folder else Path(tempfile.mkdtemp(prefix="stripscan-demo-")) / "settings.ini"
    app, window = _start(settings, None)
    window.show()
    files = open_demo(window, Path(folder) if folder else None)
    window.statusBar().showMessage(f"Demo: invented scenario in {files.folder}", 10000)
    return int(app.exec())
