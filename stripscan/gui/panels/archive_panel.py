"""The lot archive in the workbench: lots, their snapshots, one snapshot in full, trends.

What is shown and what is read next is decided by the page's model
(:class:`stripscan.gui.models.archive_page.ArchivePage`); its reading runs in
a worker thread (:class:`~stripscan.gui.tasks.TaskRunner`), so a slow or
locked archive never freezes the window, and a command line run writing to
the same file at the same time is seen on the next refresh.  A snapshot is shown read-only: its curve, its figures as
stored, its steps, where it came from (scan file and sha256, calibration,
operator, dates, program version) and its chain of revisions.
"""

from __future__ import annotations

import os
from pathlib import Path

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
from stripscan.archive import LotSummary, Snapshot, SnapshotSummary
from stripscan.gui.models.location import ArchiveLocation
from stripscan.gui.models.archive_page import (
    SNAPSHOT_COLUMNS,
    ArchivePage,
    SnapshotRecord,
    history_rows,
    provenance_rows,
    read_snapshot,
    record_title,
)
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

__all__ = ["ArchivePanel", "SnapshotView", "SnapshotRecord", "read_snapshot", "provenance_rows"]

#: Item data role holding a snapshot's id in the tables.
ID_ROLE = Qt.ItemDataRole.UserRole + 2


def _or_dash(value: object) -> str:
    return "—" if value in (None, "") else str(value)


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
        self.title = QLabel(record_title(None))
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
        self.title.setText(record_title(record))

    def _show_history(self, record: SnapshotRecord | None) -> None:
        rows = []
        for snapshot_id, stored, change, status in history_rows(record):
            cells = [_cell(str(snapshot_id), snapshot_id), _cell(stored), _cell(change), _cell(status)]
            if snapshot_id == record.snapshot.id:  # type: ignore[union-attr]
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
    archive_path : path-like, str or None
        The archive file, or a server's connection string.  It is only read
        here; a missing file shows an empty panel that says so (saving the
        first snapshot makes it).
    parent : QWidget, optional
    runner : TaskRunner, optional
        Runs the page's reading and storing off the UI thread (default: the
        panel's own).

    Signals
    -------
    snapshot_opened(int)
        Id of the snapshot just shown.
    demo_ready(str)
        Path of a demo archive just built and shown (see :meth:`build_demo`).

    Attributes
    ----------
    model : ArchivePage
        What the page shows and reads, without Qt.
    runner : TaskRunner
        Runs the reading, storing and the demo build off the UI thread; its
        ``busy_changed`` and ``progress`` signals can drive a progress bar.
    """

    snapshot_opened = Signal(int)
    demo_ready = Signal(str)

    def __init__(self, archive_path: str | os.PathLike[str] | None, parent: QWidget | None = None, *,
                 runner: TaskRunner | None = None) -> None:
        super().__init__(parent)
        self.runner = runner if runner is not None else TaskRunner(self)
        self.model = ArchivePage(archive_path, run=self.runner.start)
        # Set by open_latest: the next snapshot list read opens its latest line.
        self._open_when_listed = False
        self.where = QLabel()
        self.where.setWordWrap(True)
        self.where.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        #: Said while the archive is being read or written (a slow or locked file takes a while).
        self.busy_label = QLabel("Waiting for the archive…")
        self.busy_label.setStyleSheet("color: #8a4b00")
        self.busy_label.setVisible(self.runner.busy)
        self.refresh_button = QPushButton("Refresh")
        self.refresh_button.setToolTip("Read the archive again (another program may have added to it)")
        self.refresh_button.clicked.connect(self.refresh)
        self.lots = _table(["Lot", "Film type", "Snapshots", "First", "Last"])
        self.lots.itemSelectionChanged.connect(self._lot_changed)
        self.lots.setMaximumHeight(150)  # a handful of lots at a time; the snapshots need the room
        self.snapshot_title = QLabel("Snapshots")
        self.show_all = QCheckBox("Also corrected and retired")
        self.show_all.setToolTip("List snapshots that a revision corrects or that were retired, too")
        self.show_all.toggled.connect(self.model.set_show_all)
        self.own_steps = QCheckBox("Each strip's own steps")
        self.own_steps.setToolTip(
            "Mid-density and density difference at the steps each strip chose for itself. Unticked, every strip "
            "of the lot is read at the lot's kept steps (those its first snapshot chose), as the trends are, so "
            "that its strips compare")
        self.own_steps.toggled.connect(self.model.set_own_steps)
        self.snapshot_table = _table(list(SNAPSHOT_COLUMNS))
        self.snapshot_table.cellDoubleClicked.connect(lambda row, _col: self.open_selected())
        self.open_button = QPushButton("Open the snapshot")
        self.open_button.clicked.connect(self.open_selected)
        self.view = SnapshotView()
        self.view.open_requested.connect(self.open_snapshot)
        self.trend = TrendView(self.model.path, runner=self.runner)
        self.trend.snapshot_clicked.connect(self.open_snapshot)
        self.tabs = QTabWidget()
        self.tabs.addTab(self.view, "Snapshot")
        self.tabs.addTab(self.trend, "Trend")

        head = QHBoxLayout()
        head.addWidget(self.where, 1)
        head.addWidget(self.busy_label)
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
        events = self.model.events
        events.lots_changed.connect(self._show_lots)
        events.snapshots_changed.connect(self._show_snapshots)
        events.record_changed.connect(self._show_record)
        events.failed.connect(lambda title, error: report_error(self, title, error))
        self.runner.busy_changed.connect(self.busy_label.setVisible)
        self.refresh()
        self.busy_label.setVisible(self.runner.busy)  # the trend may have started the reading already

    # -- the archive -------------------------------------------------------------------------
    @property
    def archive_path(self) -> ArchiveLocation | None:
        """The archive shown: a file, or a server's connection string."""
        return self.model.path

    @property
    def lot_summaries(self) -> list[LotSummary]:
        return self.model.lots

    @property
    def snapshots(self) -> tuple[SnapshotSummary, ...]:
        return self.model.snapshots

    @property
    def busy(self) -> bool:
        """Whether the archive is being read or written for this page."""
        return self.runner.busy

    def set_archive(self, path: str | os.PathLike[str] | None) -> None:
        """Show another archive (a file, or a server's connection string)."""
        self.trend.set_archive(path)
        self.model.set_archive(path)
        self.where.setText(self.model.where_text())

    def refresh(self) -> None:
        """Read lots and snapshots again (worker thread), keeping the selected lot and the open snapshot."""
        self.where.setText(self.model.where_text())
        self.model.refresh()
        self.trend.refresh()

    # -- lots and snapshots ------------------------------------------------------------------
    def _show_lots(self) -> None:
        self.where.setText(self.model.where_text())
        self.lots.blockSignals(True)
        try:
            _fill(self.lots, [[_cell(s.lot.lot_id, s.lot.lot_id), _cell(_or_dash(s.lot.film_type)),
                               _cell(str(s.snapshot_count), s.snapshot_count, right=True),
                               _cell(_or_dash(s.first_date)), _cell(_or_dash(s.last_date))]
                              for s in self.model.lots])
            self.lots.clearSelection()
            for k in range(self.lots.rowCount()):
                if self.lots.item(k, 0).text() == self.model.lot:
                    self.lots.selectRow(k)
        finally:
            self.lots.blockSignals(False)

    def selected_lot(self) -> str | None:
        return self.model.lot

    def select_lot(self, lot: str | None) -> None:
        """Select a lot by id (None: none) and list its snapshots."""
        self.model.select_lot(lot)
        self._show_lots()

    def _lot_changed(self) -> None:
        rows = self.lots.selectionModel().selectedRows()
        self.model.select_lot(self.lots.item(rows[0].row(), 0).text() if rows else None)

    def _show_snapshots(self) -> None:
        rows = []
        for row in self.model.snapshot_rows():
            cells = [_cell(text, value, right=right) for text, value, right in row.cells]
            if not row.current:
                for cell in cells:
                    cell.setForeground(pg.mkColor("#8a8a8a"))
            rows.append(cells)
        _fill(self.snapshot_table, rows)
        self.snapshot_title.setText(self.model.listing_title())
        self.open_button.setEnabled(bool(rows))
        if rows:
            self.snapshot_table.selectRow(len(rows) - 1)  # the latest reading first to hand
        self._mark_open_row()
        if self._open_when_listed and rows:
            self._open_when_listed = False
            self.open_selected()

    def selected_snapshot(self) -> int | None:
        rows = self.snapshot_table.selectionModel().selectedRows()
        return int(self.snapshot_table.item(rows[0].row(), 0).data(VALUE_ROLE)) if rows else None

    def open_selected(self) -> bool:
        """Open the snapshot selected in the list (read in a worker thread)."""
        snapshot_id = self.selected_snapshot()
        return snapshot_id is not None and self.open_snapshot(snapshot_id)

    def open_latest(self) -> None:
        """Open the chosen lot's latest snapshot once the list has been read (now, if it has been)."""
        self._open_when_listed = True
        if not self.busy:
            self._show_snapshots()

    def open_snapshot(self, snapshot_id: int, *, quiet: bool = False) -> bool:
        """Read snapshot ``snapshot_id`` and show it; False when there is no archive.

        The reading runs in a worker thread; a snapshot that cannot be read
        is said in a message (unless ``quiet``) and leaves the view empty.
        """
        return self.model.open_snapshot(snapshot_id, quiet=quiet)

    def _show_record(self, quiet: bool) -> None:
        record = self.model.record
        self.view.show_record(record)
        if record is None:
            return
        self._mark_open_row()
        if not quiet:
            self.tabs.setCurrentWidget(self.view)
            self.snapshot_opened.emit(record.snapshot.id)

    def _mark_open_row(self) -> None:
        record = self.model.record
        for k, summary in enumerate(self.model.snapshots):
            if record is not None and summary.id == record.snapshot.id:  # the list shows which line is open
                self.snapshot_table.selectRow(k)

    # -- storing ----------------------------------------------------------------------------
    def save_dialog(self, analysis: Analysis | None, calibration: CalibrationLike) -> SaveSnapshotDialog:
        """Open the short form that stores ``analysis`` in this panel's archive; the panel follows."""
        dialog = SaveSnapshotDialog(analysis, calibration, self.archive_path, self, runner=self.runner)
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        dialog.saved.connect(self._saved)
        dialog.open()
        return dialog

    def _saved(self, lot: str, ids: list[int]) -> None:
        self.model.lot = lot  # kept by the refresh: the stored lot is listed
        self.refresh()

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
