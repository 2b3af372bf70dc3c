"""What the figure and step tables show, as plain text (no Qt).

The widgets only lay these rows out, so the clipboard, the CSV file and
the screen cannot disagree.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from typing import Callable

from ..core.records import CurveFigures, StepDensity, StripResult

__all__ = ["FigureRow", "figure_rows", "STEP_COLUMNS", "step_flag", "step_rows", "step_table_text"]


@dataclass(frozen=True)
class FigureRow:
    """One line of the figure table.

    Attributes
    ----------
    key : str
        Field of :class:`~stripscan.core.records.CurveFigures`.
    label : str
    value : float or None
        The core's number, unrounded.
    text : str
        ``value`` as shown (with the step number where one belongs).
    unit : str
    definition : str
        One line, for the tooltip.
    """

    key: str
    label: str
    value: float | None
    text: str
    unit: str
    definition: str


def _fmt(value: float | None, digits: int = 3) -> str:
    if value is None or not math.isfinite(value):
        return "—"
    return f"{value:.{digits}f}"


# (key, label, unit, definition, digits); labels with {low}/{high} follow the density levels.
_FIGURES: tuple[tuple[str, str, str, str, int], ...] = (
    ("base_fog", "Base+fog", "OD", "Density of processed but unexposed film: the film base plus chemical fog.", 3),
    ("dmax", "Dmax", "OD", "Highest density on the strip that lies within the calibrated range.", 3),
    (
        "speed_log_exposure", "Speed point", "log E",
        "Log relative exposure at which the density reaches net 1.00 above base+fog (ISO 9236-1).", 3,
    ),
    (
        "average_gradient", "Average gradient (net {low}–{high})", "",
        "Slope of the straight line joining the curve at the two density levels: "
        "(D2 − D1) / (log E2 − log E1) (ISO 9236-1 uses net 0.25 and 2.00).", 3,
    ),
    (
        "latitude_log_exposure", "Latitude (net {low}–{high})", "log E",
        "Span of log exposure between the two density levels: the range of exposures the film renders usefully.", 3,
    ),
    ("gradient_low_log_exposure", "Log E at net {low}", "log E", "Where the curve reaches the lower density level.", 3),
    ("gradient_high_log_exposure", "Log E at net {high}", "log E", "Where the curve reaches the upper density level.", 3),
    ("gamma", "Gamma (maximum slope)", "", "Greatest slope dD/d(log E) of the characteristic curve.", 3),
    ("gamma_log_exposure", "Log E of maximum slope", "log E", "Where the curve is steepest.", 3),
    (
        "mid_density", "Mid-density", "OD",
        "Density of the step closest to the mid-density target (1.20 OD by common practice), "
        "followed daily in processor QC.", 3,
    ),
    (
        "density_difference", "Density difference", "OD",
        "Density of the step closest to 2.20 OD minus that of the step closest to 0.45 OD "
        "(common practice): a contrast index for processor QC.", 3,
    ),
    (
        "iso_speed", "ISO speed S", "",
        "S = 1 mGy / K, K the air kerma giving net density 1.00 (ISO 9236-1); needs the air kerma per step.", 1,
    ),
    (
        "relative_speed_percent", "Relative speed", "%",
        "Speed compared with a reference speed point, per cent faster (+) or slower (−).", 1,
    ),
)


def figure_rows(figures: CurveFigures | None, levels: tuple[float, float]) -> list[FigureRow]:
    """Every figure of a strip, in display order (values None when unknown)."""
    low, high = (f"{levels[0]:.2f}", f"{levels[1]:.2f}")
    rows = []
    for key, label, unit, definition, digits in _FIGURES:
        value = getattr(figures, key) if figures is not None else None
        text = _fmt(value, digits)
        if figures is not None and value is not None:
            if key == "mid_density" and figures.mid_density_step:
                text += f"  (step {figures.mid_density_step})"
            elif key == "density_difference" and figures.dd_high_step and figures.dd_low_step:
                text += f"  (steps {figures.dd_high_step} − {figures.dd_low_step})"
        rows.append(FigureRow(key, label.format(low=low, high=high), value, text, unit, definition))
    return rows


STEP_COLUMNS = ("Step", "Log E", "OD", "Uncertainty (OD)", "Flag")


def step_flag(step: StepDensity) -> str:
    """Why a step is not on the curve, or "used"."""
    if step.excluded:
        return "excluded"
    if not step.in_range:
        return "outside calibrated range"
    return "used"


_COLUMN_TEXT: tuple[Callable[[StepDensity], str], ...] = (
    lambda s: str(s.step),
    lambda s: _fmt(s.log_exposure, 3),
    lambda s: _fmt(s.od, 3),
    lambda s: _fmt(s.od_sd, 3),
    step_flag,
)


def step_rows(result: StripResult | None) -> list[list[str]]:
    """The step table's cells, step 1 first."""
    if result is None:
        return []
    return [[cell(s) for cell in _COLUMN_TEXT] for s in result.steps]


def step_table_text(result: StripResult | None, *, delimiter: str = "\t") -> str:
    """The step table with its header, tab-separated (clipboard) or as CSV (``delimiter=","``)."""
    out = io.StringIO()
    writer = csv.writer(out, delimiter=delimiter, lineterminator="\n")
    writer.writerow(STEP_COLUMNS)
    writer.writerows(step_rows(result))
    return out.getvalue()
