"""The selected strip's figures and its step table.

Both lay out rows made by :mod:`stripscan.gui.views.tables` from the core's
result; the step table copies to the clipboard as tab-separated text and
saves as CSV, and its tick boxes exclude steps from the curve.
"""

from __future__ import annotations

import logging
import os
from pathlib import Path

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QBrush, QColor, QFont, QGuiApplication, QKeySequence, QShortcut
from PySide6.QtWidgets import (
    QAbstractItemView,
    QFileDialog,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QPushButton,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from stripscan.core.figure_settings import FigureSettings
from stripscan.core.records import StripResult
from stripscan.core.figures import NOISE_ONLY_NOTE, read_in_direct_mode
from stripscan.gui.models.session import Session
from stripscan.gui.views.tables import STEP_COLUMNS, figure_rows, step_columns, step_rows, step_table_text
from stripscan.gui.style import caution_label, notes_label

__all__ = ["FiguresPanel", "StepTable", "VALUE_ROLE"]

log = logging.getLogger(__name__)

#: Item data role holding the core's unrounded number behind a shown value.
VALUE_ROLE = Qt.ItemDataRole.UserRole + 1


def _read_only(text: str, tooltip: str = "") -> QTableWidgetItem:
    item = QTableWidgetItem(text)
    item.setFlags(Qt.ItemFlag.ItemIsEnabled | Qt.ItemFlag.ItemIsSelectable)
    if tooltip:
        item.setToolTip(tooltip)
    return item


class FiguresPanel(QWidget):
    """Every figure of the selected strip, with unit and a one-line definition."""

    def __init__(self, session: Session, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.session = session
        self.title = QLabel()
        bold = QFont()
        bold.setBold(True)
        self.title.setFont(bold)
        self.table = QTableWidget(0, 3)
        self.table.setHorizontalHeaderLabels(["Figure", "Value", "Unit"])
        self.table.verticalHeader().hide()
        self.table.verticalHeader().setDefaultSectionSize(22)
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        header = self.table.horizontalHeader()
        header.setSectionResizeMode(0, QHeaderView.ResizeMode.Stretch)
        header.setSectionResizeMode(1, QHeaderView.ResizeMode.ResizeToContents)
        header.setSectionResizeMode(2, QHeaderView.ResizeMode.ResizeToContents)
        self.notes = notes_label()
        self.caution = caution_label()
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        layout.addWidget(self.title)
        layout.addWidget(self.table, 1)
        layout.addWidget(self.notes)
        layout.addWidget(self.caution)
        session.events.connect_each(self.refresh, *session.events.RESULT_EVENTS)
        self.refresh()

    def refresh(self, *_: object) -> None:
        result = self.session.result()
        rows = figure_rows(result.figures if result else None, self.session.levels)
        self.title.setText(f"Figures of strip {result.index}" if result else "Figures")
        if self.table.rowCount() != len(rows):
            self._make_rows(len(rows))
        # Cells are rewritten in place: a level drag refreshes this many times a second.
        for k, row in enumerate(rows):
            name, value, unit = (self.table.item(k, col) for col in range(3))
            name.setText(row.label)
            name.setData(VALUE_ROLE, row.key)
            value.setText(row.text)
            value.setData(VALUE_ROLE, row.value)
            unit.setText(row.unit or "—")
            for item in (name, value, unit):
                item.setToolTip(row.definition)
        notes = list(result.warnings) if result else list(self.session.search_notes)
        self.notes.setText("\n".join(f"• {n}" for n in notes))
        self.notes.setVisible(bool(notes))

    def _make_rows(self, count: int) -> None:
        self.table.setRowCount(count)
        for k in range(count):
            for col in range(3):
                item = _read_only("")
                if col == 1:
                    item.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
                self.table.setItem(k, col, item)

    def value_of(self, key: str) -> float | None:
        """The core's number behind the row for figure ``key``."""
        for k in range(self.table.rowCount()):
            if self.table.item(k, 0).data(VALUE_ROLE) == key:
                return self.table.item(k, 1).data(VALUE_ROLE)
        raise KeyError(key)

    def text_of(self, key: str) -> str:
        """The shown text of figure ``key``."""
        for k in range(self.table.rowCount()):
            if self.table.item(k, 0).data(VALUE_ROLE) == key:
                return self.table.item(k, 1).text()
        raise KeyError(key)


def _step_key(result: StripResult | None) -> str:
    """What the tick and the flags of the step table mean, with the targets the strip was read with."""
    defaults = FigureSettings()
    given = result.figures.settings if result is not None else {}

    def target(name: str) -> float:
        return float(given.get(name, getattr(defaults, name)))

    return (f"Ticked: on the curve (untick to leave a step off). MD: mid-density step (closest to "
            f"{target('mid_density_target'):.2f} OD); DD high, DD low: the steps of the density difference "
            f"(closest to {target('dd_high_target'):.2f} and {target('dd_low_target'):.2f} OD); not used: outside "
            "the calibrated range, too noisy or saturated (the notes say which); excluded: left off by you.")


class StepTable(QWidget):
    """Step, log E, OD, uncertainty and flag of each step of the selected strip.

    Signals
    -------
    saved(str)
        Path of a CSV file just written.
    """

    saved = Signal(str)

    def __init__(self, session: Session, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.session = session
        self.table = QTableWidget(0, len(STEP_COLUMNS))
        self.table.setHorizontalHeaderLabels(list(STEP_COLUMNS))
        self.table.verticalHeader().hide()
        self.table.verticalHeader().setDefaultSectionSize(22)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.setToolTip("Untick a step to leave it off the curve (dust, a scratch); tick it to use it again.")
        self.table.itemChanged.connect(self._item_changed)
        self.copy_button = QPushButton("Copy table")
        self.copy_button.setToolTip("Copy the whole table as tab-separated text (Ctrl+C in the table)")
        self.copy_button.clicked.connect(self.copy)
        self.save_button = QPushButton("Save as CSV…")
        self.save_button.clicked.connect(self._ask_save)
        QShortcut(QKeySequence.StandardKey.Copy, self.table, self.copy,
                  context=Qt.ShortcutContext.WidgetWithChildrenShortcut)
        #: What the tick and the flags mean (the flags' words are figure_table.step_flag's).
        self.key = QLabel()
        self.key.setWordWrap(True)
        self.key.setStyleSheet("color: #555555; font-size: 8pt")
        buttons = QHBoxLayout()
        buttons.addWidget(self.key, 1)
        buttons.addWidget(self.copy_button)
        buttons.addWidget(self.save_button)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        layout.addWidget(self.table, 1)
        layout.addLayout(buttons)
        self._filling = False
        # The figures follow the levels; the steps do not.
        session.events.connect_each(self.refresh, "strips_changed", "results_changed", "strip_changed",
                                    "selection_changed")
        self.refresh()

    def refresh(self, *_: object) -> None:
        result = self.session.result()
        rows = step_rows(result)
        # Read without a calibration, the uncertainty column holds the reading noise only: its title says so.
        self.table.setHorizontalHeaderLabels(list(step_columns(result)))
        column = STEP_COLUMNS.index("Uncertainty (OD)")
        self.table.horizontalHeaderItem(column).setToolTip(NOISE_ONLY_NOTE if read_in_direct_mode(result) else "")
        self._filling = True
        try:
            self.table.setRowCount(len(rows))
            for k, cells in enumerate(rows):
                step = result.steps[k]  # type: ignore[union-attr]
                colour = None
                if step.excluded:
                    colour = QColor("#9e9e9e")
                elif not step.in_range:
                    colour = QColor("#b35c00")
                for col, text in enumerate(cells):
                    item = _read_only(text)
                    if col == 0 and not step.excluded and not step.in_range:
                        # The program keeps it off the curve: no tick, and none to give (its flag says why).
                        item.setFlags(item.flags() & ~Qt.ItemFlag.ItemIsEnabled)
                        item.setCheckState(Qt.CheckState.Unchecked)
                        item.setToolTip(f"Step {step.step} is not on the curve: {cells[-1]}; it cannot be ticked.")
                        item.setData(VALUE_ROLE, step.step)
                    elif col == 0:
                        item.setFlags(item.flags() | Qt.ItemFlag.ItemIsUserCheckable)
                        item.setCheckState(Qt.CheckState.Unchecked if step.excluded else Qt.CheckState.Checked)
                        item.setData(VALUE_ROLE, step.step)
                    elif col > 0:
                        item.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
                    if col == len(cells) - 1:
                        item.setTextAlignment(Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignVCenter)
                    if colour is not None:
                        item.setForeground(QBrush(colour))
                    self.table.setItem(k, col, item)
        finally:
            self._filling = False
        enabled = result is not None
        self.copy_button.setEnabled(enabled)
        self.save_button.setEnabled(enabled)
        self.key.setText(_step_key(result))

    def _item_changed(self, item: QTableWidgetItem) -> None:
        if self._filling or item.column() != 0 or self.session.selected is None:
            return
        step = item.data(VALUE_ROLE)
        use = item.checkState() == Qt.CheckState.Checked
        self.session.set_excluded(self.session.selected, int(step), not use)

    def set_step_used(self, step: int, used: bool) -> None:
        """Tick or untick a step's box, as a click would."""
        self.table.item(step - 1, 0).setCheckState(Qt.CheckState.Checked if used else Qt.CheckState.Unchecked)

    def text(self, delimiter: str = "\t") -> str:
        return step_table_text(self.session.result(), delimiter=delimiter)

    def copy(self) -> None:
        """Put the table on the clipboard as tab-separated text."""
        QGuiApplication.clipboard().setText(self.text("\t"))

    def save_csv(self, path: str | os.PathLike[str]) -> Path:
        """Write the table as CSV; raises OSError with the file named."""
        path = Path(path)
        try:
            path.write_text(self.text(","), encoding="utf-8")
        except OSError as exc:
            raise OSError(f"{path}: cannot be written ({exc.strerror or exc})") from None
        log.info("step table saved to %s", path)
        self.saved.emit(str(path))
        return path

    def _ask_save(self) -> None:
        result = self.session.result()
        scan = self.session.scan
        stem = Path(scan.info.path).stem if scan else "steps"
        default = str(Path(scan.info.path).with_name(f"{stem}_strip{result.index if result else 1}_steps.csv")) \
            if scan else "steps.csv"
        path, _ = QFileDialog.getSaveFileName(self, "Save the step table", default, "CSV files (*.csv)")
        if path:
            try:
                self.save_csv(path)
            except OSError as exc:
                from stripscan.gui.errors import report_error

                report_error(self, "The step table was not saved", exc)
