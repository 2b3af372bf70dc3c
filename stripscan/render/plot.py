"""A small plot description and the one routine that draws it with QPainter.

A :class:`Plot` is plain data (lines, points, bands, reference lines,
notes); :func:`draw_plot` paints it into any rectangle of any Qt paint
device, so the PDF pages, the PNG and SVG exports and the tests all use
the same drawing (:mod:`stripscan.render.pictures` saves it as PNG or
SVG).  Sizes (fonts, pens, markers) are in typographic points
and turned into device pixels with the device's own resolution, so a plot
looks alike on a 300 dpi page and a 150 dpi picture.

Colours are Okabe & Ito's palette (distinguishable with the common
colour-vision deficiencies); every series also differs by marker or dash,
so a grey print still reads.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Sequence, Union

from stripscan.render.qt import ReportError

if TYPE_CHECKING:
    from PySide6.QtCore import QRectF
    from PySide6.QtGui import QFont, QPainter, QPen

__all__ = [
    "COLOURS", "Line", "Points", "Band", "HBand", "RefLine", "ErrorBars", "Note", "Plot",
    "nice_ticks", "make_font", "draw_marker", "draw_plot", "x_tick_text",
]

#: Okabe & Ito (2008) colours by role, plus ink and greys.
COLOURS = {
    "ink": "#1a1a1a", "grid": "#d9d9d9", "grey": "#6e6e6e", "blue": "#0072B2", "orange": "#D55E00",
    "green": "#009E73", "purple": "#CC79A7", "yellow": "#E69F00", "sky": "#56B4E9", "red": "#B3261E",
}

MARKERS = ("circle", "square", "triangle", "diamond", "cross", "plus")
DASHES = ("solid", "dash", "dot", "dashdot")


@dataclass(frozen=True)
class Line:
    """A polyline through (x, y); NaN values break it."""

    x: Sequence[float]
    y: Sequence[float]
    label: str = ""
    colour: str = COLOURS["blue"]
    width_pt: float = 1.2
    dash: str = "solid"


@dataclass(frozen=True)
class Points:
    """Markers at (x, y); NaN points are skipped."""

    x: Sequence[float]
    y: Sequence[float]
    label: str = ""
    colour: str = COLOURS["blue"]
    marker: str = "circle"
    filled: bool = True
    size_pt: float = 4.0


@dataclass(frozen=True)
class Band:
    """A shaded area between ``low`` and ``high`` along x (e.g. ± 1 sd)."""

    x: Sequence[float]
    low: Sequence[float]
    high: Sequence[float]
    label: str = ""
    colour: str = COLOURS["blue"]
    opacity: float = 0.22


@dataclass(frozen=True)
class HBand:
    """A horizontal shaded stripe from ``low`` to ``high`` across the whole plot."""

    low: float
    high: float
    label: str = ""
    colour: str = COLOURS["green"]
    opacity: float = 0.12


@dataclass(frozen=True)
class RefLine:
    """A horizontal (``vertical=False``) or vertical reference line at ``at``."""

    at: float
    label: str = ""
    colour: str = COLOURS["grey"]
    width_pt: float = 0.8
    dash: str = "dash"
    vertical: bool = False


@dataclass(frozen=True)
class ErrorBars:
    """Vertical bars from ``low`` to ``high`` at each x, with a centre marker at y."""

    x: Sequence[float]
    y: Sequence[float]
    low: Sequence[float]
    high: Sequence[float]
    label: str = ""
    colour: str = COLOURS["ink"]
    marker: str = "square"


@dataclass(frozen=True)
class Note:
    """Text next to a data point; kept inside the plot area."""

    x: float
    y: float
    text: str
    colour: str = COLOURS["ink"]
    side: str = "right"  # right, left, above, below


Item = Union[Line, Points, Band, HBand, RefLine, ErrorBars, Note]


@dataclass(frozen=True)
class Plot:
    """Everything needed to draw one chart.

    Attributes
    ----------
    items : sequence of Line, Points, Band, HBand, RefLine, ErrorBars, Note
        Drawn areas first, then lines, then markers, then notes.
    title, x_label, y_label : str
    x_range, y_range : (float, float) or None
        Fixed axis ranges; None fits the data with a small margin.
    x_ticks : sequence of (float, str) or None
        Explicit tick positions and labels (e.g. days of a month).
    y_signed : bool
        Print y tick labels with a sign (deviations).
    y_decimals : int or None
        Decimals of the y tick labels (None: as the tick step needs); fixed
        decimals line up the axes of plots stacked on a page.
    legend : bool
        Show a legend of the labelled items below the plot.
    empty_text : str
        Shown in the middle when there is nothing to draw.
    font_pt : float
        Size of tick labels, axis labels and notes, points.
    """

    items: Sequence[Item] = ()
    title: str = ""
    x_label: str = ""
    y_label: str = ""
    x_range: tuple[float, float] | None = None
    y_range: tuple[float, float] | None = None
    x_ticks: Sequence[tuple[float, str]] | None = None
    y_signed: bool = False
    y_decimals: int | None = None
    legend: bool = True
    empty_text: str = "no data to draw"
    font_pt: float = 7.0


def nice_ticks(low: float, high: float, target: int = 6) -> tuple[list[float], int]:
    """Round tick values covering [low, high] (steps 1, 2, 2.5 or 5 x 10^k) and the decimals to print."""
    span = high - low
    if not span > 0:
        return [low], 2
    raw = span / max(target, 1)
    magnitude = 10.0 ** math.floor(math.log10(raw))
    for factor in (1.0, 2.0, 2.5, 5.0, 10.0):
        step = factor * magnitude
        if span / step <= target * 1.25:
            break
    first = math.ceil(low / step - 1e-9) * step
    ticks = []
    value = first
    while value <= high + 1e-9 * step:
        ticks.append(0.0 if abs(value) < 1e-12 * step else value)
        value += step
    decimals = max(0, -int(math.floor(math.log10(step) + 1e-9)))
    if factor == 2.5 and step < 10:
        decimals += 1
    return ticks, decimals


def _finite(values: Sequence[float]) -> list[float]:
    return [float(v) for v in values if v is not None and math.isfinite(float(v))]


def _data_extent(plot: Plot) -> tuple[list[float], list[float]]:
    xs: list[float] = []
    ys: list[float] = []
    for item in plot.items:
        if isinstance(item, (Line, Points)):
            xs += _finite(item.x)
            ys += _finite(item.y)
        elif isinstance(item, Band):
            xs += _finite(item.x)
            ys += _finite(item.low) + _finite(item.high)
        elif isinstance(item, ErrorBars):
            xs += _finite(item.x)
            ys += _finite(item.low) + _finite(item.high) + _finite(item.y)
        elif isinstance(item, HBand):
            ys += _finite([item.low, item.high])
        elif isinstance(item, RefLine):
            (xs if item.vertical else ys).append(float(item.at))
    return xs, ys


def _range(values: list[float], fixed: tuple[float, float] | None) -> tuple[float, float] | None:
    if fixed is not None:
        return float(fixed[0]), float(fixed[1])
    if not values:
        return None
    low, high = min(values), max(values)
    if high - low < 1e-9:
        return low - 0.5, high + 0.5
    pad = 0.04 * (high - low)
    return low - pad, high + pad


def _qt():
    from PySide6 import QtCore, QtGui

    return QtCore, QtGui


def _pen(colour: str, width_px: float, dash: str = "solid", opacity: float = 1.0) -> "QPen":
    QtCore, QtGui = _qt()
    qcolour = QtGui.QColor(colour)
    qcolour.setAlphaF(opacity)
    pen = QtGui.QPen(qcolour, max(width_px, 0.5))
    styles = {"solid": QtCore.Qt.PenStyle.SolidLine, "dash": QtCore.Qt.PenStyle.DashLine,
              "dot": QtCore.Qt.PenStyle.DotLine, "dashdot": QtCore.Qt.PenStyle.DashDotLine}
    if dash not in styles:
        raise ValueError(f"unknown dash {dash!r}; choose one of {', '.join(DASHES)}")
    pen.setStyle(styles[dash])
    pen.setCapStyle(QtCore.Qt.PenCapStyle.FlatCap)
    return pen


def make_font(size_pt: float, *, bold: bool = False, italic: bool = False, mono: bool = False) -> "QFont":
    """The reports' font: a plain sans (or mono) face at ``size_pt`` points, without ligatures.

    Ligatures are turned off so that a PDF's text reads back letter by
    letter ("fi", not one ligature glyph): searchable and copyable.
    """
    _, QtGui = _qt()
    font = QtGui.QFont()
    if mono:
        font.setFamilies(["DejaVu Sans Mono", "Liberation Mono", "Courier New", "Courier"])
        font.setStyleHint(QtGui.QFont.StyleHint.Monospace)
    else:
        font.setFamilies(["DejaVu Sans", "Liberation Sans", "Arial", "Helvetica"])
        font.setStyleHint(QtGui.QFont.StyleHint.SansSerif)
    font.setPointSizeF(size_pt)
    font.setBold(bold)
    font.setItalic(italic)
    for tag in ("liga", "clig", "dlig"):
        font.setFeature(QtGui.QFont.Tag(tag), 0)
    return font


def draw_marker(painter: "QPainter", x: float, y: float, marker: str, size_px: float, colour: str, filled: bool,
                pen_px: float) -> None:
    """Draw one marker centred on device point (x, y)."""
    QtCore, QtGui = _qt()
    r = size_px / 2.0
    painter.setPen(_pen(colour, pen_px))
    painter.setBrush(QtGui.QBrush(QtGui.QColor(colour)) if filled else QtCore.Qt.BrushStyle.NoBrush)
    if marker == "circle":
        painter.drawEllipse(QtCore.QPointF(x, y), r, r)
    elif marker == "square":
        painter.drawRect(QtCore.QRectF(x - r, y - r, 2 * r, 2 * r))
    elif marker in ("triangle", "diamond"):
        if marker == "triangle":
            corners = [(x, y - 1.15 * r), (x + r, y + 0.75 * r), (x - r, y + 0.75 * r)]
        else:
            corners = [(x, y - 1.2 * r), (x + 1.2 * r, y), (x, y + 1.2 * r), (x - 1.2 * r, y)]
        painter.drawPolygon(QtGui.QPolygonF([QtCore.QPointF(a, b) for a, b in corners]))
    elif marker in ("cross", "plus"):
        painter.setPen(_pen(colour, max(pen_px, size_px / 5.0)))
        if marker == "cross":
            painter.drawLine(QtCore.QPointF(x - r, y - r), QtCore.QPointF(x + r, y + r))
            painter.drawLine(QtCore.QPointF(x - r, y + r), QtCore.QPointF(x + r, y - r))
        else:
            painter.drawLine(QtCore.QPointF(x - r, y), QtCore.QPointF(x + r, y))
            painter.drawLine(QtCore.QPointF(x, y - r), QtCore.QPointF(x, y + r))
    else:
        raise ValueError(f"unknown marker {marker!r}; choose one of {', '.join(MARKERS)}")


def _legend_entries(plot: Plot) -> list[Item]:
    return [item for item in plot.items if getattr(item, "label", "") and not isinstance(item, Note)]


def _draw_swatch(painter, item: Item, x: float, y: float, w: float, pt: float) -> None:
    QtCore, QtGui = _qt()
    if isinstance(item, (Band, HBand)):
        colour = QtGui.QColor(item.colour)
        colour.setAlphaF(min(1.0, item.opacity * 2.0))
        painter.setPen(QtCore.Qt.PenStyle.NoPen)
        painter.setBrush(colour)
        painter.drawRect(QtCore.QRectF(x, y - 2.5 * pt, w, 5 * pt))
    elif isinstance(item, (Line, RefLine)):
        painter.setPen(_pen(item.colour, item.width_pt * pt, item.dash))
        painter.drawLine(QtCore.QPointF(x, y), QtCore.QPointF(x + w, y))
    elif isinstance(item, Points):
        draw_marker(painter, x + w / 2, y, item.marker, item.size_pt * pt, item.colour, item.filled, 0.8 * pt)
    elif isinstance(item, ErrorBars):
        painter.setPen(_pen(item.colour, 0.8 * pt))
        painter.drawLine(QtCore.QPointF(x + w / 2, y - 3 * pt), QtCore.QPointF(x + w / 2, y + 3 * pt))
        draw_marker(painter, x + w / 2, y, item.marker, 3.5 * pt, item.colour, True, 0.8 * pt)


def _legend_rows(plot: Plot, metrics, width: float, pt: float) -> list[list[tuple[Item, str, float]]]:
    """Legend entries (item, text, width) in rows that fit ``width``."""
    rows: list[list[tuple[Item, str, float]]] = [[]]
    used = 0.0
    for item in _legend_entries(plot):
        text = metrics.elidedText(item.label, _qt()[0].Qt.TextElideMode.ElideRight, width - 20 * pt)
        entry = 14 * pt + metrics.horizontalAdvance(text) + 10 * pt
        if rows[-1] and used + entry > width:
            rows.append([])
            used = 0.0
        rows[-1].append((item, text, entry))
        used += entry
    return [row for row in rows if row]


def draw_plot(painter: "QPainter", rect: "QRectF", plot: Plot) -> None:
    """Paint ``plot`` inside ``rect`` (a QRectF in device pixels) with ``painter``.

    Nothing is drawn outside ``rect``: data are clipped to the plot area and
    texts are shortened to fit.
    """
    QtCore, QtGui = _qt()
    painter.save()
    try:
        _draw(painter, QtCore.QRectF(rect), plot)
    finally:
        painter.restore()


def _draw(painter, rect, plot: Plot) -> None:
    QtCore, QtGui = _qt()
    Qt = QtCore.Qt
    dpi = painter.device().logicalDpiX()
    pt = dpi / 72.0
    painter.setRenderHint(QtGui.QPainter.RenderHint.Antialiasing)
    small, bold = make_font(plot.font_pt), make_font(plot.font_pt + 1.0, bold=True)
    fm = QtGui.QFontMetricsF(small, painter.device())
    fm_bold = QtGui.QFontMetricsF(bold, painter.device())
    line_h = fm.height()
    xs, ys = _data_extent(plot)
    x_span, y_span = _range(xs, plot.x_range), _range(ys, plot.y_range)
    x_ticks, x_dec = ([t for t, _ in plot.x_ticks], 0) if plot.x_ticks else (
        nice_ticks(*x_span) if x_span else ([], 0))
    y_ticks, y_dec = nice_ticks(*y_span, target=5) if y_span else ([], 0)
    if plot.y_decimals is not None:
        y_dec = max(y_dec, plot.y_decimals)
    y_texts = [f"{v:+.{y_dec}f}" if plot.y_signed and v != 0 else f"{v:.{y_dec}f}" for v in y_ticks]

    top = rect.top()
    if plot.title:
        painter.setFont(bold)
        painter.setPen(QtGui.QColor(COLOURS["ink"]))
        title = fm_bold.elidedText(plot.title, Qt.TextElideMode.ElideRight, rect.width())
        painter.drawText(QtCore.QRectF(rect.left(), top, rect.width(), fm_bold.height()),
                         int(Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignVCenter), title)
        top += fm_bold.height() + 2 * pt
    legend = _legend_rows(plot, fm, rect.width(), pt) if plot.legend else []
    bottom = rect.bottom() - len(legend) * (line_h + 2 * pt)
    if plot.x_label:
        bottom -= line_h + 1 * pt
    bottom -= line_h + 3 * pt  # x tick labels
    left = rect.left() + (line_h + 2 * pt if plot.y_label else 0.0)
    left += max((fm.horizontalAdvance(t) for t in y_texts), default=0.0) + 4 * pt
    right = rect.right() - max(4 * pt, fm.horizontalAdvance(x_tick_text(x_ticks, plot, x_dec)[-1]) / 2
                               if x_ticks else 4 * pt)
    area = QtCore.QRectF(QtCore.QPointF(left, top + 0.5 * line_h), QtCore.QPointF(right, bottom))
    if area.width() < 20 * pt or area.height() < 20 * pt:
        raise ReportError(f"a plot needs more room than {rect.width() / pt:.0f} x {rect.height() / pt:.0f} pt")

    painter.setPen(Qt.PenStyle.NoPen)
    painter.setBrush(QtGui.QColor("#ffffff"))
    painter.drawRect(area)
    painter.setFont(small)
    if x_span is None or y_span is None:
        painter.setPen(_pen(COLOURS["ink"], 0.8 * pt))
        painter.setBrush(Qt.BrushStyle.NoBrush)
        painter.drawRect(area)
        painter.setPen(QtGui.QColor(COLOURS["grey"]))
        painter.drawText(area, int(Qt.AlignmentFlag.AlignCenter | Qt.TextFlag.TextWordWrap), plot.empty_text)
        return

    def px(x: float) -> float:
        return area.left() + (x - x_span[0]) / (x_span[1] - x_span[0]) * area.width()

    def py(y: float) -> float:
        return area.bottom() - (y - y_span[0]) / (y_span[1] - y_span[0]) * area.height()

    # Grid and ticks.
    painter.setPen(_pen(COLOURS["grid"], 0.4 * pt))
    for t in x_ticks:
        if x_span[0] <= t <= x_span[1]:
            painter.drawLine(QtCore.QPointF(px(t), area.top()), QtCore.QPointF(px(t), area.bottom()))
    for t in y_ticks:
        painter.drawLine(QtCore.QPointF(area.left(), py(t)), QtCore.QPointF(area.right(), py(t)))
    painter.setPen(QtGui.QColor(COLOURS["ink"]))
    for t, text in zip(y_ticks, y_texts):
        box = QtCore.QRectF(rect.left(), py(t) - line_h / 2, area.left() - rect.left() - 3 * pt, line_h)
        painter.drawText(box, int(Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter), text)
    for t, text in zip(x_ticks, x_tick_text(x_ticks, plot, x_dec)):
        if x_span[0] - 1e-9 <= t <= x_span[1] + 1e-9:
            w = fm.horizontalAdvance(text) + 2 * pt
            painter.drawText(QtCore.QRectF(px(t) - w / 2, area.bottom() + 2 * pt, w, line_h),
                             int(Qt.AlignmentFlag.AlignHCenter | Qt.AlignmentFlag.AlignTop), text)
    if plot.x_label:
        label = fm.elidedText(plot.x_label, Qt.TextElideMode.ElideRight, area.width())
        painter.drawText(QtCore.QRectF(area.left(), area.bottom() + line_h + 3 * pt, area.width(), line_h),
                         int(Qt.AlignmentFlag.AlignHCenter | Qt.AlignmentFlag.AlignTop), label)
    if plot.y_label:
        painter.save()
        painter.translate(rect.left(), area.center().y())
        painter.rotate(-90)
        label = fm.elidedText(plot.y_label, Qt.TextElideMode.ElideRight, area.height())
        painter.drawText(QtCore.QRectF(-area.height() / 2, 0, area.height(), line_h),
                         int(Qt.AlignmentFlag.AlignHCenter | Qt.AlignmentFlag.AlignTop), label)
        painter.restore()

    painter.save()
    painter.setClipRect(area)
    _draw_items(painter, plot, area, px, py, pt, fm)
    painter.restore()
    painter.setPen(_pen(COLOURS["ink"], 0.8 * pt))
    painter.setBrush(Qt.BrushStyle.NoBrush)
    painter.drawRect(area)

    # Legend rows under the axis label.
    y = rect.bottom() - len(legend) * (line_h + 2 * pt) + line_h / 2 + 1 * pt
    for row in legend:
        x = rect.left()
        for item, text, entry in row:
            _draw_swatch(painter, item, x, y, 12 * pt, pt)
            painter.setPen(QtGui.QColor(COLOURS["ink"]))
            painter.setFont(small)
            painter.drawText(QtCore.QRectF(x + 14 * pt, y - line_h / 2, entry - 14 * pt, line_h),
                             int(Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignVCenter), text)
            x += entry
        y += line_h + 2 * pt


def x_tick_text(ticks: Sequence[float], plot: Plot, decimals: int) -> list[str]:
    """Labels of the x ticks: the explicit ones, or the values at ``decimals``."""
    if plot.x_ticks:
        return [label for _, label in plot.x_ticks]
    return [f"{t:.{decimals}f}" for t in ticks]


def _segments(x: Sequence[float], y: Sequence[float]) -> list[list[tuple[float, float]]]:
    runs: list[list[tuple[float, float]]] = [[]]
    for a, b in zip(x, y):
        if a is None or b is None or not (math.isfinite(float(a)) and math.isfinite(float(b))):
            if runs[-1]:
                runs.append([])
            continue
        runs[-1].append((float(a), float(b)))
    return [r for r in runs if r]


def _draw_items(painter, plot: Plot, area, px, py, pt: float, fm) -> None:
    QtCore, QtGui = _qt()
    Qt = QtCore.Qt
    order = (HBand, Band, RefLine, Line, ErrorBars, Points, Note)
    for kind in order:
        for item in (i for i in plot.items if isinstance(i, kind)):
            if isinstance(item, HBand):
                colour = QtGui.QColor(item.colour)
                colour.setAlphaF(item.opacity)
                painter.setPen(Qt.PenStyle.NoPen)
                painter.setBrush(colour)
                y0, y1 = py(item.high), py(item.low)
                painter.drawRect(QtCore.QRectF(area.left(), y0, area.width(), y1 - y0))
            elif isinstance(item, Band):
                colour = QtGui.QColor(item.colour)
                colour.setAlphaF(item.opacity)
                painter.setPen(Qt.PenStyle.NoPen)
                painter.setBrush(colour)
                for run in _segments(item.x, [h - lo for h, lo in zip(item.high, item.low)]):
                    keep = [(a, lo, hi) for a, lo, hi in zip(item.x, item.low, item.high)
                            if run[0][0] <= a <= run[-1][0]]
                    upper = [QtCore.QPointF(px(a), py(hi)) for a, _, hi in keep]
                    lower = [QtCore.QPointF(px(a), py(lo)) for a, lo, _ in reversed(keep)]
                    painter.drawPolygon(QtGui.QPolygonF(upper + lower))
            elif isinstance(item, RefLine):
                painter.setPen(_pen(item.colour, item.width_pt * pt, item.dash))
                if item.vertical:
                    painter.drawLine(QtCore.QPointF(px(item.at), area.top()), QtCore.QPointF(px(item.at), area.bottom()))
                else:
                    painter.drawLine(QtCore.QPointF(area.left(), py(item.at)), QtCore.QPointF(area.right(), py(item.at)))
            elif isinstance(item, Line):
                painter.setPen(_pen(item.colour, item.width_pt * pt, item.dash))
                painter.setBrush(Qt.BrushStyle.NoBrush)
                for run in _segments(item.x, item.y):
                    painter.drawPolyline(QtGui.QPolygonF([QtCore.QPointF(px(a), py(b)) for a, b in run]))
            elif isinstance(item, ErrorBars):
                for a, b, lo, hi in zip(item.x, item.y, item.low, item.high):
                    if not all(v is not None and math.isfinite(float(v)) for v in (a, b, lo, hi)):
                        continue
                    painter.setPen(_pen(item.colour, 0.9 * pt))
                    cx = px(a)
                    painter.drawLine(QtCore.QPointF(cx, py(lo)), QtCore.QPointF(cx, py(hi)))
                    for end in (lo, hi):
                        painter.drawLine(QtCore.QPointF(cx - 2 * pt, py(end)), QtCore.QPointF(cx + 2 * pt, py(end)))
                    draw_marker(painter, cx, py(b), item.marker, 3.5 * pt, item.colour, True, 0.8 * pt)
            elif isinstance(item, Points):
                for a, b in (run_point for run in _segments(item.x, item.y) for run_point in run):
                    draw_marker(painter, px(a), py(b), item.marker, item.size_pt * pt, item.colour, item.filled, 0.9 * pt)
            elif isinstance(item, Note):
                _draw_note(painter, item, area, px, py, pt, fm)


def _draw_note(painter, note: Note, area, px, py, pt: float, fm) -> None:
    QtCore, QtGui = _qt()
    if not (math.isfinite(note.x) and math.isfinite(note.y)):
        return
    w, h = min(fm.horizontalAdvance(note.text) + 2 * pt, area.width()), fm.height()
    x, y = px(note.x), py(note.y)
    gap = 4 * pt
    left = {"right": x + gap, "left": x - gap - w, "above": x - w / 2, "below": x - w / 2}[note.side]
    top = {"right": y - h / 2, "left": y - h / 2, "above": y - gap - h, "below": y + gap}[note.side]
    left = min(max(left, area.left() + pt), area.right() - w - pt)
    top = min(max(top, area.top() + pt), area.bottom() - h - pt)
    box = QtCore.QRectF(left, top, w, h)
    background = QtGui.QColor("#ffffff")
    background.setAlphaF(0.8)
    painter.setPen(QtCore.Qt.PenStyle.NoPen)
    painter.setBrush(background)
    painter.drawRect(box)
    painter.setPen(QtGui.QColor(note.colour))
    text = fm.elidedText(note.text, QtCore.Qt.TextElideMode.ElideRight, w)
    painter.drawText(box, int(QtCore.Qt.AlignmentFlag.AlignCenter), text)
