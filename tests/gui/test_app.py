"""The entry points the command line calls: ``stripscan`` and ``stripscan demo``."""

from __future__ import annotations

import sys

from PySide6.QtCore import QTimer
from PySide6.QtWidgets import QApplication

from stripscan.gui.app import run_demo, run_gui
from stripscan.gui.main_window import MainWindow


def _close_when(condition, seen: dict, qapp) -> QTimer:
    """Poll the open windows; once ``condition(window)`` holds, note it and close them (ending exec)."""

    def check() -> None:
        windows = [w for w in QApplication.topLevelWidgets() if isinstance(w, MainWindow) and w.isVisible()]
        for window in windows:
            if not window.busy and condition(window):
                seen["strips"] = len(window.session.strips)
                seen["calibrated"] = window.session.calibration is not None
                seen["title"] = window.windowTitle()
                window.close()

    timer = QTimer(qapp)
    timer.timeout.connect(check)
    timer.start(50)
    return timer


def test_run_demo_opens_the_scenario_analysed_and_calibrated(qapp, settings, monkeypatch):
    monkeypatch.setattr(sys, "excepthook", sys.excepthook)  # run_demo installs its guard; put ours back after
    seen: dict = {}
    timer = _close_when(lambda w: len(w.session.strips) > 0, seen, qapp)
    try:
        assert run_demo() == 0
    finally:
        timer.stop()
    assert seen == {"strips": 3, "calibrated": True, "title": "stripscan — lot_M-2610-A_three_strips.tif"}


def test_run_gui_opens_the_window_on_a_scan(qapp, settings, files, monkeypatch):
    monkeypatch.setattr(sys, "excepthook", sys.excepthook)
    seen: dict = {}
    timer = _close_when(lambda w: len(w.session.strips) > 0, seen, qapp)
    try:
        assert run_gui([files.scan]) == 0
    finally:
        timer.stop()
    assert seen["strips"] == 2 and not seen["calibrated"]  # settings in tmp_path: no calibration chosen yet


def test_the_log_and_the_default_archive_share_one_data_folder(tmp_path, monkeypatch):
    """Issue 13, wrong output 8: the window's log goes to ``logs`` in the same user data folder as the default
    archive (``~/.local/share/stripscan``), and the archive stays where existing users have it."""
    from stripscan.archive import default_archive_path
    from stripscan.gui.errors import default_log_dir, setup_logging

    for name in ("STRIPSCAN_LOG_DIR", "STRIPSCAN_ARCHIVE"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setattr(sys, "platform", "linux")
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "share"))
    # XDG base directory specification: $XDG_DATA_HOME/<program>.
    assert default_archive_path() == tmp_path / "share" / "stripscan" / "archive.sqlite3"
    assert default_log_dir() == tmp_path / "share" / "stripscan" / "logs"
    try:
        assert setup_logging() == tmp_path / "share" / "stripscan" / "logs" / "stripscan.log"
    finally:
        setup_logging(tmp_path / "elsewhere")
