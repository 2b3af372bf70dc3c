"""Each page's own actions in the corner of the tab row, only the current page's shown."""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from PySide6.QtCore import Qt
from PySide6.QtGui import QAction
from PySide6.QtWidgets import QHBoxLayout, QMenu, QTabWidget, QToolButton, QWidget

__all__ = ["PageCorner"]


class PageCorner(QWidget):
    """Buttons for the current page's actions, beside the tabs.

    The tab row has room to the right: each page's own actions go there, no
    extra row is taken.  Only the current page's row is shown, and only it
    takes room (a stacked widget is as wide as its widest row, which took
    the tabs' room at 1024 px).

    Parameters
    ----------
    tabs : QTabWidget
        The pages, in the order of ``rows``.
    rows : mapping of page name to actions
        A menu becomes one button that opens it, titled with the menu's title.
    menu_tip : str
        The tooltip of such a button.

    Attributes
    ----------
    buttons : dict of str to list of QToolButton
        Each page's buttons.
    """

    def __init__(self, tabs: QTabWidget, rows: Mapping[str, Sequence[QAction | QMenu]], *, menu_tip: str = "") -> None:
        super().__init__()
        self.tabs = tabs
        stack_layout = QHBoxLayout(self)
        stack_layout.setContentsMargins(0, 0, 0, 0)
        self._rows: list[QWidget] = []
        self.buttons: dict[str, list[QToolButton]] = {}
        for name, items in rows.items():
            row = QWidget()
            layout = QHBoxLayout(row)
            layout.setContentsMargins(0, 2, 4, 2)
            layout.setSpacing(4)
            layout.addStretch(1)
            buttons = []
            for item in items:
                button = QToolButton()
                button.setToolButtonStyle(Qt.ToolButtonStyle.ToolButtonTextOnly)
                if isinstance(item, QMenu):
                    button.setText(item.title())
                    button.setToolTip(menu_tip)
                    button.setMenu(item)
                    button.setPopupMode(QToolButton.ToolButtonPopupMode.InstantPopup)
                else:
                    button.setDefaultAction(item)
                layout.addWidget(button)
                buttons.append(button)
            self.buttons[name] = buttons
            stack_layout.addWidget(row)
            self._rows.append(row)
        tabs.currentChanged.connect(self.follow)
        self.follow(0)

    def follow(self, index: int) -> None:
        """Show the row of page ``index``."""
        for k, row in enumerate(self._rows):
            row.setVisible(k == index)
        # Set again, so that the tab bar gives back or takes the room (Qt hides the widget it replaces).
        self.tabs.setCornerWidget(self, Qt.Corner.TopRightCorner)
        self.show()
