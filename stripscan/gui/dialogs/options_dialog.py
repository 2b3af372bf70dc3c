"""Analysis settings: step increment, fixed step count and the calibration age limit."""

from __future__ import annotations

import dataclasses

from PySide6.QtWidgets import QDialog, QDialogButtonBox, QDoubleSpinBox, QFormLayout, QLabel, QSpinBox, QWidget

from stripscan.core.reading import AnalysisOptions

__all__ = ["OptionsDialog"]


class OptionsDialog(QDialog):
    """Edit the settings that apply to every strip of every scan.

    Parameters
    ----------
    options : AnalysisOptions
    max_age_days : float
    """

    def __init__(self, options: AnalysisOptions, max_age_days: float, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Analysis settings")
        self._options = options
        self.increment = QDoubleSpinBox()
        self.increment.setDecimals(3)
        self.increment.setRange(0.01, 1.0)
        self.increment.setSingleStep(0.005)
        self.increment.setValue(options.increment)
        self.increment.setToolTip("Log relative exposure between neighbouring steps of the sensitometer "
                                  "(0.15 for the common √2 step tablet)")
        self.n_steps = QSpinBox()
        # A strip has at least two steps: the lowest value, 1, stands for "count them".
        self.n_steps.setRange(1, 60)
        self.n_steps.setSpecialValueText("count them")
        self.n_steps.setValue(options.n_steps or 1)
        self.n_steps.setToolTip("Step count used when strips are searched for; 'count them' lets the search decide")
        self.max_age = QDoubleSpinBox()
        self.max_age.setDecimals(0)
        self.max_age.setRange(1, 3650)
        self.max_age.setSuffix(" days")
        self.max_age.setValue(max_age_days)
        self.max_age.setToolTip("A calibration older than this is flagged above the scan")
        form = QFormLayout(self)
        form.addRow("Log exposure per step:", self.increment)
        form.addRow("Steps per strip when searching:", self.n_steps)
        form.addRow("Calibration is old after:", self.max_age)
        note = QLabel("The density levels of the average gradient are set by dragging them on the curve.")
        note.setWordWrap(True)
        form.addRow(note)
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        form.addRow(buttons)

    def options(self) -> AnalysisOptions:
        """The options as edited."""
        return dataclasses.replace(
            self._options, increment=float(self.increment.value()),
            n_steps=int(self.n_steps.value()) if self.n_steps.value() >= 2 else None
        )

    def max_age_days(self) -> float:
        return float(self.max_age.value())
