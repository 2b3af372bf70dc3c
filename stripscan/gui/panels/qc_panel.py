"""The processor QC panel: a processor's deviation plots, today's status, and forms for a typed day and a correction.

A standalone ``QWidget`` over the archive file: it opens the archive for
each read or write and keeps no connection, so the command line (or
another window) may write meanwhile; :meth:`QcPanel.refresh` shows what is
stored now.  Every number and verdict comes from :mod:`stripscan.services.qc_log`
and the pure core; the panel only draws them, with the same marks as the
PNG chart (:data:`stripscan.render.qc_chart.MARKS`: shape *and* colour).  Entries
kept but not used are drawn as the chart draws them: a strip repeated the
same day hollow, a value corrected afterwards as a grey cross.

A processor is made on the panel ("New processor…": its name, the QC film
it is checked with and its limits).  The typed-day form stores a day's
strip, or a repeat strip of the latest day, from values typed in or read
off a strip of the scan open in the window (:attr:`QcPanel.scan_source`); the correction form stores the right values of an entry (typed by its
number, or picked by clicking its point) with the reason it was wrong.  The
log cannot be changed, so no number field starts with a value the user did
not type or the chosen entry does not hold: the day's three fields start
empty and are all required.  A refused entry is explained under its
button; nothing is stored then.
"""

from __future__ import annotations

import datetime
import html
import logging
import os
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pyqtgraph as pg
from PySide6.QtCore import QDate, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QDoubleValidator, QPen
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDateEdit,
    QDialog,
    QDialogButtonBox,
    QFormLayout,
    QGraphicsRectItem,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from stripscan import CAUTION
from stripscan.render import qtguard  # noqa: F401  (before any signal is emitted)
from stripscan.archive import Archive, ArchiveError, Processor
from stripscan.archive import QcEntry as StoredEntry
from stripscan.core.qc.rules import QUANTITIES, QCLimits, QCValues
from stripscan.core.records import Analysis
from stripscan.render.qc_chart import (
    BANDS,
    BASELINE_COLOUR,
    BASELINE_OPACITY,
    CORRECTED_COLOUR,
    EVENT_COLOUR,
    LEGEND,
    LEVEL_LINE,
    LIMIT_LINE,
    MARKS,
    SET_ASIDE_SHIFT,
    TREND_COLOUR,
    WAITING_COLOUR,
    WARNING_LINE,
    legend_entries,
    y_span,
)
from stripscan.services.qc_chart import ChartData, ChartPoint, ChartSeries, chart_data, describe_rule
from stripscan.services.qc_log import (
    LABELS,
    VERDICT_WORDS,
    DuplicateDayError,
    ProcessorLog,
    QcSetup,
    add_day,
    correct_entry,
    latest_words,
    load_processor_log,
    status_text,
)

__all__ = ["QcPanel", "DayAxis", "DensityEdit", "NewProcessorDialog", "ScanSource", "create_processor"]

log = logging.getLogger(__name__)

# pyqtgraph's names for the chart's shapes.
_SYMBOLS = {"circle": "o", "triangle": "t1", "diamond": "d"}
_GLYPHS = {e.key: e.glyph for e in LEGEND}
# Height of one row of trend-rule bars under a plot, as a share of the plot's half range.
_LANE_ROW = 0.2


class DayAxis(pg.AxisItem):
    """A bottom axis whose values are days counted from ``first``, labelled '2 Nov'."""

    def __init__(self, first: datetime.date | None = None) -> None:
        super().__init__(orientation="bottom")
        self.first = first or datetime.date.today()

    def tickStrings(self, values: Any, scale: float, spacing: float) -> list[str]:  # noqa: N802 (Qt name)
        out = []
        for v in values:
            day = self.first + datetime.timedelta(days=round(v))
            out.append(f"{day.day} {day.strftime('%b')}" if abs(v - round(v)) < 1e-6 else "")
        return out


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


def _glyph_colour(entry: Any) -> str:
    """The colour of a legend glyph: its entry's, or for the translucent shading, that shading on white.

    The glyph is drawn at twice the shading's opacity (as the report's
    legend swatches are), since a pale glyph on the window's grey is hard to see.
    """
    if entry.look != "shade":
        return entry.colour
    alpha = min(1.0, 2 * BASELINE_OPACITY)
    grey = round(255 * (1 - alpha) + QColor(entry.colour).red() * alpha)
    return QColor(grey, grey, grey).name()


def _join(words: list[str]) -> str:
    """'a', 'a and b', 'a, b and c'."""
    return " and ".join(words) if len(words) < 3 else f"{', '.join(words[:-1])} and {words[-1]}"


def _message(label: QLabel, text: str, *, ok: bool) -> None:
    label.setStyleSheet("color: #1b5e20" if ok else "color: #b71c1c")
    label.setText(text if ok else f"Not stored: {text}")


#: What :attr:`QcPanel.scan_source` gives: the open scan's analysis and the full calibration it used
#: (None in direct mode), or None when no scan is open.
ScanSource = Callable[[], "tuple[Analysis, dict[str, Any] | None] | None"]

#: The key of a processor's QC settings that holds the film type its QC strips are cut from.
FILM_TYPE_KEY = "qc_film_type"


def create_processor(path: str | os.PathLike[str], name: str, *, film_type: str = "",
                     limits: QCLimits | None = None) -> QcSetup:
    """Add a processor to the archive at ``path`` (made when missing) and start its QC log.

    Parameters
    ----------
    path : path-like
        The archive file.
    name : str
        The processor's name; it must be new.
    film_type : str
        The QC film its daily strips are cut from (kept with its QC settings).
    limits : QCLimits, optional
        Control limits and warning tiers (default 21 CFR 900.12(e)(1) with a ±0.10 warning tier).

    Raises
    ------
    ValueError, ArchiveError
        A name missing or taken, limits that do not hold; nothing is stored.
    """
    name = name.strip()
    if not name:
        raise ValueError("type the processor's name")
    # Everything is checked before the first write, so a refusal leaves the archive as it was.
    setup = QcSetup(limits=limits or QCLimits(), extra={FILM_TYPE_KEY: film_type.strip()} if film_type.strip() else {})
    record = Processor(name)
    with Archive.open(path, create=True) as archive:
        if any(p.name == name for p in archive.list_processors()):
            raise ValueError(f"processor {name!r} is in the archive already; choose it in the list")
        archive.add_processor(record)
        archive.set_qc_settings(name, setup.to_settings())
    return setup


class NewProcessorDialog(QDialog):
    """The short form that makes a processor: its name, QC film type and limits.

    Parameters
    ----------
    panel : QcPanel
        Where the processor is stored and then shown.
    """

    def __init__(self, panel: "QcPanel") -> None:
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
        """Store the processor and show it on the panel; True when stored (a refusal is said in the form)."""
        try:
            limits = self.limits()
        except ValueError as exc:
            _message(self.message, str(exc), ok=False)
            return False
        if not self.panel.create_processor(self.name_edit.text(), film_type=self.film_edit.text(), limits=limits,
                                           message=self.message):
            return False
        self.accept()
        return True


class QcPanel(QWidget):
    """A processor's QC: three stacked deviation plots, today's status and forms for a typed day and a correction.

    Parameters
    ----------
    archive_path : path-like, optional
        The archive file; :meth:`set_archive` may give it later.
    parent : QWidget, optional

    Signals
    -------
    sigDayAdded(str, str)
        Processor and date (``YYYY-MM-DD``) of a day stored through the form.
    sigEntryCorrected(str, int)
        Processor and id of a correction stored through the correction form.
    """

    sigDayAdded = Signal(str, str)
    sigEntryCorrected = Signal(str, int)
    sigProcessorCreated = Signal(str)

    def __init__(self, archive_path: str | os.PathLike[str] | None = None, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.archive_path: Path | None = None
        #: Where a new processor makes the archive when :attr:`archive_path` is None (no file yet).
        self.new_archive_path: Path | None = None
        #: The scan open in the window, for a day read off one of its strips (None: no window gives one).
        self.scan_source: ScanSource | None = None
        #: The new-processor form opened last, for a test or a script to fill in.
        self.dialog: NewProcessorDialog | None = None
        #: The status ends with the caution; a window that shows it under every page sets this False.
        self.caution_in_status = True
        self.data: ChartData | None = None
        self.plog: ProcessorLog | None = None
        self.processor_box = QComboBox()
        self.processor_box.currentTextChanged.connect(self._processor_chosen)
        self.refresh_button = QPushButton("Reload")
        self.refresh_button.clicked.connect(self.refresh)
        self.new_processor_button = QPushButton("New processor…")
        self.new_processor_button.setToolTip("Start the QC log of a processor: its name, QC film and limits")
        self.new_processor_button.clicked.connect(self.ask_new_processor)
        #: Month of the QC report, among the months the shown processor has entries in (newest first).
        self.month_box = QComboBox()
        self.month_box.setToolTip("The month the QC report (PDF) covers")
        self.status_label = QLabel()
        self.status_label.setWordWrap(True)
        self.status_label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.status_label.setTextFormat(Qt.TextFormat.RichText)
        self.graphics = pg.GraphicsLayoutWidget()
        self.graphics.setBackground("w")
        self.axes = {q: DayAxis() for q in QUANTITIES}
        self.plots: dict[str, pg.PlotItem] = {}
        for row, q in enumerate(QUANTITIES):
            plot = self.graphics.addPlot(row=row, col=0, axisItems={"bottom": self.axes[q]})
            plot.setLabel("left", f"{LABELS[q]} \u0394 (OD)")
            plot.showGrid(x=False, y=True, alpha=0.25)
            plot.setMenuEnabled(False)
            # Deviations are read in OD; a "x0.001" scale would hide the limits' own numbers.
            plot.getAxis("left").enableAutoSIPrefix(False)
            if self.plots:
                plot.setXLink(self.plots[QUANTITIES[0]])
            self.plots[q] = plot
        self.scatter: dict[str, pg.ScatterPlotItem] = {}
        self.set_aside: dict[str, pg.ScatterPlotItem] = {}
        #: The legend of the plots, the same as the PNG chart's and the monthly report's.
        self.key_label = QLabel()
        self.key_label.setWordWrap(True)
        self.key_label.setTextFormat(Qt.TextFormat.RichText)
        layout = QVBoxLayout(self)
        top = QHBoxLayout()
        top.addWidget(QLabel("Processor:"))
        top.addWidget(self.processor_box, 1)
        top.addWidget(self.new_processor_button)
        top.addWidget(QLabel("Report month:"))
        top.addWidget(self.month_box)
        top.addWidget(self.refresh_button)
        layout.addLayout(top)
        layout.addWidget(self.status_label)
        layout.addWidget(self.graphics, 1)
        layout.addWidget(self.key_label)
        #: The typed-day and correction forms; a page with room to the side may place them there.
        self.form_box = QWidget()
        forms = QVBoxLayout(self.form_box)
        forms.setContentsMargins(0, 0, 0, 0)
        forms.addWidget(self._make_form())
        forms.addWidget(self._make_scan_form())
        forms.addWidget(self._make_correction_form())
        layout.addWidget(self.form_box)
        if archive_path is not None:
            self.set_archive(archive_path)

    # ----------------------------------------------------------- the form

    def _make_form(self) -> QGroupBox:
        box = QGroupBox("Add a day's values read on a densitometer")
        form = QFormLayout(box)
        self.date_edit = QDateEdit()
        self.date_edit.setCalendarPopup(True)
        self.date_edit.setDisplayFormat("yyyy-MM-dd")
        self.date_edit.setDate(QDate.currentDate())
        form.addRow("Date processed", self.date_edit)
        self.repeat_check = QCheckBox("Repeat strip of the day")
        self.repeat_check.setToolTip("A second strip processed on the latest day (after a result past a limit, say). "
                                     "Both strips are kept; the repeat is the day's value from then on.")
        self.repeat_check.toggled.connect(self._set_form_date)
        form.addRow("", self.repeat_check)
        self.value_edits: dict[str, DensityEdit] = {}
        for q in QUANTITIES:
            self.value_edits[q] = DensityEdit(LABELS[q], "required")
            form.addRow(f"{LABELS[q].capitalize()} (OD)", self.value_edits[q])
        self.note_edit = QLineEdit()
        self.note_edit.setPlaceholderText("remark for the day (optional)")
        self.action_edit = QLineEdit()
        self.action_edit.setPlaceholderText("corrective action taken (optional)")
        form.addRow("Note", self.note_edit)
        form.addRow("Corrective action", self.action_edit)
        self.add_button = QPushButton("Add day")
        self.add_button.clicked.connect(self.add_typed_day)
        self.form_message = QLabel()
        self.form_message.setWordWrap(True)
        form.addRow(self.add_button, self.form_message)
        return box

    def _set_form_date(self) -> None:
        """The day after the latest strip, or the latest strip's own day for a repeat."""
        latest = self.plog.latest_day if self.plog is not None else None
        if latest is None:
            self.date_edit.setDate(QDate.currentDate())
        else:
            self.date_edit.setDate(QDate(latest if self.repeat_check.isChecked() else
                                         latest + datetime.timedelta(days=1)))

    def add_typed_day(self) -> bool:
        """Store the form's values for the chosen processor; True when stored.

        A refused day (duplicate, out of order, bad number) is explained
        under the button and nothing is stored.
        """
        processor = self.processor_box.currentText()
        if self.archive_path is None or not processor:
            _message(self.form_message, "create a processor first (New processor…)", ok=False)
            return False
        day = self.date_edit.date().toPython()
        repeat = self.repeat_check.isChecked()
        try:
            typed = [self.value_edits[q].value() for q in QUANTITIES]
            missing = [LABELS[q] for q, v in zip(QUANTITIES, typed) if v is None]
            if missing:
                raise ValueError(f"{_join(missing)} {'is' if len(missing) == 1 else 'are'} missing: type all "
                                 "three values read on the densitometer")
            values = QCValues(*typed)  # type: ignore[arg-type]
            with Archive.open(self.archive_path, create=False) as archive:
                added = add_day(archive, processor, day, values=values, note=self.note_edit.text().strip(),
                                action=self.action_edit.text().strip(), repeat=repeat)
        except (ArchiveError, ValueError, OSError) as exc:
            repeat_hint = isinstance(exc, DuplicateDayError)
            hint = " Tick 'Repeat strip of the day' to keep it as a repeat." if repeat_hint else ""
            _message(self.form_message, f"{exc}.{hint}", ok=False)
            return False
        log.info("QC day %s stored for %r from the panel (entry %s)", day, processor, added.entry.id)
        what = f"a repeat strip of {day.isoformat()}" if repeat else day.isoformat()
        _message(self.form_message, f"Stored {what} as entry {added.entry.id}.", ok=True)
        return self._day_stored(processor, day)

    def _day_stored(self, processor: str, day: datetime.date) -> bool:
        # Emptied, so that the next day never inherits this day's numbers or remarks.
        for edit in (*self.value_edits.values(), self.note_edit, self.action_edit):
            edit.clear()
        self.repeat_check.setChecked(False)
        self.show_processor(processor)
        self.sigDayAdded.emit(processor, day.isoformat())
        return True

    # ------------------------------------------------ a day read off the open scan

    def _make_scan_form(self) -> QGroupBox:
        box = QGroupBox("…or read the day off a strip of the open scan")
        form = QFormLayout(box)
        self.scan_strip_box = QComboBox()
        self.scan_strip_box.setToolTip("The QC strip among the open scan's strips; read with the active calibration "
                                       "at the steps the processor keeps (chosen on its first scanned strip)")
        form.addRow("Strip", self.scan_strip_box)
        self.add_scan_button = QPushButton("Add day from the strip")
        self.add_scan_button.clicked.connect(lambda: self.add_scanned_day())
        self.scan_message = QLabel()
        self.scan_message.setWordWrap(True)
        form.addRow(self.add_scan_button, self.scan_message)
        self.update_scan_strips()
        return box

    def _open_scan(self) -> tuple[Analysis, dict[str, Any] | None] | None:
        source = self.scan_source() if self.scan_source is not None else None
        return source if source is not None and source[0].strips else None

    def update_scan_strips(self) -> None:
        """List the open scan's strips in the scanned-day form (the window calls it when the scan changes)."""
        chosen = self.scan_strip_box.currentData()
        self.scan_strip_box.clear()
        source = self._open_scan()
        if source is None:
            self.scan_strip_box.addItem("no scan open", None)
        else:
            name = Path(source[0].scan.path).name
            for strip in source[0].strips:
                self.scan_strip_box.addItem(f"{name}, strip {strip.index}", strip.index)
            index = self.scan_strip_box.findData(chosen)
            self.scan_strip_box.setCurrentIndex(max(index, 0))
        self.scan_strip_box.setEnabled(source is not None)
        self.add_scan_button.setEnabled(source is not None)

    def add_scanned_day(self, strip: int | None = None) -> bool:
        """Store the day read off a strip of the open scan (the form's date, note and repeat); True when stored.

        Parameters
        ----------
        strip : int, optional
            Strip number on the scan; default the one chosen in the form.
        """
        processor = self.processor_box.currentText()
        source = self._open_scan()
        if source is None:
            _message(self.scan_message, "open a scan of the day's QC strip first", ok=False)
            return False
        if self.archive_path is None or not processor:
            _message(self.scan_message, "create a processor first (New processor…)", ok=False)
            return False
        analysis, calibration = source
        number = strip if strip is not None else self.scan_strip_box.currentData()
        day = self.date_edit.date().toPython()
        repeat = self.repeat_check.isChecked()
        try:
            with Archive.open(self.archive_path, create=False) as archive:
                added = add_day(archive, processor, day, analysis=analysis, strip=number, calibration=calibration,
                                note=self.note_edit.text().strip(), action=self.action_edit.text().strip(),
                                repeat=repeat)
        except (ArchiveError, ValueError, OSError) as exc:
            hint = " Tick 'Repeat strip of the day' to keep it as a repeat." if isinstance(exc, DuplicateDayError) else ""
            _message(self.scan_message, f"{exc}.{hint}", ok=False)
            return False
        log.info("QC day %s stored for %r from strip %s of %s (entry %s)", day, processor, number,
                 analysis.scan.path, added.entry.id)
        values = added.entry
        words = [f"Stored {day.isoformat()} as entry {added.entry.id}: " + ", ".join(
            f"{LABELS[q]} {getattr(values, q):.3f}" for q in QUANTITIES) + "."]
        words += [f"{note[0].upper()}{note[1:]}." for note in added.notes]
        _message(self.scan_message, " ".join(words), ok=True)
        return self._day_stored(processor, day)

    # ------------------------------------------------------------- a new processor

    def ask_new_processor(self) -> NewProcessorDialog:
        """Open the form that makes a processor."""
        dialog = NewProcessorDialog(self)
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        self.dialog = dialog
        dialog.destroyed.connect(lambda: setattr(self, "dialog", None))
        dialog.open()
        return dialog

    def create_processor(self, name: str, *, film_type: str = "", limits: QCLimits | None = None,
                         message: QLabel | None = None) -> bool:
        """Make the processor ``name`` (and the archive file if there is none yet), then show it; True when made.

        A refusal is said in ``message`` (default: under the typed-day form); nothing is stored then.
        """
        path = self.archive_path or self.new_archive_path
        label = message if message is not None else self.form_message
        if path is None:
            _message(label, "choose or make a lot archive first (Archive menu)", ok=False)
            return False
        try:
            create_processor(path, name, film_type=film_type, limits=limits)
        except (ArchiveError, ValueError, OSError) as exc:
            _message(label, str(exc), ok=False)
            return False
        name = name.strip()
        log.info("processor %r made from the QC panel in %s", name, path)
        if self.archive_path != Path(path):
            self.archive_path = Path(path)
        self.refresh()
        self.show_processor(name)
        _message(self.form_message, f"Processor {name!r} is ready: add its first day's values.", ok=True)
        self.sigProcessorCreated.emit(name)
        return True

    # ----------------------------------------------------- the correction form

    def _make_correction_form(self) -> QGroupBox:
        box = QGroupBox("Correct an entry typed or read wrongly")
        form = QFormLayout(box)
        self.entry_spin = QSpinBox()
        self.entry_spin.setRange(1, 2_000_000_000)
        self.entry_spin.setToolTip("The entry's number, as 'stripscan qc list' shows it; or click its point.")
        self.entry_spin.valueChanged.connect(self._entry_chosen)
        form.addRow("Entry", self.entry_spin)
        self.entry_label = QLabel()
        self.entry_label.setWordWrap(True)
        form.addRow("", self.entry_label)
        # Filled from the chosen entry only: empty where it has no value (or no entry is chosen).
        self.fix_edits = {q: DensityEdit(f"right {LABELS[q]}", "none stored") for q in QUANTITIES}
        for q, edit in self.fix_edits.items():
            form.addRow(f"Right {LABELS[q]} (OD)", edit)
        self.reason_edit = QLineEdit()
        self.reason_edit.setPlaceholderText("why it was wrong (needed)")
        form.addRow("Reason", self.reason_edit)
        self.correct_button = QPushButton("Store correction")
        self.correct_button.clicked.connect(self.correct_chosen_entry)
        self.correct_message = QLabel()
        self.correct_message.setWordWrap(True)
        form.addRow(self.correct_button, self.correct_message)
        return box

    def _stored_entry(self, entry_id: int) -> StoredEntry | None:
        entries = self.plog.entries if self.plog is not None else ()
        return next((e for e in entries if e.id == entry_id), None)

    def _entry_chosen(self, entry_id: int) -> None:
        """Show the chosen entry and start the right values from its own."""
        entry = self._stored_entry(entry_id)
        if entry is None:
            self.entry_label.setText(f"No entry {entry_id} for this processor.")
            for edit in self.fix_edits.values():
                edit.clear()
            return
        state = self.plog.states[entry_id] if self.plog is not None else None
        fate = f"; corrected already by entry {state.corrected_by}" if state and state.corrected_by else ""
        self.entry_label.setText(f"{entry.date}, {entry.source}: " + ", ".join(
            f"{LABELS[q]} {getattr(entry, q):.3f}" for q in QUANTITIES if getattr(entry, q) is not None) + fate)
        for q, edit in self.fix_edits.items():
            edit.setValue(getattr(entry, q))

    def correct_chosen_entry(self) -> bool:
        """Store the correction form's values for the chosen entry; True when stored.

        Only the numbers changed in the form are corrected (to the
        form's 0.001 OD); an emptied field keeps the stored value.  A
        refusal (no reason, nothing changed, a number that is not a
        density, entry corrected already) is explained under the button
        and nothing is stored.
        """
        processor = self.processor_box.currentText()
        entry_id = self.entry_spin.value()
        entry = self._stored_entry(entry_id)
        if self.archive_path is None or entry is None:
            _message(self.correct_message, f"entry {entry_id} is not in the QC log shown", ok=False)
            return False
        try:
            typed = {q: edit.value() for q, edit in self.fix_edits.items()}
            changes = {q: v for q, v in typed.items() if v is not None
                       and (getattr(entry, q) is None or round(v, 3) != round(getattr(entry, q), 3))}
            with Archive.open(self.archive_path, create=False) as archive:
                added = correct_entry(archive, entry_id, reason=self.reason_edit.text(), **changes)
        except (ArchiveError, ValueError, OSError) as exc:
            _message(self.correct_message, str(exc), ok=False)
            return False
        log.info("QC entry %s of %r corrected from the panel by entry %s", entry_id, processor, added.entry.id)
        _message(self.correct_message, f"Stored entry {added.entry.id}: the correction of entry {entry_id}.", ok=True)
        self.reason_edit.clear()
        self.show_processor(processor)
        self.sigEntryCorrected.emit(processor, added.entry.id)
        return True

    # ------------------------------------------------------------ reading

    def set_archive(self, path: str | os.PathLike[str]) -> None:
        """Show the processors of the archive at ``path``."""
        self.archive_path = Path(path)
        self.refresh()

    def refresh(self) -> None:
        """Read the processor list and the shown processor's log again."""
        current = self.processor_box.currentText()
        names: list[str] = []
        if self.archive_path is not None:
            try:
                with Archive.open(self.archive_path, create=False) as archive:
                    names = [p.name for p in archive.list_processors()]
            except ArchiveError as exc:
                self._show_message(f"Cannot read the archive: {exc}")
                return
        self.processor_box.blockSignals(True)
        self.processor_box.clear()
        self.processor_box.addItems(names)
        self.processor_box.blockSignals(False)
        if current in names:
            self.processor_box.setCurrentText(current)
        self.show_processor(self.processor_box.currentText() or None)

    def _processor_chosen(self, name: str) -> None:
        self.show_processor(name or None)

    def report_month(self) -> datetime.date | None:
        """First day of the month chosen for the QC report; None when no processor with entries is shown."""
        text = self.month_box.currentText()
        return datetime.date.fromisoformat(f"{text}-01") if text else None

    def set_report_month(self, month: str) -> None:
        """Choose the report's month, ``YYYY-MM`` (one the shown processor has entries in)."""
        index = self.month_box.findText(month)
        if index < 0:
            raise ValueError(f"no QC entries in {month} for the processor shown")
        self.month_box.setCurrentIndex(index)

    def show_processor(self, processor: str | None) -> None:
        """Draw ``processor``'s log and status (None: clear)."""
        for plot in self.plots.values():
            plot.clear()
        self.scatter.clear()
        self.set_aside.clear()
        self.key_label.clear()
        self.data = self.plog = None
        self.month_box.clear()
        self._empty_ranges()
        if processor is None or self.archive_path is None:
            self._show_message("No processor chosen.")
            return
        if self.processor_box.currentText() != processor:
            self.processor_box.blockSignals(True)
            self.processor_box.setCurrentText(processor)
            self.processor_box.blockSignals(False)
        try:
            with Archive.open(self.archive_path, create=False) as archive:
                plog = load_processor_log(archive, processor)
        except (ArchiveError, ValueError) as exc:
            self._show_message(f"Cannot read the QC log of {processor!r}: {exc}")
            return
        self.plog = plog
        for month in sorted({e.date[:7] for e in plog.entries}, reverse=True):
            self.month_box.addItem(month)
        self._set_form_date()
        if plog.entries:
            # The latest entry is the one most often found mistyped.
            self.entry_spin.setValue(max(e.id for e in plog.entries if e.id is not None))
            self._entry_chosen(self.entry_spin.value())
        status = self._status_html(plog)
        if not self.caution_in_status:
            status = status.replace(html.escape(CAUTION), "").replace(CAUTION, "")
        self.status_label.setText(status)
        if not plog.log.entries:
            return
        self.data = chart_data(plog)
        for series in self.data.series:
            self._draw(series, self.data)
        self.key_label.setText(self._legend_html(self.data))

    def _empty_ranges(self) -> None:
        """Before any day: deviations of ±0.20 OD with the control limits' own ticks, not 0-1 around nothing."""
        for q, plot in self.plots.items():
            plot.setYRange(-0.2, 0.2, padding=0.02)
            plot.setXRange(-0.5, 30.5, padding=0)
            self._y_ticks(q, 0.2)

    def _show_message(self, text: str) -> None:
        self.status_label.setText(html.escape(text))

    @staticmethod
    def _legend_html(data: ChartData) -> str:
        """The shared legend (:func:`stripscan.render.qc_chart.legend_entries`), each entry with a glyph in its colour."""
        return " &nbsp; ".join(
            f"<b style='color:{_glyph_colour(e)}'>{html.escape(e.glyph)}</b>&nbsp;{html.escape(e.words)}"
            for e in legend_entries(data))

    @staticmethod
    def _status_html(plog: Any) -> str:
        status = plog.status()
        if status.baseline_in_progress:
            head, colour, glyph = "BASELINE IN PROGRESS", "#444444", ""
        else:
            head, colour, glyph = VERDICT_WORDS[status.verdict], MARKS[status.verdict][0], _GLYPHS[status.verdict]
        lines = status_text(plog, status).splitlines()
        body = "<br>".join(html.escape(line.strip()) for line in lines[1:])
        when = latest_words(status)
        film = plog.setup.extra.get(FILM_TYPE_KEY)
        if film:
            when += f"; QC film {html.escape(film)}"
        return (f"<b style='color:{colour}; font-size:13pt'>{glyph} {html.escape(plog.processor)}: {head}</b> "
                f"<span>({when})</span><br>{body}")

    # ------------------------------------------------------------ drawing

    def _x(self, day: datetime.date) -> float:
        assert self.data is not None
        return float((day - self.data.first).days)

    def _draw(self, series: ChartSeries, data: ChartData) -> None:
        """Draw one quantity's plot with the marks, lines and shading of the shared legend."""
        plot = self.plots[series.quantity]
        self.axes[series.quantity].first = data.first
        span = y_span(series)
        x0, x1 = -0.5, (data.last - data.first).days + 0.5
        up_a, low_a = series.action
        up_w, low_w = series.warning
        zones = [(up_a, span, "action"), (low_a, -span, "action") if low_a is not None else None,
                 (up_w, up_a, "warning") if up_w is not None else None,
                 (low_w, low_a, "warning") if low_w is not None and low_a is not None else None]
        for zone in zones:
            if zone is None or zone[0] is None:
                continue
            a, b, kind = zone
            self._rect(plot, x0, min(a, b), x1 - x0, abs(b - a), QColor(BANDS[kind]), -10)
        shade = QColor(BASELINE_COLOUR)
        shade.setAlphaF(BASELINE_OPACITY)
        for period in data.periods:
            days = [self._x(d) for d in period.baseline_dates if data.first <= d <= data.last]
            if days:
                # A baseline's days are consecutive strips; one column over them, not one per day.
                self._rect(plot, days[0] - 0.5, -span, days[-1] - days[0] + 1.0, 2 * span, shade, -9)
        plot.addItem(pg.InfiniteLine(0.0, angle=0, movable=False, pen=pg.mkPen(LEVEL_LINE, width=1.5)))
        for limit, colour, style in ((up_a, LIMIT_LINE, Qt.PenStyle.DashLine), (low_a, LIMIT_LINE, Qt.PenStyle.DashLine),
                                     (up_w, WARNING_LINE, Qt.PenStyle.DotLine), (low_w, WARNING_LINE, Qt.PenStyle.DotLine)):
            if limit is not None:
                plot.addItem(pg.InfiniteLine(limit, angle=0, movable=False, pen=pg.mkPen(colour, width=1.5, style=style)))
        for day, label in data.events:
            plot.addItem(pg.InfiniteLine(self._x(day) - 0.5, angle=90, movable=False, label=label.split(" on ")[0],
                                         labelOpts={"position": 0.9, "color": "#333333"},
                                         pen=pg.mkPen(EVENT_COLOUR, width=1.5, style=Qt.PenStyle.DashDotLine)))
        for period in data.periods:
            pts = [p for p in series.points if period.first <= p.date <= period.last and p.deviation is not None]
            if len(pts) > 1:
                plot.addItem(pg.PlotDataItem([self._x(p.date) for p in pts], [p.deviation for p in pts],
                                             pen=pg.mkPen("#888888", width=1)))
        bottom = self._draw_trends(plot, series, data, span, x0, x1)
        kept = pg.ScatterPlotItem(spots=[self._set_aside_spot(p, span) for p in series.set_aside
                                         if p.deviation is not None], hoverable=True, tip=self._tip(series))
        kept.sigClicked.connect(self._point_clicked)
        plot.addItem(kept)
        self.set_aside[series.quantity] = kept
        spots = []
        for p in series.points:
            if p.deviation is None:
                # A day of a baseline in progress: not judged, marked on the level's line.
                look = {"pos": (self._x(p.date), 0.0), "symbol": "+", "size": 11,
                        "brush": pg.mkBrush(WAITING_COLOUR), "pen": pg.mkPen(WAITING_COLOUR, width=1)}
            else:
                colour, shape, size, _ = MARKS[p.verdict or "ok"]
                look = {"pos": (self._x(p.date), p.deviation), "symbol": _SYMBOLS[shape], "size": 2 * size + 2,
                        "brush": pg.mkBrush(colour), "pen": pg.mkPen("#1A1A1A", width=1)}
            spots.append({**look, "data": (p.date.isoformat(), p.verdict, p.entry_id)})
        scatter = pg.ScatterPlotItem(spots=spots, hoverable=True, tip=self._tip(series))
        scatter.sigClicked.connect(self._point_clicked)
        plot.addItem(scatter)
        self.scatter[series.quantity] = scatter
        self._y_ticks(series.quantity, span)
        plot.setYRange(bottom, span, padding=0.02)
        plot.setXRange(x0, x1, padding=0.01)

    @staticmethod
    def _rect(plot: pg.PlotItem, x: float, y: float, w: float, h: float, colour: QColor, z: float) -> None:
        rect = QGraphicsRectItem(x, y, w, h)
        rect.setPen(QPen(Qt.PenStyle.NoPen))
        rect.setBrush(QBrush(colour))
        rect.setZValue(z)
        plot.addItem(rect)

    def _draw_trends(self, plot: pg.PlotItem, series: ChartSeries, data: ChartData, span: float, x0: float,
                     x1: float) -> float:
        """Trend-rule bars in a lane under the plot, one row per rule; return the lane's foot (OD axis)."""
        mine = [f for f in data.findings if f.quantity == series.quantity]
        rules = [rule for rule in ("run", "drift", "two_warnings") if any(f.rule == rule for f in mine)]
        if not rules:
            return -span
        # Below -span, apart from the points; each rule has a row, so no label lies over another row's bar.
        row_h = _LANE_ROW * span
        plot.addItem(pg.InfiniteLine(-span, angle=0, movable=False, pen=pg.mkPen("#BBBBBB", width=1)))
        self._rect(plot, x0, -span - row_h * len(rules), x1 - x0, row_h * len(rules), QColor("white"), -8)
        for finding in mine:
            days = [self._x(d) for d in finding.dates if data.first <= d <= data.last]
            if not days:
                continue
            y = -span - row_h * (rules.index(finding.rule) + 0.5)
            plot.addItem(pg.PlotDataItem([days[0] - 0.2, days[-1] + 0.2], [y, y], pen=pg.mkPen(TREND_COLOUR, width=5)))
            label = pg.TextItem(describe_rule(finding), color=TREND_COLOUR, anchor=(0, 0.5))
            label.setPos(days[-1] + 0.35, y)
            plot.addItem(label)
        return -span - row_h * len(rules)

    def _y_ticks(self, quantity: str, span: float) -> None:
        """Deviation ticks within ±span only: the lane of trend bars under it is not a deviation."""
        step = next(g for g in (0.01, 0.02, 0.05, 0.1, 0.2, 0.5) if span / g <= 3.01)
        count = int(span / step + 1e-9)
        ticks = [(k * step, f"{k * step:+.2f}" if k else "0") for k in range(-count, count + 1)]
        self.plots[quantity].getAxis("left").setTicks([ticks, []])

    def _set_aside_spot(self, p: ChartPoint, span: float) -> dict[str, Any]:
        """A spot left of its day: a hollow mark of its tier for a repeated strip, a grey cross for a corrected one."""
        x = self._x(p.date) - SET_ASIDE_SHIFT
        if p.set_aside == "corrected":
            # A slip may be far off; it is held at the plot's edge.
            y = min(max(p.deviation, -0.97 * span), 0.97 * span)  # type: ignore[type-var]
            look = {"symbol": "x", "size": 11, "brush": pg.mkBrush(CORRECTED_COLOUR), "pen": pg.mkPen(None)}
        else:
            y = p.deviation
            colour, shape, size, _ = MARKS[p.verdict or "ok"]
            look = {"symbol": _SYMBOLS[shape], "size": 2 * size + 2, "brush": pg.mkBrush(None),
                    "pen": pg.mkPen(colour, width=2)}
        return {"pos": (x, y), **look, "data": (p.date.isoformat(), p.verdict, p.entry_id, p.set_aside)}

    def _point_clicked(self, item: Any, points: Any, *_: Any) -> None:
        # A clicked point chooses its entry in the correction form.
        if len(points) and points[0].data()[2] is not None:
            self.entry_spin.setValue(points[0].data()[2])

    @staticmethod
    def _tip(series: ChartSeries) -> Any:
        values = {(p.date.isoformat(), p.entry_id): p.value for p in (*series.points, *series.set_aside)}

        def tip(x: float, y: float, data: Any) -> str:
            day, verdict, entry_id = data[:3]
            aside = data[3] if len(data) > 3 else None
            words = "corrected, not used" if aside == "corrected" else VERDICT_WORDS.get(verdict, "baseline").lower()
            if aside == "repeated":
                words += "; repeated the same day, not used"
            # A corrected value is drawn at the plot's edge, a day still in its baseline on the level's line:
            # neither height is a deviation.
            dev = "" if aside == "corrected" or verdict is None else f" ({y:+.3f})"
            return f"{day}, entry {entry_id}: {series.label} {values[(day, entry_id)]:.3f} OD{dev}, {words}"

        return tip
