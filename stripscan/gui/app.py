"""Starting the workbench: ``stripscan`` (empty window) and ``stripscan demo``."""

from __future__ import annotations

import logging
import os
import sys
import tempfile
from pathlib import Path
from typing import Sequence

from PySide6.QtWidgets import QApplication

from stripscan.gui.errors import install_excepthook, setup_logging
from stripscan.gui.settings import AppSettings

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
    from stripscan.gui.main_window import MainWindow

    return MainWindow(settings=settings)


def _start(settings: str | os.PathLike[str] | AppSettings | None, log_dir: str | os.PathLike[str] | None):
    app = make_app()
    path = setup_logging(log_dir)
    log.info("stripscan window starting; log at %s", path)
    window = make_window(settings if isinstance(settings, AppSettings) else AppSettings(settings))
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


def open_demo(window, folder: str | os.PathLike[str] | None = None, *,
              archive_folder: str | os.PathLike[str] | None = None):
    """Point ``window`` at the invented demo: its calibration active, lot A's scan opening.

    Parameters
    ----------
    window : MainWindow
    folder : path-like, optional
        Where the demo's files are (made there if missing).
    archive_folder : path-like, optional
        Also build the demo lot archive and QC month there (in a worker
        thread) and point the archive, comparison and QC pages at it.

    Returns the demo's files (:class:`stripscan.sim.demo_data.DemoFiles`).
    """
    from stripscan.sim.demo_data import demo_files

    files = demo_files(folder)
    window.use_calibration_file(str(files.calibration))
    window.open_path(str(files.lot_a_scan))
    if archive_folder is not None:
        window.workspace.build_demo(archive_folder, files)
    return files


def run_demo(folder: str | None = None) -> int:
    """Open the window on the bundled invented scenario, a scan analysed and a calibration active.

    Parameters
    ----------
    folder : str, optional
        The demo's own folder: its files (made there if missing), its
        settings and its lot archive.  By default the files are the
        checkout's ``sample_scans/`` (or a cache folder) and the settings
        and archive go to a new temporary folder.

    The demo lot archive and a month of processor QC are built there in a
    worker thread (progress in the status bar); the archive, comparison and
    QC pages show them when ready.
    """
    from stripscan.gui.jobs import demo_archive_path
    from stripscan.gui.workspace import set_archive_setting

    # The demo keeps its own settings and its own archive in its own folder, so it never changes
    # the user's active calibration nor reads or writes the user's lot archive.
    own = Path(folder) if folder else Path(tempfile.mkdtemp(prefix="stripscan-demo-"))
    own.mkdir(parents=True, exist_ok=True)
    settings = AppSettings(own / "stripscan-demo.ini")
    set_archive_setting(settings, demo_archive_path(own))
    app, window = _start(settings, None)
    window.show()
    files = open_demo(window, own if folder else None, archive_folder=own)
    window.statusBar().showMessage(f"Demo: invented scenario in {files.folder}; its archive in {own}", 10000)
    return int(app.exec())
