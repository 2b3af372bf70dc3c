"""The short form that picks which lots to compare."""

from __future__ import annotations

from collections.abc import Sequence

from PySide6.QtCore import Signal
from PySide6.QtWidgets import QComboBox, QDialog, QDialogButtonBox, QFormLayout, QLabel, QVBoxLayout, QWidget

from stripscan import CAUTION

__all__ = ["LotChoiceDialog", "caution_label"]


def caution_label() -> QLabel:
    """The caution, wrapped and in the colour the panels give it."""
    label = QLabel(CAUTION)
    label.setWordWrap(True)
    label.setStyleSheet("color: #6d4c00; font-style: italic")
    return label


class LotChoiceDialog(QDialog):
    """Pick the lots to compare: a reference lot A and a lot B, or a lot A and the open scan.

    Parameters
    ----------
    lots : sequence of str
        The archive's lots that have snapshots, oldest first.
    scan_name : str, optional
        When given, B is the open scan's strips (named so) and only A is picked.
    parent : QWidget, optional

    Signals
    -------
    chosen(list)
        The lot ids picked, A first.
    """

    chosen = Signal(list)

    def __init__(self, lots: Sequence[str], *, scan_name: str | None = None, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Compare a lot with this scan" if scan_name else "Compare two lots")
        intro = QLabel("Every current snapshot of a lot counts as one strip of its set. Differences are "
                       "B − A; a negative speed-point shift means B needs less exposure (B is faster).")
        intro.setWordWrap(True)
        self.lot_a = QComboBox()
        self.lot_a.addItems(list(lots))
        self.lot_b: QComboBox | None = None
        form = QFormLayout()
        form.addRow("Reference lot (A):", self.lot_a)
        if scan_name is None:
            self.lot_b = QComboBox()
            self.lot_b.addItems(list(lots))
            self.lot_b.setCurrentIndex(min(1, len(lots) - 1))
            form.addRow("Lot to compare (B):", self.lot_b)
        else:
            form.addRow("Compared with (B):", QLabel(scan_name))
        self.problem = QLabel()
        self.problem.setStyleSheet("color: #b71c1c")
        self.buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel)
        self.buttons.button(QDialogButtonBox.StandardButton.Ok).setText("Compare")
        self.buttons.accepted.connect(self.accept)
        self.buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addWidget(intro)
        layout.addLayout(form)
        layout.addWidget(self.problem)
        layout.addWidget(caution_label())
        layout.addWidget(self.buttons)
        self.resize(480, self.sizeHint().height())

    def choice(self) -> list[str]:
        """The lots picked, A first."""
        return [self.lot_a.currentText()] + ([self.lot_b.currentText()] if self.lot_b is not None else [])

    def accept(self) -> None:
        lots = self.choice()
        if len(set(lots)) != len(lots):
            self.problem.setText("Choose two different lots.")
            return
        self.chosen.emit(lots)
        super().accept()
