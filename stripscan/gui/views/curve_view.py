"""The characteristic curve: density against log relative exposure.

Step points carry their uncertainty bars; the interpolated curve is the
core's :class:`~stripscan.core.curve.CharacteristicCurve`.  Two horizontal
lines are the density levels of the average gradient and latitude: drag
them and the line of the average gradient and the shaded latitude follow
live, from the core's figures.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QEvent, QObject, Qt, Signal
from PySide6.QtGui import QKeyEvent
from PySide6.QtWidgets import (
    QCheckBox,
    QDoubleSpinBox,
    QGraphicsItem,
    QHBoxLayout,
    QLabel,
    QPushButton,
    QVBoxLayout,
    QWidget,
)

from stripscan.core.curve import strip_curve
from stripscan.core.figure_settings import FigureSettings
from stripscan.core.records import StripResult
from stripscan.core.curve_marks import CURVE_MARKS, GLYPHS, CurveMark
from stripscan.gui.models.session import Session
from stripscan.gui.style import strip_colour

__all__ = ["CurveView", "EMPTY_RANGE", "mark_points", "mark_pen", "legend_entry"]

# pyqtgraph's names for the shapes and dashes of stripscan.core.curve_marks.
_SYMBOLS = {"circle": "o", "square": "s", "triangle": "t1", "diamond": "d", "cross": "x"}
_DASHES = {"solid": Qt.PenStyle.SolidLine, "dash": Qt.PenStyle.DashLine, "dot": Qt.PenStyle.DotLine,
           "dashdot": Qt.PenStyle.DashDotLine}
_LEVEL_PEN = pg.mkPen(CURVE_MARKS["levels"].colour, width=2, style=_DASHES[CURVE_MARKS["levels"].dash])
_LEVEL_HOVER = pg.mkPen("#ab47bc", width=3)
#: What the empty plot spans: a 21-step tablet's 0-3 log E, densities to 3.5 OD.
EMPTY_RANGE = ((0.0, 3.0), (0.0, 3.5))


def mark_points(mark: CurveMark, size: float, colour: str | None = None) -> pg.ScatterPlotItem:
    """Points drawn with ``mark``'s shape and colour (filled: with a black rim)."""
    colour = colour or mark.colour
    return pg.ScatterPlotItem(size=size, symbol=_SYMBOLS[mark.shape],
                              pen=pg.mkPen("#000000" if mark.filled and mark.shape != "cross" else colour,
                                           width=1 if mark.filled else 1.5),
                              brush=pg.mkBrush(colour) if mark.filled else pg.mkBrush(None))


def mark_pen(mark: CurveMark, width: float) -> object:
    """A pen in ``mark``'s colour and dash."""
    return pg.mkPen(mark.colour, width=width, style=_DASHES[mark.dash])


def legend_entry(mark: CurveMark, colour: str | None = None, words: str | None = None) -> str:
    """One legend entry as rich text: the mark's glyph (or a line) in its colour, then its words."""
    colour = colour or mark.colour
    if mark.shape == "line":
        glyph = {"solid": "━━", "dash": "╍╍", "dot": "┄┄",
                 "dashdot": "━·━"}[mark.dash]
    else:
        glyph = GLYPHS[mark.shape][0 if mark.filled else 1]
    return (f"<span style='white-space:nowrap'><b style='color:{colour}'>{glyph}</b>&nbsp;"
            f"{words or mark.words}</span>")


class _StripCurve:
    """Points, bars and curve of one strip (the selected one or an overlaid one)."""

    def __init__(self, plot: pg.PlotItem, colour: str, *, main: bool) -> None:
        size = 8 if main else 6
        self.points = pg.ScatterPlotItem(size=size, pen=pg.mkPen(colour), brush=pg.mkBrush(colour))
        # Steps not used and steps excluded by the user are marked apart (as on the scan and in reports).
        self.unused = mark_points(CURVE_MARKS["unused"], size)
        self.excluded = mark_points(CURVE_MARKS["excluded"], size + 2)
        self.bars = pg.ErrorBarItem(x=np.zeros(0), y=np.zeros(0), height=np.zeros(0), beam=0.012,
                                    pen=pg.mkPen(colour, width=1))
        style = Qt.PenStyle.SolidLine if main else Qt.PenStyle.DashLine
        self.line = pg.PlotCurveItem(pen=pg.mkPen(colour, width=2 if main else 1.5, style=style))
        self.items = (self.line, self.bars, self.unused, self.excluded, self.points)
        for item in self.items:
            # The selected strip stays on top of the strips drawn with it.
            item.setZValue(5 if main else 0)
            plot.addItem(item)

    def show(self, result: StripResult | None) -> None:
        if result is None:
            for item in (self.points, self.unused, self.excluded, self.line):
                item.setData([], [])
            self.bars.setData(x=np.zeros(0), y=np.zeros(0), height=np.zeros(0))
            return
        used = [s for s in result.steps if s.in_range and not s.excluded and np.isfinite(s.od)]
        other = [s for s in result.steps if s not in used and not s.excluded and np.isfinite(s.od)]
        excluded = [s for s in result.steps if s.excluded and np.isfinite(s.od)]
        x = np.array([s.log_exposure for s in used])
        y = np.array([s.od for s in used])
        self.points.setData(x, y)
        self.unused.setData([s.log_exposure for s in other], [s.od for s in other])
        self.excluded.setData([s.log_exposure for s in excluded], [s.od for s in excluded])
        sd = np.array([s.od_sd if np.isfinite(s.od_sd) else 0.0 for s in used])
        self.bars.setData(x=x, y=y, height=2.0 * sd)
        curve = strip_curve(result)
        if curve is None:
            self.line.setData([], [])
        else:
            grid = np.linspace(curve.log_exposure[0], curve.log_exposure[-1], 300)
            self.line.setData(grid, curve(grid))

    def remove(self, plot: pg.PlotItem) -> None:
        for item in self.items:
            plot.removeItem(item)


class CurveView(QWidget):
    """Characteristic curve of the selected strip, with draggable density levels.

    Parameters
    ----------
    session : Session

    Attributes
    ----------
    low_line, high_line : pg.InfiniteLine
        The density levels, at base+fog plus the net levels.
    gradient_item : pg.PlotCurveItem
        The average gradient's straight line between the two curve points.
    latitude_region : pg.LinearRegionItem
        The latitude's span on the log E axis.
    """

    levels_dragged = Signal(float, float)

    def __init__(self, session: Session, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.session = session
        self.plot_widget = pg.PlotWidget()
        self.plot = self.plot_widget.getPlotItem()
        self.plot.setLabel("bottom", "Log relative exposure")
        self.plot.setLabel("left", "Optical density (OD)")
        self.plot.showGrid(x=True, y=True, alpha=0.15)
        self.plot.setMenuEnabled(False)
        # Densities and log E are read as they are: a "(x0.001)" scale would hide the numbers people know.
        for name in ("left", "bottom"):
            self.plot.getAxis(name).enableAutoSIPrefix(False)
        #: The legend, under the plot: never over the data (the shared marks of stripscan.core.curve_marks).
        self.legend_label = QLabel()
        self.legend_label.setWordWrap(True)
        self.legend_label.setTextFormat(Qt.TextFormat.RichText)
        self.legend_label.setStyleSheet("font-size: 8pt")

        self.latitude_region = pg.LinearRegionItem(movable=False, brush=pg.mkBrush(106, 27, 154, 30),
                                                   pen=pg.mkPen(None))
        self.latitude_region.setZValue(-20)
        self.plot.addItem(self.latitude_region)
        self.base_fog_line = pg.InfiniteLine(angle=0, movable=False, pen=mark_pen(CURVE_MARKS["base_fog"], 1),
                                             label="base+fog", labelOpts={"position": 0.04, "color": "#616161",
                                                                         "anchors": [(0, 1), (0, 1)]})
        self.plot.addItem(self.base_fog_line)
        self.main = _StripCurve(self.plot, strip_colour(0), main=True)
        self.low_line = self._level_line()
        self.high_line = self._level_line()
        self.gradient_item = pg.PlotCurveItem(pen=mark_pen(CURVE_MARKS["gradient"], 3))
        self.plot.addItem(self.gradient_item)
        self.density_points_item = mark_points(CURVE_MARKS["density_points"], 11)
        self.speed_item = mark_points(CURVE_MARKS["speed"], 14)
        self.max_slope_item = mark_points(CURVE_MARKS["max_slope"], 13)
        self.tangent_item = pg.PlotCurveItem(pen=mark_pen(CURVE_MARKS["tangent"], 1.5))
        for item in (self.density_points_item, self.speed_item, self.max_slope_item, self.tangent_item):
            item.setZValue(6)
            self.plot.addItem(item)
        self.empty_hint = pg.TextItem("Open a scan of strips (File ▸ Open, or drop it on the window):\n"
                                      "each strip's characteristic curve is drawn here.",
                                      color="#616161", anchor=(0.5, 0.5))
        self.empty_hint.setPos(sum(EMPTY_RANGE[0]) / 2, sum(EMPTY_RANGE[1]) / 2)
        self.plot.addItem(self.empty_hint)
        self.overlays: dict[int, _StripCurve] = {}
        self._syncing = False
        self._setup_gradient_axis()
        # Axes and legend are drawn once into pixmaps: a level drag repaints the plot
        # many times a second while they stay the same (text drawing is the slow part).
        for name in ("left", "bottom", "right"):
            self.plot.getAxis(name).setCacheMode(QGraphicsItem.CacheMode.DeviceCoordinateCache)

        self.show_gradient = QCheckBox("Gradient curve")
        self.show_gradient.setToolTip("Show dD/d(log E) of the curve against a second axis")
        self.show_gradient.toggled.connect(self.set_gradient_visible)
        self.readout = QLabel()
        self.readout.setWordWrap(True)
        self.readout.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        # The levels typed, as well as dragged (ISO 9236-1's 0.25 and 2.00 by the reset button).
        self.level_edits: dict[str, QDoubleSpinBox] = {}
        for name, tip in (("low", "Lower net density of the average gradient and latitude"),
                          ("high", "Upper net density of the average gradient and latitude")):
            edit = QDoubleSpinBox()
            edit.setRange(0.01, 4.0)
            edit.setDecimals(2)
            edit.setSingleStep(0.01)
            edit.setKeyboardTracking(False)
            edit.setToolTip(tip)
            edit.valueChanged.connect(lambda value, n=name: self._level_typed(n, value))
            self.level_edits[name] = edit
        defaults = FigureSettings()
        self.reset_levels = QPushButton("Reset")
        self.reset_levels.setToolTip(f"Back to net {defaults.gradient_low:.2f} and {defaults.gradient_high:.2f}, "
                                     "ISO 9236-1's average gradient")
        self.reset_levels.clicked.connect(lambda: self.session.set_levels(defaults.gradient_low, defaults.gradient_high))
        # One row under the legend: the plot keeps the height on a 700-px screen.
        hint = QLabel("Levels, net OD:")
        hint.setToolTip("The two density levels of the average gradient and latitude: drag a dashed line, "
                        "or click it and press ↑/↓ (Shift: 0.05), or type them here")
        bottom = QHBoxLayout()
        bottom.addWidget(hint)
        bottom.addWidget(self.level_edits["low"])
        bottom.addWidget(QLabel("and"))
        bottom.addWidget(self.level_edits["high"])
        bottom.addWidget(self.reset_levels)
        bottom.addStretch(1)
        bottom.addWidget(self.show_gradient)
        #: The level the arrow keys move: the one clicked or dragged last.
        self.chosen_level: pg.InfiniteLine | None = None
        layout = QVBoxLayout(self)
        layout.setContentsMargins(2, 2, 2, 2)
        layout.addWidget(self.readout)
        layout.addWidget(self.plot_widget, 1)
        layout.addWidget(self.legend_label)
        layout.addLayout(bottom)
        # Arrow keys on the plot move the chosen level (the plot's own view would take them otherwise).
        self.plot_widget.installEventFilter(self)

        # Moving a level changes figures only: the points and curves stay as they are.
        session.events.connect_each(self.refresh, "strips_changed", "results_changed", "strip_changed",
                                    "selection_changed", "overlay_changed")
        session.events.levels_changed.connect(lambda low, high: self._show_figures(self.session.result()))
        session.events.levels_changed.connect(lambda low, high: self._show_level_values())
        self._show_level_values()
        self.set_gradient_visible(False)
        self.refresh()

    def _level_line(self) -> pg.InfiniteLine:
        line = pg.InfiniteLine(angle=0, movable=True, pen=_LEVEL_PEN, hoverPen=_LEVEL_HOVER,
                               label="", labelOpts={"position": 0.97, "color": "#4a148c",
                                                    "fill": pg.mkBrush(255, 255, 255, 210),
                                                    "anchors": [(1, 1), (1, 1)]})
        line.setToolTip("Drag to move this density level, or click it and press ↑/↓ (Shift: larger steps)")
        line.sigPositionChanged.connect(self._line_moved)
        line.sigClicked.connect(lambda item, *_: self.choose_level(item))
        self.plot.addItem(line)
        return line

    def _setup_gradient_axis(self) -> None:
        # A second view box sharing the log E axis, drawn against the right axis.
        self.gradient_view = pg.ViewBox()
        self.plot.scene().addItem(self.gradient_view)
        axis = self.plot.getAxis("right")
        axis.linkToView(self.gradient_view)
        axis.setLabel("Gradient dD/d(log E)")
        self.gradient_view.setXLink(self.plot)
        self.gradient_curve = pg.PlotCurveItem(pen=pg.mkPen(CURVE_MARKS["max_slope"].colour, width=1.5,
                                                            style=Qt.PenStyle.DashLine))
        self.gradient_view.addItem(self.gradient_curve)
        self._gradient_shown = False

        def follow() -> None:
            self.gradient_view.setGeometry(self.plot.getViewBox().sceneBoundingRect())

        self.plot.getViewBox().sigResized.connect(follow)

    def set_gradient_visible(self, shown: bool) -> None:
        """Show or hide the gradient curve and its axis."""
        self._gradient_shown = shown
        self.plot.showAxis("right", shown)
        self.gradient_view.setVisible(shown)
        if self.show_gradient.isChecked() != shown:
            self.show_gradient.setChecked(shown)
        self.refresh()

    # -- model → view --------------------------------------------------------------
    def refresh(self, *_: object) -> None:
        """Redraw everything from the session's results."""
        result = self.session.result()
        index = self.session.selected
        colour = strip_colour(index or 0)
        for item, pen in ((self.main.points, pg.mkPen(colour)), (self.main.line, pg.mkPen(colour, width=2))):
            item.setPen(pen)
        self.main.points.setBrush(pg.mkBrush(colour))
        self.main.bars.setData(pen=pg.mkPen(colour, width=1))
        self.main.show(result)
        self._show_overlays()
        self._show_figures(result)
        self._show_slope(result)
        self._show_legend(colour)
        # Nothing to draw: fixed ranges in plain units and a hint, not pyqtgraph's ±0.5 around nothing.
        empty = result is None and not self.overlays
        self.empty_hint.setVisible(empty and self.session.scan is None)
        if empty:
            self.plot.disableAutoRange()
            self.plot.setRange(xRange=EMPTY_RANGE[0], yRange=EMPTY_RANGE[1], padding=0.02)
        else:
            self.plot.enableAutoRange()

    def _show_legend(self, colour: str) -> None:
        """The legend under the plot: what is drawn now, in the marks the reports use too."""
        m = CURVE_MARKS
        entries = [legend_entry(m["step"], colour, f"step on the curve (strip {(self.session.selected or 0) + 1})"),
                   legend_entry(m["unused"]), legend_entry(m["excluded"]), legend_entry(m["levels"]),
                   legend_entry(m["density_points"]), legend_entry(m["gradient"]), legend_entry(m["speed"]),
                   legend_entry(m["max_slope"])]
        entries += [legend_entry(CurveMark(f"strip {k + 1}", strip_colour(k), "line", dash="dash"))
                    for k in sorted(self.overlays)]
        if self._gradient_shown:
            entries.append(legend_entry(CurveMark("gradient dD/d(log E) (right axis)", m["max_slope"].colour, "line",
                                                  dash="dash")))
        self.legend_label.setText(" &nbsp; ".join(entries))

    def _show_overlays(self) -> None:
        wanted = {k for k in self.session.overlay if k != self.session.selected and k < len(self.session.strips)}
        for k in list(self.overlays):
            if k not in wanted:
                self.overlays.pop(k).remove(self.plot)
        for k in sorted(wanted):
            if k not in self.overlays:
                self.overlays[k] = _StripCurve(self.plot, strip_colour(k), main=False)
            self.overlays[k].show(self.session.result(k))

    def _show_figures(self, result: StripResult | None) -> None:
        low, high = self.session.levels
        figures = result.figures if result is not None else None
        reference = figures.net_reference if figures is not None else None
        base_fog = figures.base_fog if figures is not None else None
        for item in (self.low_line, self.high_line):
            item.setVisible(reference is not None)
        self.base_fog_line.setVisible(base_fog is not None)
        if reference is not None:
            self._syncing = True
            try:
                self.low_line.setValue(reference + low)
                self.high_line.setValue(reference + high)
            finally:
                self._syncing = False
            self.low_line.label.setFormat(f"net {low:.2f}")
            self.high_line.label.setFormat(f"net {high:.2f}")
        if base_fog is not None:
            self.base_fog_line.setValue(base_fog)
        x1 = figures.gradient_low_log_exposure if figures else None
        x2 = figures.gradient_high_log_exposure if figures else None
        if reference is not None and x1 is not None and x2 is not None:
            self.gradient_item.setData([x1, x2], [reference + low, reference + high])
            self.density_points_item.setData([x1, x2], [reference + low, reference + high])
            self.latitude_region.setRegion((x1, x2))
            self.latitude_region.show()
        else:
            self.gradient_item.setData([], [])
            self.density_points_item.setData([], [])
            self.latitude_region.hide()
        if reference is not None and figures.speed_log_exposure is not None:
            self.speed_item.setData([figures.speed_log_exposure],
                                    [reference + figures.settings.get("speed_net_density", 1.0)])
        else:
            self.speed_item.setData([], [])
        self._show_readout(result)

    def _show_slope(self, result: StripResult | None) -> None:
        curve = strip_curve(result) if result is not None else None
        figures = result.figures if result is not None else None
        if curve is None or figures is None or figures.gamma_log_exposure is None:
            self.max_slope_item.setData([], [])
            self.tangent_item.setData([], [])
            self.gradient_curve.setData([], [])
            return
        x0 = figures.gamma_log_exposure
        y0 = float(curve(x0))
        self.max_slope_item.setData([x0], [y0])
        # A short tangent shows what "maximum slope" means on the curve itself, never past the usable steps.
        half = 0.12
        a, b = max(x0 - half, float(curve.log_exposure[0])), min(x0 + half, float(curve.log_exposure[-1]))
        self.tangent_item.setData([a, b], [y0 + figures.gamma * (a - x0), y0 + figures.gamma * (b - x0)])
        if self._gradient_shown:
            grid, slope = curve.gradient_curve()
            self.gradient_curve.setData(grid, slope)
            self.gradient_view.enableAutoRange(axis=pg.ViewBox.YAxis)
        else:
            self.gradient_curve.setData([], [])

    def _show_readout(self, result: StripResult | None) -> None:
        if result is None:
            self.readout.setText("No strip selected." if self.session.selected is None
                                 else "No densities: see the message above the scan.")
            return
        f = result.figures
        low, high = self.session.levels

        def num(value: float | None, digits: int = 2) -> str:
            return "—" if value is None else f"{value:.{digits}f}"

        self.readout.setText(
            f"<b>Strip {result.index}</b> · average gradient <b>{num(f.average_gradient)}</b> "
            f"(net {low:.2f}–{high:.2f}) · latitude <b>{num(f.latitude_log_exposure)}</b> log E · "
            f"speed point {num(f.speed_log_exposure)} · gamma {num(f.gamma)}"
        )

    # -- view → model -------------------------------------------------------------------
    def _show_level_values(self) -> None:
        low, high = self.session.levels
        for name, value in (("low", low), ("high", high)):
            edit = self.level_edits[name]
            edit.blockSignals(True)
            edit.setValue(value)
            edit.blockSignals(False)

    def _level_typed(self, name: str, value: float) -> None:
        self.session.set_levels(**{name: value})
        self._show_level_values()  # the session may have kept the levels apart

    def choose_level(self, line: pg.InfiniteLine) -> None:
        """Make ``line`` (low_line or high_line) the level the arrow keys move, and take the keyboard focus."""
        self.chosen_level = line
        for item in (self.low_line, self.high_line):
            item.setPen(_LEVEL_HOVER if item is line else _LEVEL_PEN)
        self.plot_widget.setFocus()

    def nudge_level(self, steps: int, size: float = 0.01) -> None:
        """Move the chosen level by ``steps`` × ``size`` OD of net density."""
        if self.chosen_level is None:
            return
        low, high = self.session.levels
        if self.chosen_level is self.low_line:
            self.session.set_levels(low=round(low + steps * size, 6))
        else:
            self.session.set_levels(high=round(high + steps * size, 6))
        self.levels_dragged.emit(*self.session.levels)

    def eventFilter(self, watched: QObject, event: QEvent) -> bool:  # noqa: N802 (Qt's name)
        if watched is self.plot_widget and event.type() == QEvent.Type.KeyPress and self._arrow(event):
            return True
        return super().eventFilter(watched, event)

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802 (Qt's name)
        if not self._arrow(event):
            super().keyPressEvent(event)

    def _arrow(self, event: QKeyEvent) -> bool:
        key = event.key()
        if self.chosen_level is None or key not in (Qt.Key.Key_Up, Qt.Key.Key_Down):
            return False
        size = 0.05 if event.modifiers() & Qt.KeyboardModifier.ShiftModifier else 0.01
        self.nudge_level(1 if key == Qt.Key.Key_Up else -1, size)
        event.accept()
        return True

    def _line_moved(self, line: pg.InfiniteLine) -> None:
        if self._syncing:
            return
        self.chosen_level = line
        result = self.session.result()
        reference = result.figures.net_reference if result is not None else None
        if reference is None:
            return
        net = float(line.value()) - reference
        if line is self.low_line:
            self.session.set_levels(low=net)
        else:
            self.session.set_levels(high=net)
        self.levels_dragged.emit(*self.session.levels)
