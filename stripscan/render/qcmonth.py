"""The monthly processor QC report: three deviation charts, the day table, actions taken.

Two A4 pages per processor and month, from the processor's QC log as the
archive keeps it (:func:`stripscan.services.qc_log.load_processor_log`) and the
chart data the QC views share (:func:`stripscan.services.qc_chart.chart_data`):

1. the processor, the operating levels and control limits in force, the
   status at the month's last strip, and three stacked charts (base+fog,
   mid-density, density difference) of each day's deviation from its
   operating level, with the warning and control-limit zones shaded, the
   limit lines drawn, points past a limit marked by shape and colour, and
   the processor's events as vertical lines;
2. the table of every entry (values, deviations, verdict, note and
   action), the actions taken and events, where the numbers came from
   (strips read off scans with their calibration, or densitometer readings
   typed in), and the trend findings.

Entries kept but not used are shown in the charts and the table: a strip
repeated the same day (a hollow mark; the latest repeat is the day's value)
and a value corrected afterwards (a grey cross; the correction counts),
each with its entry number and what replaced it.

Marks, lines, shading and their legend are the program's QC chart's
(:data:`stripscan.render.qc_chart.LEGEND`, :func:`stripscan.render.qc_chart.legend_entries`):
a circle within limits, a triangle past the warning tier, a larger diamond
past the control limit, hollow for a repeated strip, grey columns for the
days that set the levels, bars for trend rules that fired.
"""

from __future__ import annotations

import calendar
import datetime as dt
import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, Sequence

from stripscan.render.canvas import Canvas, Column, draw_frame, write_pdf
from stripscan.render.plot import COLOURS, Band, HBand, Line, Note, Plot, Points, RefLine
from stripscan.render.provenance import calibration_brief
from stripscan.render.qt import ReportError

if TYPE_CHECKING:
    from stripscan.archive import Archive
    from stripscan.services.qc_chart import ChartData, ChartPoint, ChartSeries
    from stripscan.services.qc_log import LoggedEntry

__all__ = ["QCMonth", "qc_month", "qc_month_plots", "qc_month_report_pdf", "CHARTS"]

#: Chart names (as the export command takes them) and the quantity each shows.
CHARTS = {"base-fog": "base_fog", "mid-density": "mid_density", "density-difference": "density_difference"}


@dataclass(frozen=True)
class QCMonth:
    """One processor's month of QC, ready to print.

    Attributes
    ----------
    processor : str
    month : str
        ``YYYY-MM``.
    data : ChartData
        The charts' data (points, limits, events, findings, periods, status).
    entries : tuple of LoggedEntry
        Every entry of the month, repeats and corrections too, with what
        became of it and its verdict, by date and id.
    place : str
        Where the processor is, its chemistry and settings, in words.
    sources : tuple of (str, str)
        Where the month's numbers came from: scans (with calibrations) or typed in.
    notes : tuple of str
        What the log read but could not use.
    site : str
    """

    processor: str
    month: str
    data: "ChartData"
    entries: tuple["LoggedEntry", ...]
    place: str = ""
    sources: tuple[tuple[str, str], ...] = ()
    notes: tuple[str, ...] = ()
    site: str = ""

    @property
    def month_name(self) -> str:
        return dt.date.fromisoformat(f"{self.month}-01").strftime("%B %Y")

    def pages(self) -> list[Any]:
        return [_Page(self, "charts"), _Page(self, "days and actions")]


def _month_days(month: str) -> tuple[dt.date, dt.date]:
    try:
        first = dt.date.fromisoformat(f"{month}-01")
    except ValueError:
        raise ReportError(f"month {month!r} is not written YYYY-MM") from None
    if len(month) != 7:
        raise ReportError(f"month {month!r} is not written YYYY-MM")
    return first, first.replace(day=calendar.monthrange(first.year, first.month)[1])


def _sources(archive: "Archive", processor: str, first: dt.date, last: dt.date) -> list[tuple[str, str]]:
    """Which days were read off scans (with which calibration) and which were typed in."""
    kept: dict[str | None, list[str]] = {}
    unkept, typed = [], []
    for entry in archive.list_qc_entries(processor, since=first.isoformat(), until=last.isoformat()):
        # A day's second entry says what it is, so a repeated or corrected day reads as such.
        what = {"repeat": " repeat", "correction": " correction"}.get(entry.kind, "")
        if entry.source == "scan" and entry.snapshot_id is not None:
            digest = archive.get_snapshot(entry.snapshot_id).calibration_hash
            kept.setdefault(digest, []).append(f"{entry.date}{what} (snapshot {entry.snapshot_id})")
        elif entry.source == "scan":
            unkept.append(f"{entry.date[8:]}{what}")
        else:
            typed.append(f"{entry.date[8:]}{what}")

    def days(dates: Sequence[str]) -> str:
        count = len({d.split()[0] for d in dates})
        return f"{count} day{'s' if count != 1 else ''}"

    lines = []
    for digest, dates in kept.items():
        calibration = archive.get_calibration(digest) if digest else None
        lines.append((f"Read off scans, {days(dates)}", f"{', '.join(dates)}: {calibration_brief(calibration, digest)}"))
    if unkept:
        lines.append((f"Read off scans, {days(unkept)}",
                      "the strips were not kept in the archive, so their calibration is not recorded here (each "
                      "entry's note names its scan): " + ", ".join(unkept)))
    if typed:
        lines.append((f"Typed in, {days(typed)}",
                      "densitometer readings as entered (no scan, no calibration of this program): "
                      + ", ".join(typed)))
    return lines


def qc_month(archive: "Archive", processor: str, month: str, *, site: str = "") -> QCMonth:
    """Read one processor's month of QC from the archive.

    Raises
    ------
    ReportError
        A month not written ``YYYY-MM``.
    ArchiveLookupError, ValueError
        An unknown processor, unreadable settings, or no entry in the month.
    """
    from stripscan.services.qc_chart import chart_data
    from stripscan.services.qc_log import load_processor_log

    first, last = _month_days(month)
    plog = load_processor_log(archive, processor)
    data = chart_data(plog, month=month)
    record = archive.get_processor(processor)
    place = ", ".join(part for part in (
        record.place, record.chemistry,
        f"developer {record.developer_temperature_c:g} \u00b0C" if record.developer_temperature_c else "",
        f"cycle {record.cycle_time_s:g} s" if record.cycle_time_s else "") if part)
    return QCMonth(processor, month, data, plog.logged(first, last), place,
                   tuple(_sources(archive, processor, first, last)), tuple(plog.notes), site)


# --------------------------------------------------------------------------
# Charts


def _limits_items(series: "ChartSeries") -> tuple[list[Any], float]:
    """Shaded zones and lines of a series' limits, and the largest limit (for the axis)."""
    from stripscan.render.qc_chart import BANDS, LIMIT_LINE, WARNING_LINE

    items: list[Any] = []
    reach = 0.0
    far = 10.0  # beyond any axis: the zone runs off the plot, where it is clipped
    upper_action, lower_action = series.action
    upper_warning, lower_warning = series.warning
    for sign, action, warning in ((1, upper_action, upper_warning), (-1, lower_action, lower_warning)):
        if action is None:
            continue
        action = abs(action)
        reach = max(reach, action)
        lo, hi = sorted((sign * action, sign * far))
        items.append(HBand(lo, hi, colour=BANDS["action"], opacity=1.0))
        items.append(RefLine(sign * action, colour=LIMIT_LINE, dash="dash", width_pt=0.9))
        if warning is not None:
            warning = abs(warning)
            lo, hi = sorted((sign * warning, sign * action))
            items.append(HBand(lo, hi, colour=BANDS["warning"], opacity=1.0))
            items.append(RefLine(sign * warning, colour=WARNING_LINE, dash="dot", width_pt=0.8))
    return items, reach


def _runs(days: Sequence[int]) -> list[tuple[int, int]]:
    """(first, last) of each stretch of consecutive days."""
    runs: list[tuple[int, int]] = []
    for day in sorted(days):
        if runs and day == runs[-1][1] + 1:
            runs[-1] = (runs[-1][0], day)
        else:
            runs.append((day, day))
    return runs


def _nan_joined(pieces: Sequence[tuple[float, ...]]) -> tuple[float, ...]:
    """Pieces of one polyline or band, NaN between them (NaN breaks a Line or Band)."""
    out: list[float] = []
    for piece in pieces:
        out += [*([math.nan] if out else []), *piece]
    return tuple(out)


def _legend_items(data: "ChartData") -> list[Any]:
    """Label-only items (no data) that draw the shared legend (:func:`stripscan.render.qc_chart.legend_entries`)."""
    from stripscan.render.qc_chart import BASELINE_OPACITY, MARKS, legend_entries

    items: list[Any] = []
    for entry in legend_entries(data):
        if entry.look in ("mark", "hollow"):
            items.append(Points((), (), label=entry.words, colour=entry.colour, marker=entry.shape,
                                filled=entry.look == "mark", size_pt=MARKS[entry.key if entry.look == "mark"
                                                                             else "ok"][2] * 0.75))
        elif entry.look in ("cross", "plus"):
            items.append(Points((), (), label=entry.words, colour=entry.colour, marker=entry.look, size_pt=4))
        elif entry.look == "shade":
            # The swatch is drawn at twice a band's opacity: halve it to show the plots' own grey.
            items.append(Band((), (), (), label=entry.words, colour=entry.colour, opacity=BASELINE_OPACITY / 2))
        else:
            items.append(Line((), (), label=entry.words, colour=entry.colour, dash=entry.dash,
                              width_pt=3.0 if entry.look == "bar" else 0.9))
    return items


def _series_plot(data: "ChartData", series: "ChartSeries", first: dt.date, last: dt.date, *,
                 legend: bool) -> Plot:
    from stripscan.render.qc_chart import (
        BASELINE_COLOUR,
        BASELINE_OPACITY,
        EVENT_COLOUR,
        LEVEL_LINE,
        MARKS,
        TREND_COLOUR,
        WAITING_COLOUR,
    )
    from stripscan.services.qc_chart import describe_rule

    items, reach = _limits_items(series)
    items.insert(0, RefLine(0.0, colour=LEVEL_LINE, dash="solid", width_pt=0.7))
    for day, _ in data.events:
        if first <= day <= last:
            # The baseline restarts from that day's strip on: the line sits at the day's left edge.
            items.append(RefLine(day.day - 0.5, vertical=True, colour=EVENT_COLOUR, dash="dashdot", width_pt=1.0))
    judged = [p for p in series.points if p.deviation is not None]
    x = [float(p.date.day) for p in judged]
    y = [float(p.deviation) for p in judged]
    repeated = [p for p in series.set_aside if p.set_aside == "repeated" and p.deviation is not None]
    span = max([reach * 1.35, 0.05, *(abs(v) * 1.15 for v in (*y, *(p.deviation for p in repeated)))])
    baseline = [d.day for p in data.periods for d in p.baseline_dates if first <= d <= last]
    if baseline:
        runs = _runs(baseline)
        items.append(Band(_nan_joined([(a - 0.5, b + 0.5) for a, b in runs]),
                          _nan_joined([(-span, -span)] * len(runs)), _nan_joined([(span, span)] * len(runs)),
                          colour=BASELINE_COLOUR, opacity=BASELINE_OPACITY))
    items.append(Line(tuple(x), tuple(y), colour=COLOURS["grey"], width_pt=0.6))
    for verdict in ("ok", "warning", "action"):
        chosen = [p for p in judged if p.verdict == verdict]
        colour, shape, size_px, _ = MARKS[verdict]
        if chosen:
            items.append(Points(tuple(float(p.date.day) for p in chosen), tuple(p.deviation for p in chosen),
                                colour=colour, marker=shape, size_pt=size_px * 0.75))
        if verdict == "action":
            items += [Note(float(p.date.day), p.deviation, f"{p.deviation:+.3f}", colour=COLOURS["red"],
                           side="above" if p.deviation > 0 else "below") for p in chosen]
    waiting = [p for p in series.points if p.deviation is None]
    if waiting:
        items.append(Points(tuple(float(p.date.day) for p in waiting), (0.0,) * len(waiting),
                            colour=WAITING_COLOUR, marker="plus", size_pt=4))
    items += _set_aside_items(series.set_aside, span)
    # Trend findings on this quantity: bars under the days they cover, one row per rule, below every point
    # (the axis is stretched down for them), so no bar or label hides a mark.
    mine = [f for f in data.findings if f.quantity == series.quantity and any(first <= d <= last for d in f.dates)]
    rules = [rule for rule in ("run", "drift", "two_warnings") if any(f.rule == rule for f in mine)]
    foot = -span
    if rules:
        row_h = 0.14 * span
        lowest = min([0.0, *y, *(p.deviation for p in repeated)])
        foot = min(-span, lowest - 0.5 * row_h) - row_h * len(rules)
        for finding in mine:
            days = [d.day for d in finding.dates if first <= d <= last]
            at = foot + row_h * (len(rules) - rules.index(finding.rule) - 0.5)
            items.append(Line((days[0] - 0.2, days[-1] + 0.2), (at, at), colour=TREND_COLOUR, width_pt=2.5))
            items.append(Note(days[-1] + 0.2, at, describe_rule(finding), colour=TREND_COLOUR, side="right"))
    if legend:
        items += _legend_items(data)
    ticks = [(float(d), str(d) if d == 1 or d % 5 == 0 or d == last.day else "") for d in range(1, last.day + 1)]
    return Plot(items=tuple(items), title=f"{series.label}: deviation from operating level",
                x_label="day of the month" if legend else "", y_label="OD", x_range=(0.5, last.day + 0.5),
                y_range=(foot, span), x_ticks=ticks, y_signed=True, y_decimals=2, legend=legend, font_pt=6.5,
                empty_text="no strip this month")


def _set_aside_items(points: Sequence["ChartPoint"], span: float) -> list[Any]:
    """Marks for entries kept but not used, a little left of their day.

    A repeated strip keeps the shape and colour of its own tier, hollow,
    with the word "repeated" beside it; a corrected value is a grey cross,
    held inside the plot: it was a slip, perhaps far off.
    """
    from stripscan.render.qc_chart import CORRECTED_COLOUR, MARKS, SET_ASIDE_SHIFT

    items: list[Any] = []
    judged = [p for p in points if p.deviation is not None]
    for verdict in ("ok", "warning", "action"):
        chosen = [p for p in judged if p.set_aside == "repeated" and (p.verdict or "ok") == verdict]
        if not chosen:
            continue
        colour, shape, size_px, _ = MARKS[verdict]
        items.append(Points(tuple(p.date.day - SET_ASIDE_SHIFT for p in chosen), tuple(p.deviation for p in chosen),
                            colour=colour, marker=shape, filled=False, size_pt=size_px * 0.75))
        items += [Note(p.date.day - SET_ASIDE_SHIFT, p.deviation, "repeated", colour=COLOURS["grey"], side="left")
                  for p in chosen]
    corrected = [p for p in judged if p.set_aside == "corrected"]
    if corrected:
        edge = 0.97 * span
        items.append(Points(tuple(p.date.day - SET_ASIDE_SHIFT for p in corrected),
                            tuple(min(max(p.deviation, -edge), edge) for p in corrected),
                            colour=CORRECTED_COLOUR, marker="cross", size_pt=4))
    return items


def qc_month_plots(month: QCMonth) -> dict[str, Plot]:
    """The three charts of a month, by name (see :data:`CHARTS`); the last one carries the legend."""
    first, last = _month_days(month.month)
    by_quantity = {s.quantity: s for s in month.data.series}
    names = list(CHARTS)
    return {name: _series_plot(month.data, by_quantity[CHARTS[name]], first, last, legend=name == names[-1])
            for name in names}


# --------------------------------------------------------------------------
# Pages


def _frame(month: QCMonth, canvas: Canvas, part: str) -> tuple[float, float]:
    return draw_frame(canvas, title=f"Processor QC - {month.month_name}",
                      subtitle=f"{month.processor}\n{part}", extra_footer=f"{month.processor}, {month.month}")


def _status_text(month: QCMonth) -> str:
    from stripscan import CAUTION
    from stripscan.core.qc.names import VERDICT_WORDS

    status = month.data.status
    head = "BASELINE IN PROGRESS" if status.baseline_in_progress else VERDICT_WORDS[status.verdict]
    advice = status.advice.replace(CAUTION, "").strip()  # the caution has its own box on every page
    latest = status.latest_date.isoformat() if status.latest_date else "no strip"
    return f"{head} at the month's last strip ({latest}). {advice}"


def _limits_text(month: QCMonth) -> str:
    series = {s.quantity: s for s in month.data.series}
    md, bf = series["mid_density"], series["base_fog"]
    text = f"mid-density and density difference \u00b1{abs(md.action[0]):.2f} OD"
    if md.warning[0] is not None:
        text += f" (warning tier \u00b1{abs(md.warning[0]):.2f})"
    text += f"; base+fog no more than +{abs(bf.action[0]):.2f} OD above its level"
    if bf.warning[0] is not None:
        text += f" (warning +{abs(bf.warning[0]):.2f})"
    return text


@dataclass(frozen=True)
class _Page:
    """Page ``part`` ("charts" or "days and actions") of a month's report."""

    month: QCMonth
    part: str

    def draw(self, canvas: Canvas) -> None:
        top, bottom = _frame(self.month, canvas, self.part)
        (_draw_charts if self.part == "charts" else _draw_days)(self.month, canvas, top, bottom)


def _draw_charts(m: QCMonth, c: Canvas, top: float, bottom: float) -> None:
    from stripscan.services.qc_chart import chart_legend

    pairs = [("Site", m.site), ("Processor", f"{m.processor}" + (f" ({m.place})" if m.place else "")),
             ("Operating levels", "\n".join(chart_legend(m.data))), ("Control limits", _limits_text(m)),
             ("Status", _status_text(m))]
    y = top + c.fields(c.left, top, c.content_width, pairs, key_width=28.0, size=7.5, max_lines=4) + 2.0
    plots = list(qc_month_plots(m).values())
    gap = 2.0
    # The last chart carries the legend and the axis title: give it more room.
    height = (bottom - y - 2 * gap - 14.0) / 3
    for number, plot in enumerate(plots):
        h = height + (14.0 if number == len(plots) - 1 else 0.0)
        c.plot(c.left, y, c.content_width, h, plot)
        y += h + gap


_DAY_TABLE = (Column("Entry", 9, "right"), Column("Date", 17), Column("Source", 11), Column("Base+fog", 14, "right"),
              Column("\u0394", 10, "right"), Column("Mid-density", 16, "right"), Column("\u0394", 10, "right"),
              Column("Density diff.", 18, "right"), Column("\u0394", 10, "right"), Column("Verdict", 20),
              Column("Note and action", 47))
_VERDICT_COLOURS = {"action": COLOURS["red"], "warning": "#8a5a00"}


def _number(value: float | None, deviation: float | None) -> list[str]:
    return ["-" if value is None else f"{value:.3f}",
            "-" if deviation is None else f"{round(deviation, 3) + 0.0:+.3f}"]


def _verdict_cell(item: "LoggedEntry") -> str:
    from stripscan.core.qc.names import VERDICT_WORDS

    if item.set_aside == "corrected":
        return "corrected, not used"
    word = VERDICT_WORDS[item.verdict.verdict] if item.verdict else "baseline"
    return word if item.state.in_use else f"{word}; repeated, not used"


def _day_rows(month: QCMonth) -> tuple[list[list[str]], list[str | None]]:
    rows, colours = [], []
    for item in month.entries:
        e, verdict = item.entry, item.verdict
        cells = [str(e.id), e.date, e.source]
        for q in ("base_fog", "mid_density", "density_difference"):
            cells += _number(getattr(e, q), getattr(verdict.deviations, q) if verdict else None)
        cells.append(_verdict_cell(item))
        remarks = [r for r in (item.standing(), e.note, f"action: {e.action}" if e.action else "") if r]
        cells.append("; ".join(remarks))
        rows.append(cells)
        # Entries not used are greyed: they are kept for the record, not judged for the day.
        in_use_colour = _VERDICT_COLOURS.get(verdict.verdict) if verdict else COLOURS["grey"]
        colours.append(in_use_colour if item.state.in_use else COLOURS["grey"])
    return rows, colours


def _bullets(c: Canvas, y: float, bottom: float, title: str, lines: Sequence[str], *, empty: str) -> float:
    y += c.text(c.left, y, c.content_width, title, size=8.5, bold=True, max_lines=1)
    for number, line in enumerate(lines or [empty]):
        height = c.text_height(c.content_width - 3.0, line, size=7.0, max_lines=3)
        if y + height + c.line_height(7.0) > bottom and number < len(lines) - 1:
            return y + c.text(c.left, y, c.content_width, f"\u2026 and {len(lines) - number} more", size=7.0,
                              italic=True, max_lines=1)
        c.text(c.left, y, 3.0, "\u2022", size=7.0)
        y += c.text(c.left + 3.0, y, c.content_width - 3.0, line, size=7.0, max_lines=3)
    return y + 1.5


def _draw_days(m: QCMonth, c: Canvas, top: float, bottom: float) -> None:
    rows, colours = _day_rows(m)
    size = 7.0
    # The table may take most of the page; what follows is a few short lists.
    while size > 5.0 and c.table(0, 0, _DAY_TABLE, rows, size=size, max_lines=4, draw=False) > 0.72 * (bottom - top):
        size -= 0.25
    y = top + c.table(c.left, top, _DAY_TABLE, rows, size=size, max_lines=4, row_colours=colours) + 1.0
    y += c.text(c.left, y, c.content_width, "\u0394 = value minus the operating level in force that day, OD; "
                "source: scan (read by this program) or manual (typed in). Entries in grey are kept but not used: "
                "a strip repeated the same day (the latest repeat is the day's value) or a value corrected "
                "afterwards (the correction counts).", size=6.0, colour=COLOURS["grey"])
    y += 2.0
    # Actions of every entry that was not corrected: the action is often written on the first strip.
    actions = [f"{i.entry.date}: {i.entry.action}" for i in m.entries if i.entry.action and i.set_aside != "corrected"]
    actions += [f"{day.isoformat()}: {label}" for day, label in m.data.events]
    y = _bullets(c, y, bottom, "Actions taken and processor events", sorted(actions), empty="None recorded.")
    # Provenance before the findings: it must never be what runs out of room.
    sources = [f"{label}: {text}" for label, text in m.sources] + list(m.notes)
    y = _bullets(c, y, bottom, "Where the numbers come from", sources, empty="No entry this month.")
    findings = [f.message for f in m.data.findings]
    _bullets(c, y, bottom, "Trend findings", findings, empty="No trend rule fired.")


def qc_month_report_pdf(archive: "Archive", processor: str, month: str, path: str | os.PathLike[str], *,
                        site: str = "", generated: dt.datetime | None = None) -> Path:
    """Write the monthly QC report of one processor (two pages) to a PDF; return the absolute path.

    Parameters
    ----------
    archive : Archive
    processor : str
        As named in the archive.
    month : str
        ``YYYY-MM``.
    path : path-like
    site : str
        Site name for the header.
    """
    report = qc_month(archive, processor, month, site=site)
    return write_pdf(report.pages(), path, title=f"stripscan processor QC - {processor} - {month}",
                     generated=generated)
