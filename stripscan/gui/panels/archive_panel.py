"""The lot archive in the workbench: lots, their snapshots, one snapshot in full, trends.

Everything shown is read straight from the archive API
(:class:`stripscan.archive.Archive`), opened read-only for each look, so a
command line run writing to the same file at the same time is seen on the
next refresh.  A snapshot is shown read-only: its curve, its figures as
stored, its steps, where it came from (scan file and sha256, calibration,
operator, dates, program version) and its chain of revisions.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QFont
from PySide6.QtWidgets import (
    QAbstractItemView,
    QCheckBox,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QPushButton,
    QSplitter,
    QTableWidget,
    QTableWidgetItem,
    QTabWidget,
    QVBoxLayout,
    QWidget,
)

from stripscan import CAUTION
from stripscan.archive import Archive, LotSummary, Snapshot, SnapshotNote, SnapshotSummary, StepReadings
from stripscan.core.records import Analysis
from stripscan.core.curve import strip_curve
from stripscan.core.curve_marks import CURVE_MARKS
from stripscan.gui.views.curve_view import EMPTY_RANGE, mark_pen, mark_points
from stripscan.gui.errors import report_error
from stripscan.gui.panels.figures_panel import VALUE_ROLE
from stripscan.gui.dialogs.save_snapshot_dialog import CalibrationLike, SaveSnapshotDialog
from stripscan.gui.style import strip_colour
from stripscan.gui.views.tables import STEP_COLUMNS, figure_rows, step_columns, step_rows
from stripscan.gui.tasks import TaskRunner
from stripscan.gui.views.trend_view import TrendView

__all__ = ["ArchivePanel", "SnapshotView", "SnapshotRecord", "read_snapshot", "provenance_rows", "status_text"]

#: Item data role holding a snapshot's id in the tables.
ID_ROLE = Qt.ItemDataRole.UserRole + 2

# (title, SnapshotSummary field, digits) of the snapshot list.
_SUMMARY_COLUMNS: tuple[tuple[str, str, int], ...] = (
    ("Base+fog", "base_fog", 3), ("Speed", "speed_log_exposure", 3),
    ("Avg. grad.", "average_gradient", 2),
)
#: Mid-density and density difference go with the steps they were read at (Archive.step_readings).
_STEP_READING_COLUMNS = ("Mid-dens.", "MD step", "Dens. diff.", "DD steps")


@dataclass(frozen=True)
class SnapshotRecord:
    """One snapshot with what an audit asks next to it.

    Attributes
    ----------
    snapshot : Snapshot
    history : list of Snapshot
        The whole revision chain, oldest first (just the snapshot when never revised).
    notes : list of SnapshotNote
        Remarks added after storing.
    calibration : dict or None
        The stored calibration the snapshot names.
    """

    snapshot: Snapshot
    history: list[Snapshot]
    notes: list[SnapshotNote]
    calibration: dict[str, Any] | None

    @property
    def superseded_by(self) -> int | None:
        """Id of the revision that corrects this snapshot, or None."""
        return next((s.id for s in self.history if s.revises == self.snapshot.id), None)


def read_snapshot(path: str | os.PathLike[str], snapshot_id: int) -> SnapshotRecord:
    """Read a snapshot, its revision chain, notes and calibration in one look at the archive."""
    with Archive.open(path, read_only=True) as archive:
        snapshot = archive.get_snapshot(snapshot_id)
        digest = snapshot.calibration_hash
        return SnapshotRecord(snapshot, archive.history(snapshot_id), archive.list_notes(snapshot_id),
                              archive.get_calibration(digest) if digest else None)


def status_text(item: Snapshot | SnapshotSummary, superseded_by: int | None) -> str:
    """"current", "corrected by N" or "retired …" in plain words."""
    if item.retired_at is not None:
        return f"retired {item.retired_at[:10]}: {item.retired_reason}"
    if superseded_by is not None:
        return f"corrected by snapshot {superseded_by}"
    return "current"


def _or_dash(value: object) -> str:
    return "—" if value in (None, "") else str(value)


def provenance_rows(record: SnapshotRecord) -> list[tuple[str, str]]:
    """(what, value) lines saying where a snapshot came from, for the audit trail."""
    s, scan, cal = record.snapshot, record.snapshot.scan, record.calibration
    dpi = f"{scan.dpi:g} dpi" if scan.dpi else "resolution unknown"
    rows = [
        ("Snapshot", str(s.id)), ("Status", status_text(s, record.superseded_by)),
        ("Emulsion lot", s.lot_id), ("Processor", _or_dash(s.processor)),
        ("Sensitometer", _or_dash(s.sensitometer)), ("Operator", _or_dash(s.operator)),
        ("Exposed on", _or_dash(s.exposed_on)), ("Processed on", _or_dash(s.processed_on)),
        ("Scanned on", _or_dash(s.scanned_on)), ("Stored (UTC)", s.created_at),
        ("Program version", f"stripscan {s.program_version}" if s.program_version else "—"),
        ("Scan file", scan.path), ("Scan sha256", scan.sha256),
        ("Scan", f"{scan.width} × {scan.height} px, {dpi}, {scan.bits}-bit, {scan.channel}, {scan.decoding}"),
        ("Strip on the scan", str(s.strip.index)),
    ]
    if cal is not None and cal.get("mode") == "direct":
        rows.append(("Calibration", "none: direct mode, densities uncalibrated"))
    else:
        rows.append(("Calibration sha256", _or_dash(s.calibration_hash)))
    if cal is not None and cal.get("mode") != "direct":
        rows += [("Calibration made", _or_dash(cal.get("created"))),
                 ("Calibration tablet scan sha256", _or_dash(cal.get("scan_sha256")))]
    if s.revises is not None:
        rows.append(("Corrects snapshot", f"{s.revises}: {s.revision_reason}"))
    if s.notes:
        rows.append(("Notes", s.notes))
    if s.strip.warnings:
        rows.append(("Warnings of this strip", "; ".join(s.strip.warnings)))
    return rows


def _cell(text: str, value: object = None, *, right: bool = False) -> QTableWidgetItem:
    item = QTableWidgetItem(text)
    item.setFlags(Qt.ItemFlag.ItemIsEnabled | Qt.ItemFlag.ItemIsSelectable)
    if value is not None:
        item.setData(VALUE_ROLE, value)
    if right:
        item.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
    return item


def _table(titles: list[str], *, stretch_last: bool = True) -> QTableWidget:
    table = QTableWidget(0, len(titles))
    table.setHorizontalHeaderLabels(titles)
    table.verticalHeader().hide()
    table.verticalHeader().setDefaultSectionSize(22)
    table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
    table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
    table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
    table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
    table.horizontalHeader().setStretchLastSection(stretch_last)
    return table


def _fill(table: QTableWidget, rows: list[list[QTableWidgetItem]]) -> None:
    table.setRowCount(len(rows))
    for r, cells in enumerate(rows):
        for c, item in enumerate(cells):
            table.setItem(r, c, item)


def _number(value: float | None, digits: int) -> str:
    return "—" if value is None else f"{value:.{digits}f}"


def _caution() -> QLabel:
    label = QLabel(CAUTION)
    label.setWordWrap(True)
    label.setStyleSheet("color: #6d4c00; font-style: italic")
    return label


class _StoredCurve(pg.PlotWidget):
    """The stored strip's characteristic curve, without anything to drag."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        plot = self.getPlotItem()
        plot.setLabel("bottom", "Log relative exposure")
        plot.setLabel("left", "Optical density (OD)")
        plot.showGrid(x=True, y=True, alpha=0.15)
        plot.setMenuEnabled(False)
        # The marks and words of the window's curve and the reports (stripscan.core.curve_marks); the legend on a
        # background of its own, and plain units on the axes.
        for side in ("left", "bottom"):
            plot.getAxis(side).enableAutoSIPrefix(False)
        legend = plot.addLegend(offset=(10, 10), labelTextSize="8pt", brush=pg.mkBrush(255, 255, 255, 235),
                                pen=pg.mkPen("#9e9e9e"))
        colour = strip_colour(0)
        self.line = pg.PlotCurveItem(pen=pg.mkPen(colour, width=2))
        self.bars = pg.ErrorBarItem(x=np.zeros(0), y=np.zeros(0), height=np.zeros(0), beam=0.012,
                                    pen=pg.mkPen(colour, width=1))
        self.points = pg.ScatterPlotItem(size=8, pen=pg.mkPen(colour), brush=pg.mkBrush(colour))
        self.unused = mark_points(CURVE_MARKS["unused"], 8)
        self.excluded = mark_points(CURVE_MARKS["excluded"], 10)
        self.gradient = pg.PlotCurveItem(pen=mark_pen(CURVE_MARKS["gradient"], 3))
        self.speed = mark_points(CURVE_MARKS["speed"], 14)
        self.base_fog = pg.InfiniteLine(angle=0, movable=False, pen=mark_pen(CURVE_MARKS["base_fog"], 1))
        for item in (self.base_fog, self.line, self.bars, self.unused, self.excluded, self.points, self.gradient,
                     self.speed):
            plot.addItem(item)
        legend.addItem(self.points, f"{CURVE_MARKS['step'].words} (±1 sd)")
        legend.addItem(self.unused, CURVE_MARKS["unused"].words)
        legend.addItem(self.excluded, CURVE_MARKS["excluded"].words)
        legend.addItem(self.gradient, CURVE_MARKS["gradient"].words)
        legend.addItem(self.speed, CURVE_MARKS["speed"].words)
        plot.setRange(xRange=EMPTY_RANGE[0], yRange=EMPTY_RANGE[1], padding=0.02)

    def show_strip(self, snapshot: Snapshot | None) -> None:
        strip = snapshot.strip if snapshot is not None else None
        steps = strip.steps if strip is not None else ()
        used = [s for s in steps if s.in_range and not s.excluded and np.isfinite(s.od)]
        other = [s for s in steps if s not in used and not s.excluded and np.isfinite(s.od)]
        excluded = [s for s in steps if s.excluded and np.isfinite(s.od)]
        x, y = np.array([s.log_exposure for s in used]), np.array([s.od for s in used])
        self.points.setData(x, y)
        self.unused.setData([s.log_exposure for s in other], [s.od for s in other])
        self.excluded.setData([s.log_exposure for s in excluded], [s.od for s in excluded])
        plot = self.getPlotItem()
        if steps:
            plot.enableAutoRange()
        else:
            plot.setRange(xRange=EMPTY_RANGE[0], yRange=EMPTY_RANGE[1], padding=0.02)
        sd = np.array([s.od_sd if np.isfinite(s.od_sd) else 0.0 for s in used])
        self.bars.setData(x=x, y=y, height=2.0 * sd)
        curve = strip_curve(strip) if strip is not None else None
        if curve is None:
            self.line.setData([], [])
        else:
            grid = np.linspace(curve.log_exposure[0], curve.log_exposure[-1], 300)
            self.line.setData(grid, curve(grid))
        f = strip.figures if strip is not None else None
        bf = f.base_fog if f is not None else None
        self.base_fog.setVisible(bf is not None)
        if bf is not None:
            self.base_fog.setValue(bf)
        self.gradient.setData([], [])
        self.speed.setData([], [])
        ref = f.net_reference if f is not None else None  # where the net densities count from
        if ref is None:
            return
        low, high = f.settings.get("gradient_low", 0.25), f.settings.get("gradient_high", 2.0)
        if f.gradient_low_log_exposure is not None and f.gradient_high_log_exposure is not None:
            self.gradient.setData([f.gradient_low_log_exposure, f.gradient_high_log_exposure], [ref + low, ref + high])
        if f.speed_log_exposure is not None:
            self.speed.setData([f.speed_log_exposure], [ref + f.settings.get("speed_net_density", 1.0)])


class SnapshotView(QWidget):
    """One stored snapshot, read-only: curve, figures, steps, provenance, revisions.

    Signals
    -------
    open_requested(int)
        A person asked to see another snapshot of the revision chain.
    """

    open_requested = Signal(int)

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.record: SnapshotRecord | None = None
        self.title = QLabel("No snapshot open. Choose one from the list and press Open, or click a trend point.")
        self.title.setWordWrap(True)
        bold = QFont()
        bold.setBold(True)
        self.title.setFont(bold)
        self.curve = _StoredCurve()
        self.figures = _table(["Figure", "Value", "Unit"])
        self.figures.horizontalHeader().setSectionResizeMode(0, QHeaderView.ResizeMode.Stretch)
        self.figures.horizontalHeader().setStretchLastSection(False)
        self.steps = _table(list(STEP_COLUMNS))
        self.provenance = _table(["", "Value"])
        self.provenance.horizontalHeader().hide()
        self.provenance.setWordWrap(True)
        self.history = _table(["Snapshot", "Stored (UTC)", "Change", "Status"])
        self.history.setToolTip("Double-click a line to open that version")
        self.history.cellDoubleClicked.connect(self._history_clicked)
        self.notes = QLabel()
        self.notes.setWordWrap(True)
        self.notes.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        history_page = QWidget()
        history_layout = QVBoxLayout(history_page)
        history_layout.setContentsMargins(0, 0, 0, 0)
        history_layout.addWidget(self.history, 1)
        history_layout.addWidget(self.notes)
        self.tabs = QTabWidget()
        self.tabs.addTab(self.figures, "Figures")
        self.tabs.addTab(self.steps, "Steps")
        self.tabs.addTab(self.provenance, "Where it came from")
        self.tabs.addTab(history_page, "Revisions and notes")
        split = QSplitter(Qt.Orientation.Vertical)
        split.addWidget(self.curve)
        split.addWidget(self.tabs)
        split.setSizes([330, 300])
        layout = QVBoxLayout(self)
        layout.setContentsMargins(2, 2, 2, 2)
        layout.addWidget(self.title)
        layout.addWidget(split, 1)
        self.show_record(None)

    def show_record(self, record: SnapshotRecord | None) -> None:
        """Show a snapshot (None: empty)."""
        self.record = record
        snapshot = record.snapshot if record is not None else None
        self.curve.show_strip(snapshot)
        f = snapshot.figures if snapshot is not None else None
        levels = (f.settings.get("gradient_low", 0.25), f.settings.get("gradient_high", 2.0)) if f else (0.25, 2.0)
        _fill(self.figures, [[_cell(r.label, r.key), _cell(r.text, r.value, right=True), _cell(r.unit or "—")]
                             for r in figure_rows(f, levels)])
        strip = snapshot.strip if snapshot else None
        self.steps.setHorizontalHeaderLabels(list(step_columns(strip)))  # "noise only" when read uncalibrated
        _fill(self.steps, [[_cell(c, right=k in (1, 2, 3)) for k, c in enumerate(row)] for row in step_rows(strip)])
        _fill(self.provenance, [[_cell(k), _cell(v)] for k, v in (provenance_rows(record) if record else [])])
        self.provenance.resizeRowsToContents()
        self._show_history(record)
        if record is None:
            self.title.setText("No snapshot open. Choose one from the list and press Open, or click a trend point.")
            return
        s = record.snapshot
        self.title.setText(f"Snapshot {s.id}: lot {s.lot_id}, strip {s.strip.index}, {s.date} "
                           f"({status_text(s, record.superseded_by)})")

    def _show_history(self, record: SnapshotRecord | None) -> None:
        chain = record.history if record is not None else []
        later = {s.revises: s.id for s in chain if s.revises is not None}
        rows = []
        for s in chain:
            change = f"corrects {s.revises}: {s.revision_reason}" if s.revises is not None else "first reading"
            cells = [_cell(str(s.id), s.id), _cell(s.created_at), _cell(change), _cell(status_text(s, later.get(s.id)))]
            if s.id == record.snapshot.id:  # type: ignore[union-attr]
                for cell in cells:
                    font = cell.font()
                    font.setBold(True)
                    cell.setFont(font)
            rows.append(cells)
        _fill(self.history, rows)
        notes = record.notes if record is not None else []
        self.notes.setText("\n".join(f"• {n.created_at[:10]} {n.author or 'unknown'}: {n.text}" for n in notes)
                           if notes else "No notes were added to this snapshot.")

    def _history_clicked(self, row: int, _column: int) -> None:
        self.open_requested.emit(int(self.history.item(row, 0).data(VALUE_ROLE)))

    def value_of(self, key: str) -> float | None:
        """The stored number behind the figure row ``key``."""
        for k in range(self.figures.rowCount()):
            if self.figures.item(k, 0).data(VALUE_ROLE) == key:
                return self.figures.item(k, 1).data(VALUE_ROLE)
        raise KeyError(key)

    def provenance_value(self, what: str) -> str:
        """The shown text of the provenance line ``what``."""
        for k in range(self.provenance.rowCount()):
            if self.provenance.item(k, 0).text() == what:
                return self.provenance.item(k, 1).text()
        raise KeyError(what)


class ArchivePanel(QWidget):
    """Lots, their snapshots, one snapshot and trends, over one archive file.

    Parameters
    ----------
    archive_path : path-like or None
        The archive file.  It is only read here; a missing file shows an
        empty panel that says so (saving the first snapshot makes it).

    Signals
    -------
    snapshot_opened(int)
        Id of the snapshot just shown.
    demo_ready(str)
        Path of a demo archive just built and shown (see :meth:`build_demo`).

    Attributes
    ----------
    runner : TaskRunner
        Runs the demo build off the UI thread; its ``busy_changed`` and
        ``progress`` signals can drive a progress bar.
    """

    snapshot_opened = Signal(int)
    demo_ready = Signal(str)

    def __init__(self, archive_path: str | os.PathLike[str] | None, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.archive_path = Path(archive_path) if archive_path is not None else None
        self.lot_summaries: list[LotSummary] = []
        self.snapshots: list[SnapshotSummary] = []
        self.runner = TaskRunner(self)
        self.where = QLabel()
        self.where.setWordWrap(True)
        self.where.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.refresh_button = QPushButton("Refresh")
        self.refresh_button.setToolTip("Read the archive again (another program may have added to it)")
        self.refresh_button.clicked.connect(self.refresh)
        self.lots = _table(["Lot", "Film type", "Snapshots", "First", "Last"])
        self.lots.itemSelectionChanged.connect(self._lot_changed)
        self.lots.setMaximumHeight(150)  # a handful of lots at a time; the snapshots need the room
        self.snapshot_title = QLabel("Snapshots")
        self.show_all = QCheckBox("Also corrected and retired")
        self.show_all.setToolTip("List snapshots that a revision corrects or that were retired, too")
        self.show_all.toggled.connect(self._fill_snapshots)
        self.own_steps = QCheckBox("Each strip's own steps")
        self.own_steps.setToolTip(
            "Mid-density and density difference at the steps each strip chose for itself. Unticked, every strip "
            "of the lot is read at the lot's kept steps (those its first snapshot chose), as the trends are, so "
            "that its strips compare")
        self.own_steps.toggled.connect(self._fill_snapshots)
        self.snapshot_table = _table(["No.", "Date", "Strip", "Operator", *(t for t, _, _ in _SUMMARY_COLUMNS),
                                      *_STEP_READING_COLUMNS, "Status"])
        self.snapshot_table.cellDoubleClicked.connect(lambda row, _col: self.open_selected())
        self.open_button = QPushButton("Open the snapshot")
        self.open_button.clicked.connect(self.open_selected)
        self.view = SnapshotView()
        self.view.open_requested.connect(self.open_snapshot)
        self.trend = TrendView(self.archive_path)
        self.trend.snapshot_clicked.connect(self.open_snapshot)
        self.tabs = QTabWidget()
        self.tabs.addTab(self.view, "Snapshot")
        self.tabs.addTab(self.trend, "Trend")

        head = QHBoxLayout()
        head.addWidget(self.where, 1)
        head.addWidget(self.refresh_button)
        listing = QHBoxLayout()
        listing.addWidget(self.snapshot_title, 1)
        listing.addWidget(self.own_steps)
        listing.addWidget(self.show_all)
        left = QWidget()
        left_layout = QVBoxLayout(left)
        left_layout.setContentsMargins(0, 0, 0, 0)
        left_layout.addWidget(QLabel("Emulsion lots"))
        left_layout.addWidget(self.lots, 1)
        left_layout.addLayout(listing)
        left_layout.addWidget(self.snapshot_table, 5)
        left_layout.addWidget(self.open_button, 0, Qt.AlignmentFlag.AlignRight)
        split = QSplitter(Qt.Orientation.Horizontal)
        split.addWidget(left)
        split.addWidget(self.tabs)
        split.setSizes([600, 800])
        self.caution = _caution()
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        layout.addLayout(head)
        layout.addWidget(split, 1)
        layout.addWidget(self.caution)
        self.refresh()

    # -- the archive -------------------------------------------------------------------------
    def set_archive(self, path: str | os.PathLike[str] | None) -> None:
        """Show another archive file."""
        self.archive_path = Path(path) if path is not None else None
        self.view.show_record(None)
        self.trend.set_archive(self.archive_path)
        self.refresh()

    def refresh(self) -> None:
        """Read lots and snapshots again, keeping the selected lot and the open snapshot."""
        chosen = self.selected_lot()
        path = self.archive_path
        self.lot_summaries = []
        if path is None:
            self.where.setText("No archive chosen.")
        elif not path.is_file():
            self.where.setText(f"No archive yet at {path}; it is made when the first snapshot is saved.")
        else:
            self.where.setText(f"Archive: {path}")
            try:
                with Archive.open(path, read_only=True) as archive:
                    self.lot_summaries = archive.list_lots()
            except Exception as exc:  # shown, never fatal
                report_error(self, "The archive could not be read", exc)
        self.lots.blockSignals(True)
        try:
            _fill(self.lots, [[_cell(s.lot.lot_id, s.lot.lot_id), _cell(_or_dash(s.lot.film_type)),
                               _cell(str(s.snapshot_count), s.snapshot_count, right=True),
                               _cell(_or_dash(s.first_date)), _cell(_or_dash(s.last_date))]
                              for s in self.lot_summaries])
        finally:
            self.lots.blockSignals(False)
        ids = [s.lot.lot_id for s in self.lot_summaries]
        self.select_lot(chosen if chosen in ids else (ids[0] if ids else None))
        self.trend.refresh()
        if self.view.record is not None:
            self.open_snapshot(self.view.record.snapshot.id, quiet=True)

    # -- lots and snapshots ------------------------------------------------------------------
    def selected_lot(self) -> str | None:
        rows = self.lots.selectionModel().selectedRows()
        return self.lots.item(rows[0].row(), 0).text() if rows else None

    def select_lot(self, lot: str | None) -> None:
        """Select a lot by id (None: none) and list its snapshots."""
        self.lots.blockSignals(True)
        try:
            self.lots.clearSelection()
            for k in range(self.lots.rowCount()):
                if self.lots.item(k, 0).text() == lot:
                    self.lots.selectRow(k)
        finally:
            self.lots.blockSignals(False)
        self._fill_snapshots()

    def _lot_changed(self) -> None:
        self._fill_snapshots()

    def _fill_snapshots(self, *_: object) -> None:
        lot = self.selected_lot()
        self.snapshots = []
        readings: dict[int, StepReadings] = {}
        if lot is not None and self.archive_path is not None and self.archive_path.is_file():
            every = self.show_all.isChecked()
            try:
                with Archive.open(self.archive_path, read_only=True) as archive:
                    self.snapshots = archive.list_snapshots(lot, include_retired=every, include_superseded=every)
                    readings = archive.step_readings(lot, at_lot_steps=not self.own_steps.isChecked(),
                                                     include_retired=every, include_superseded=every)
            except Exception as exc:  # shown, never fatal
                report_error(self, f"The snapshots of lot {lot} could not be read", exc)
        rows = []
        for s in self.snapshots:
            cells = [_cell(str(s.id), s.id, right=True), _cell(s.date), _cell(str(s.strip_index), right=True),
                     _cell(_or_dash(s.operator))]
            cells += [_cell(_number(getattr(s, name), digits), getattr(s, name), right=True)
                      for _, name, digits in _SUMMARY_COLUMNS]
            qc = readings.get(s.id, StepReadings(None, None, None, None, None))
            dd_steps = f"{qc.dd_high_step}−{qc.dd_low_step}" if qc.dd_high_step is not None else "—"
            cells += [_cell(_number(qc.mid_density, 3), qc.mid_density, right=True),
                      _cell(_or_dash(qc.mid_step), qc.mid_step, right=True),
                      _cell(_number(qc.density_difference, 3), qc.density_difference, right=True),
                      _cell(dd_steps, right=True)]
            cells.append(_cell(status_text(s, s.superseded_by)))
            if not s.current:
                for cell in cells:
                    cell.setForeground(pg.mkColor("#8a8a8a"))
            rows.append(cells)
        _fill(self.snapshot_table, rows)
        self.snapshot_title.setText(f"Snapshots of lot {lot} ({len(self.snapshots)})" if lot else "Snapshots")
        self.open_button.setEnabled(bool(self.snapshots))
        if self.snapshots:
            self.snapshot_table.selectRow(len(self.snapshots) - 1)  # the latest reading first to hand

    def selected_snapshot(self) -> int | None:
        rows = self.snapshot_table.selectionModel().selectedRows()
        return int(self.snapshot_table.item(rows[0].row(), 0).data(VALUE_ROLE)) if rows else None

    def open_selected(self) -> bool:
        """Open the snapshot selected in the list."""
        snapshot_id = self.selected_snapshot()
        return snapshot_id is not None and self.open_snapshot(snapshot_id)

    def open_snapshot(self, snapshot_id: int, *, quiet: bool = False) -> bool:
        """Show snapshot ``snapshot_id``; False (with a message) when it cannot be read."""
        if self.archive_path is None:
            return False
        try:
            record = read_snapshot(self.archive_path, snapshot_id)
        except Exception as exc:  # shown, never fatal
            if not quiet:
                report_error(self, f"Snapshot {snapshot_id} could not be opened", exc)
            self.view.show_record(None)
            return False
        self.view.show_record(record)
        for k, summary in enumerate(self.snapshots):
            if summary.id == snapshot_id:  # the list shows which line is open
                self.snapshot_table.selectRow(k)
        if not quiet:
            self.tabs.setCurrentWidget(self.view)
            self.snapshot_opened.emit(snapshot_id)
        return True

    # -- storing ----------------------------------------------------------------------------
    def save_dialog(self, analysis: Analysis | None, calibration: CalibrationLike) -> SaveSnapshotDialog:
        """Open the short form that stores ``analysis`` in this panel's archive; the panel follows."""
        dialog = SaveSnapshotDialog(analysis, calibration, self.archive_path, self)
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        dialog.saved.connect(self._saved)
        dialog.open()
        return dialog

    def _saved(self, lot: str, ids: list[int]) -> None:
        self.refresh()
        self.select_lot(lot)

    def build_demo(self, folder: str | os.PathLike[str]) -> None:
        """Build the invented demo archive in ``folder`` (a worker thread, ~10 s) and show it.

        The user's own archive is never touched: the builder refuses its
        folder.  ``demo_ready`` follows when the archive is shown.
        """
        from stripscan.services.demo_archive import build_demo_archive

        self.where.setText(f"Building the demo archive in {folder}…")
        self.runner.start(build_demo_archive, Path(folder), key="demo", on_done=self._demo_built,
                          on_error=lambda exc: self._demo_failed(exc))

    def _demo_built(self, path: Path) -> None:
        self.set_archive(path)
        self.demo_ready.emit(str(path))

    def _demo_failed(self, error: BaseException) -> None:
        self.refresh()
        report_error(self, "The demo archive was not built", error)
