"""The processor QC page's three deviation plots, drawn with the marks and words of the PNG chart and the report.

The plots show what :func:`stripscan.services.qc_chart.chart_data` gives,
with the same marks as the PNG chart (:data:`stripscan.render.qc_chart.MARKS`:
shape *and* colour).  Entries kept but not used are drawn as the chart draws
them: a strip repeated the same day hollow, a value corrected afterwards as
a grey cross.  Clicking a point names its entry (:attr:`QcPlots.entry_clicked`).
"""

from __future__ import annotations

import datetime
import html
from typing import Any

import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QBrush, QColor, QPen
from PySide6.QtWidgets import QGraphicsRectItem

from stripscan.core.qc.names import QUANTITIES
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
from stripscan.services.qc_chart import ChartData, ChartPoint, ChartSeries, describe_rule
from stripscan.core.qc.names import LABELS, VERDICT_WORDS

__all__ = ["QcPlots", "DayAxis", "GLYPHS", "legend_html"]

# pyqtgraph's names for the chart's shapes.
_SYMBOLS = {"circle": "o", "triangle": "t1", "diamond": "d"}
#: The legend's glyph of each mark, by key.
GLYPHS = {e.key: e.glyph for e in LEGEND}
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



def legend_html(data: ChartData) -> str:
    """The shared legend (:func:`stripscan.render.qc_chart.legend_entries`), each entry with a glyph in its colour."""
    return " &nbsp; ".join(
        f"<b style='color:{_glyph_colour(e)}'>{html.escape(e.glyph)}</b>&nbsp;{html.escape(e.words)}"
        for e in legend_entries(data))


class QcPlots(pg.GraphicsLayoutWidget):
    """Base+fog, mid-density and density difference deviations, stacked, one day axis.

    Signals
    -------
    entry_clicked(int)
        The stored entry id of a clicked point.

    Attributes
    ----------
    plots : dict of str to PlotItem
    axes : dict of str to DayAxis
    scatter, set_aside : dict of str to ScatterPlotItem
        The points in use and those kept but not used, per quantity.
    data : ChartData or None
        What is drawn.
    """

    entry_clicked = Signal(int)

    def __init__(self, parent: Any = None) -> None:
        super().__init__(parent)
        self.setBackground("w")
        self.data: ChartData | None = None
        self.axes = {q: DayAxis() for q in QUANTITIES}
        self.plots: dict[str, pg.PlotItem] = {}
        for row, q in enumerate(QUANTITIES):
            plot = self.addPlot(row=row, col=0, axisItems={"bottom": self.axes[q]})
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
        self._empty_ranges()

    def show_data(self, data: ChartData | None) -> None:
        """Draw ``data`` (None: empty plots with the control limits' ticks)."""
        for plot in self.plots.values():
            plot.clear()
        self.scatter.clear()
        self.set_aside.clear()
        self.data = data
        self._empty_ranges()
        if data is None:
            return
        for series in data.series:
            self._draw(series, data)

    def _empty_ranges(self) -> None:
        """Before any day: deviations of ±0.20 OD with the control limits' own ticks, not 0-1 around nothing."""
        for q, plot in self.plots.items():
            plot.setYRange(-0.2, 0.2, padding=0.02)
            plot.setXRange(-0.5, 30.5, padding=0)
            self._y_ticks(q, 0.2)

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
        # A clicked point chooses its entry (in the correction form).
        if len(points) and points[0].data()[2] is not None:
            self.entry_clicked.emit(int(points[0].data()[2]))

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
