"""The short form that makes a processor, and the density field it and the QC forms share."""

from __future__ import annotations

from typing import Any

from PySide6.QtGui import QDoubleValidator
from PySide6.QtWidgets import (
    QCheckBox,
    QDialog,
    QDialogButtonBox,
    QFormLayout,
    QLabel,
    QLineEdit,
    QVBoxLayout,
)

from stripscan.core.qc.records import QCLimits

__all__ = ["DensityEdit", "NewProcessorDialog", "show_result"]


def show_result(label: QLabel, text: str, *, ok: bool) -> None:
    """Say under a button what became of a store: green when stored, red "Not stored: …" when refused."""
    label.setStyleSheet("color: #1b5e20" if ok else "color: #b71c1c")
    label.setText(text if ok else f"Not stored: {text}")


class DensityEdit(QLineEdit):
    """A density typed in OD (0 to 5, to 0.001), empty until one is typed.

    The QC log cannot be changed, so a field never starts with a value the
    user did not type: an empty field shows ``placeholder`` in grey and
    :meth:`value` gives None for it.
    """

    def __init__(self, label: str, placeholder: str) -> None:
        super().__init__()
        self.label = label
        validator = QDoubleValidator(0.0, 5.0, 3, self)
        validator.setNotation(QDoubleValidator.Notation.StandardNotation)
        self.setValidator(validator)
        self.setPlaceholderText(placeholder)

    def value(self) -> float | None:
        """The typed density, OD; None when the field is empty.

        Raises
        ------
        ValueError
            A text that is not a density from 0 to 5 OD (the validator lets
            such text stand while it is being typed).
        """
        text = self.text().strip()
        if not text:
            return None
        number, ok = self.validator().locale().toDouble(text)
        if not ok or not self.hasAcceptableInput():
            raise ValueError(f"{self.label} {text!r} is not a density from 0 to 5 OD to 0.001")
        return number

    def setValue(self, value: float | None) -> None:  # noqa: N802 (Qt's name, as a spin box has)
        """Show ``value`` to 0.001 OD, or empty the field for None."""
        self.setText("" if value is None else self.validator().locale().toString(value, "f", 3))



class NewProcessorDialog(QDialog):
    """The short form that makes a processor: its name, QC film type and limits.

    Parameters
    ----------
    panel : QcPanel
        Where the processor is stored and then shown; the form closes once
        it is stored (in a worker thread) and says a refusal in :attr:`message`.
    """

    def __init__(self, panel: Any) -> None:
        super().__init__(panel)
        self.setWindowTitle("New processor")
        self.panel = panel
        self.name_edit = QLineEdit()
        self.name_edit.setPlaceholderText("required, e.g. the room it stands in")
        self.film_edit = QLineEdit()
        self.film_edit.setPlaceholderText("optional: the film the daily QC strips are cut from")
        defaults = QCLimits()
        self.action_edit = DensityEdit("control limit", f"{defaults.md_dd_action:.2f}")
        self.action_edit.setValue(defaults.md_dd_action)
        self.action_edit.setToolTip("± OD around the operating level for mid-density and density difference "
                                    "(21 CFR 900.12(e)(1): 0.15)")
        self.warning_check = QCheckBox("Warning tier ±")
        self.warning_check.setChecked(defaults.md_dd_warning is not None)
        self.warning_edit = DensityEdit("warning tier", "0.10")
        self.warning_edit.setValue(defaults.md_dd_warning)
        self.warning_check.toggled.connect(self.warning_edit.setEnabled)
        self.fog_edit = DensityEdit("base+fog limit", f"{defaults.base_fog_action:.2f}")
        self.fog_edit.setValue(defaults.base_fog_action)
        self.fog_edit.setToolTip("How far base+fog may rise above its operating level (21 CFR 900.12(e)(1): 0.03)")
        form = QFormLayout()
        form.addRow("Name *", self.name_edit)
        form.addRow("QC film type", self.film_edit)
        form.addRow("Control limit ± (OD)", self.action_edit)
        form.addRow(self.warning_check, self.warning_edit)
        form.addRow("Base+fog rise limit (OD)", self.fog_edit)
        self.message = QLabel("The first five days set the operating levels; * required.")
        self.message.setWordWrap(True)
        self.buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel)
        self.buttons.button(QDialogButtonBox.StandardButton.Ok).setText("Create processor")
        self.buttons.accepted.connect(self.create)
        self.buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addLayout(form)
        layout.addWidget(self.message)
        layout.addWidget(self.buttons)

    def limits(self) -> QCLimits:
        """The limits typed, checked by the core's own record."""
        defaults = QCLimits()
        action = self.action_edit.value()
        fog = self.fog_edit.value()
        warning = self.warning_edit.value() if self.warning_check.isChecked() else None
        if self.warning_check.isChecked() and warning is None:
            raise ValueError("type the warning tier, or untick it")
        return QCLimits(md_dd_action=defaults.md_dd_action if action is None else action, md_dd_warning=warning,
                        base_fog_action=defaults.base_fog_action if fog is None else fog)

    def create(self) -> bool:
        """Have the panel store the processor; True when the store was started (a refusal is said in the form)."""
        try:
            limits = self.limits()
        except ValueError as exc:
            show_result(self.message, str(exc), ok=False)
            return False
        return self.panel.create_processor(self.name_edit.text(), film_type=self.film_edit.text(), limits=limits,
                                           message=self.message)
