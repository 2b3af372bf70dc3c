"""Pages drawn with QPainter: millimetre layout, wrapped text, tables, PDF and PNG output.

A page is any object with a ``draw(canvas)`` method.  The same method
paints the PDF page (``QPdfWriter``) and a picture of it (``QImage``), so
what the tests and the sample pictures show is what the PDF holds.

Layout is in millimetres from the page's top-left corner; fonts are in
points.  Every text goes through :meth:`Canvas.text`, which wraps it to
the width given (breaking inside a word only when a single word is wider
than the column, e.g. a very long lot name) and, when a line limit is set,
shortens the last line with an ellipsis, so no text leaves its column.
"""

from __future__ import annotations

import datetime as dt
import os
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Callable, Protocol, Sequence

from stripscan import CAUTION, __version__
from stripscan.render.plot import COLOURS, Plot, draw_plot, make_font
from stripscan.render.provenance import short_hash
from stripscan.render.qt import ReportError, ensure_app, replacing

if TYPE_CHECKING:
    from PySide6.QtGui import QFont, QFontMetricsF, QImage, QPainter

__all__ = [
    "A4_MM", "Page", "Canvas", "Column", "write_pdf", "render_page", "save_page_png", "draw_frame",
]

A4_MM = (210.0, 297.0)
MARGIN_MM = 14.0


class Page(Protocol):
    """Something that can draw one page."""

    def draw(self, canvas: "Canvas") -> None: ...


@dataclass(frozen=True)
class Column:
    """A table column: title, width in mm, alignment (``left``, ``right``, ``center``)."""

    title: str
    width_mm: float
    align: str = "left"


def _qt():
    from PySide6 import QtCore, QtGui

    return QtCore, QtGui


def _wrap_paragraph(text: str, advance: Callable[[str], float], width: float) -> list[str]:
    """Greedy word wrap with ``advance(text)`` widths; a word wider than a line is cut where it must.

    Time grows linearly with the text: a word too long for a line is cut
    by the widths of its characters (measured once per distinct character)
    and each piece is checked whole only once or twice, so a 100 kB name
    with no space wraps as fast as a sentence.
    """
    words = text.split()
    if not words:
        return [""]
    char_width: dict[str, float] = {}
    lines: list[str] = []
    current = ""
    for word in words:
        trial = f"{current} {word}" if current else word
        if advance(trial) <= width:
            current = trial
            continue
        if current:
            lines.append(current)
        current = word
        if advance(current) > width:
            pieces = _cut_word(current, advance, width, char_width)
            lines += pieces[:-1]
            current = pieces[-1]
    lines.append(current)
    return lines


def _cut_word(word: str, advance: Callable[[str], float], width: float, char_width: dict[str, float]) -> list[str]:
    """``word`` cut into pieces no wider than ``width`` (at least one character each)."""
    pieces: list[str] = []
    start, run = 0, 0.0
    for k, char in enumerate(word):
        w = char_width.get(char)
        if w is None:
            w = char_width[char] = advance(char)
        if run + w > width and k > start:
            pieces.append(word[start:k])
            start, run = k, 0.0
        run += w
    pieces.append(word[start:])
    # Kerning can make a piece a little wider than its characters' sum:
    # move its last characters on to the next piece until it fits.
    for i in range(len(pieces) - 1):
        while len(pieces[i]) > 1 and advance(pieces[i]) > width:
            pieces[i], pieces[i + 1] = pieces[i][:-1], pieces[i][-1] + pieces[i + 1]
    return pieces


class Canvas:
    """A painter on one page, measured in millimetres.

    Parameters
    ----------
    painter : QPainter
        Active on the page's device.
    page_no, page_count : int
        For the footer.
    generated : datetime
        When the document is made (printed in the footer).
    """

    def __init__(self, painter: "QPainter", *, page_no: int = 1, page_count: int = 1, generated: dt.datetime | None = None,
                 page_mm: tuple[float, float] = A4_MM, margin_mm: float = MARGIN_MM) -> None:
        self.painter = painter
        self.dpi = float(painter.device().logicalDpiX())
        self.page_no, self.page_count = page_no, page_count
        self.generated = generated or dt.datetime.now(dt.timezone.utc)
        self.width_mm, self.height_mm = page_mm
        self.margin = margin_mm
        self.left, self.right = margin_mm, page_mm[0] - margin_mm
        self.top, self.bottom = margin_mm, page_mm[1] - margin_mm

    # -- units and fonts -------------------------------------------------
    def px(self, mm: float) -> float:
        """Millimetres to device pixels."""
        return mm / 25.4 * self.dpi

    def mm(self, px: float) -> float:
        """Device pixels to millimetres."""
        return px / self.dpi * 25.4

    @property
    def content_width(self) -> float:
        return self.right - self.left

    def font(self, size_pt: float = 8.0, *, bold: bool = False, italic: bool = False, mono: bool = False) -> "QFont":
        return make_font(size_pt, bold=bold, italic=italic, mono=mono)

    def metrics(self, font: "QFont") -> "QFontMetricsF":
        _, QtGui = _qt()
        return QtGui.QFontMetricsF(font, self.painter.device())

    def line_height(self, size_pt: float = 8.0, *, bold: bool = False, spacing: float = 1.12) -> float:
        """Height of one text line, mm."""
        return self.mm(self.metrics(self.font(size_pt, bold=bold)).height()) * spacing

    # -- text -------------------------------------------------------------
    def wrap(self, text: str, font: "QFont", width_mm: float, max_lines: int | None = None) -> list[str]:
        """``text`` broken into lines no wider than ``width_mm``.

        Explicit newlines start new lines.  With ``max_lines`` the last line
        kept ends in an ellipsis when text was left out.
        """
        QtCore, _ = _qt()
        width = self.px(width_mm)
        fm = self.metrics(font)
        lines: list[str] = []
        for paragraph in text.split("\n"):
            lines += _wrap_paragraph(paragraph, fm.horizontalAdvance, width)
        if max_lines is not None and len(lines) > max_lines:
            # What one elided line can show: no need to hand Qt the whole rest.
            rest = " ".join(lines[max_lines - 1:max_lines + 1])
            lines = lines[:max_lines - 1] + [fm.elidedText(rest + " \u2026", QtCore.Qt.TextElideMode.ElideRight, width)]
        return lines

    def text(self, x: float, y: float, width: float, text: str, *, size: float = 8.0, bold: bool = False,
             italic: bool = False, mono: bool = False, colour: str = COLOURS["ink"], align: str = "left",
             max_lines: int | None = None, spacing: float = 1.12, draw: bool = True) -> float:
        """Draw wrapped text in the column ``x .. x + width`` from ``y`` down; return its height, mm."""
        QtCore, QtGui = _qt()
        font = self.font(size, bold=bold, italic=italic, mono=mono)
        fm = self.metrics(font)
        lines = self.wrap(text, font, width, max_lines)
        step = fm.height() * spacing
        if draw:
            self.painter.setFont(font)
            self.painter.setPen(QtGui.QColor(colour))
            top = self.px(y)
            for k, line in enumerate(lines):
                advance = fm.horizontalAdvance(line)
                left = self.px(x)
                if align == "right":
                    left = self.px(x + width) - advance
                elif align == "center":
                    left = self.px(x + width / 2) - advance / 2
                self.painter.drawText(QtCore.QPointF(left, top + k * step + fm.ascent()), line)
        return self.mm(step * len(lines))

    def text_height(self, width: float, text: str, **kwargs) -> float:
        """Height :meth:`text` would take, mm, without drawing."""
        return self.text(0.0, 0.0, width, text, draw=False, **kwargs)

    def fields(self, x: float, y: float, width: float, pairs: Sequence[tuple[str, str]], *, key_width: float,
               size: float = 8.0, max_lines: int = 3, draw: bool = True) -> float:
        """``key: value`` rows, values wrapped beside their keys; return the height, mm."""
        height = 0.0
        for key, value in pairs:
            self.text(x, y + height, key_width - 1.5, key, size=size, colour=COLOURS["grey"], max_lines=1, draw=draw)
            height += self.text(x + key_width, y + height, width - key_width, value or "-", size=size,
                                max_lines=max_lines, draw=draw)
        return height

    # -- shapes -------------------------------------------------------------
    def rule(self, x0: float, y: float, x1: float, *, colour: str = COLOURS["ink"], width_pt: float = 0.5) -> None:
        QtCore, QtGui = _qt()
        pen = QtGui.QPen(QtGui.QColor(colour), width_pt / 72.0 * self.dpi)
        self.painter.setPen(pen)
        self.painter.drawLine(QtCore.QPointF(self.px(x0), self.px(y)), QtCore.QPointF(self.px(x1), self.px(y)))

    def box(self, x: float, y: float, w: float, h: float, *, fill: str | None = None, stroke: str | None = None,
            width_pt: float = 0.6) -> None:
        QtCore, QtGui = _qt()
        if stroke:
            self.painter.setPen(QtGui.QPen(QtGui.QColor(stroke), width_pt / 72.0 * self.dpi))
        else:
            self.painter.setPen(QtCore.Qt.PenStyle.NoPen)
        self.painter.setBrush(QtGui.QColor(fill) if fill else QtCore.Qt.BrushStyle.NoBrush)
        self.painter.drawRect(QtCore.QRectF(self.px(x), self.px(y), self.px(w), self.px(h)))

    def plot(self, x: float, y: float, w: float, h: float, plot: Plot) -> None:
        QtCore, _ = _qt()
        draw_plot(self.painter, QtCore.QRectF(self.px(x), self.px(y), self.px(w), self.px(h)), plot)

    # -- tables -------------------------------------------------------------
    def table(self, x: float, y: float, columns: Sequence[Column], rows: Sequence[Sequence[str]], *,
              size: float = 7.5, max_lines: int = 1, row_colours: Sequence[str | None] | None = None,
              header: bool = True, draw: bool = True) -> float:
        """A table with a bold header row and light rules; return its height, mm.

        Cells wrap up to ``max_lines`` lines; ``row_colours`` gives a text
        colour per row (None for ink).
        """
        pad = 1.0
        height = 0.0
        width = sum(c.width_mm for c in columns)
        if header:
            line = max(self.text_height(c.width_mm - 2 * pad, c.title, size=size, bold=True, max_lines=2)
                       for c in columns)
            if draw:
                self.box(x, y, width, line + 1.0, fill="#ececec")
                cx = x
                for c in columns:
                    self.text(cx + pad, y + 0.5, c.width_mm - 2 * pad, c.title, size=size, bold=True,
                              align=c.align, max_lines=2)
                    cx += c.width_mm
            height += line + 1.0
        for k, row in enumerate(rows):
            colour = (row_colours[k] if row_colours else None) or COLOURS["ink"]
            line = max(self.text_height(c.width_mm - 2 * pad, cell, size=size, max_lines=max_lines)
                       for c, cell in zip(columns, row))
            if draw:
                cx = x
                for c, cell in zip(columns, row):
                    self.text(cx + pad, y + height + 0.4, c.width_mm - 2 * pad, cell, size=size, colour=colour,
                              align=c.align, max_lines=max_lines)
                    cx += c.width_mm
                self.rule(x, y + height + line + 0.8, x + width, colour="#cfcfcf", width_pt=0.3)
            height += line + 0.8
        return height


def draw_frame(canvas: Canvas, *, title: str, subtitle: str = "", scan_sha256: str | None = None,
               extra_footer: str = "") -> tuple[float, float]:
    """Header, caution box and footer shared by every report page.

    Returns
    -------
    (top, bottom) : float
        The free band between header and caution box, mm.
    """
    c = canvas
    y = c.top
    title_h = c.text(c.left, y, c.content_width * 0.55, title, size=14, bold=True, max_lines=1)
    if subtitle:
        title_h = max(title_h, 1.0 + c.text(c.left + c.content_width * 0.55, y + 1.0, c.content_width * 0.45,
                                            subtitle, size=8, colour=COLOURS["grey"], align="right", max_lines=3))
    y += title_h + 1.0
    c.rule(c.left, y, c.right, width_pt=1.0)
    top = y + 2.5

    footer_size = 6.5
    footer_h = c.line_height(footer_size)
    footer_y = c.bottom - footer_h
    parts = [f"stripscan {__version__}"]
    if scan_sha256 is not None:
        parts.append(f"scan sha256 {short_hash(scan_sha256, 16)}")
    if extra_footer:
        parts.append(extra_footer)
    parts.append(f"made {c.generated.astimezone(dt.timezone.utc):%Y-%m-%d %H:%M} UTC")
    c.rule(c.left, footer_y - 1.0, c.right, colour=COLOURS["grey"], width_pt=0.4)
    page_text = f"page {c.page_no} of {c.page_count}"
    page_w = c.mm(c.metrics(c.font(footer_size)).horizontalAdvance(page_text)) + 1.0
    c.text(c.left, footer_y, c.content_width - page_w - 2.0, "  \u00b7  ".join(parts), size=footer_size,
           colour=COLOURS["grey"], max_lines=1)
    c.text(c.right - page_w, footer_y, page_w, page_text, size=footer_size, colour=COLOURS["grey"], align="right")

    caution = f"Caution: {CAUTION}"
    inner = c.content_width - 4.0
    caution_h = c.text_height(inner, caution, size=7.5, bold=True) + 3.0
    caution_y = footer_y - 2.5 - caution_h
    c.box(c.left, caution_y, c.content_width, caution_h, fill="#fff4d6", stroke="#9a6b00", width_pt=0.7)
    c.text(c.left + 2.0, caution_y + 1.5, inner, caution, size=7.5, bold=True)
    return top, caution_y - 2.5


def _begin(painter, device, path: Path) -> None:
    if not painter.begin(device):
        raise ReportError(f"{path}: Qt could not start drawing the document")


def write_pdf(pages: Sequence[Page], path: str | os.PathLike[str], *, title: str, dpi: int = 300,
              generated: dt.datetime | None = None) -> Path:
    """Draw ``pages`` into an A4 PDF at ``path`` (atomically); return the absolute path.

    Raises
    ------
    ReportError
        When there is no page, the file cannot be written, or a page cannot be laid out.
    """
    if not pages:
        raise ReportError(f"{path}: nothing to report (no page)")
    ensure_app()
    QtCore, QtGui = _qt()
    generated = generated or dt.datetime.now(dt.timezone.utc)
    target = Path(path).expanduser().absolute()
    with replacing(target) as temp:
        writer = QtGui.QPdfWriter(str(temp))
        writer.setPageSize(QtGui.QPageSize(QtGui.QPageSize.PageSizeId.A4))
        writer.setPageMargins(QtCore.QMarginsF(0, 0, 0, 0))
        writer.setResolution(dpi)
        writer.setTitle(title)
        writer.setCreator(f"stripscan {__version__}")
        painter = QtGui.QPainter()
        _begin(painter, writer, target)
        try:
            for number, page in enumerate(pages, start=1):
                if number > 1 and not writer.newPage():
                    raise ReportError(_write_failure(target, f"Qt could not start page {number}"))
                page.draw(Canvas(painter, page_no=number, page_count=len(pages), generated=generated))
        finally:
            finished = painter.end()
        if not finished:
            raise ReportError(_write_failure(target, "Qt could not finish the document"))
    return target


def _write_failure(target: Path, what: str) -> str:
    """Why Qt could not write a document: Qt only says that it failed; a full disk is the usual cause."""
    import shutil

    try:
        full = shutil.disk_usage(target.parent).free < (1 << 20)
    except OSError:
        full = False
    return f"{target}: cannot write: the disk is full ({what})" if full else f"{target}: {what}"


def render_page(page: Page, *, dpi: float = 100.0, page_no: int = 1, page_count: int = 1,
                border_mm: float = 0.0, generated: dt.datetime | None = None) -> "QImage":
    """A picture (``QImage``) of one page, drawn by the same code as the PDF.

    ``border_mm`` adds a white border around the page: anything drawn
    there lies outside the page, which the tests look for.
    """
    ensure_app()
    QtCore, QtGui = _qt()
    width = round((A4_MM[0] + 2 * border_mm) / 25.4 * dpi)
    height = round((A4_MM[1] + 2 * border_mm) / 25.4 * dpi)
    image = QtGui.QImage(width, height, QtGui.QImage.Format.Format_RGB32)
    image.setDotsPerMeterX(round(dpi / 0.0254))
    image.setDotsPerMeterY(round(dpi / 0.0254))
    image.fill(QtGui.QColor("#ffffff"))
    painter = QtGui.QPainter()
    _begin(painter, image, Path("<picture>"))
    try:
        painter.translate(border_mm / 25.4 * dpi, border_mm / 25.4 * dpi)
        page.draw(Canvas(painter, page_no=page_no, page_count=page_count, generated=generated))
    finally:
        painter.end()
    return image


def save_page_png(page: Page, path: str | os.PathLike[str], *, dpi: float = 100.0, **kwargs) -> Path:
    """Save a picture of one page as PNG (atomically); return the absolute path."""
    image = render_page(page, dpi=dpi, **kwargs)
    with replacing(path) as temp:
        if not image.save(str(temp), "PNG"):
            raise ReportError(f"{path}: Qt could not write the PNG picture")
    return Path(path).expanduser().absolute()
