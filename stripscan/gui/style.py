"""Shared looks: pyqtgraph's configuration (set once, here) and the overlay colours.

Steps are told apart by colour *and* line style, so the legend still reads
for people who do not see the colours apart.
"""

from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QPointF, QRectF, Qt
from PySide6.QtGui import QColor, QPainter, QPen, QPixmap
from PySide6.QtWidgets import QLabel

from stripscan import CAUTION
from stripscan.render import qtguard  # noqa: F401  (before any signal is emitted)

__all__ = ["LOOKS", "Look", "strip_colour", "look_pen", "swatch", "FILM_LUT", "SCAN_BACKGROUND",
           "notes_label", "caution_label"]

# Row-major images match numpy's (rows, cols); once, for every view of the program.
pg.setConfigOptions(imageAxisOrder="row-major", antialias=True, background="w", foreground="k")

#: Background of the scan view: dark, so bright overlays stand out on film.
SCAN_BACKGROUND = "#1e1f22"

#: Grey levels for density images: clear film light, dense film dark grey (not black,
#: so the densest steps and their labels stay visible), as on a light box.
FILM_LUT = np.linspace(255, 28, 256).astype(np.uint8)

# Okabe & Ito's palette, distinguishable with the common colour-vision deficiencies.
_STRIP_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442")


def strip_colour(index: int) -> str:
    """The colour that marks strip ``index`` (0-based) on the curve and in the list."""
    return _STRIP_COLOURS[index % len(_STRIP_COLOURS)]


class Look:
    """How one kind of overlay is drawn: colour, width, dash, and a legend text."""

    def __init__(self, colour: str, width: float, style: Qt.PenStyle, text: str, cross: bool = False) -> None:
        self.colour, self.width, self.style, self.text, self.cross = colour, width, style, text, cross


#: The overlay kinds of the scan view, in legend order.
LOOKS = {
    "used": Look("#4dd0e1", 1.5, Qt.PenStyle.SolidLine, "step used for the curve"),
    # The strip's warnings say which reason holds for which step.
    "outside": Look("#ffa726", 1.5, Qt.PenStyle.DashLine,
                    "not used: outside the calibrated range, too noisy or saturated"),
    "excluded": Look("#ef5350", 1.5, Qt.PenStyle.SolidLine, "excluded by you (not used)", cross=True),
    "unread": Look("#bdbdbd", 1.0, Qt.PenStyle.SolidLine, "step not converted (no usable calibration)"),
    "base_fog": Look("#fff176", 1.5, Qt.PenStyle.DotLine, "base+fog sampling area"),
    "outline": Look("#ffffff", 1.0, Qt.PenStyle.SolidLine, "strip outline (the selected one has handles)"),
}


def look_pen(look: Look, *, cosmetic: bool = True) -> QPen:
    """A pen for ``look`` whose width is in screen pixels at any zoom."""
    pen = pg.mkPen(look.colour, width=look.width, style=look.style)
    pen.setCosmetic(cosmetic)
    return pen


def swatch(look: Look, size: tuple[int, int] = (30, 16)) -> QPixmap:
    """A small picture of ``look`` on the scan view's background, for legends."""
    pixmap = QPixmap(*size)
    pixmap.fill(QColor(SCAN_BACKGROUND))
    painter = QPainter(pixmap)
    painter.setRenderHint(QPainter.RenderHint.Antialiasing)
    pen = QPen(QColor(look.colour), max(1.5, look.width))
    pen.setStyle(look.style)
    painter.setPen(pen)
    rect = QRectF(3, 3, size[0] - 6, size[1] - 6)
    painter.drawRect(rect)
    if look.cross:
        painter.drawLine(rect.topLeft(), rect.bottomRight())
        painter.drawLine(QPointF(rect.left(), rect.bottom()), QPointF(rect.right(), rect.top()))
    painter.end()
    return pixmap


def notes_label() -> QLabel:
    """A wrapping, selectable label for a panel's notes and warnings (amber, small)."""
    label = QLabel()
    label.setWordWrap(True)
    label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
    label.setStyleSheet("color: #8a4b00; font-size: 8pt")
    return label


def caution_label() -> QLabel:
    """The caution every panel shows (grey italic, small)."""
    label = QLabel(CAUTION)
    label.setWordWrap(True)
    label.setStyleSheet("color: #555555; font-style: italic; font-size: 8pt")
    return label
