"""The one-page strip report: who, what, the curve, the figures, the steps, the calibration.

One A4 page per strip.  It is made either from an archived snapshot
(:func:`snapshot_report_pdf`) or straight from a scan analysis with no
archive (:func:`scan_report_pdf`, one page per strip found).

Page layout, top to bottom: title and snapshot number; the strip's
identity (site, lot, processor, operator, dates, scan); the characteristic
curve beside the step table; the figures with units and one-line
definitions; the calibration's provenance; flags and warnings; the
caution; a footer with the program version and the scan's sha256.
"""

from __future__ import annotations

import datetime as dt
import math
import os
from dataclasses import dataclass, field
from pathlib import Path, PurePath
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from stripscan.core.curve import CharacteristicCurve
from stripscan.core.records import Analysis, ScanInfo, StripResult, warnings_of_strip
from stripscan.core.curve_marks import CURVE_MARKS as MARK
from stripscan.core.figures import (NOISE_ONLY_NOTE, figure_digits, figure_rows, format_value, read_in_direct_mode,
                                    step_flag)
from stripscan.render.canvas import Canvas, Column, draw_frame, write_pdf
from stripscan.render.plot import COLOURS, Line, Plot, Points, RefLine
from stripscan.render.provenance import calibration_lines, is_uncalibrated, valid_range, when
from stripscan.render.qt import ReportError

if TYPE_CHECKING:
    from stripscan.archive import Archive, Snapshot
    from stripscan.core.calibration import Calibration

__all__ = [
    "StripContext", "StripReport", "curve_plot", "reports_from_analysis", "report_from_snapshot",
    "scan_report_pdf", "snapshot_report_pdf",
]


@dataclass(frozen=True)
class StripContext:
    """Who, where and when of a strip, as printed in the report's header block.

    Every field is optional text; an empty field prints as '-'.
    """

    site: str = ""
    lot: str = ""
    film_type: str = ""
    processor: str = ""
    sensitometer: str = ""
    operator: str = ""
    exposed_on: str = ""
    processed_on: str = ""
    scanned_on: str = ""
    snapshot_id: int | None = None
    stored_at: str = ""
    status: str = ""
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class StripReport:
    """Everything one strip page shows; its :meth:`draw` paints the page.

    Attributes
    ----------
    strip : StripResult
    scan : ScanInfo
    calibration : dict or None
        Full calibration record, its summary, or the direct-mode summary.
    calibration_digest : str or None
        The calibration's hash as stored with the reading.
    context : StripContext
    warnings : tuple of str
        Scan-wide warnings (those of other strips left out).
    settings : dict
        Analysis settings (step count, log E increment or table).
    n_strips : int
        Strips on the scan.
    """

    strip: StripResult
    scan: ScanInfo
    calibration: dict[str, Any] | None
    calibration_digest: str | None = None
    context: StripContext = field(default_factory=StripContext)
    warnings: tuple[str, ...] = ()
    settings: dict[str, Any] = field(default_factory=dict)
    n_strips: int = 1

    @property
    def title(self) -> str:
        """What this page is: the snapshot's number, or the strip's place on its scan."""
        if self.context.snapshot_id is not None:
            return f"Snapshot {self.context.snapshot_id}, strip {self.strip.index}"
        of = f" of {self.n_strips}" if self.n_strips else ""
        return f"Strip {self.strip.index}{of} on {PurePath(self.scan.path).name}"

    def flags(self) -> list[str]:
        """Flags and warnings, most serious first, without repeats."""
        out: list[str] = []
        if self.calibration is None:
            out.append("The calibration of these densities is not recorded.")
        if self.context.status and self.context.status != "current":
            out.append(f"This snapshot is {self.context.status}.")
        # What people wrote (notes, a revision's reason) before what the reading found.
        out += [f"Note: {note}" for note in self.context.notes]
        for text in (*warnings_of_strip(self.warnings, self.strip), *self.strip.figures.notes):
            if text not in out:
                out.append(text)
        return out

    def draw(self, canvas: Canvas) -> None:
        _draw_page(self, canvas)


def curve_plot(strip: StripResult, *, valid_od: tuple[float, float] | None = None, title: str = "") -> Plot:
    """The characteristic curve of a strip as a :class:`Plot`.

    Steps on the curve, steps not used and excluded steps are marked
    apart; the interpolated curve is the core's
    :class:`~stripscan.core.curve.CharacteristicCurve` through the usable
    steps.  The two density points of the average gradient are marked and
    joined by the average-gradient line; the speed point and base+fog are
    shown, and the top of the calibrated range when ``valid_od`` is given.
    """
    f = strip.figures
    used = [s for s in strip.steps if s.in_range and not s.excluded and math.isfinite(s.od)]
    unused = [s for s in strip.steps if not s.in_range and not s.excluded and math.isfinite(s.od)]
    excluded = [s for s in strip.steps if s.excluded and math.isfinite(s.od)]
    items: list[Any] = []
    # Marks, colours and words as the window draws them (stripscan.core.curve_marks).
    if f.base_fog is not None:
        items.append(RefLine(f.base_fog, label=f"base+fog {format_value(f.base_fog, figure_digits('base_fog'))} OD",
                             colour=MARK["base_fog"].colour, dash=MARK["base_fog"].dash))
    if valid_od is not None:
        items.append(RefLine(valid_od[1], label=f"top of calibrated range {valid_od[1]:.2f} OD",
                             colour=COLOURS["red"], dash="dashdot"))
    curve = None
    if len(used) >= 2:
        curve = CharacteristicCurve([s.log_exposure for s in used], [s.od for s in used])
        grid = np.linspace(curve.log_exposure[0], curve.log_exposure[-1], 300)
        items.append(Line(tuple(grid), tuple(curve(grid)), label=MARK["curve"].words, colour=MARK["curve"].colour,
                          width_pt=1.3))
    low_net = float(f.settings.get("gradient_low", 0.25))
    high_net = float(f.settings.get("gradient_high", 2.0))
    reference = f.net_reference  # base+fog, or the lightest step when none was read (a note says so)
    if reference is not None and f.gradient_low_log_exposure is not None and f.gradient_high_log_exposure is not None:
        x1, x2 = f.gradient_low_log_exposure, f.gradient_high_log_exposure
        y1, y2 = reference + low_net, reference + high_net
        if f.average_gradient is not None:
            gradient = format_value(f.average_gradient, figure_digits("average_gradient"))
            items.append(Line((x1, x2), (y1, y2), label=f"{MARK['gradient'].words} {gradient}",
                              colour=MARK["gradient"].colour, width_pt=1.1, dash=MARK["gradient"].dash))
        items.append(Points((x1, x2), (y1, y2),
                            label=f"{MARK['density_points'].words} (net {low_net:.2f} and {high_net:.2f})",
                            colour=MARK["density_points"].colour, marker=MARK["density_points"].shape,
                            filled=MARK["density_points"].filled, size_pt=5.0))
    if reference is not None and f.speed_log_exposure is not None:
        net = float(f.settings.get("speed_net_density", 1.0))
        items.append(Points((f.speed_log_exposure,), (reference + net,),
                            label=f"{MARK['speed'].words} (net {net:.2f})", colour=MARK["speed"].colour,
                            marker=MARK["speed"].shape, size_pt=5.5))
    if curve is not None and f.gamma is not None and f.gamma_log_exposure is not None:
        items.append(Points((f.gamma_log_exposure,), (float(curve(f.gamma_log_exposure)),),
                            label=f"{MARK['max_slope'].words} {format_value(f.gamma, figure_digits('gamma'))}",
                            colour=MARK["max_slope"].colour, marker=MARK["max_slope"].shape, size_pt=5.0))
    items.append(Points(tuple(s.log_exposure for s in used), tuple(s.od for s in used), label=MARK["step"].words,
                        colour=MARK["step"].colour, size_pt=3.6))
    if unused:
        items.append(Points(tuple(s.log_exposure for s in unused), tuple(s.od for s in unused),
                            label=MARK["unused"].words, colour=MARK["unused"].colour, marker=MARK["unused"].shape,
                            filled=MARK["unused"].filled, size_pt=3.6))
    if excluded:
        items.append(Points(tuple(s.log_exposure for s in excluded), tuple(s.od for s in excluded),
                            label=MARK["excluded"].words, colour=MARK["excluded"].colour,
                            marker=MARK["excluded"].shape, size_pt=3.6))
    log_e = [s.log_exposure for s in strip.steps]
    densities = [s.od for s in strip.steps if math.isfinite(s.od)] + ([valid_od[1]] if valid_od else [])
    top = max(densities, default=3.0)
    return Plot(
        items=tuple(items), title=title, x_label="log relative exposure (log E)", y_label="optical density (OD)",
        x_range=(min(log_e) - 0.05, max(log_e) + 0.05) if log_e else None,
        y_range=(0.0, math.ceil((top + 0.15) * 2.0) / 2.0),
        empty_text="no step could be read",
    )


# --------------------------------------------------------------------------
# Building reports


def _calibration_dict(calibration: "Calibration | dict[str, Any] | None") -> dict[str, Any] | None:
    if calibration is None or isinstance(calibration, dict):
        return calibration
    return calibration.to_dict()


def reports_from_analysis(analysis: Analysis, *, calibration: "Calibration | dict[str, Any] | None" = None,
                          context: StripContext | None = None) -> list[StripReport]:
    """One :class:`StripReport` per strip of an analysed scan.

    Parameters
    ----------
    analysis : Analysis
    calibration : Calibration or dict, optional
        The full calibration the analysis used, for its provenance; without
        it the summary the analysis carries is printed.
    context : StripContext, optional
        Site, lot, processor, operator and dates to print.

    Raises
    ------
    ReportError
        When the scan holds no strip, or the calibration given is not the
        one the analysis used.
    """
    if not analysis.strips:
        raise ReportError(f"{analysis.scan.path}: no strip was found on the scan; nothing to report")
    summary = analysis.calibration
    full = _calibration_dict(calibration)
    digest = summary.get("sha256") if isinstance(summary, dict) else None
    if full is not None and digest:
        from stripscan.core.calibration import Calibration

        own = Calibration.from_dict(full).sha256 if isinstance(calibration, dict) else calibration.sha256  # type: ignore[union-attr]
        if own != digest:
            raise ReportError(f"the calibration given (sha256 {own[:12]}...) is not the one the analysis of "
                              f"{analysis.scan.path} used (sha256 {digest[:12]}...)")
    used = full if full is not None and not is_uncalibrated(summary) else summary
    scan_wide = tuple(w for w in analysis.warnings)
    return [
        StripReport(strip=strip, scan=analysis.scan, calibration=used, calibration_digest=digest,
                    context=context or StripContext(), warnings=scan_wide, settings=dict(analysis.settings),
                    n_strips=len(analysis.strips))
        for strip in analysis.strips
    ]


def _status(snapshot: "Snapshot", archive: "Archive | None") -> str:
    # The one wording the command line, the window and CSV use (records.snapshot_status).
    from stripscan.archive.records import snapshot_status

    later = None
    if archive is not None and snapshot.retired_at is None:
        later = next((s.id for s in archive.history(snapshot.id) if s.revises == snapshot.id), None)
    status = snapshot_status(snapshot, later)
    return f"{status}: a later reading corrects it" if later is not None else status


def report_from_snapshot(snapshot: "Snapshot", *, archive: "Archive | None" = None,
                         calibration: dict[str, Any] | None = None, site: str = "") -> StripReport:
    """A :class:`StripReport` of one archived snapshot.

    With ``archive`` the calibration, the lot's film type, the snapshot's
    status (current, revised, retired) and its notes are looked up.
    """
    film_type = ""
    notes: tuple[str, ...] = ()
    if archive is not None:
        if calibration is None and snapshot.calibration_hash:
            calibration = archive.get_calibration(snapshot.calibration_hash)
        film_type = archive.get_lot(snapshot.lot_id).film_type or ""
        notes = tuple(f"{when(n.created_at)}{' ' + n.author if n.author else ''}: {n.text}"
                      for n in archive.list_notes(snapshot.id))
    if snapshot.revises is not None:
        notes = (f"corrects snapshot {snapshot.revises}: {snapshot.revision_reason}", *notes)
    if snapshot.notes:
        notes = (snapshot.notes, *notes)
    context = StripContext(
        site=site, lot=snapshot.lot_id, film_type=film_type, processor=snapshot.processor or "",
        sensitometer=snapshot.sensitometer or "", operator=snapshot.operator, exposed_on=snapshot.exposed_on or "",
        processed_on=snapshot.processed_on or "", scanned_on=snapshot.scanned_on or "", snapshot_id=snapshot.id,
        stored_at=snapshot.created_at, status=_status(snapshot, archive), notes=notes,
    )
    return StripReport(strip=snapshot.strip, scan=snapshot.scan, calibration=calibration,
                       calibration_digest=snapshot.calibration_hash, context=context,
                       warnings=tuple(snapshot.warnings), settings=dict(snapshot.settings), n_strips=0)


def scan_report_pdf(analysis: Analysis, path: str | os.PathLike[str], *,
                    calibration: "Calibration | dict[str, Any] | None" = None, context: StripContext | None = None,
                    generated: dt.datetime | None = None) -> Path:
    """Write the strip report of every strip on an analysed scan (one page each) to a PDF.

    Returns the absolute path written; see :func:`reports_from_analysis`.
    """
    pages = reports_from_analysis(analysis, calibration=calibration, context=context)
    return write_pdf(pages, path, title=f"stripscan strip report - {PurePath(analysis.scan.path).name}",
                     generated=generated)


def snapshot_report_pdf(snapshot: "Snapshot | int", path: str | os.PathLike[str], *,
                        archive: "Archive | None" = None, calibration: dict[str, Any] | None = None,
                        site: str = "", generated: dt.datetime | None = None) -> Path:
    """Write the one-page report of an archived snapshot to a PDF.

    Parameters
    ----------
    snapshot : Snapshot or int
        The snapshot, or its id (then ``archive`` is needed).
    path : path-like
        The PDF to write (atomically).
    archive : Archive, optional
        Where to look up calibration, lot and notes.
    calibration : dict, optional
        The calibration record, when known without the archive.
    site : str
        Site name for the header (the archive does not keep one).
    """
    if not hasattr(snapshot, "strip"):
        if archive is None:
            raise ReportError("a snapshot id needs the archive it belongs to")
        snapshot = archive.get_snapshot(int(snapshot))  # type: ignore[arg-type]
    report = report_from_snapshot(snapshot, archive=archive, calibration=calibration, site=site)  # type: ignore[arg-type]
    return write_pdf([report], path, title=f"stripscan {report.title.lower()}", generated=generated)


# --------------------------------------------------------------------------
# The page


def _scan_line(report: StripReport) -> str:
    scan, strip = report.scan, report.strip
    dpi = f"{scan.dpi:g} dpi" if scan.dpi else "resolution unknown"
    where = f"strip {strip.index} of {report.n_strips}" if report.n_strips else f"strip {strip.index}"
    table = report.settings.get("exposure_table")
    increment = report.settings.get("increment")
    if table:
        exposure = "log E from the sensitometer's step table"
    elif increment:
        exposure = f"log E {float(increment):.3g} per step from step 1"
    else:
        exposure = "log E relative to step 1"
    return (f"{PurePath(scan.path).name} ({scan.width} x {scan.height} px, {dpi}, {scan.bits}-bit {scan.channel}); "
            f"{where}, {strip.geometry.n_steps} steps; {exposure}")


def _section(canvas: Canvas, y: float, title: str, *, draw: bool = True) -> float:
    height = canvas.text(canvas.left, y, canvas.content_width, title, size=9, bold=True, max_lines=1, draw=draw)
    if draw:
        canvas.rule(canvas.left, y + height + 0.2, canvas.right, colour=COLOURS["grey"], width_pt=0.4)
    return height + 1.4


def _identity(report: StripReport, canvas: Canvas, y: float, *, draw: bool = True) -> float:
    """Draw (or measure) the who/where/when block from ``y``; return its height."""
    c, ctx = canvas, report.context
    half = c.content_width / 2 - 2.0
    stored = "not archived (read straight from the scan)"
    if ctx.snapshot_id is not None:
        stored = f"snapshot {ctx.snapshot_id}, {when(ctx.stored_at)}"
    left = [("Site", ctx.site), ("Emulsion lot", ctx.lot), ("Film type", ctx.film_type),
            ("Processor", ctx.processor), ("Sensitometer", ctx.sensitometer)]
    right = [("Operator", ctx.operator), ("Exposed", ctx.exposed_on), ("Processed", ctx.processed_on),
             ("Scanned", ctx.scanned_on), ("Stored", stored)]
    # A lot name is printed whole however long (it is what the page is about); others may be shortened.
    h1 = c.fields(c.left, y, half, left[:1], key_width=24.0, size=7.5, max_lines=2, draw=draw)
    h1 += c.fields(c.left, y + h1, half, left[1:2], key_width=24.0, size=7.5, max_lines=8, draw=draw)
    h1 += c.fields(c.left, y + h1, half, left[2:], key_width=24.0, size=7.5, max_lines=2, draw=draw)
    h2 = c.fields(c.left + half + 4.0, y, half, right, key_width=20.0, size=7.5, max_lines=2, draw=draw)
    height = max(h1, h2) + 0.8
    height += c.fields(c.left, y + height, c.content_width, [("Scan", _scan_line(report))], key_width=24.0,
                       size=7.5, max_lines=2, draw=draw)
    return height


def _step_rows(report: StripReport) -> tuple[list[list[str]], list[str | None]]:
    rows, colours = [], []
    f = report.strip.figures
    for s in report.strip.steps:
        flag = step_flag(s, f)
        rows.append([str(s.step), f"{s.log_exposure:.2f}", format_value(s.od, 3, missing="-"),
                     format_value(s.od_sd, 3, missing="-"), flag])
        colours.append(COLOURS["grey"] if flag in ("not used", "excluded", "not read") else None)
    return rows, colours


_STEP_COLUMNS = (Column("Step", 9, "right"), Column("log E", 11, "right"), Column("OD", 12, "right"),
                 Column("\u00b1 sd", 11, "right"), Column("Flag", 30))
_FIGURE_COLUMNS = (Column("Figure", 29), Column("Value", 21, "right"), Column("Unit", 36),
                   Column("Definition", 96))
_STEP_NOTE = ("OD gross, incl. base+fog; \u00b1 sd standard uncertainty; not used: outside the calibrated "
              "range, too noisy, saturated, at the dark floor, or stray light too large to correct (the "
              "warnings say more)")


def _step_note(report: StripReport) -> str:
    """The note under the step table; read without a calibration, its ± sd is the reading noise only."""
    if not read_in_direct_mode(report.strip):
        return _STEP_NOTE
    return _STEP_NOTE.replace("\u00b1 sd standard uncertainty", f"\u00b1 sd {NOISE_ONLY_NOTE}")


#: Preferred and least height of the curve beside the step table, mm.
_BAND, _LEAST_BAND = 84.0, 52.0
#: Room kept for flags and warnings: their heading and a few lines, mm.
_FLAGS_ROOM = 20.0


def _draw_page(report: StripReport, canvas: Canvas) -> None:
    c = canvas
    subtitle = report.title + (f"\nEmulsion lot {report.context.lot}" if report.context.lot else "")
    top, bottom = draw_frame(c, title="Sensitometric strip report", subtitle=subtitle,
                             scan_sha256=report.scan.sha256)
    figures = figure_rows(report.strip.figures)
    fig_rows = [[r.label, r.text, r.unit, r.definition] for r in figures]
    lines = calibration_lines(report.calibration, report.calibration_digest)
    rows, colours = _step_rows(report)
    table_w = sum(col.width_mm for col in _STEP_COLUMNS)

    # Measure first, so that a long header block takes its room from the curve, never from the flags.
    section = _section(c, 0.0, "x", draw=False)
    fixed = (_identity(report, c, top, draw=False) + 2.0 + 4 * section
             + c.text_height(table_w, _step_note(report), size=5.5, max_lines=5) + 2.5
             + c.table(0, 0, _FIGURE_COLUMNS, fig_rows, size=7.5, max_lines=2, draw=False) + 2.0
             + c.fields(0, 0, c.content_width, lines, key_width=27.0, size=7.5, max_lines=2, draw=False) + 2.0)
    band = max(_LEAST_BAND, min(_BAND, bottom - top - fixed - _FLAGS_ROOM))
    size = 7.0
    while size > 4.5 and c.table(0, 0, _STEP_COLUMNS, rows, size=size, draw=False) > band:
        size -= 0.25
    band = max(band, c.table(0, 0, _STEP_COLUMNS, rows, size=size, draw=False))

    y = top + _identity(report, c, top) + 2.0
    y += _section(c, y, "Characteristic curve and steps")
    c.plot(c.left, y, c.content_width - table_w - 4.0, band,
           curve_plot(report.strip, valid_od=valid_range(report.calibration)))
    c.table(c.right - table_w, y, _STEP_COLUMNS, rows, size=size, row_colours=colours)
    y += band + 1.0
    y += c.text(c.right - table_w, y, table_w, _step_note(report), size=5.5, colour=COLOURS["grey"],
                max_lines=5) + 1.5

    y += _section(c, y, "Figures")
    missing = [COLOURS["red"] if r.value is None else None for r in figures]
    y += c.table(c.left, y, _FIGURE_COLUMNS, fig_rows, size=7.5, max_lines=2, row_colours=missing) + 2.0

    y += _section(c, y, "Calibration provenance")
    y += c.fields(c.left, y, c.content_width, lines, key_width=27.0, size=7.5, max_lines=2) + 2.0

    y += _section(c, y, "Flags and warnings")
    _draw_flags(c, y, bottom, report.flags())


def _draw_flags(c: Canvas, y: float, bottom: float, flags: Sequence[str]) -> None:
    if not flags:
        c.text(c.left, y, c.content_width, "None.", size=7.5)
        return
    # Every flag belongs on the page: a smaller type first, cutting the list only as a last resort.
    size = 7.5
    while size > 5.5 and sum(c.text_height(c.content_width - 4.0, f, size=size, max_lines=3)
                             for f in flags) > bottom - y:
        size -= 0.5
    for number, flag in enumerate(flags):
        left = len(flags) - number
        height = c.text_height(c.content_width - 4.0, flag, size=size, max_lines=3)
        more = c.line_height(size)
        if y + height + (more if left > 1 else 0.0) > bottom:
            c.text(c.left, y, c.content_width, f"\u2026 and {left} more (the JSON export lists them all)",
                   size=size, italic=True, max_lines=1)
            return
        serious = flag.startswith(("UNCALIBRATED", "This snapshot", "The calibration"))
        colour = COLOURS["red"] if serious else COLOURS["ink"]
        c.text(c.left, y, 4.0, "\u2022", size=size, colour=colour)
        y += c.text(c.left + 4.0, y, c.content_width - 4.0, flag, size=size, max_lines=3, colour=colour)

