"""The list of strips on the scan: select one, overlay others, set the step count."""

from __future__ import annotations

from PySide6.QtCore import QSize, Qt, QTimer, Signal
from PySide6.QtGui import QColor, QIcon, QPixmap
from PySide6.QtWidgets import (
    QFormLayout,
    QHBoxLayout,
    QLabel,
    QListWidget,
    QListWidgetItem,
    QPushButton,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from stripscan.gui.models.session import Session
from stripscan.gui.style import strip_colour

__all__ = ["StripsPanel"]


def _dot(colour: str) -> QIcon:
    pixmap = QPixmap(12, 12)
    pixmap.fill(QColor(colour))
    return QIcon(pixmap)


class StripsPanel(QWidget):
    """Strips of the open scan.

    A tick draws the strip on the curve together with the selected one.

    Signals
    -------
    draw_requested, find_requested
        The user asked to draw a strip by hand / search the scan again.
    """

    draw_requested = Signal()
    find_requested = Signal()

    def __init__(self, session: Session, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.session = session
        self.list = QListWidget()
        self.list.setToolTip("Click to select a strip; tick to draw it on the curve as well")
        # Long lines wrap in the narrow dock instead of hiding behind a scroll bar.
        self.list.setWordWrap(True)
        self.list.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.list.setResizeMode(QListWidget.ResizeMode.Adjust)
        self.list.currentRowChanged.connect(self._row_changed)
        self.list.itemChanged.connect(self._item_changed)
        self.steps = QSpinBox()
        self.steps.setRange(2, 60)
        self.steps.setToolTip("Number of steps on the selected strip; the band is divided evenly")
        self.steps.valueChanged.connect(self._steps_changed)
        self.details = QLabel()
        self.details.setWordWrap(True)
        self.details.setStyleSheet("color: #555555")
        self.draw_button = QPushButton("Draw a strip…")
        self.draw_button.setToolTip("Outline a strip by hand with three clicks on the scan")
        self.draw_button.clicked.connect(self.draw_requested)
        self.remove_button = QPushButton("Remove")
        self.remove_button.setToolTip("Remove the selected strip from this scan's results")
        self.remove_button.clicked.connect(self._remove)
        self.find_button = QPushButton("Find again")
        self.find_button.setToolTip("Search the scan for strips again (with the step count set in the settings)")
        self.find_button.clicked.connect(self.find_requested)
        form = QFormLayout()
        form.addRow("Steps on this strip:", self.steps)
        buttons = QHBoxLayout()
        for button in (self.draw_button, self.remove_button, self.find_button):
            buttons.addWidget(button)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        layout.addWidget(self.list, 1)
        layout.addLayout(form)
        layout.addWidget(self.details)
        layout.addLayout(buttons)
        self._filling = False
        session.events.connect_each(self.refresh, "strips_changed", "results_changed", "strip_changed",
                                    "selection_changed", "overlay_changed")
        # While a level is dragged the list's gradients follow a moment later, not every step.
        self._later = QTimer(self, singleShot=True, interval=150)
        self._later.timeout.connect(self.refresh)
        session.events.levels_changed.connect(lambda low, high: self._later.start())
        self.refresh()

    def set_reading(self, name: str | None) -> None:
        """While a new scan is read: the old strips greyed out and the list says which file is coming (None: done)."""
        self.list.setEnabled(name is None)
        for button in (self.draw_button, self.remove_button, self.find_button):
            button.setEnabled(name is None and button.isEnabled())
        if name is not None:
            self.details.setText(f"Reading {name}… the strips shown are the previous scan's until it is read.")
        else:
            self.refresh()

    def sizeHint(self) -> QSize:  # noqa: N802 (Qt's name)
        return QSize(240, 400)

    def refresh(self, *_: object) -> None:
        self._filling = True
        try:
            strips = self.session.strips
            while self.list.count() > len(strips):
                self.list.takeItem(self.list.count() - 1)
            while self.list.count() < len(strips):
                item = QListWidgetItem()
                item.setFlags(item.flags() | Qt.ItemFlag.ItemIsUserCheckable)
                self.list.addItem(item)
            for k, state in enumerate(strips):
                item = self.list.item(k)
                g = state.geometry
                text = f"Strip {k + 1}: {g.n_steps} steps"
                if g.manual:
                    text += ", edited"
                if state.excluded:
                    text += f", {len(state.excluded)} excluded"
                gradient = state.result.figures.average_gradient if state.result else None
                if gradient is not None:
                    text += f" · avg. gradient {gradient:.2f}"
                item.setText(text)
                item.setIcon(_dot(strip_colour(k)))
                shown = k in self.session.overlay or k == self.session.selected
                item.setCheckState(Qt.CheckState.Checked if shown else Qt.CheckState.Unchecked)
            selected = self.session.selected
            self.list.setCurrentRow(-1 if selected is None else selected)
            has = selected is not None
            self.steps.setEnabled(has)
            self.remove_button.setEnabled(has)
            self.draw_button.setEnabled(self.session.scan is not None)
            self.find_button.setEnabled(self.session.scan is not None)
            if has:
                state = strips[selected]
                self.steps.setValue(state.geometry.n_steps)
                g = state.geometry
                pitch = f"{g.step_pitch_px:.1f} px"
                if self.session.scan is not None and self.session.scan.info.pixel_mm:
                    pitch = f"{g.step_pitch_px * self.session.scan.info.pixel_mm:.1f} mm"
                self.details.setText(f"Step length {pitch}, turned {g.angle_deg:.1f}°"
                                     + (", outline set by hand" if g.manual else ""))
            else:
                self.details.setText("Open a scan: strips are found on it by themselves." if self.session.scan is None
                                     else "No strip found: draw one by hand.")
        finally:
            self._filling = False

    def _row_changed(self, row: int) -> None:
        if not self._filling and 0 <= row < len(self.session.strips):
            self.session.select(row)

    def _item_changed(self, item: QListWidgetItem) -> None:
        if self._filling:
            return
        row = self.list.row(item)
        if row == self.session.selected:
            self.refresh()  # the selected strip is always drawn
            return
        self.session.set_overlay(row, item.checkState() == Qt.CheckState.Checked)

    def _steps_changed(self, value: int) -> None:
        if not self._filling and self.session.selected is not None:
            self.session.set_step_count(self.session.selected, value)

    def _remove(self) -> None:
        if self.session.selected is not None:
            self.session.remove_strip(self.session.selected)
