"""Emulsion lots side by side: mean curves ± 1 sd, ΔD and Δlog E, and the table of figures.

A standalone widget over comparisons already made by the core
(:func:`stripscan.core.compare.comparison.compare_sets`: every set against the first).
It draws, at a glance:

* every set's mean characteristic curve with a ±1 sd band over its strips;
* the density difference ΔD = D(B) − D(A) against log E;
* the shift Δlog E = log E_B − log E_A against net density (negative: B
  needs less exposure there, it is faster), with the speed tolerance shaded;
* the table of figures with B − A, its 95 % interval, the tolerance and the
  verdict, in words and a plain background colour.

With more than two sets a chooser picks which pair the table shows; the
plots show every set and every pair.  The panel only displays: it never
changes a comparison.  What is shown (the comparisons, the pair, the words
around them) is held by its model, :class:`stripscan.gui.models.compare_page.ComparePage`.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtGui import QBrush, QColor, QFont
from PySide6.QtWidgets import (
    QAbstractItemView,
    QComboBox,
    QGridLayout,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QSplitter,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from stripscan.core.compare.comparison import Comparison
from stripscan.core.compare.statistics import FigureRow
from stripscan.gui.models.compare_page import EMPTY_WORDS, ComparePage, plain_names
from stripscan.gui.style import caution_label, notes_label, strip_colour

__all__ = ["ComparePanel", "plain_names", "COLUMNS", "VERDICT_COLOURS"]

#: Table columns, left to right.
COLUMNS = ("Figure", "A mean ± sd (n)", "B mean ± sd (n)", "B − A", "95 % interval", "Tolerance of B − A",
           "Verdict")
_CELL_KEYS = ("figure", "a", "b", "difference", "interval", "tolerance", "verdict")

#: Verdict backgrounds: pale, so the words stay readable; the words carry the meaning.
VERDICT_COLOURS: dict[str, str | None] = {
    "same": "#d9efd9",
    "differs": "#f5d0d0",
    "unclear": "#fbe6bf",
    "single": "#fbe6bf",
    "no_tolerance": None,
    "missing": None,
}

# Sets are told apart by line style as well as colour.
_DASHES = (Qt.PenStyle.SolidLine, Qt.PenStyle.DashLine, Qt.PenStyle.DotLine, Qt.PenStyle.DashDotLine)


def _pen(k: int, width: float = 2.0) -> pg.QtGui.QPen:
    return pg.mkPen(strip_colour(k), width=width, style=_DASHES[k % len(_DASHES)])


def _finite(x: np.ndarray, *ys: np.ndarray) -> np.ndarray:
    mask = np.isfinite(x)
    for y in ys:
        mask &= np.isfinite(y)
    return mask


def _plot(title: str, x_label: str, y_label: str) -> pg.PlotWidget:
    widget = pg.PlotWidget()
    item = widget.getPlotItem()
    item.setTitle(title)
    item.setLabel("bottom", x_label)
    item.setLabel("left", y_label)
    item.showGrid(x=True, y=True, alpha=0.25)
    for side in ("left", "bottom"):
        # Differences of a few hundredths read best as they are, not as "x0.001".
        item.getAxis(side).enableAutoSIPrefix(False)
    item.addLegend(offset=(8, 8), brush=pg.mkBrush(255, 255, 255, 235), pen=pg.mkPen("#9e9e9e"))
    return widget


class ComparePanel(QWidget):
    """Sets of strips side by side.

    Parameters
    ----------
    comparisons : sequence of Comparison
        From :func:`stripscan.core.compare.comparison.compare_sets`: set k against set 0.
    parent : QWidget, optional

    Attributes
    ----------
    curve_plot, delta_density_plot, shift_plot : pyqtgraph.PlotWidget
        The three plots.
    table : QTableWidget
        The figures of the chosen pair, columns :data:`COLUMNS`.
    pair_choice : QComboBox
        Which pair the table shows (hidden with two sets).
    model : ComparePage
        The comparisons shown and the chosen pair, without Qt.
    """

    def __init__(self, comparisons: Sequence[Comparison] = (), parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Compare sets of strips")
        self.model = ComparePage()
        self.model.changed.connect(self._show)
        self.title = QLabel()
        bold = QFont()
        bold.setBold(True)
        self.title.setFont(bold)
        # A long title wraps: it must not set the width of the window.
        self.title.setWordWrap(True)
        self.pair_choice = QComboBox()
        self.pair_choice.currentIndexChanged.connect(self._show_table)
        self.curve_plot = _plot("Mean curves, ±1 sd over the strips", "log relative exposure", "optical density")
        # Not called "density difference": that is the QC figure in the table beside it.
        self.delta_density_plot = _plot("ΔD = D(B) − D(A) at equal log E", "log relative exposure", "ΔD (OD)")
        self.shift_plot = _plot("Shift along log E, B − A (negative: B faster)", "net density (OD)", "Δlog E")
        self.table = QTableWidget(0, len(COLUMNS))
        self.table.setHorizontalHeaderLabels(list(COLUMNS))
        self.table.verticalHeader().hide()
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        header = self.table.horizontalHeader()
        header.setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
        header.setSectionResizeMode(len(COLUMNS) - 1, QHeaderView.ResizeMode.Stretch)
        self.notes = notes_label()
        self.caution = caution_label()

        plots = QWidget()
        grid = QGridLayout(plots)
        grid.setContentsMargins(0, 0, 0, 0)
        grid.addWidget(self.curve_plot, 0, 0, 2, 1)
        grid.addWidget(self.delta_density_plot, 0, 1)
        grid.addWidget(self.shift_plot, 1, 1)
        grid.setColumnStretch(0, 3)
        grid.setColumnStretch(1, 2)
        lower = QWidget()
        lower_layout = QVBoxLayout(lower)
        lower_layout.setContentsMargins(0, 0, 0, 0)
        top_row = QHBoxLayout()
        top_row.addWidget(self.title, 1)
        top_row.addWidget(self.pair_choice)
        lower_layout.addLayout(top_row)
        lower_layout.addWidget(self.table, 1)
        lower_layout.addWidget(self.notes)
        splitter = QSplitter(Qt.Orientation.Vertical)
        splitter.addWidget(plots)
        splitter.addWidget(lower)
        splitter.setStretchFactor(0, 3)
        splitter.setStretchFactor(1, 2)
        splitter.setChildrenCollapsible(False)
        # Every row of the table visible without scrolling: it is the verdict.
        rows_px = self.table.verticalHeader().defaultSectionSize() * 9
        self.table.setMinimumHeight(rows_px + self.table.horizontalHeader().sizeHint().height() + 6)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        layout.addWidget(splitter, 1)
        layout.addWidget(self.caution)
        self.set_comparisons(comparisons)

    @property
    def comparisons(self) -> tuple[Comparison, ...]:
        return self.model.comparisons

    @property
    def _comparisons(self) -> tuple[Comparison, ...]:
        return self.model.comparisons

    def set_comparisons(self, comparisons: Sequence[Comparison], result: object = None) -> None:
        """Show new comparisons (set k against set 0), replacing what is shown."""
        self.model.set_comparisons(comparisons, result)

    def _show(self) -> None:
        for widget in (self.curve_plot, self.delta_density_plot, self.shift_plot):
            widget.getPlotItem().clear()
        self.pair_choice.blockSignals(True)
        self.pair_choice.clear()
        self.pair_choice.addItems(self.model.pair_names())
        self.pair_choice.blockSignals(False)
        self.pair_choice.setVisible(len(self._comparisons) > 1)
        if not self._comparisons:
            self.title.setText(EMPTY_WORDS)
            self.table.setRowCount(0)
            self.notes.setText("")
            return
        self._draw_curves()
        self._draw_differences()
        self.pair_choice.setCurrentIndex(0)
        self._show_table(0)

    def _draw_curves(self) -> None:
        item = self.curve_plot.getPlotItem()
        sets = [self._comparisons[0].a, *(c.b for c in self._comparisons)]
        for k, s in enumerate(sets):
            x, mean, sd = s.density_curve.arrays()
            ok = _finite(x, mean)
            colour = QColor(strip_colour(k))
            banded = ok & np.isfinite(sd)
            if banded.any():
                upper = pg.PlotDataItem(x[banded], mean[banded] + sd[banded], pen=None)
                lower = pg.PlotDataItem(x[banded], mean[banded] - sd[banded], pen=None)
                colour.setAlpha(70)
                item.addItem(pg.FillBetweenItem(upper, lower, brush=QBrush(colour)))
            item.addItem(pg.PlotDataItem(x[ok], mean[ok], pen=_pen(k), name=plain_names(f"{s.name} ({s.n} strips)")))

    def _draw_differences(self) -> None:
        dd_item, shift_item = self.delta_density_plot.getPlotItem(), self.shift_plot.getPlotItem()
        for item in (dd_item, shift_item):
            item.addItem(pg.InfiniteLine(pos=0.0, angle=0, pen=pg.mkPen("#777777", width=1)))
        speed = self._comparisons[0].row("speed_log_exposure")
        if speed.bounds is not None:
            region = pg.LinearRegionItem(values=speed.bounds, orientation="horizontal", movable=False,
                                         brush=pg.mkBrush(0, 114, 178, 25), pen=pg.mkPen(None))
            region.setToolTip(f"speed tolerance {speed.tolerance.text() if speed.tolerance else ''}")
            shift_item.addItem(region)
        # With one comparison the titles say what the line is; a legend would only hide a small plot's data.
        for item in (dd_item, shift_item):
            if item.legend is not None:
                item.legend.setVisible(len(self._comparisons) > 1)
        for k, c in enumerate(self._comparisons, start=1):
            x = np.asarray(c.a.density_curve.x, float)
            dd = np.asarray(c.delta_density, float)
            ok = _finite(x, dd)
            dd_item.addItem(pg.PlotDataItem(x[ok], dd[ok], pen=_pen(k), name=plain_names(c.b.name)))
            net = np.asarray(c.a.exposure_curve.x, float)
            shift = np.asarray(c.delta_log_exposure, float)
            ok = _finite(net, shift)
            shift_item.addItem(pg.PlotDataItem(net[ok], shift[ok], pen=_pen(k), name=plain_names(c.b.name)))

    def _show_table(self, index: int) -> None:
        if not self.model.choose_pair(index):
            return
        c = self._comparisons[index]
        self.title.setText(self.model.title())
        self.table.setRowCount(len(c.rows))
        for r, row in enumerate(c.rows):
            cells = row.cells()
            for col, key in enumerate(_CELL_KEYS):
                self.table.setItem(r, col, self._item(row, key, cells[key]))
        self.notes.setText(self.model.notes())

    @staticmethod
    def _item(row: FigureRow, key: str, text: str) -> QTableWidgetItem:
        item = QTableWidgetItem(text)
        item.setFlags(Qt.ItemFlag.ItemIsEnabled | Qt.ItemFlag.ItemIsSelectable)
        if key in ("a", "b", "difference", "interval", "tolerance"):
            item.setTextAlignment(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        if key == "tolerance" and row.tolerance is not None:
            item.setToolTip(f"{row.tolerance.text()}: {row.tolerance.source}")
        if key == "verdict":
            colour = VERDICT_COLOURS.get(row.verdict)
            if colour:
                item.setBackground(QBrush(QColor(colour)))
            item.setToolTip("The whole 95 % interval (Welch's t) is put against the tolerance: inside it, the "
                            "same; wholly outside, differs; across an edge, cannot tell.")
        return item
