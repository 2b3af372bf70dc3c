"""A line over the pages that says what was just stored or written, with the path and a way to open it.

The status bar's messages pass in a few seconds and are easily missed; a
stored snapshot or a written report deserves a line that stays until the
next one (or until closed), and never blocks the window as a message box
would.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

from PySide6.QtCore import Qt, QUrl
from PySide6.QtGui import QDesktopServices
from PySide6.QtWidgets import QFrame, QHBoxLayout, QLabel, QPushButton, QToolButton, QWidget

__all__ = ["NoticeBar"]


class NoticeBar(QFrame):
    """A green line with what was done, up to two buttons for what follows, and a close button.

    Attributes
    ----------
    label : QLabel
    buttons : list of QPushButton
        The buttons of the notice shown.
    warning : bool
        Whether the notice shown says something went wrong (amber, not green).
    """

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.warning = False
        self.setObjectName("notice")
        self._style(warning=False)
        self.label = QLabel()
        self.label.setWordWrap(True)
        self.label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.buttons: list[QPushButton] = []
        self._row = QHBoxLayout(self)
        self._row.setContentsMargins(8, 3, 4, 3)
        self._row.addWidget(self.label, 1)
        close = QToolButton()
        close.setText("×")
        close.setToolTip("Close this line")
        close.setAutoRaise(True)
        close.clicked.connect(self.hide)
        self._close = close
        self._row.addWidget(close)
        self.hide()

    def _style(self, *, warning: bool) -> None:
        self.warning = warning
        background, border, ink = ("#fff3cd", "#e0a800", "#3b2a00") if warning else ("#e3f1e4", "#6aa56d", "#1b3d1d")
        self.setStyleSheet(f"QFrame#notice {{ background: {background}; border: 1px solid {border}; }}"
                           f" QLabel {{ color: {ink}; }}")

    def show_notice(self, text: str, actions: list[tuple[str, Callable[[], object]]] = (), *,
                    warning: bool = False) -> None:
        """Show ``text`` with a button per ``(title, callback)``; ``warning``: in amber, for what went wrong."""
        self._style(warning=warning)
        for button in self.buttons:
            self._row.removeWidget(button)
            button.deleteLater()
        self.buttons = []
        self.label.setText(text)
        for title, callback in actions:
            button = QPushButton(title)
            button.clicked.connect(lambda checked=False, c=callback: c())
            self._row.insertWidget(self._row.count() - 1, button)
            self.buttons.append(button)
        self.show()

    def show_file(self, text: str, path: str | Path) -> None:
        """Say a file was written, with buttons to open it and its folder."""
        path = Path(path)
        self.show_notice(f"{text}: {path}", [("Open it", lambda: _open(path)), ("Show folder", lambda: _open(path.parent))])


def _open(path: Path) -> bool:
    return QDesktopServices.openUrl(QUrl.fromLocalFile(str(path)))
