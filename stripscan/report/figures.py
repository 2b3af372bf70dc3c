"""The curve figures as reports print them: name, value, unit and a one-line definition.

One table serves the PDF pages and the CSV exports, so a figure has the
same name, unit and precision everywhere.  Definitions follow ISO 9236-1
(speed point at net density 1.00, average gradient between net densities
0.25 and 2.00, both adjustable) and common processor-QC practice
(mid-density step near 1.20 OD, density difference between the steps near
2.20 and 0.45 OD); the targets actually used are read from the figures'
own settings, never assumed.

This module is Qt-free.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable

from ..core.records import CurveFigures, StepDensity

__all__ = ["FigureRow", "figure_rows", "format_value", "step_flag", "NOT_REACHED", "FIGURE_COLUMNS"]

#: What a report prints where a figure could not be read from the curve.
NOT_REACHED = "not reached"

# Units as the archive writes them in its CSV headers, so both exports agree.
_OD = "OD"
_LOGE = "log10 rel. exposure"
_SLOPE = "OD per log10 exposure"


@dataclass(frozen=True)
class FigureRow:
    """One printed figure.

    Attributes
    ----------
    key : str
        Field of :class:`~stripscan.core.records.CurveFigures`.
    label : str
        Name as printed.
    value : float or None
        The figure; None when it could not be read.
    text : str
        ``value`` at the printed precision, or why it is missing.
    unit : str
        Unit (empty for plain numbers).
    definition : str
        One line saying what the figure is, with the targets used.
    """

    key: str
    label: str
    value: float | None
    text: str
    unit: str
    definition: str


def format_value(value: float | None, digits: int, *, missing: str = NOT_REACHED, signed: bool = False) -> str:
    """``value`` with ``digits`` decimals, or ``missing`` for None and non-finite values."""
    if value is None or not math.isfinite(float(value)):
        return missing
    return f"{float(value):+.{digits}f}" if signed else f"{float(value):.{digits}f}"


def _setting(figures: CurveFigures, name: str, default: float) -> float:
    value = figures.settings.get(name, default)
    return default if value is None else float(value)


def _dmax_text(figures: CurveFigures) -> str:
    if figures.dmax is not None:
        return format_value(figures.dmax, 2)
    if any("beyond the calibrated range" in note for note in figures.notes):
        return "above range"
    return NOT_REACHED


#: (key, label, unit, decimals, definition(figures) -> str); decimals follow the
#: terminal tables of ``stripscan analyze`` so a report and a screen agree.
_ROWS: tuple[tuple[str, str, str, int, Callable[[CurveFigures], str]], ...] = (
    ("base_fog", "Base+fog", _OD, 3,
     lambda f: "Density of unexposed processed film beside the steps."),
    ("dmax", "Dmax", _OD, 2,
     lambda f: "Highest step density read within the calibrated range"
               + ("; this strip is denser than that range." if f.dmax is None and f.notes else ".")),
    ("speed_log_exposure", "Speed point", _LOGE, 3,
     lambda f: f"Log E where the density reaches base+fog + {_setting(f, 'speed_net_density', 1.0):.2f} "
               "(net density, ISO 9236-1)."),
    ("average_gradient", "Average gradient", _SLOPE, 2,
     lambda f: f"Slope of the straight line between net densities {_setting(f, 'gradient_low', 0.25):.2f} "
               f"and {_setting(f, 'gradient_high', 2.0):.2f}."),
    ("gamma", "Gamma", _SLOPE, 2,
     lambda f: "Greatest slope of the curve"
               + (f", reached at log E {f.gamma_log_exposure:.2f}." if f.gamma_log_exposure is not None else ".")),
    ("latitude_log_exposure", "Latitude", _LOGE, 2,
     lambda f: f"Log E span between net densities {_setting(f, 'gradient_low', 0.25):.2f} "
               f"and {_setting(f, 'gradient_high', 2.0):.2f}."),
    ("mid_density", "Mid-density", _OD, 2,
     lambda f: f"Density of the step closest to {_setting(f, 'mid_density_target', 1.2):.2f} OD"
               + (f" (step {f.mid_density_step})." if f.mid_density_step is not None else ".")),
    ("density_difference", "Density difference", _OD, 2,
     lambda f: f"Step closest to {_setting(f, 'dd_high_target', 2.2):.2f} OD minus step closest to "
               f"{_setting(f, 'dd_low_target', 0.45):.2f} OD"
               + (f" (step {f.dd_high_step} - step {f.dd_low_step})." if f.dd_high_step is not None else ".")),
)

_OPTIONAL_ROWS: tuple[tuple[str, str, str, int, Callable[[CurveFigures], str]], ...] = (
    ("iso_speed", "ISO speed", "", 0,
     lambda f: "S = 1 mGy / K_S, K_S the air kerma giving net density 1.00 (ISO 9236-1)."),
    ("relative_speed_percent", "Relative speed", "%", 1,
     lambda f: "Speed against the reference film's speed point; + is faster."),
)

#: CSV column names of the figures export, in order, with their units.
FIGURE_COLUMNS: tuple[tuple[str, str], ...] = tuple(
    (key, unit) for key, _, unit, _, _ in (*_ROWS, *_OPTIONAL_ROWS)
) + (
    ("gradient_low_log_exposure", _LOGE),
    ("gradient_high_log_exposure", _LOGE),
    ("gamma_log_exposure", _LOGE),
    ("mid_density_step", ""),
    ("dd_high_step", ""),
    ("dd_low_step", ""),
)


def figure_rows(figures: CurveFigures, *, include_optional: bool | None = None) -> list[FigureRow]:
    """The printed rows of a strip's figures.

    Parameters
    ----------
    figures : CurveFigures
    include_optional : bool or None
        Print ISO speed and relative speed too.  None (default): only when
        the analysis computed them.
    """
    rows = []
    for key, label, unit, digits, define in _ROWS:
        value: Any = getattr(figures, key)
        text = _dmax_text(figures) if key == "dmax" else format_value(value, digits)
        rows.append(FigureRow(key, label, value, text, unit, define(figures)))
    for key, label, unit, digits, define in _OPTIONAL_ROWS:
        value = getattr(figures, key)
        if include_optional or (include_optional is None and value is not None):
            signed = key == "relative_speed_percent"
            rows.append(FigureRow(key, label, value, format_value(value, digits, signed=signed), unit,
                                  define(figures)))
    return rows


def step_flag(step: StepDensity, figures: CurveFigures | None = None) -> str:
    """Why a step is not on the curve, or which QC role it plays; empty when neither."""
    if step.excluded:
        return "excluded"
    if not math.isfinite(step.od):
        return "not read"
    if not step.in_range:
        return "not used"
    if figures is not None:
        roles = []
        if step.step == figures.mid_density_step:
            roles.append("MD")
        if step.step == figures.dd_high_step:
            roles.append("DD high")
        if step.step == figures.dd_low_step:
            roles.append("DD low")
        return ", ".join(roles)
    return ""
