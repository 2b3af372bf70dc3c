"""The marks of the characteristic curve: one shape, colour and wording per thing, for the window and every file.

The window's curve (:mod:`stripscan.gui.views.curve_view`), the strip reports and
the exported curve pictures (:func:`stripscan.render.curve_plot`) draw the
same things; they take their marks from here so that a speed point, say, is
the same black diamond everywhere and the legends use the same words.
Qt-free: plain data the drawing code turns into its own pens and symbols.

Shapes: ``circle``, ``square``, ``triangle``, ``diamond``, ``cross`` for
points; ``line`` for lines (with ``dash`` one of ``solid``, ``dash``,
``dot``, ``dashdot``).  The selected strip's own steps take the strip's
colour (the window marks strips apart by colour); every other mark has a
colour and a shape of its own, so that it reads in grey print too.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["CurveMark", "CURVE_MARKS", "GLYPHS"]


@dataclass(frozen=True)
class CurveMark:
    """How one thing on the curve is drawn and named.

    Attributes
    ----------
    words : str
        The legend's words.
    colour : str
        ``#RRGGBB``; for ``step`` the default strip colour.
    shape : str
        Point shape, or ``line``.
    filled : bool
        Points: filled (True) or outlined.
    dash : str
        Lines: ``solid``, ``dash``, ``dot`` or ``dashdot``.
    """

    words: str
    colour: str
    shape: str
    filled: bool = True
    dash: str = "solid"


#: The marks, by what they show.
CURVE_MARKS: dict[str, CurveMark] = {
    "step": CurveMark("step on the curve", "#0072B2", "circle"),
    # Why a step is not used (outside the calibrated range, too noisy, saturated) is its flag in the step table.
    "unused": CurveMark("step not used", "#6e6e6e", "circle", filled=False),
    "excluded": CurveMark("step excluded by you", "#B3261E", "cross"),
    "curve": CurveMark("curve through the usable steps", "#0072B2", "line"),
    "levels": CurveMark("density levels (drag to move)", "#6a1b9a", "line", dash="dash"),
    "density_points": CurveMark("density points", "#6a1b9a", "square", filled=False),
    "gradient": CurveMark("average gradient", "#6a1b9a", "line"),
    "speed": CurveMark("speed point", "#1a1a1a", "diamond"),
    "max_slope": CurveMark("maximum slope (gamma)", "#8a4b08", "triangle"),
    "tangent": CurveMark("slope at gamma", "#8a4b08", "line", dash="dashdot"),
    "base_fog": CurveMark("base+fog", "#6e6e6e", "line", dash="dot"),
}

#: A text glyph per shape, for legends written as text (filled, outlined).
GLYPHS: dict[str, tuple[str, str]] = {
    "circle": ("\u25cf", "\u25cb"), "square": ("\u25a0", "\u25a1"), "triangle": ("\u25b2", "\u25b3"),
    "diamond": ("\u25c6", "\u25c7"), "cross": ("\u00d7", "\u00d7"),
}
