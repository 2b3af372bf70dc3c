"""A chosen figure over time, one series per emulsion lot, from the lot archive.

Every point is one current snapshot as :meth:`Archive.trend
<stripscan.archive.Archive.trend>` returns it, read in a worker thread
(:func:`stripscan.gui.models.archive_page.read_trend`); clicking a point
asks for that snapshot to be opened.  Lots are told apart by colour *and* symbol, so
the legend still reads for people who do not see the colours apart.
"""

from __future__ import annotations

import datetime as dt
import math
import os
import time

import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (
    QComboBox,
    QHBoxLayout,
    QLabel,
    QListWidget,
    QListWidgetItem,
    QVBoxLayout,
    QWidget,
)

from stripscan.archive import FIGURES, LotSummary, TrendPoint
from stripscan.archive.records import FIGURE_UNITS
from stripscan.core.figure_settings import FigureSettings
from stripscan.gui.errors import report_error
from stripscan.gui.models.location import ArchiveLocation, as_location, connection_lost, location_exists
from stripscan.gui.models.archive_page import TrendData, read_lots, read_trend
from stripscan.gui.style import strip_colour
from stripscan.gui.tasks import TaskRunner
from stripscan.gui.views.tables import figure_rows

__all__ = ["TrendView", "figure_labels", "day_seconds"]

_SYMBOLS = ("o", "s", "t", "d", "+", "star", "t1", "p")


def figure_labels() -> dict[str, str]:
    """Plain names of the archive's figures, as the figure table shows them."""
    defaults = FigureSettings()
    rows = {row.key: row.label for row in figure_rows(None, (defaults.gradient_low, defaults.gradient_high))}
    return {name: rows.get(name, name) for name in FIGURES}


def day_seconds(day: str) -> float:
    """Position of a ``YYYY-MM-DD`` day on the date axis: local noon of that day.

    pyqtgraph's date axis shows local time; noon keeps every point inside
    its own day whatever the time zone.
    """
    date = dt.date.fromisoformat(day)
    return time.mktime((date.year, date.month, date.day, 12, 0, 0, 0, 0, -1))


_DAY = 86_400.0


class DateDayAxis(pg.AxisItem):
    """A date axis that ticks whole days only (at :func:`day_seconds`), labelled '2 Nov' or 'Nov 2026'.

    pyqtgraph's own date axis ticks hours and seconds when the points span
    less than a day (snapshots of one day): its labels then read as
    clock times, not dates.  Here the finest tick is one day; wider
    spans tick every 2, 7 or 14 days, or at the first day of every 1, 3,
    6 or 12 months.
    """

    #: Least width of one tick label, px.
    LABEL_PX = 64

    def __init__(self) -> None:
        super().__init__(orientation="bottom")
        self.enableAutoSIPrefix(False)  # seconds since 1970 are not to be scaled ("x1e+09")

    def tickValues(self, minVal: float, maxVal: float, size: float) -> list:  # noqa: N802 (Qt name)
        if not (math.isfinite(minVal) and math.isfinite(maxVal)) or maxVal <= minVal:
            return []
        fits = max(1, int(size / self.LABEL_PX))
        days = (maxVal - minVal) / _DAY
        first = dt.date.fromtimestamp(max(minVal, 0.0))
        last = dt.date.fromtimestamp(max(maxVal, 0.0))
        for step in (1, 2, 7, 14):
            if days / step <= fits:
                start = first - dt.timedelta(days=first.toordinal() % step)
                values = [day_seconds((start + dt.timedelta(days=k)).isoformat())
                          for k in range(0, (last - start).days + 1, step)]
                return [(step * _DAY, [v for v in values if minVal <= v <= maxVal])]
        for months in (1, 3, 6, 12):
            if days / (30.44 * months) <= fits:
                break
        values, year, month = [], first.year, first.month
        month -= (month - 1) % months
        while (year, month) <= (last.year, last.month):
            v = day_seconds(f"{year:04d}-{month:02d}-01")
            if minVal <= v <= maxVal:
                values.append(v)
            month += months
            year, month = year + (month - 1) // 12, (month - 1) % 12 + 1
        return [(months * 30.44 * _DAY, values)]

    def tickStrings(self, values: list, scale: float, spacing: float) -> list[str]:  # noqa: N802 (Qt name)
        out = []
        for v in values:
            day = dt.date.fromtimestamp(v)
            out.append(f"{day.strftime('%b')} {day.year}" if spacing > 20 * _DAY else f"{day.day} {day.strftime('%b')}")
        return out


class TrendView(QWidget):
    """The trend of one figure for the lots ticked in the list.

    Parameters
    ----------
    archive_path : path-like, str or None
        The archive to read, a file or a server's connection string (opened read-only for each refresh, in a worker thread).
    parent : QWidget, optional
    runner : TaskRunner, optional
        Runs the reading (default: the view's own).

    Signals
    -------
    snapshot_clicked(int)
        The id of the snapshot whose point was clicked.
    """

    snapshot_clicked = Signal(int)

    def __init__(self, archive_path: str | os.PathLike[str] | None = None, parent: QWidget | None = None, *,
                 runner: TaskRunner | None = None) -> None:
        super().__init__(parent)
        self.runner = runner if runner is not None else TaskRunner(self)
        self.archive_path: ArchiveLocation | None = as_location(archive_path)
        self.points: list[TrendPoint] = []
        self.series: dict[str, pg.ScatterPlotItem] = {}
        self.figure = QComboBox()
        for name, label in figure_labels().items():
            self.figure.addItem(label, name)
        self.figure.setCurrentIndex(FIGURES.index("speed_log_exposure"))
        self.figure.currentIndexChanged.connect(self.redraw)
        self.lots = QListWidget()
        self.lots.setToolTip("Tick the lots to draw")
        # One row of tick boxes beside the figure picker leaves the plot the whole width.
        self.lots.setFlow(QListWidget.Flow.LeftToRight)
        self.lots.setWrapping(True)
        self.lots.setSpacing(2)
        self.lots.setFixedHeight(40)
        self.lots.itemChanged.connect(self.redraw)
        self.plot_widget = pg.PlotWidget(axisItems={"bottom": DateDayAxis()})
        self.plot = self.plot_widget.getPlotItem()
        self.plot.showGrid(x=True, y=True, alpha=0.15)
        self.plot.setMenuEnabled(False)
        self.plot.setLabel("bottom", "Film date (processing)")
        # Densities read as OD: a "(x0.001)" scale on the axis would hide the unit people know.
        self.plot.getAxis("left").enableAutoSIPrefix(False)
        # On a white background with a frame: never read through the points under it.
        self.legend = self.plot.addLegend(offset=(10, 10), labelTextSize="8pt", brush=pg.mkBrush(255, 255, 255, 235),
                                          pen=pg.mkPen("#9e9e9e"))
        self.empty = QLabel()
        self.empty.setStyleSheet("color: #8a4b00")
        self.empty.setWordWrap(True)
        self.steps_note = QLabel()
        self.steps_note.setStyleSheet("color: #616161")
        self.steps_note.setWordWrap(True)
        hint = QLabel("Each point is one strip's snapshot; click a point to open it.")
        hint.setStyleSheet("color: #616161")
        top = QHBoxLayout()
        top.addWidget(QLabel("Figure:"))
        top.addWidget(self.figure, 2)
        top.addWidget(QLabel("Lots:"))
        top.addWidget(self.lots, 3)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        layout.addLayout(top)
        layout.addWidget(self.plot_widget, 1)
        layout.addWidget(self.empty)
        layout.addWidget(self.steps_note)
        layout.addWidget(hint)
        self.refresh()

    # -- what is drawn ---------------------------------------------------------------------
    @property
    def figure_name(self) -> str:
        """The archive's name of the chosen figure (one of ``FIGURES``)."""
        return str(self.figure.currentData())

    def set_figure(self, name: str) -> None:
        """Choose the figure to draw, by its archive name."""
        self.figure.setCurrentIndex(FIGURES.index(name))

    def chosen_lots(self) -> list[str]:
        """Lots ticked in the list, in list order."""
        items = (self.lots.item(k) for k in range(self.lots.count()))
        return [item.text() for item in items if item.checkState() == Qt.CheckState.Checked]

    def set_lots(self, lots: list[str]) -> None:
        """Tick exactly ``lots`` (others untick) and redraw once."""
        self.lots.blockSignals(True)
        try:
            for k in range(self.lots.count()):
                item = self.lots.item(k)
                item.setCheckState(Qt.CheckState.Checked if item.text() in lots else Qt.CheckState.Unchecked)
        finally:
            self.lots.blockSignals(False)
        self.redraw()

    def point_count(self) -> int:
        """Points on the plot, over all lots."""
        return sum(len(item.data) for item in self.series.values())

    # -- reading -----------------------------------------------------------------------------
    def set_archive(self, path: str | os.PathLike[str] | None) -> None:
        """Show another archive (a file, or a server's connection string)."""
        self.archive_path = as_location(path)
        self.lots.clear()
        self.refresh()

    def refresh(self) -> None:
        """Read the archive's lots again (worker thread; ticks kept, new lots ticked) and redraw."""
        if not self._readable():
            self._lots_read([])
            return
        self.runner.start(read_lots, self.archive_path, key="trend-lots", on_done=self._lots_read,
                          on_error=self._lots_failed)

    def _lots_failed(self, error: BaseException) -> None:
        if not connection_lost(error):  # a lost connection keeps the trend drawn
            self._lots_read([])
        report_error(self, "The archive's lots could not be read", error)

    def _lots_read(self, summaries: list[LotSummary]) -> None:
        lots = [s.lot.lot_id for s in summaries]
        before = {self.lots.item(k).text(): self.lots.item(k).checkState() for k in range(self.lots.count())}
        self.lots.blockSignals(True)
        try:
            self.lots.clear()
            for k, lot in enumerate(lots):
                item = QListWidgetItem(lot)
                item.setFlags(item.flags() | Qt.ItemFlag.ItemIsUserCheckable)
                item.setCheckState(before.get(lot, Qt.CheckState.Checked))
                item.setForeground(pg.mkColor(strip_colour(k)))
                self.lots.addItem(item)
        finally:
            self.lots.blockSignals(False)
        self.redraw()

    def _readable(self) -> bool:
        return location_exists(self.archive_path)

    def redraw(self, *_: object) -> None:
        """Read the trend of the chosen figure and lots (worker thread) and draw it."""
        lots, figure = self.chosen_lots(), self.figure_name
        if not (lots and self._readable()):
            self._show(figure, lots, TrendData())
            return

        def failed(exc: BaseException) -> None:
            if not connection_lost(exc):
                self._show(figure, lots, TrendData())
            report_error(self, "The trend could not be read", exc)

        self.runner.start(read_trend, self.archive_path, figure, lots, key="trend",
                          on_done=lambda data: self._show(figure, lots, data), on_error=failed)

    def _show(self, figure: str, lots: list[str], data: TrendData) -> None:
        self.points = list(data.points)
        self.steps_note.setText(_steps_note(figure, data.steps))
        self.steps_note.setVisible(bool(data.steps))
        self._draw(figure, lots, self.points)
        self._draw_events(data)

    def _draw_events(self, data: TrendData) -> None:
        # Processor events (chemistry changes, service) explain steps in a trend.
        if not self.points:
            return
        first, last = self.points[0].date, self.points[-1].date
        for event in data.events:
            if first <= event.date <= last:
                line = pg.InfiniteLine(day_seconds(event.date), angle=90, movable=False,
                                       pen=pg.mkPen("#757575", width=1, style=Qt.PenStyle.DotLine),
                                       label=f"{event.processor}: {event.kind}",
                                       labelOpts={"position": 0.04, "color": "#424242", "rotateAxis": (1, 0),
                                                  "anchors": [(0, 0), (0, 0)]})
                line.setToolTip(f"{event.date} {event.processor}: {event.kind}. {event.note}".strip())
                self.plot.addItem(line)

    def _draw(self, figure: str, lots: list[str], points: list[TrendPoint]) -> None:
        for item in self.series.values():
            self.legend.removeItem(item)
        self.plot.clear()
        self.series = {}
        order = [self.lots.item(k).text() for k in range(self.lots.count())]
        for lot in lots:
            mine = [p for p in points if p.lot == lot]
            if not mine:
                continue
            k = order.index(lot)
            colour = strip_colour(k)
            x = [day_seconds(p.date) for p in mine]
            y = [p.value for p in mine]
            # A thin line through each day's mean shows the drift without hiding the scatter.
            days = sorted(set(x))
            means = [sum(v for xi, v in zip(x, y) if xi == d) / x.count(d) for d in days]
            self.plot.addItem(pg.PlotCurveItem(days, means, pen=pg.mkPen(colour, width=1, style=Qt.PenStyle.DashLine)))
            scatter = pg.ScatterPlotItem(x=x, y=y, data=[p.snapshot_id for p in mine], size=9,
                                         symbol=_SYMBOLS[k % len(_SYMBOLS)], pen=pg.mkPen("#000000", width=0.5),
                                         brush=pg.mkBrush(colour), hoverable=True, hoverSize=12,
                                         tip=lambda x, y, data: f"snapshot {data}: {y:.3f}")
            scatter.sigClicked.connect(self._clicked)
            self.plot.addItem(scatter)
            self.legend.addItem(scatter, f"lot {lot} ({len(mine)})")
            self.series[lot] = scatter
        label = figure_labels()[figure]
        unit = FIGURE_UNITS.get(figure, "")
        self.plot.setLabel("left", f"{label} ({unit})" if unit else label)
        if not lots:
            self.empty.setText("Tick one or more lots to draw their trend.")
        elif not points:
            self.empty.setText(f"No current snapshot of the ticked lots has a reading of {label.lower()}.")
        else:
            self.empty.setText("")
        self.empty.setVisible(bool(self.empty.text()))
        self.plot.enableAutoRange()
        if points:
            # At least a day either side: a single day's snapshots still sit on a date axis with its day ticked.
            x = [day_seconds(p.date) for p in points]
            self.plot.setXRange(min(x) - _DAY, max(x) + _DAY, padding=0.02)

    def _clicked(self, item: pg.ScatterPlotItem, spots: list, event: object = None) -> None:
        if len(spots):
            self.snapshot_clicked.emit(int(spots[0].data()))


def _steps_note(figure: str, steps: dict[str, tuple[int, int, int] | None]) -> str:
    """Which steps each lot's mid-density or density difference is read at."""
    parts = []
    for lot, chosen in steps.items():
        if chosen is None:
            continue
        md, high, low = chosen
        parts.append(f"{lot} step {md}" if figure == "mid_density" else f"{lot} step {high} \u2212 step {low}")
    what = "Mid-density" if figure == "mid_density" else "Density difference"
    return (f"{what} is read at the same steps in every strip of a lot, those its first snapshot chose: "
            + "; ".join(parts) + ".") if parts else ""
