"""The short form that stores the current analysis in the lot archive, one snapshot per strip.

The form checks what a person types before anything is written (a lot must
be named and known, or marked new; someone must have read the strips; the
dates must follow each other and not lie ahead), then makes one call to
:meth:`Archive.add_analysis <stripscan.archive.Archive.add_analysis>`, which
stores every strip in one transaction or nothing at all.  A refusal is a
message naming the problem; the form stays open with what was typed.

The archive is read (the pickers' choices) and written in a worker thread
(:class:`~stripscan.gui.tasks.TaskRunner`): a slow or locked archive leaves
the window responsive, the form saying what it waits for.
"""

from __future__ import annotations

import datetime as dt
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Union

from PySide6.QtCore import QDate, Signal
from PySide6.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDateEdit,
    QDialog,
    QDialogButtonBox,
    QFormLayout,
    QLabel,
    QLineEdit,
    QMessageBox,
    QVBoxLayout,
    QWidget,
)

from stripscan import CAUTION
from stripscan.archive import Archive, EmulsionLot, FilmType, Snapshot, snapshots_from_analysis
from stripscan.archive.entry_checks import already_stored, describe_stored
from stripscan.core.calibration import Calibration
from stripscan.core.records import Analysis
from stripscan.gui.errors import report_error, show_message
from stripscan.gui.models.location import as_location, location_exists, location_words
from stripscan.gui.tasks import TaskRunner

__all__ = ["SaveSnapshotDialog", "SaveForm", "ArchiveChoices", "check_form", "read_choices", "store_strips",
           "NONE", "lot_from_file_name"]

#: What the processor and sensitometer pickers show for "not recorded".
NONE = "(not recorded)"

CalibrationLike = Union[Calibration, dict, None]


@dataclass(frozen=True)
class SaveForm:
    """What the form holds, as plain values.

    Attributes
    ----------
    lot : str
    new_lot : bool
        Add the lot to the archive (bare, with no further details) when it is not there.
    processor, sensitometer : str or None
    operator : str
    exposed_on, processed_on, scanned_on : datetime.date
    notes : str
    film_type : str
        Film type of a new lot (kept with the lot); an existing lot keeps its own.
    """

    lot: str
    new_lot: bool
    processor: str | None
    sensitometer: str | None
    operator: str
    exposed_on: dt.date
    processed_on: dt.date
    scanned_on: dt.date
    notes: str = ""
    film_type: str = ""

    def details(self) -> dict[str, Any]:
        """The snapshot fields :meth:`Archive.add_analysis` takes as ``**details``."""
        return {"processor": self.processor, "sensitometer": self.sensitometer, "operator": self.operator,
                "exposed_on": self.exposed_on.isoformat(), "processed_on": self.processed_on.isoformat(),
                "scanned_on": self.scanned_on.isoformat(), "notes": self.notes}


@dataclass(frozen=True)
class ArchiveChoices:
    """What the pickers offer: the archive's lots, processors, sensitometers and known operators."""

    lots: tuple[str, ...] = ()
    processors: tuple[str, ...] = ()
    sensitometers: tuple[str, ...] = ()
    operators: tuple[str, ...] = ()
    #: Each lot's film type as stored ("" when none).
    film_types: tuple[tuple[str, str], ...] = ()
    #: The film types the archive knows.
    film_type_names: tuple[str, ...] = ()


def read_choices(path: str | os.PathLike[str] | None, *, progress: Any = None) -> ArchiveChoices:
    """The pickers' contents from an archive (empty when there is no file yet)."""
    if not location_exists(as_location(path)):
        return ArchiveChoices()
    with Archive.open(path, read_only=True) as archive:
        operators = sorted({s.operator for s in archive.list_snapshots(include_retired=True,
                                                                        include_superseded=True) if s.operator})
        lots = archive.list_lots()
        return ArchiveChoices(tuple(s.lot.lot_id for s in lots),
                              tuple(p.name for p in archive.list_processors()),
                              tuple(s.sensitometer_id for s in archive.list_sensitometers()), tuple(operators),
                              tuple((s.lot.lot_id, s.lot.film_type or "") for s in lots),
                              tuple(f.name for f in archive.list_film_types()))


@dataclass(frozen=True)
class StoreOutcome:
    """What :func:`store_strips` did: the snapshots stored, or what the archive holds of the scan already."""

    stored: tuple[Snapshot, ...] = ()
    held_already: str = ""


def store_strips(path: str | os.PathLike[str], analysis: Analysis, form: SaveForm, *,
                 calibration: dict[str, Any] | None, again: bool, new_lot: EmulsionLot | None,
                 new_film_type: FilmType | None, progress: Any = None) -> StoreOutcome:
    """Store one snapshot per strip of ``analysis`` in one transaction (run in a worker thread).

    Unless ``again``, nothing is stored when the archive holds the scan's
    strips already (the outcome says which).  ``new_lot`` (and its
    ``new_film_type``) are added first when the archive lacks them.
    """
    with Archive.open(path) as archive:
        if not again:
            stored = already_stored(archive, analysis)
            if stored:
                return StoreOutcome(held_already=describe_stored(stored))
        if new_lot is not None and form.lot not in [s.lot.lot_id for s in archive.list_lots()]:
            if new_film_type is not None and form.film_type not in [f.name for f in archive.list_film_types()]:
                archive.add_film_type(new_film_type)
            archive.add_lot(new_lot)
        return StoreOutcome(tuple(archive.add_analysis(analysis, form.lot, calibration=calibration,
                                                       create_missing=form.new_lot, **form.details())))


def lot_from_file_name(path: str | os.PathLike[str]) -> str:
    """The lot named in a scan's file name (``lot_M-2610-A_three_strips.tif`` → ``M-2610-A``); "" when none."""
    match = re.search(r"(?:^|[_\s-])lot[_\s-]+([A-Za-z0-9][A-Za-z0-9.-]*[A-Za-z0-9])", Path(path).stem, re.IGNORECASE)
    return match.group(1) if match else ""


def check_form(form: SaveForm, *, strips: int, known_lots: tuple[str, ...], today: dt.date) -> list[str]:
    """Every reason not to store the form, in plain words (empty: fine to store)."""
    problems = []
    if strips < 1:
        problems.append("There is no strip with densities to store; open and read a scan first.")
    if not form.lot.strip():
        problems.append("Choose the emulsion lot the strips were cut from.")
    elif form.lot.strip() not in known_lots and not form.new_lot:
        problems.append(f"Lot {form.lot.strip()!r} is not in the archive. Choose a lot from the list, "
                        "or tick \"New lot\" to add it.")
    if not form.operator.strip():
        problems.append("Enter who exposed, processed and read the strips (operator).")
    if form.processed_on < form.exposed_on:
        problems.append("The processing date lies before the exposure date.")
    if form.scanned_on < form.processed_on:
        problems.append("The scan date lies before the processing date.")
    ahead = [name for name, day in (("exposure", form.exposed_on), ("processing", form.processed_on),
                                     ("scan", form.scanned_on)) if day > today]
    if ahead:
        problems.append(f"The {', '.join(ahead)} date{'s lie' if len(ahead) > 1 else ' lies'} after today.")
    return problems


def _calibration_dict(calibration: CalibrationLike) -> dict[str, Any] | None:
    return calibration.to_dict() if isinstance(calibration, Calibration) else calibration


def _date_edit(day: dt.date) -> QDateEdit:
    edit = QDateEdit(QDate(day.year, day.month, day.day))
    edit.setCalendarPopup(True)
    edit.setDisplayFormat("yyyy-MM-dd")
    return edit


def _day(edit: QDateEdit) -> dt.date:
    q = edit.date()
    return dt.date(q.year(), q.month(), q.day())


class SaveSnapshotDialog(QDialog):
    """Store the current analysis in the lot archive, one snapshot per strip.

    Parameters
    ----------
    analysis : Analysis or None
        The open scan's results (e.g. ``Session.analysis()``).
    calibration : Calibration, dict or None
        The full calibration the analysis used (None in direct mode).
    archive_path : path-like, str or None
        The archive file (made when it does not exist yet), or a server's connection string.
    parent : QWidget, optional
    runner : TaskRunner, optional
        Reads and writes the archive off the UI thread (default: the form's
        own; a panel that outlives the form passes its own).

    Signals
    -------
    saved(str, list)
        The lot and the ids of the snapshots just stored.

    Attributes
    ----------
    stored : list of Snapshot
        What the last successful save stored.
    """

    saved = Signal(str, list)

    def __init__(self, analysis: Analysis | None, calibration: CalibrationLike,
                 archive_path: str | os.PathLike[str] | None, parent: QWidget | None = None, *,
                 runner: TaskRunner | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Save to the lot archive")
        self.analysis = analysis
        self.calibration = calibration
        self.archive_path = as_location(archive_path)
        self.stored: list[Snapshot] = []
        self.runner = runner if runner is not None else TaskRunner(self)
        #: Filled once the archive has been read (worker thread); until then the form cannot store.
        self.choices = ArchiveChoices()
        self.choices_read = False
        #: The store under way (the buttons wait for it).
        self.storing = False
        # Closed (and soon deleted): the archive's answer, when it comes, has nothing left to fill.
        self._closed = False
        self.finished.connect(lambda _result: setattr(self, "_closed", True))

        self.lot = QComboBox()
        self.lot.setEditable(True)
        # No lot is chosen for the person: a snapshot under the wrong lot would stay for good.
        self.lot.setCurrentText("")
        self.lot.lineEdit().setPlaceholderText("choose, or type a new lot's id")
        self.lot.setToolTip("The emulsion lot printed on the film box")
        self.new_lot = QCheckBox("New lot: add it to the archive")
        #: The lot's film type: typed for a new lot, shown (not changed) for a lot in the archive.
        self.film_type = QComboBox()
        self.film_type.setEditable(True)
        self.film_type.setCurrentText("")
        self.film_type.lineEdit().setPlaceholderText("optional, for a new lot: the film's type as on the box")
        self.lot_hint = QLabel()
        self.lot_hint.setStyleSheet("color: #555555")
        self.lot_hint.setWordWrap(True)
        self.lot.currentTextChanged.connect(self._lot_changed)
        self.processor = QComboBox()
        self.processor.addItem(NONE)
        self.sensitometer = QComboBox()
        self.sensitometer.addItem(NONE)
        self.operator = QComboBox()
        self.operator.setEditable(True)
        self.operator.setCurrentText("")
        self.operator.lineEdit().setPlaceholderText("who exposed, processed and read the strips")
        today = dt.date.today()
        self.exposed_on, self.processed_on, self.scanned_on = (_date_edit(today) for _ in range(3))
        self.notes = QLineEdit()
        self.notes.setPlaceholderText("optional")
        # Shown when the archive turns out to hold this scan's strips already.
        self.again = QCheckBox("Store again: the archive holds this scan's strips already")
        self.again.setVisible(False)

        form = QFormLayout()
        form.addRow("Emulsion lot: *", self.lot)
        form.addRow("", self.lot_hint)
        form.addRow("", self.new_lot)
        form.addRow("Film type:", self.film_type)
        form.addRow("Processor:", self.processor)
        form.addRow("Sensitometer:", self.sensitometer)
        form.addRow("Operator: *", self.operator)
        form.addRow("Exposed on:", self.exposed_on)
        form.addRow("Processed on:", self.processed_on)
        form.addRow("Scanned on:", self.scanned_on)
        form.addRow("Notes:", self.notes)
        form.addRow("", self.again)
        self.summary = QLabel(self._summary_text())
        self.summary.setWordWrap(True)
        #: What the form waits for: the archive being read, or the strips being stored.
        self.wait_label = QLabel("Reading the archive's lots, processors and operators…")
        self.wait_label.setStyleSheet("color: #8a4b00")
        self.wait_label.setWordWrap(True)
        self.buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Save | QDialogButtonBox.StandardButton.Cancel)
        n = self.strip_count
        self.buttons.button(QDialogButtonBox.StandardButton.Save).setText(
            f"Store {n} snapshot{'s' if n != 1 else ''}")
        self.buttons.accepted.connect(self.save)
        self.buttons.rejected.connect(self.reject)
        caution = QLabel(CAUTION)
        caution.setWordWrap(True)
        caution.setStyleSheet("color: #6d4c00; font-style: italic")
        required = QLabel("* required")
        required.setStyleSheet("color: #555555")
        layout = QVBoxLayout(self)
        layout.addWidget(self.summary)
        layout.addLayout(form)
        layout.addWidget(required)
        layout.addWidget(caution)
        layout.addWidget(self.wait_label)
        layout.addWidget(self.buttons)
        self.resize(520, self.sizeHint().height())
        # A lot named in the scan's file name is offered (to be checked, never stored unseen).
        suggested = lot_from_file_name(analysis.scan.path) if analysis is not None else ""
        if suggested:
            self.lot.setCurrentText(suggested)
            self.lot_hint.setText("Suggested from the scan's file name: check it against the film box.")
        self._set_waiting()
        self.runner.start(read_choices, self.archive_path, key="save-choices", on_done=self._choices_read,
                          on_error=self._choices_failed)

    # -- the archive's choices (read in a worker thread) -----------------------------------------
    def _choices_failed(self, error: BaseException) -> None:
        if self._closed:
            return
        # The form still works; storing will say what is wrong with the archive.
        self._choices_read(ArchiveChoices())
        report_error(self, "The archive's lots could not be read", error)

    def _choices_read(self, choices: ArchiveChoices) -> None:
        if self._closed:
            return
        self.choices = choices
        self.choices_read = True
        # What the person typed meanwhile stays; the lists are added under it.
        for box, items in ((self.lot, choices.lots), (self.film_type, choices.film_type_names),
                           (self.operator, choices.operators)):
            typed = box.currentText()
            box.blockSignals(True)
            box.clear()
            box.addItems(list(items))
            box.setCurrentText(typed)
            box.blockSignals(False)
        for box, items in ((self.processor, choices.processors), (self.sensitometer, choices.sensitometers)):
            box.clear()
            box.addItems([*items, NONE])
        suggested = lot_from_file_name(self.analysis.scan.path) if self.analysis is not None else ""
        if suggested and self.lot.currentText() == suggested:
            self.new_lot.setChecked(suggested not in choices.lots)
        self._lot_changed(self.lot.currentText())
        self._set_waiting()

    def reject(self) -> None:
        if self.storing:  # the strips are being stored: the form waits for the archive's answer
            return
        super().reject()

    @property
    def busy(self) -> bool:
        """Whether the form waits for the archive (reading its choices, or storing)."""
        return not self.choices_read or self.storing

    def _set_waiting(self) -> None:
        self.wait_label.setVisible(self.busy)
        if self.storing:
            self.wait_label.setText("Storing the strips… (the archive may be busy with another program; "
                                    "the window stays usable)")
        self.buttons.button(QDialogButtonBox.StandardButton.Save).setEnabled(not self.busy)
        self.buttons.button(QDialogButtonBox.StandardButton.Cancel).setEnabled(not self.storing)

    def _lot_changed(self, text: str) -> None:
        known = dict(self.choices.film_types)
        lot = text.strip()
        if lot in known:
            self.film_type.setCurrentText(known[lot])
            self.film_type.setEnabled(False)
            self.film_type.setToolTip("The lot's film type as stored in the archive")
        elif not self.film_type.isEnabled():
            self.film_type.setCurrentText("")
            self.film_type.setEnabled(True)
            self.film_type.setToolTip("Kept with the new lot")

    @property
    def strip_count(self) -> int:
        return len(self.analysis.strips) if self.analysis is not None else 0

    def _summary_text(self) -> str:
        if self.analysis is None:
            return "No scan has been read: there is nothing to store."
        n = self.strip_count
        lines = [f"Scan <b>{Path(self.analysis.scan.path).name}</b> (sha256 {self.analysis.scan.sha256[:12]}…): "
                 f"{n} strip{'s' if n != 1 else ''}, each stored as one snapshot that is never changed afterwards."]
        used = self.analysis.calibration or {}
        if used.get("mode") == "direct":
            lines.append("<span style='color:#b35c00'>These densities are uncalibrated (direct mode); "
                         "the snapshots will say so.</span>")
        else:
            lines.append(f"Calibration sha256 {str(used.get('sha256', ''))[:12]}…, made {used.get('created', '?')}"
                         + ("." if self.calibration is not None else "; only its summary is at hand and stored."))
        lines.append(f"Archive: {location_words(self.archive_path) or 'none chosen'}")
        return "<br>".join(lines)

    # -- reading and checking the form ----------------------------------------------------------
    def form(self) -> SaveForm:
        """The form's values as typed."""
        def picked(box: QComboBox) -> str | None:
            return None if box.currentText() == NONE else box.currentText()

        return SaveForm(lot=self.lot.currentText().strip(), new_lot=self.new_lot.isChecked(),
                        processor=picked(self.processor), sensitometer=picked(self.sensitometer),
                        operator=self.operator.currentText().strip(), exposed_on=_day(self.exposed_on),
                        processed_on=_day(self.processed_on), scanned_on=_day(self.scanned_on),
                        notes=self.notes.text().strip(), film_type=self.film_type.currentText().strip())

    def set_dates(self, exposed: dt.date, processed: dt.date | None = None, scanned: dt.date | None = None) -> None:
        """Set the three dates (processing and scan default to the exposure day)."""
        for edit, day in ((self.exposed_on, exposed), (self.processed_on, processed or exposed),
                          (self.scanned_on, scanned or processed or exposed)):
            edit.setDate(QDate(day.year, day.month, day.day))

    def _refuse(self, text: str) -> QMessageBox:
        return show_message(self, "Nothing was stored", text)

    def save(self) -> bool:
        """Check the form and store one snapshot per strip (worker thread); True when the store was started.

        A refusal shows a message and stores nothing; the form stays open.
        When the strips are stored, ``saved`` follows and the form closes.
        """
        if self.busy:
            return False
        if self.archive_path is None:
            self._refuse("No archive is chosen; choose the archive file first.")
            return False
        form = self.form()
        problems = check_form(form, strips=self.strip_count, known_lots=self.choices.lots, today=dt.date.today())
        if problems:
            self._refuse("\n".join(f"• {p}" for p in problems))
            return False
        assert self.analysis is not None  # check_form refuses an analysis without strips
        new_lot_record = new_film_type = None
        if form.new_lot and form.film_type and form.lot not in self.choices.lots:
            try:
                new_lot_record = EmulsionLot(form.lot, film_type=form.film_type)
                new_film_type = None if form.film_type in self.choices.film_type_names else FilmType(form.film_type)
                # Every strip is checked before the lot is written, so a refusal leaves the archive as it was.
                snapshots_from_analysis(self.analysis, form.lot, calibration=_calibration_dict(self.calibration),
                                        **form.details())
            except (TypeError, ValueError) as exc:
                report_error(self, "Nothing was stored", exc)
                return False
        self.storing = True
        self._set_waiting()
        self.runner.start(store_strips, self.archive_path, self.analysis, form,
                          calibration=_calibration_dict(self.calibration), again=self.again.isChecked(),
                          new_lot=new_lot_record, new_film_type=new_film_type, key="save-store",
                          on_done=lambda outcome: self._stored(form, outcome), on_error=self._store_failed)
        return True

    def _store_failed(self, error: BaseException) -> None:
        self.storing = False
        self._set_waiting()
        report_error(self, "Nothing was stored", error)  # one transaction: nothing of it was stored

    def _stored(self, form: SaveForm, outcome: StoreOutcome) -> None:
        self.storing = False
        self._set_waiting()
        if outcome.held_already:
            # Said, with "Store again" offered: the same strips twice count twice in every trend.
            self.again.setVisible(True)
            self._refuse(f"The archive holds this scan's strips already ({outcome.held_already}). Storing "
                         "them again counts them twice in every trend and comparison; tick \"Store again\" "
                         "if that is meant.")
            return
        self.stored = list(outcome.stored)
        self.saved.emit(form.lot, [s.id for s in self.stored])
        self.accept()
