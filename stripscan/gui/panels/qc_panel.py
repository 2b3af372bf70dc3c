"""The processor QC panel: a processor's deviation plots, today's status, and forms for a typed day and a correction.

A standalone ``QWidget`` over the archive file.  What it shows and what a
form may store are decided by its model
(:class:`stripscan.gui.models.qc_page.QcPage`), whose reading and storing run
in a worker thread (:class:`~stripscan.gui.tasks.TaskRunner`): each opens the
archive for one look and keeps no connection, so the command line (or
another window) may write meanwhile, and a slow or locked archive never
freezes the window; :meth:`QcPanel.refresh` shows what is stored now.  Every
number and verdict comes from :mod:`stripscan.services.qc_log` and the pure
core; the plots (:class:`stripscan.gui.views.qc_plots.QcPlots`) draw them
with the same marks as the PNG chart.

A processor is made on the panel ("New processor…": its name, the QC film
it is checked with and its limits).  The typed-day form stores a day's
strip, or a repeat strip of the latest day, from values typed in or read
off a strip of the scan open in the window (:attr:`QcPanel.scan_source`);
the correction form stores the right values of an entry (typed by its
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
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDateEdit,
    QFormLayout,
    QFrame,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QScrollArea,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from stripscan import CAUTION
from stripscan.render import qtguard  # noqa: F401  (before any signal is emitted)
from stripscan.core.qc.names import QUANTITIES
from stripscan.core.qc.records import QCLimits
from stripscan.core.records import Analysis
from stripscan.gui.dialogs.new_processor import DensityEdit, NewProcessorDialog, show_result
from stripscan.gui.models.location import ArchiveLocation, as_location
from stripscan.gui.models.qc_page import (
    FILM_TYPE_KEY,
    QcPage,
    correction_changes,
    create_processor,
    entry_words,
    find_entry,
    form_date,
    typed_values,
)
from stripscan.gui.tasks import TaskRunner
from stripscan.gui.views.qc_plots import GLYPHS, DayAxis, QcPlots, legend_html
from stripscan.render.qc_chart import MARKS
from stripscan.services.qc_chart import ChartData
from stripscan.core.qc.names import LABELS, VERDICT_WORDS
from stripscan.services.qc_log import ProcessorLog
from stripscan.services.qc_status import latest_words, status_text

__all__ = ["QcPanel", "DayAxis", "DensityEdit", "NewProcessorDialog", "ScanSource", "create_processor",
           "FILM_TYPE_KEY"]

log = logging.getLogger(__name__)

#: What :attr:`QcPanel.scan_source` gives: the open scan's analysis and the full calibration it used
#: (None in direct mode), or None when no scan is open.
ScanSource = Callable[[], "tuple[Analysis, dict[str, Any] | None] | None"]


class QcPanel(QWidget):
    """A processor's QC: three stacked deviation plots, today's status and forms for a typed day and a correction.

    Parameters
    ----------
    archive_path : path-like, optional
        The archive file; :meth:`set_archive` may give it later.
    parent : QWidget, optional
    runner : TaskRunner, optional
        Runs the reading and storing off the UI thread (default: the panel's own).

    Signals
    -------
    sigDayAdded(str, str)
        Processor and date (``YYYY-MM-DD``) of a day stored through the form (the log shown already has it).
    sigEntryCorrected(str, int)
        Processor and id of a correction stored through the correction form.
    sigProcessorCreated(str)
        A processor made through the panel (and shown).
    """

    sigDayAdded = Signal(str, str)
    sigEntryCorrected = Signal(str, int)
    sigProcessorCreated = Signal(str)

    def __init__(self, archive_path: str | os.PathLike[str] | None = None, parent: QWidget | None = None, *,
                 runner: TaskRunner | None = None) -> None:
        super().__init__(parent)
        self.runner = runner if runner is not None else TaskRunner(self)
        self.model = QcPage(run=self.runner.start)
        #: The scan open in the window, for a day read off one of its strips (None: no window gives one).
        self.scan_source: ScanSource | None = None
        #: The new-processor form opened last, for a test or a script to fill in.
        self.dialog: NewProcessorDialog | None = None
        #: The status ends with the caution; a window that shows it under every page sets this False.
        self.caution_in_status = True
        #: What the status says while no processor is shown (a window says how to start one).
        self.empty_words = "No processor chosen."
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
        #: Said while the archive is being read or written (a slow or locked file takes a while).
        self.busy_label = QLabel("Waiting for the archive…")
        self.busy_label.setStyleSheet("color: #8a4b00")
        self.busy_label.setVisible(self.runner.busy)
        self.graphics = QcPlots()
        self.graphics.entry_clicked.connect(lambda entry_id: self.entry_spin.setValue(entry_id))
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
        top.addWidget(self.busy_label)
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
        # Where a refusal or a store is said: under the button that asked for it.
        self._labels = {"day": self.form_message, "scan": self.scan_message, "correct": self.correct_message,
                        "processor": self.form_message}
        self.model.events.shown.connect(self._show)
        self.model.events.message.connect(self._said)
        self.model.events.stored.connect(self._stored)
        self.runner.busy_changed.connect(self._busy)
        if archive_path is not None:
            self.set_archive(archive_path)

    def page_with_forms_beside(self) -> QWidget:
        """A page with the panel and, beside it, its forms (:attr:`form_box`, in a scroll area: :attr:`side`)."""
        page = QWidget()
        layout = QVBoxLayout(page)
        layout.setContentsMargins(0, 0, 0, 4)
        # The typed-day form beside the charts, not under them: at 900 px high the three
        # charts need the height, and the form's few fields need no more than a column.
        # On a laptop screen the three forms are taller than the page: they scroll, the charts do not.
        side = QScrollArea()
        side.setWidgetResizable(True)
        side.setFrameShape(QFrame.Shape.NoFrame)
        side.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.form_box.setContentsMargins(0, 40, 8, 0)
        side.setWidget(self.form_box)
        side.setFixedWidth(400)
        self.side = side
        row = QHBoxLayout()
        row.addWidget(self, 1)
        row.addWidget(side)
        layout.addLayout(row, 1)
        return page

    # -- the model's state, as the panel's --------------------------------------------------

    @property
    def archive_path(self) -> ArchiveLocation | None:
        """The archive shown, a file or a server (None: none, or no file yet)."""
        return self.model.path

    @archive_path.setter
    def archive_path(self, path: str | os.PathLike[str] | None) -> None:
        self.model.path = as_location(path)

    @property
    def new_archive_path(self) -> ArchiveLocation | None:
        """Where a new processor makes the archive when :attr:`archive_path` is None (no file yet)."""
        return self.model.new_archive_path

    @new_archive_path.setter
    def new_archive_path(self, path: str | os.PathLike[str] | None) -> None:
        self.model.new_archive_path = as_location(path)

    @property
    def plog(self) -> ProcessorLog | None:
        return self.model.plog

    @property
    def data(self) -> ChartData | None:
        return self.model.data

    @property
    def plots(self) -> dict[str, pg.PlotItem]:
        return self.graphics.plots

    @property
    def axes(self) -> dict[str, DayAxis]:
        return self.graphics.axes

    @property
    def scatter(self) -> dict[str, pg.ScatterPlotItem]:
        return self.graphics.scatter

    @property
    def set_aside(self) -> dict[str, pg.ScatterPlotItem]:
        return self.graphics.set_aside

    @property
    def busy(self) -> bool:
        """Whether the archive is being read or written for this page."""
        return self.runner.busy

    def _busy(self, busy: bool) -> None:
        # One store at a time; the page says it waits (a locked archive answers after a while).
        self.busy_label.setVisible(busy)
        for button in (self.add_button, self.correct_button, self.refresh_button):
            button.setEnabled(not busy)
        self.add_scan_button.setEnabled(not busy and self._open_scan() is not None)

    def _said(self, where: str, text: str, ok: bool) -> None:
        if where == "page":
            self._show_message(text)
        else:
            show_result(self._labels[where], text, ok=ok)

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
        self.date_edit.setDate(QDate(form_date(self.plog, repeat=self.repeat_check.isChecked(),
                                               today=QDate.currentDate().toPython())))

    def _day_details(self) -> dict[str, Any]:
        return {"note": self.note_edit.text().strip(), "action": self.action_edit.text().strip(),
                "repeat": self.repeat_check.isChecked()}

    def add_typed_day(self) -> bool:
        """Store the form's values for the chosen processor (worker thread); True when the store was started.

        A day the form refuses (a value missing or not a density) is
        explained under the button at once; one the archive refuses
        (duplicate, out of order) when it answers.  Nothing is stored then.
        ``sigDayAdded`` follows a stored day.
        """
        processor = self.processor_box.currentText()
        if self.archive_path is None or not processor:
            show_result(self.form_message, "create a processor first (New processor…)", ok=False)
            return False
        try:
            values = typed_values({q: edit.value() for q, edit in self.value_edits.items()})
        except ValueError as exc:
            show_result(self.form_message, f"{exc}.", ok=False)
            return False
        day = self.date_edit.date().toPython()
        self.model.store_day("day", processor, day, values=values, **self._day_details())
        return True

    def _stored(self, where: str, processor: str, added: Any) -> None:
        if where == "processor":
            self._processor_made(processor)
            return
        if where == "correct":
            corrected = self.entry_spin.value()
            log.info("QC entry %s of %r corrected from the panel by entry %s", corrected, processor, added.entry.id)
            show_result(self.correct_message, f"Stored entry {added.entry.id}: the correction of entry {corrected}.",
                        ok=True)
            self.reason_edit.clear()
            self.sigEntryCorrected.emit(processor, added.entry.id)
            return
        entry = added.entry
        log.info("QC day %s stored for %r from the panel (entry %s)", entry.date, processor, entry.id)
        if where == "scan":
            words = [f"Stored {entry.date} as entry {entry.id}: " + ", ".join(
                f"{LABELS[q]} {getattr(entry, q):.3f}" for q in QUANTITIES) + "."]
            words += [f"{note[0].upper()}{note[1:]}." for note in added.notes]
            show_result(self.scan_message, " ".join(words), ok=True)
        else:
            what = f"a repeat strip of {entry.date}" if entry.repeat_of is not None else entry.date
            show_result(self.form_message, f"Stored {what} as entry {entry.id}.", ok=True)
        # Emptied, so that the next day never inherits this day's numbers or remarks.
        for edit in (*self.value_edits.values(), self.note_edit, self.action_edit):
            edit.clear()
        self.repeat_check.setChecked(False)
        self.sigDayAdded.emit(processor, entry.date)

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
        """Store the day read off a strip of the open scan (the form's date, note and repeat); True when started.

        Parameters
        ----------
        strip : int, optional
            Strip number on the scan; default the one chosen in the form.
        """
        processor = self.processor_box.currentText()
        source = self._open_scan()
        if source is None:
            show_result(self.scan_message, "open a scan of the day's QC strip first", ok=False)
            return False
        if self.archive_path is None or not processor:
            show_result(self.scan_message, "create a processor first (New processor…)", ok=False)
            return False
        analysis, calibration = source
        number = strip if strip is not None else self.scan_strip_box.currentData()
        log.info("QC day of %r read from strip %s of %s", processor, number, analysis.scan.path)
        self.model.store_day("scan", processor, self.date_edit.date().toPython(), analysis=analysis, strip=number,
                             calibration=calibration, **self._day_details())
        return True

    # ------------------------------------------------------------- a new processor

    def ask_new_processor(self) -> NewProcessorDialog:
        """Open the form that makes a processor."""
        dialog = NewProcessorDialog(self)
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        self.dialog = dialog
        # Only this form's end clears it: the form before, deleted late, must not clear this one.
        dialog.destroyed.connect(lambda: self.dialog is dialog and setattr(self, "dialog", None))
        dialog.open()
        return dialog

    def create_processor(self, name: str, *, film_type: str = "", limits: QCLimits | None = None,
                         message: QLabel | None = None) -> bool:
        """Make the processor ``name`` (and the archive file if there is none yet), then show it; True when started.

        A refusal is said in ``message`` (default: under the typed-day form); nothing is stored then.
        """
        label = self._labels["processor"] = message if message is not None else self.form_message
        if not name.strip():
            show_result(label, "type the processor's name", ok=False)
            return False
        return self.model.create_processor(name, film_type=film_type, limits=limits)

    def _processor_made(self, name: str) -> None:
        log.info("processor %r made from the QC panel in %s", name, self.archive_path)
        if self.dialog is not None and self.dialog.isVisible():
            self.dialog.accept()
        self._labels["processor"] = self.form_message
        show_result(self.form_message, f"Processor {name!r} is ready: add its first day's values.", ok=True)
        self.sigProcessorCreated.emit(name)

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

    def _entry_chosen(self, entry_id: int) -> None:
        """Show the chosen entry and start the right values from its own."""
        self.entry_label.setText(entry_words(self.plog, entry_id))
        entry = find_entry(self.plog, entry_id)
        for q, edit in self.fix_edits.items():
            edit.setValue(getattr(entry, q) if entry is not None else None)

    def correct_chosen_entry(self) -> bool:
        """Store the correction form's values for the chosen entry (worker thread); True when started.

        Only the numbers changed in the form are corrected (to the
        form's 0.001 OD); an emptied field keeps the stored value.  A
        refusal (no reason, nothing changed, a number that is not a
        density, entry corrected already) is explained under the button
        and nothing is stored.
        """
        processor = self.processor_box.currentText()
        entry_id = self.entry_spin.value()
        entry = find_entry(self.plog, entry_id)
        if self.archive_path is None or entry is None:
            show_result(self.correct_message, f"entry {entry_id} is not in the QC log shown", ok=False)
            return False
        try:
            changes = correction_changes(entry, {q: edit.value() for q, edit in self.fix_edits.items()})
        except ValueError as exc:
            show_result(self.correct_message, str(exc), ok=False)
            return False
        self.model.store_correction(processor, entry_id, reason=self.reason_edit.text(), changes=changes)
        return True

    # ------------------------------------------------------------ reading

    def set_archive(self, path: str | os.PathLike[str]) -> None:
        """Show the processors of the archive at ``path``."""
        self.archive_path = path
        self.refresh()

    def refresh(self) -> None:
        """Read the processor list and the shown processor's log again (worker thread)."""
        self.model.read(self.processor_box.currentText() or None)

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
        """Read and draw ``processor``'s log and status (worker thread; None: clear at once)."""
        if processor is None or self.archive_path is None:
            self.model.clear()
            return
        self.model.read(processor)

    def _show(self) -> None:
        """Draw what the model holds now: the processor list, the log, the status and the plots."""
        model = self.model
        self.processor_box.blockSignals(True)
        self.processor_box.clear()
        self.processor_box.addItems(list(model.processors))
        if model.processor is not None:
            self.processor_box.setCurrentText(model.processor)
        self.processor_box.blockSignals(False)
        plog = model.plog
        self.month_box.clear()
        self.key_label.clear()
        self.graphics.show_data(model.data)
        if plog is None:
            self._show_message(self.empty_words if not model.processors else "No processor chosen.")
            return
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
        if model.data is not None:
            self.key_label.setText(legend_html(model.data))

    def _show_message(self, text: str) -> None:
        self.status_label.setText(html.escape(text))

    @staticmethod
    def _status_html(plog: Any) -> str:
        status = plog.status()
        if status.baseline_in_progress:
            head, colour, glyph = "BASELINE IN PROGRESS", "#444444", ""
        else:
            head, colour, glyph = VERDICT_WORDS[status.verdict], MARKS[status.verdict][0], GLYPHS[status.verdict]
        lines = status_text(plog, status).splitlines()
        body = "<br>".join(html.escape(line.strip()) for line in lines[1:])
        when = latest_words(status)
        film = plog.setup.extra.get(FILM_TYPE_KEY)
        if film:
            when += f"; QC film {html.escape(film)}"
        return (f"<b style='color:{colour}; font-size:13pt'>{glyph} {html.escape(plog.processor)}: {head}</b> "
                f"<span>({when})</span><br>{body}")
