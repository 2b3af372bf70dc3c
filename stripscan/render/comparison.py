"""The lot comparison report: mean curves, their differences and the table of figures.

One A4 page per pair (set B against the first set A), drawn from the
core's :class:`~stripscan.core.compare.comparison.Comparison`: the overlay of the two
mean characteristic curves with ±1 sd bands; the density difference
ΔD(log E) = D(B) − D(A) and the shift Δlog E(net density) = log E(B) − log E(A)
beside each other; the table of figures (mean ± sd (n) of each set, B − A,
its 95 % interval, the tolerance and the verdict, as the compare command
prints them); notes, the tolerances' sources, the calibrations' provenance
and the caution.
"""

from __future__ import annotations

import datetime as dt
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

from stripscan.core.compare.comparison import Comparison
from stripscan.core.compare.sets import SetSummary
from stripscan.core.figures import figure_name
from stripscan.render.canvas import Canvas, Column, draw_frame, write_pdf
from stripscan.render.plot import COLOURS, Band, Line, Plot, Points, RefLine
from stripscan.render.provenance import calibration_brief
from stripscan.render.qt import ReportError

__all__ = ["CalibrationUse", "ComparisonPage", "comparison_plots", "comparison_report_pdf"]

_A, _B = COLOURS["blue"], COLOURS["orange"]
_VERDICT_COLOURS = {"differs": COLOURS["red"], "unclear": "#8a5a00", "single": COLOURS["grey"],
                    "missing": COLOURS["grey"], "no_tolerance": COLOURS["grey"]}


@dataclass(frozen=True)
class CalibrationUse:
    """A calibration and the sets whose densities it gave.

    Attributes
    ----------
    sets : tuple of str
        Set names.
    calibration : dict or None
        Full record, summary, or direct-mode summary; None when unknown.
    digest : str or None
        Its hash as stored with the readings.
    """

    sets: tuple[str, ...]
    calibration: dict[str, Any] | None
    digest: str | None = None


def _mean_and_band(summary: SetSummary, colour: str, dash: str) -> list[Any]:
    x, mean, sd = summary.density_curve.arrays()
    low, high = mean - sd, mean + sd
    items: list[Any] = []
    if summary.n >= 2:
        items.append(Band(tuple(x), tuple(low), tuple(high), label=f"{summary.name} \u00b11 sd", colour=colour))
    items.append(Line(tuple(x), tuple(mean), label=f"{summary.name} mean (n = {summary.n})", colour=colour,
                      dash=dash, width_pt=1.3))
    return items


def comparison_plots(comparison: Comparison) -> dict[str, Plot]:
    """The three plots of a comparison, by name: ``overlay``, ``delta-density``, ``delta-log-exposure``."""
    c = comparison
    bands = [*_mean_and_band(c.a, _A, "solid"), *_mean_and_band(c.b, _B, "dash")]
    # Draw both bands before both lines, so neither band hides the other set's line.
    overlay = Plot(
        items=tuple([i for i in bands if isinstance(i, Band)] + [i for i in bands if not isinstance(i, Band)]),
        title="Mean characteristic curves, \u00b11 sd over the strips of each set",
        x_label="log relative exposure (log E)", y_label="optical density (OD)",
        empty_text="no mean curve could be drawn",
    )
    x = c.a.density_curve.x
    delta_d = Plot(
        items=(RefLine(0.0, colour=COLOURS["ink"], dash="solid", width_pt=0.6),
               Line(tuple(x), tuple(c.delta_density), label=f"D({c.b.name}) \u2212 D({c.a.name})", colour=_B,
                    width_pt=1.3)),
        title="\u0394D = D(B) \u2212 D(A) along log E",
        x_label="log relative exposure (log E)", y_label="\u0394D (OD)", y_signed=True,
        empty_text="the mean curves do not overlap",
    )
    net = c.a.exposure_curve.x
    shift = c.shift_at(1.0)
    items: list[Any] = [RefLine(0.0, colour=COLOURS["ink"], dash="solid", width_pt=0.6),
                        RefLine(1.0, vertical=True, label="net density 1.00 (speed point)", dash="dot"),
                        Line(tuple(net), tuple(c.delta_log_exposure),
                             label=f"log E({c.b.name}) \u2212 log E({c.a.name})", colour=_B, width_pt=1.3)]
    if shift is not None:
        items.append(Points((1.0,), (shift,), label=f"speed-point shift {shift:+.3f}", colour=COLOURS["green"],
                            marker="triangle", size_pt=5.5))
    delta_e = Plot(
        items=tuple(items), title="\u0394log E = log E_B \u2212 log E_A (negative: B faster)",
        x_label="net density (OD above base+fog)", y_label="\u0394log E", y_signed=True,
        empty_text="the mean curves share no net density",
    )
    return {"overlay": overlay, "delta-density": delta_d, "delta-log-exposure": delta_e}


@dataclass(frozen=True)
class ComparisonPage:
    """One comparison page; :meth:`draw` paints it."""

    comparison: Comparison
    calibrations: tuple[CalibrationUse, ...] = ()
    notes: tuple[str, ...] = ()
    site: str = ""

    def draw(self, canvas: Canvas) -> None:
        _draw_page(self, canvas)


def _set_lines(page: ComparisonPage) -> list[tuple[str, str]]:
    out = []
    for tag, s in (("A", page.comparison.a), ("B", page.comparison.b)):
        left = f"; left out: {'; '.join(s.left_out)}" if s.left_out else ""
        out.append((f"Set {tag}", f"{s.name}: {s.n} strip(s) of {s.n_steps} steps ({', '.join(s.labels)}); "
                                  f"{s.source}{left}"))
    return out


_TABLE = (Column("Figure", 36), Column("A mean \u00b1 sd (n)", 27, "right"), Column("B mean \u00b1 sd (n)", 27, "right"),
          Column("B \u2212 A", 14, "right"), Column("95 % interval", 26, "right"), Column("Tolerance", 24, "right"),
          Column("Verdict", 28))


def _draw_page(page: ComparisonPage, canvas: Canvas) -> None:
    c, comp = canvas, page.comparison
    top, bottom = draw_frame(c, title="Emulsion lot comparison",
                             subtitle=f"B: {comp.b.name}\nagainst A: {comp.a.name}",
                             extra_footer="differences are B \u2212 A")
    y = top
    pairs = ([("Site", page.site)] if page.site else []) + _set_lines(page)
    y += c.fields(c.left, y, c.content_width, pairs, key_width=16.0, size=7.5, max_lines=3) + 2.0

    plots = comparison_plots(comp)
    c.plot(c.left, y, c.content_width, 62.0, plots["overlay"])
    y += 64.0
    half = (c.content_width - 6.0) / 2
    c.plot(c.left, y, half, 50.0, plots["delta-density"])
    c.plot(c.left + half + 6.0, y, half, 50.0, plots["delta-log-exposure"])
    y += 52.0

    rows = [[row.cells()[k] for k in ("figure", "a", "b", "difference", "interval", "tolerance", "verdict")]
            for row in comp.rows]
    colours = [_VERDICT_COLOURS.get(row.verdict) for row in comp.rows]
    y += c.table(c.left, y, _TABLE, rows, size=6.5, max_lines=3, row_colours=colours) + 1.5

    # Provenance before the notes: it must never be the part that runs out of room.
    uses = [(", ".join(u.sets), calibration_brief(u.calibration, u.digest)) for u in page.calibrations] or \
        [("all sets", calibration_brief(None))]
    y += c.text(c.left, y, c.content_width, "Calibration provenance", size=7.5, bold=True, max_lines=1)
    y += c.fields(c.left, y, c.content_width, uses, key_width=34.0, size=6.5, max_lines=3) + 1.0

    notes = [f"Intervals: Welch's t, {comp.confidence:.0%} two-sided; the verdict puts the whole interval against "
             "the tolerance. Relative speed: 100\u00b7(10^(\u2212\u0394log E) \u2212 1) %, positive = B faster."]
    if comp.qc_steps is not None:
        st = comp.qc_steps
        notes.append(f"Mid-density read at step {st.mid_step}, density difference at step {st.dd_high_step} "
                     f"\u2212 step {st.dd_low_step} on every strip (chosen on A's mean densities).")
    used = {row.figure: row.tolerance for row in comp.rows if row.tolerance is not None}
    if used:
        notes.append("Tolerances (set local values): " + "; ".join(
            f"{figure_name(f, qualified=True)} {t.text()} ({t.source})" for f, t in used.items() if f != "relative_speed_percent")
            + ".")
    notes += [*comp.notes, *page.notes]
    size = 6.5
    for number, note in enumerate(notes):
        height = c.text_height(c.content_width - 3.0, note, size=size, max_lines=5)
        if y + height + c.line_height(size) > bottom and number < len(notes) - 1:
            c.text(c.left, y, c.content_width, f"\u2026 and {len(notes) - number} more notes (the compare "
                   "command's JSON lists them all)", size=size, italic=True, max_lines=1)
            break
        c.text(c.left, y, 3.0, "\u2022", size=size)
        y += c.text(c.left + 3.0, y, c.content_width - 3.0, note, size=size, max_lines=5)


def comparison_report_pdf(comparisons: Sequence[Comparison], path: str | os.PathLike[str], *,
                          calibrations: Sequence[CalibrationUse] = (), notes: Sequence[str] = (), site: str = "",
                          generated: dt.datetime | None = None) -> Path:
    """Write one page per comparison (each set B against set A) to a PDF; return the absolute path.

    Parameters
    ----------
    comparisons : sequence of Comparison
        From :func:`stripscan.core.compare.comparison.compare_sets`.
    path : path-like
    calibrations : sequence of CalibrationUse
        Which calibration gave which set's densities (their provenance is printed).
    notes : sequence of str
        Notes from reading the sets (retired snapshots, uncalibrated scans...).
    site : str
        Site name for the header.
    """
    if not comparisons:
        raise ReportError(f"{path}: nothing to report (no comparison)")
    pages = [ComparisonPage(c, tuple(calibrations), tuple(notes), site) for c in comparisons]
    names = " and ".join([comparisons[0].a.name, *(c.b.name for c in comparisons)])
    return write_pdf(pages, path, title=f"stripscan lot comparison - {names}", generated=generated)
