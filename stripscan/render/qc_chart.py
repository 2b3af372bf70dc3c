"""The processor QC chart as a PNG: three stacked deviation plots drawn with QPainter.

One plot per tracked number (base+fog, mid-density, density difference),
each showing the day's deviation from the operating level in force, the
control limits and warning tier as shaded bands, the days that set the
levels, events that restart the baseline, and trend-rule findings as bars
under the days they cover.  A point past a limit is told apart by its shape
*and* its colour (a circle within limits, a triangle past the warning
tier, a larger diamond past the control limit), so the chart reads in
grey print and for people who do not see the colours apart.

Entries kept but not used are drawn too, a little left of their day: a
strip repeated the same day as a hollow mark of its own shape and colour,
a value corrected afterwards as a small grey cross.  Neither is joined to
the line, and the legend says what they are.

The picture is drawn on a ``QImage`` offscreen: no window, no display
needed.  It is written under a temporary name and renamed into place, so a
failure never leaves a half-written file.
"""

from __future__ import annotations

import datetime
import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from stripscan import CAUTION, __version__
from stripscan._shared.atomic import replacing
from stripscan.render.qt import ensure_app
from stripscan.services.qc_chart import ChartData, ChartSeries, ChartPoint, chart_legend, describe_rule
from stripscan.core.qc.names import VERDICT_WORDS

__all__ = [
    "MARKS", "BANDS", "SET_ASIDE", "CORRECTED_COLOUR", "WAITING_COLOUR", "SET_ASIDE_SHIFT", "LEVEL_LINE",
    "LIMIT_LINE", "WARNING_LINE", "TREND_COLOUR", "EVENT_COLOUR", "BASELINE_COLOUR", "BASELINE_OPACITY", "LegendEntry", "LEGEND",
    "legend_entries", "y_span", "render_chart", "render_chart_png",
]

#: How a day's point looks, by verdict: colour, shape, size (px) and legend text.
#: Colours from Okabe & Ito's palette, which survives the common colour-vision deficiencies.
MARKS = {
    "ok": ("#0072B2", "circle", 5.0, "within limits"),
    "warning": ("#E69F00", "triangle", 7.0, "past the warning tier"),
    "action": ("#D55E00", "diamond", 9.0, "past the control limit"),
}
#: Fill of the zone past the warning tier and past the control limit.
BANDS = {"warning": "#FCEFD2", "action": "#F7D4C6"}
#: Colours of the operating level, the limit lines, event lines, trend-rule bars and the days that set the levels.
LEVEL_LINE, LIMIT_LINE, WARNING_LINE = "#555555", "#B03A12", "#B7860B"
TREND_COLOUR, EVENT_COLOUR = "#8E4A7A", "#444444"
#: The days that set the levels are shaded in this grey at this opacity, over the limit zones (on white: #E6E6E6).
BASELINE_COLOUR, BASELINE_OPACITY = "#808080", 0.2
#: Legend words for entries kept but not used, by why they are set aside.
SET_ASIDE = {  # keyed by stripscan.services.qc_chart.SET_ASIDE_KINDS
    "repeated": "hollow: strip repeated the same day, kept but not used (the latest repeat counts)",
    "corrected": "value corrected afterwards: kept, not used",
}
#: Colour of a corrected value's cross and of a day still in its baseline; how far left of its day a
#: set-aside mark sits, in days.
CORRECTED_COLOUR, WAITING_COLOUR, SET_ASIDE_SHIFT = "#777777", "#666666", 0.25


@dataclass(frozen=True)
class LegendEntry:
    """One entry of the QC charts' legend: how a thing is drawn and what it means.

    The PNG chart, the monthly PDF report and the window draw their
    legends from :data:`LEGEND` (through :func:`legend_entries`), so a mark
    means the same everywhere.

    Attributes
    ----------
    key : str
        ``"ok"``, ``"warning"``, ``"action"`` (a day's point by its tier),
        ``"repeated"``, ``"corrected"``, ``"waiting"`` (a day in a baseline
        still in progress), ``"level"``, ``"control_limit"``,
        ``"warning_tier"``, ``"event"``, ``"baseline_days"``, ``"trend"``.
    look : str
        ``"mark"`` (filled), ``"hollow"``, ``"cross"``, ``"plus"``,
        ``"line"``, ``"shade"`` (a day-wide grey column) or ``"bar"``.
    words : str
        What it means, in plain words.
    colour : str
        ``#RRGGBB``.
    shape : str
        Marker shape for the marks: ``"circle"``, ``"triangle"``, ``"diamond"``.
    dash : str
        Line style for the lines: ``"solid"``, ``"dash"``, ``"dot"``, ``"dashdot"``.
    glyph : str
        A character that looks like it, for text (the window's key).
    """

    key: str
    look: str
    words: str
    colour: str
    shape: str = ""
    dash: str = "solid"
    glyph: str = ""


#: Every entry of the legend, in the order shown.
LEGEND: tuple[LegendEntry, ...] = (
    *(LegendEntry(v, "mark", MARKS[v][3], MARKS[v][0], MARKS[v][1], glyph=g)
      for v, g in (("ok", "\u25cf"), ("warning", "\u25b2"), ("action", "\u25c6"))),
    LegendEntry("repeated", "hollow", SET_ASIDE["repeated"], MARKS["ok"][0], "circle", glyph="\u25cb"),
    LegendEntry("corrected", "cross", SET_ASIDE["corrected"], CORRECTED_COLOUR, glyph="\u00d7"),
    LegendEntry("waiting", "plus", "baseline in progress: not judged yet", WAITING_COLOUR, glyph="+"),
    LegendEntry("level", "line", "operating level", LEVEL_LINE, glyph="\u2500\u2500"),
    LegendEntry("control_limit", "line", "control limit (shaded beyond)", LIMIT_LINE, dash="dash",
                glyph="\u254c\u254c"),
    LegendEntry("warning_tier", "line", "warning tier (shaded beyond)", WARNING_LINE, dash="dot", glyph="\u2508\u2508"),
    LegendEntry("event", "line", "event: the baseline restarts", EVENT_COLOUR, dash="dashdot", glyph="\u2506"),
    LegendEntry("baseline_days", "shade", "grey: days that set the operating levels", BASELINE_COLOUR,
                glyph="\u2588"),
    LegendEntry("trend", "bar", "trend rule fired, under its days (run: one side of the level; drift: each strip "
                "further than the last; repeated warnings: past the warning tier)", TREND_COLOUR, glyph="\u25ac"),
)


def legend_entries(data: ChartData) -> tuple[LegendEntry, ...]:
    """The legend of a chart: the point tiers and lines always, the rest when the chart shows any.

    The PNG chart, the monthly report and the window all call this, so
    they explain the same marks in the same words.
    """
    shown = {"ok", "warning", "action", "level", "control_limit"}
    if any(s.warning[0] is not None or s.warning[1] is not None for s in data.series):
        shown.add("warning_tier")
    shown.update(data.set_aside_kinds)
    if any(p.deviation is None for s in data.series for p in s.points):
        shown.add("waiting")
    if data.events:
        shown.add("event")
    if any(data.first <= d <= data.last for p in data.periods for d in p.baseline_dates):
        shown.add("baseline_days")
    if data.findings:
        shown.add("trend")
    return tuple(e for e in LEGEND if e.key in shown)


# --------------------------------------------------------------------------
# Drawing


class _Axes:
    """Maps days and deviations of one plot to pixels."""

    def __init__(self, rect: Any, first: datetime.date, last: datetime.date, span: float) -> None:
        self.rect, self.first, self.span = rect, first, span
        self.days = (last - first).days + 1

    def x(self, day: datetime.date | float) -> float:
        k = (day - self.first).days if isinstance(day, datetime.date) else day
        return self.rect.left() + (k + 0.5) / self.days * self.rect.width()

    def y(self, deviation: float) -> float:
        frac = (deviation + self.span) / (2 * self.span)
        return self.rect.bottom() - min(max(frac, 0.0), 1.0) * self.rect.height()


def y_span(series: ChartSeries) -> float:
    """Half the y range: room for the limits and every point, on a 0.05 OD grid."""
    limits = [abs(v) for v in (*series.action, *series.warning) if v is not None]
    # A repeated strip was measured and may be the one past a limit; a corrected value was a slip
    # (perhaps far off) and is drawn at the edge rather than squeezing the plot.
    shown = [*series.points, *(p for p in series.set_aside if p.set_aside == "repeated")]
    devs = [abs(p.deviation) for p in shown if p.deviation is not None]
    need = max([1.35 * max(limits, default=0.1), *(1.15 * d for d in devs)])
    return math.ceil(need / 0.05 - 1e-9) * 0.05


def _marker(painter: Any, verdict: str, x: float, y: float, *, hollow: bool = False) -> None:
    from PySide6.QtCore import QPointF, Qt
    from PySide6.QtGui import QBrush, QColor, QPen, QPolygonF

    colour, shape, r, _ = MARKS[verdict]
    if hollow:
        # A strip kept but not used: the shape and colour of its tier, as an outline only.
        painter.setPen(QPen(QColor(colour), 2.2))
        painter.setBrush(Qt.BrushStyle.NoBrush)
    else:
        painter.setPen(QPen(QColor("#1A1A1A"), 1.2))
        painter.setBrush(QBrush(QColor(colour)))
    if shape == "circle":
        painter.drawEllipse(QPointF(x, y), r, r)
    elif shape == "triangle":
        painter.drawPolygon(QPolygonF([QPointF(x, y - r), QPointF(x + r, y + 0.8 * r), QPointF(x - r, y + 0.8 * r)]))
    else:
        painter.drawPolygon(QPolygonF([QPointF(x, y - r), QPointF(x + r, y), QPointF(x, y + r), QPointF(x - r, y)]))


def _cross(painter: Any, x: float, y: float, r: float = 4.5) -> None:
    from PySide6.QtCore import QPointF
    from PySide6.QtGui import QColor, QPen

    painter.setPen(QPen(QColor(CORRECTED_COLOUR), 2.0))
    painter.drawLine(QPointF(x - r, y - r), QPointF(x + r, y + r))
    painter.drawLine(QPointF(x - r, y + r), QPointF(x + r, y - r))


def _set_aside_mark(painter: Any, point: ChartPoint, x: float, y: float) -> None:
    if point.set_aside == "corrected":
        _cross(painter, x, y)
    else:
        _marker(painter, point.verdict or "ok", x, y, hollow=True)


def _font(size: float, bold: bool = False) -> Any:
    from PySide6.QtGui import QFont

    font = QFont("DejaVu Sans")
    font.setPixelSize(max(1, round(size)))
    font.setBold(bold)
    return font


def _draw_plot(painter: Any, data: ChartData, series: ChartSeries, outer: Any, *, lane_rows: int, top: bool,
               bottom: bool) -> None:
    from PySide6.QtCore import QPointF, QRectF, Qt
    from PySide6.QtGui import QColor, QPen

    # Trend-rule bars get a lane of their own under the points, so neither hides the other.
    lane_h = 14 * lane_rows + 6 if lane_rows else 0
    rect = QRectF(outer.left(), outer.top(), outer.width(), outer.height() - lane_h)
    lane = QRectF(outer.left(), rect.bottom(), outer.width(), lane_h)
    span = y_span(series)
    ax = _Axes(rect, data.first, data.last, span)
    painter.setPen(Qt.PenStyle.NoPen)
    painter.fillRect(outer, QColor("white"))
    up_a, low_a = series.action
    up_w, low_w = series.warning
    for edge, limit in ((1, up_a), (-1, low_a)):
        if limit is None:
            continue
        y = ax.y(limit)
        painter.fillRect(QRectF(rect.left(), min(y, ax.y(edge * span)), rect.width(), abs(ax.y(edge * span) - y)),
                         QColor(BANDS["action"]))
    for limit, beyond in ((up_w, up_a), (low_w, low_a)):
        if limit is None or beyond is None:
            continue
        y0, y1 = ax.y(limit), ax.y(beyond)
        painter.fillRect(QRectF(rect.left(), min(y0, y1), rect.width(), abs(y1 - y0)), QColor(BANDS["warning"]))
    # Days that set each period's levels: translucent, so the zones show through.
    shade = QColor(BASELINE_COLOUR)
    shade.setAlphaF(BASELINE_OPACITY)
    for period in data.periods:
        for day in period.baseline_dates:
            if data.first <= day <= data.last:
                w = rect.width() / ax.days
                painter.fillRect(QRectF(ax.x(day) - w / 2, rect.top(), w, rect.height()), shade)
    # Grid, operating level, limit lines.
    painter.setFont(_font(12))
    # The finest grid whose labels stay at least 22 px apart.
    step = next((g for g in (0.01, 0.02, 0.05, 0.1, 0.2) if g / (2 * span) * rect.height() >= 22), 0.5)
    k = -math.floor(span / step + 1e-9)
    while k * step <= span + 1e-9:
        v, y = k * step, ax.y(k * step)
        painter.setPen(QPen(QColor("#DDDDDD"), 1))
        painter.drawLine(QPointF(rect.left(), y), QPointF(rect.right(), y))
        painter.setPen(QColor("#333333"))
        painter.drawText(QRectF(rect.left() - 64, y - 9, 58, 18), Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter,
                         f"{v:+.2f}" if abs(v) > 1e-9 else "0")
        k += 1
    painter.setPen(QPen(QColor(LEVEL_LINE), 1.6))
    painter.drawLine(QPointF(rect.left(), ax.y(0)), QPointF(rect.right(), ax.y(0)))
    # Limit and warning labels sit in two columns at the right, so close lines keep readable labels.
    for limit, colour, style, inset in ((up_a, LIMIT_LINE, Qt.PenStyle.DashLine, 4),
                                        (low_a, LIMIT_LINE, Qt.PenStyle.DashLine, 4),
                                        (up_w, WARNING_LINE, Qt.PenStyle.DotLine, 52),
                                        (low_w, WARNING_LINE, Qt.PenStyle.DotLine, 52)):
        if limit is not None:
            painter.setPen(QPen(QColor(colour), 1.6, style))
            painter.drawLine(QPointF(rect.left(), ax.y(limit)), QPointF(rect.right(), ax.y(limit)))
            painter.setFont(_font(11))
            painter.drawText(QRectF(rect.right() - inset - 60, ax.y(limit) - (16 if limit > 0 else -2), 60, 14),
                             Qt.AlignmentFlag.AlignRight, f"{limit:+.2f}")
    # Events: the baseline restarts from that day's strip on, so the line sits at the day's left edge.
    for day, label in data.events:
        x = ax.x(day) - rect.width() / ax.days / 2
        painter.setPen(QPen(QColor(EVENT_COLOUR), 1.5, Qt.PenStyle.DashDotLine))
        painter.drawLine(QPointF(x, outer.top()), QPointF(x, outer.bottom()))
        if top:
            painter.setFont(_font(12, bold=True))
            painter.drawText(QRectF(x + 4, rect.top() + 2, 300, 16), Qt.AlignmentFlag.AlignLeft, label.split(" on ")[0])
    # Trend findings on this quantity: bars under the days they cover.
    if lane_rows:
        painter.setPen(QPen(QColor("#BBBBBB"), 1))
        painter.drawLine(QPointF(lane.left(), lane.top()), QPointF(lane.right(), lane.top()))
        painter.setPen(QColor(TREND_COLOUR))
        painter.setFont(_font(11))
        painter.drawText(QRectF(lane.left() - 64, lane.top() + 2, 58, 14), Qt.AlignmentFlag.AlignRight, "trends")
    mine = [f for f in data.findings if f.quantity == series.quantity]
    for i, finding in enumerate(mine):
        days = [d for d in finding.dates if data.first <= d <= data.last]
        if not days or not lane_rows:
            continue
        y = lane.top() + 10 + 14 * (i % lane_rows)
        painter.setPen(QPen(QColor(TREND_COLOUR), 5, Qt.PenStyle.SolidLine, Qt.PenCapStyle.RoundCap))
        painter.drawLine(QPointF(ax.x(days[0]) - 4, y), QPointF(ax.x(days[-1]) + 4, y))
        painter.setFont(_font(11, bold=True))
        painter.drawText(QRectF(ax.x(days[-1]) + 8, y - 8, 170, 16), Qt.AlignmentFlag.AlignLeft, describe_rule(finding))
    # Points, joined within a period; days still in a baseline get a tick on the axis.
    painter.setPen(QPen(QColor("#888888"), 1.2))
    for period in data.periods:
        pts = [p for p in series.points if period.first <= p.date <= period.last and p.deviation is not None]
        for a, b in zip(pts, pts[1:]):
            painter.drawLine(QPointF(ax.x(a.date), ax.y(a.deviation)), QPointF(ax.x(b.date), ax.y(b.deviation)))
    shift = SET_ASIDE_SHIFT * rect.width() / ax.days
    for p in series.set_aside:
        if p.deviation is not None:
            _set_aside_mark(painter, p, ax.x(p.date) - shift, ax.y(p.deviation))
    for p in series.points:
        if p.deviation is None:
            # Not judged yet: no level to deviate from; marked on the operating level's line.
            _plus(painter, ax.x(p.date), ax.y(0.0))
            continue
        _marker(painter, p.verdict or "ok", ax.x(p.date), ax.y(p.deviation))
        if p.verdict == "action":
            painter.setPen(QColor("#1A1A1A"))
            painter.setFont(_font(12, bold=True))
            dy = -26 if p.deviation > 0 else 10
            painter.drawText(QRectF(ax.x(p.date) - 40, ax.y(p.deviation) + dy, 80, 16),
                             Qt.AlignmentFlag.AlignHCenter, f"{p.deviation:+.3f}")
    painter.setPen(QPen(QColor("#222222"), 1.2))
    painter.setBrush(Qt.BrushStyle.NoBrush)
    painter.drawRect(outer)
    painter.setFont(_font(14, bold=True))
    painter.drawText(QRectF(outer.left(), outer.top() - 21, 700, 20), Qt.AlignmentFlag.AlignLeft,
                     f"{series.label}: deviation from operating level (OD)")
    _x_ticks(painter, ax, outer, labels=bottom)


def _x_ticks(painter: Any, ax: _Axes, rect: Any, *, labels: bool) -> None:
    from PySide6.QtCore import QPointF, QRectF, Qt
    from PySide6.QtGui import QColor, QPen

    every = 1 if ax.days <= 40 else 7 if ax.days <= 200 else 30
    painter.setFont(_font(11))
    for k in range(ax.days):
        day = ax.first + datetime.timedelta(days=k)
        if k % every and day.day != 1:
            continue
        x = ax.x(day)
        painter.setPen(QPen(QColor("#222222"), 1))
        painter.drawLine(QPointF(x, rect.bottom()), QPointF(x, rect.bottom() + 4))
        if labels:
            painter.drawText(QRectF(x - 20, rect.bottom() + 5, 40, 14), Qt.AlignmentFlag.AlignHCenter, str(day.day))
            if k == 0 or day.day == 1:
                painter.setFont(_font(12, bold=True))
                painter.drawText(QRectF(x - 8, rect.bottom() + 20, 160, 16), Qt.AlignmentFlag.AlignLeft,
                                 day.strftime("%B %Y"))
                painter.setFont(_font(11))


def _plus(painter: Any, x: float, y: float, r: float = 5.0) -> None:
    from PySide6.QtCore import QPointF
    from PySide6.QtGui import QColor, QPen

    painter.setPen(QPen(QColor(WAITING_COLOUR), 2.0))
    painter.drawLine(QPointF(x - r, y), QPointF(x + r, y))
    painter.drawLine(QPointF(x, y - r), QPointF(x, y + r))


def _swatch(painter: Any, entry: LegendEntry, x: float, y: float) -> None:
    """Draw ``entry`` as the chart draws it, in a 30 px wide box whose middle is at height ``y``."""
    from PySide6.QtCore import QPointF, QRectF, Qt
    from PySide6.QtGui import QColor, QPen

    if entry.look == "mark":
        _marker(painter, entry.key, x + 15, y)
    elif entry.look == "hollow":
        _marker(painter, "ok", x + 15, y, hollow=True)
    elif entry.look == "cross":
        _cross(painter, x + 15, y)
    elif entry.look == "plus":
        _plus(painter, x + 15, y)
    elif entry.look == "shade":
        shade = QColor(entry.colour)
        shade.setAlphaF(BASELINE_OPACITY)
        painter.fillRect(QRectF(x + 4, y - 7, 22, 14), shade)
    elif entry.look == "bar":
        painter.setPen(QPen(QColor(entry.colour), 5, Qt.PenStyle.SolidLine, Qt.PenCapStyle.RoundCap))
        painter.drawLine(QPointF(x + 3, y), QPointF(x + 27, y))
    else:
        styles = {"solid": Qt.PenStyle.SolidLine, "dash": Qt.PenStyle.DashLine, "dot": Qt.PenStyle.DotLine,
                  "dashdot": Qt.PenStyle.DashDotLine}
        painter.setPen(QPen(QColor(entry.colour), 1.6, styles[entry.dash]))
        painter.drawLine(QPointF(x, y), QPointF(x + 30, y))


def _legend(painter: Any, data: ChartData, left: float, top: float, width: float, *, draw: bool = True) -> float:
    """Draw the legend (:func:`legend_entries`) in rows that fit ``width``; return the y below it."""
    from PySide6.QtCore import QRectF, Qt
    from PySide6.QtGui import QColor, QFontMetricsF

    font = _font(12)
    metrics = QFontMetricsF(font)
    flags = Qt.AlignmentFlag.AlignLeft | Qt.TextFlag.TextWordWrap
    x, y, row_h = left, top, 0.0
    if draw:
        painter.setFont(font)
    for entry in legend_entries(data):
        text_w = min(metrics.horizontalAdvance(entry.words) + 2, width - 40)
        if x > left and x + 40 + text_w > left + width:
            x, y, row_h = left, y + row_h + 6, 0.0
        # A text too long for one row wraps under itself.
        box = metrics.boundingRect(QRectF(0, 0, text_w, 1000), flags, entry.words)
        if draw:
            _swatch(painter, entry, x, y + 9)
            painter.setPen(QColor("#1A1A1A"))
            painter.drawText(QRectF(x + 38, y, text_w, box.height() + 2), flags, entry.words)
        row_h = max(row_h, box.height(), 18.0)
        x += 40 + text_w + 22
    return y + row_h + 8


def render_chart(data: ChartData, size: tuple[int, int] = (1200, 1100)) -> Any:
    """Draw the chart on a new ``QImage`` of ``size`` (width, height) px and return it."""
    ensure_app()
    from PySide6.QtCore import QRectF, Qt
    from PySide6.QtGui import QColor, QImage, QPainter

    width, height = size
    if width < 600 or height < 600 or width > 10000 or height > 10000:
        raise ValueError(f"a QC chart needs 600 to 10000 px each way, not {width} x {height}")
    image = QImage(width, height, QImage.Format.Format_ARGB32)
    image.fill(QColor("white"))
    painter = QPainter(image)
    try:
        painter.setRenderHint(QPainter.RenderHint.Antialiasing)
        painter.setRenderHint(QPainter.RenderHint.TextAntialiasing)
        painter.setPen(QColor("#111111"))
        painter.setFont(_font(20, bold=True))
        painter.drawText(QRectF(24, 14, width - 48, 28), Qt.AlignmentFlag.AlignLeft, data.title)
        status = data.status
        word = "BASELINE IN PROGRESS" if status.baseline_in_progress else VERDICT_WORDS[status.verdict]
        rules = f"; trend rules fired: {', '.join(status.rules_fired)}" if status.rules_fired else ""
        painter.setFont(_font(14, bold=True))
        painter.setPen(QColor(MARKS[status.verdict][0] if not status.baseline_in_progress else "#444444"))
        when = status.latest_date.isoformat() if status.latest_date else "-"
        painter.drawText(QRectF(24, 44, width - 48, 20), Qt.AlignmentFlag.AlignLeft,
                         f"Status on the latest strip ({when}): {word}{rules}")
        footer = _wrap([*chart_legend(data), *data.set_aside_notes, f"Caution: {CAUTION}",
                        f"Drawn by stripscan {__version__} on {datetime.date.today().isoformat()}."],
                       int((width - 48) / 7.4))
        top, left, right = 96, 96, width - 24
        foot_h = 20 + 17 * len(footer) + _legend(painter, data, left, 0, right - left, draw=False)
        gap, bottom_axis = 30, 40
        plot_h = (height - top - foot_h - bottom_axis - 2 * gap) / 3
        counts = [sum(f.quantity == s.quantity for f in data.findings) for s in data.series]
        for i, series in enumerate(data.series):
            rect = QRectF(left, top + i * (plot_h + gap), right - left, plot_h)
            _draw_plot(painter, data, series, rect, lane_rows=min(4, max(counts)), top=i == 0,
                       bottom=i == len(data.series) - 1)
        y = top + 3 * plot_h + 2 * gap + bottom_axis
        y = _legend(painter, data, left, y, right - left)
        painter.setFont(_font(12))
        painter.setPen(QColor("#222222"))
        for line in footer:
            painter.drawText(QRectF(24, y, width - 48, 17), Qt.AlignmentFlag.AlignLeft, line)
            y += 17
    finally:
        painter.end()
    return image


def render_chart_png(data: ChartData, path: str | os.PathLike[str], *, size: tuple[int, int] = (1200, 1100)) -> Path:
    """Draw the chart and write it as PNG at ``path`` (never half-written).

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    ValueError
        A size out of range, or a path that does not end in ``.png``.
    OSError
        When the file cannot be written.
    """
    path = Path(path)
    if path.suffix.lower() != ".png":
        raise ValueError(f"{path}: the chart is written as PNG; give a file name ending in .png")
    if not path.parent.is_dir():
        raise OSError(f"{path}: the folder {path.parent} does not exist")
    image = render_chart(data, size)
    with replacing(path) as partial:
        if not image.save(str(partial), "PNG"):
            raise OSError(f"{path}: cannot write the PNG image")
    return path


def _wrap(lines: Sequence[str], width: int) -> list[str]:
    """Split lines longer than ``width`` characters at spaces."""
    out = []
    for line in lines:
        while len(line) > width:
            cut = line.rfind(" ", 0, width)
            cut = cut if cut > 0 else width
            out.append(line[:cut])
            line = "    " + line[cut:].lstrip()
        out.append(line)
    return out
