"""Errors reach the user as a message and the log file, never as a crash."""

from __future__ import annotations

import logging
import logging.handlers
import os
import sys
import traceback
from pathlib import Path
from types import TracebackType
from typing import Callable

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QApplication, QMessageBox, QWidget

from stripscan.archive import user_data_folder
from stripscan.gui.models.location import connection_lost

__all__ = ["LOG_FILE_NAME", "default_log_dir", "setup_logging", "log_file", "show_message", "report_error",
           "install_excepthook", "excepthook_guard"]

log = logging.getLogger("stripscan.gui")

LOG_FILE_NAME = "stripscan.log"
_handler: logging.Handler | None = None


def default_log_dir() -> Path:
    """``$STRIPSCAN_LOG_DIR``, else ``logs`` beside the default archive, in the one user data folder.

    (``~/.local/share/stripscan/logs`` on Linux: see
    :func:`stripscan.archive.user_data_folder`.)
    """
    env = os.environ.get("STRIPSCAN_LOG_DIR")
    if env:
        return Path(env)
    return user_data_folder() / "logs"


def setup_logging(folder: str | os.PathLike[str] | None = None) -> Path:
    """Send the program's log (and every error) to ``folder/stripscan.log``.

    Calling it again moves the log; the file rotates at 1 MB, three kept.
    """
    global _handler
    folder = Path(folder) if folder is not None else default_log_dir()
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / LOG_FILE_NAME
    root = logging.getLogger("stripscan")
    if _handler is not None:
        root.removeHandler(_handler)
        _handler.close()
    _handler = logging.handlers.RotatingFileHandler(path, maxBytes=1_000_000, backupCount=3, encoding="utf-8")
    _handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(name)s: %(message)s"))
    root.addHandler(_handler)
    root.setLevel(logging.INFO)
    return path


def log_file() -> Path | None:
    """Where the log goes, or None before :func:`setup_logging`."""
    return Path(_handler.baseFilename) if isinstance(_handler, logging.FileHandler) else None


def show_message(
    parent: QWidget | None,
    title: str,
    text: str,
    *,
    icon: QMessageBox.Icon = QMessageBox.Icon.Warning,
    details: str | None = None,
) -> QMessageBox:
    """Show a message without blocking the window (it stays responsive behind it).

    Returns the box, which deletes itself when closed.
    """
    box = QMessageBox(icon, title, text, QMessageBox.StandardButton.Ok, parent)
    box.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
    box.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
    if details:
        box.setDetailedText(details)
    box.open()
    return box


def report_error(parent: QWidget | None, title: str, error: BaseException) -> QMessageBox | None:
    """Log ``error`` and show its message (ours already name the file and the problem).

    A lost connection to a server archive is said once by the window's line
    over the pages (see ``MainWindow.shows_lost_connection``), not in a box
    per page that failed: then None is returned.
    """
    log.error("%s: %s", title, error)
    window = parent.window() if parent is not None else None
    if connection_lost(error) and getattr(window, "shows_lost_connection", False):
        return None
    return show_message(parent, title, str(error) or type(error).__name__)


def excepthook_guard(
    parent: Callable[[], QWidget | None],
) -> Callable[[type[BaseException], BaseException, TracebackType | None], None]:
    """An excepthook that logs the traceback and tells the user, instead of dying."""

    def hook(kind: type[BaseException], error: BaseException, tb: TracebackType | None) -> None:
        if issubclass(kind, KeyboardInterrupt):
            sys.__excepthook__(kind, error, tb)
            return
        text = "".join(traceback.format_exception(kind, error, tb))
        log.error("unexpected error\n%s", text)
        where = log_file()
        more = f"\n\nThe details are in {where}." if where else ""
        if QApplication.instance() is not None:
            show_message(
                parent(),
                "Something went wrong",
                f"An unexpected error occurred: {error}{more}\nYour work so far is kept; you can go on.",
                icon=QMessageBox.Icon.Critical,
                details=text,
            )
        else:
            sys.__excepthook__(kind, error, tb)

    return hook


def install_excepthook(parent: Callable[[], QWidget | None]) -> None:
    """Route uncaught exceptions (e.g. in slots) to :func:`excepthook_guard`."""
    sys.excepthook = excepthook_guard(parent)
