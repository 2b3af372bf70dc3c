"""Pictures of a plot: PNG through ``QImage``, SVG through ``QSvgGenerator``.

Both draw with :func:`stripscan.render.plot.draw_plot`, the routine the
PDF pages use, and write under a temporary name renamed into place.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import TYPE_CHECKING

from stripscan.render.plot import Plot, draw_plot
from stripscan.render.qt import ReportError, ensure_app, replacing

if TYPE_CHECKING:
    from PySide6.QtGui import QImage

__all__ = ["plot_image", "save_plot_png", "save_plot_svg"]


def _qt():
    from PySide6 import QtCore, QtGui

    return QtCore, QtGui


def _check_size(width_mm: float, height_mm: float, dpi: float) -> None:
    for name, value in (("width", width_mm), ("height", height_mm)):
        if not (isinstance(value, (int, float)) and math.isfinite(value) and 30 <= value <= 1000):
            raise ReportError(f"plot {name} must be between 30 and 1000 mm, got {value!r}")
    if not (isinstance(dpi, (int, float)) and math.isfinite(dpi) and 50 <= dpi <= 1200):
        raise ReportError(f"resolution must be between 50 and 1200 dpi, got {dpi!r}")


def plot_image(plot: Plot, *, width_mm: float = 160.0, height_mm: float = 100.0, dpi: float = 150.0) -> "QImage":
    """The plot drawn on a white ``QImage`` of the given size and resolution."""
    _check_size(width_mm, height_mm, dpi)
    ensure_app()
    QtCore, QtGui = _qt()
    width, height = round(width_mm / 25.4 * dpi), round(height_mm / 25.4 * dpi)
    image = QtGui.QImage(width, height, QtGui.QImage.Format.Format_RGB32)
    image.setDotsPerMeterX(round(dpi / 0.0254))
    image.setDotsPerMeterY(round(dpi / 0.0254))
    image.fill(QtGui.QColor("#ffffff"))
    painter = QtGui.QPainter(image)
    try:
        margin = 3.0 / 25.4 * dpi
        draw_plot(painter, QtCore.QRectF(margin, margin, width - 2 * margin, height - 2 * margin), plot)
    finally:
        painter.end()
    return image


def save_plot_png(plot: Plot, path: str | os.PathLike[str], *, width_mm: float = 160.0,
                  height_mm: float = 100.0, dpi: float = 150.0) -> Path:
    """Save ``plot`` as a PNG picture; return the absolute path.

    Parameters
    ----------
    plot : Plot
    path : path-like
        Destination; written under a temporary name, then renamed.
    width_mm, height_mm : float
        Printed size (30 to 1000 mm).
    dpi : float
        Resolution; the picture is ``width_mm / 25.4 * dpi`` pixels wide.
    """
    image = plot_image(plot, width_mm=width_mm, height_mm=height_mm, dpi=dpi)
    with replacing(path) as temp:
        if not image.save(str(temp), "PNG"):
            raise ReportError(f"{path}: Qt could not write the PNG picture")
    return Path(path).expanduser().absolute()


def save_plot_svg(plot: Plot, path: str | os.PathLike[str], *, width_mm: float = 160.0,
                  height_mm: float = 100.0, title: str = "") -> Path:
    """Save ``plot`` as an SVG drawing (vector lines, real text); return the absolute path."""
    dpi = 96.0  # the SVG user unit is the CSS pixel, 1/96 inch
    _check_size(width_mm, height_mm, dpi)
    ensure_app()
    QtCore, QtGui = _qt()
    from PySide6.QtSvg import QSvgGenerator

    width, height = round(width_mm / 25.4 * dpi), round(height_mm / 25.4 * dpi)
    with replacing(path) as temp:
        generator = QSvgGenerator()
        generator.setFileName(str(temp))
        generator.setResolution(round(dpi))
        generator.setSize(QtCore.QSize(width, height))
        generator.setViewBox(QtCore.QRectF(0, 0, width, height))
        generator.setTitle(title or plot.title or "stripscan plot")
        generator.setDescription("Drawn by stripscan")
        painter = QtGui.QPainter()
        if not painter.begin(generator):
            raise ReportError(f"{path}: Qt could not start the SVG drawing")
        try:
            painter.fillRect(QtCore.QRectF(0, 0, width, height), QtGui.QColor("#ffffff"))
            margin = 3.0 / 25.4 * dpi
            draw_plot(painter, QtCore.QRectF(margin, margin, width - 2 * margin, height - 2 * margin), plot)
        finally:
            painter.end()
    return Path(path).expanduser().absolute()
