"""The one figure table: each curve figure's name, unit, decimals and one-line definition.

Every place that shows a figure takes these from here: the window's figure
table, the command line's tables, the strip and comparison reports, the
lot comparison (its table, CSV and JSON labels) and the archive's CSV
headers, so a figure has the same name, unit and precision everywhere.
Only the style of the units differs: the window and the comparison table
show short ones (``OD``, ``log E``), the strip reports and CSV headers the
long ones (``log10 rel. exposure``, ``OD per log10 exposure``).  Stored and
exported numbers keep all their digits; only printed ones are rounded.

Definitions follow ISO 9236-1 (speed point at net density 1.00, average
gradient between net densities 0.25 and 2.00, both adjustable) and common
processor-QC practice (mid-density step near 1.20 OD, density difference
between the steps near 2.20 and 0.45 OD); the targets they state are read
from the figures' own settings, never assumed.

This module is Qt-free.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable, Literal, Mapping, Sequence

from stripscan.core.figure_settings import FigureSettings
from stripscan.core.records import CurveFigures, StepDensity, StripResult

__all__ = [
    "FigureRow", "figure_rows", "format_value", "step_flag", "STEP_FLAG_WORDS", "UnitStyle",
    "figure_name", "figure_unit", "figure_digits",
    "NOISE_ONLY_NOTE", "read_in_direct_mode", "uncertainty_title",
    "FIGURE_KEYS", "FIGURE_COLUMNS", "NOT_REACHED", "NOT_READ", "ABOVE_RANGE", "NO_VALUE",
]

#: What a table shows where a figure could not be read from the curve.
NOT_REACHED = "not reached"
#: What it shows for a base+fog that was not read (no unexposed film beside the steps, or out of range).
NOT_READ = "not read"
#: What it shows for a Dmax denser than the calibrated range.
ABOVE_RANGE = "above range"
#: What it shows where there is nothing to read: no strip, or a figure not asked for.
NO_VALUE = "—"

#: ``short`` for the window, ``long`` (the archive's CSV headers) for reports and exports.
UnitStyle = Literal["short", "long"]

# (short, long) unit of each kind of quantity.
_UNITS: dict[str, tuple[str, str]] = {
    "density": ("OD", "OD"),
    "log_exposure": ("log E", "log10 rel. exposure"),
    "slope": ("OD/log E", "OD per log10 exposure"),
    "number": ("", ""),
    "percent": ("%", "%"),
}

# FigureSettings' defaults are ISO 9236-1's levels and the common QC targets.
_DEFAULTS = FigureSettings()


def _target(settings: Mapping[str, Any], name: str) -> float:
    """A target of the figures (net density or OD), from ``settings`` or the default."""
    value = settings.get(name)
    return float(getattr(_DEFAULTS, name)) if value is None else float(value)


def _steps(figures: CurveFigures | None, key: str) -> str:
    """The steps a QC figure was read from ("step 11", "step 13 − step 10"), or ""."""
    if figures is None:
        return ""
    if key == "mid_density" and figures.mid_density_step is not None:
        return f"step {figures.mid_density_step}"
    if key == "density_difference" and figures.dd_high_step is not None and figures.dd_low_step is not None:
        return f"step {figures.dd_high_step} \u2212 step {figures.dd_low_step}"
    return ""


def _in_brackets(text: str) -> str:
    return f" ({text})" if text else ""


def _above_range(figures: CurveFigures) -> bool:
    # The core leaves Dmax None and says so in a note when the strip is denser than the calibration.
    return figures.dmax is None and any("beyond the calibrated range" in note for note in figures.notes)


def _iso_levels(settings: Mapping[str, Any]) -> str:
    low, high = _target(settings, "gradient_low"), _target(settings, "gradient_high")
    if (low, high) == (_DEFAULTS.gradient_low, _DEFAULTS.gradient_high):
        return " (ISO 9236-1)"
    return f" (ISO 9236-1 uses {_DEFAULTS.gradient_low:.2f} and {_DEFAULTS.gradient_high:.2f})"


# A definition is made from the targets used and, when there is a strip, its figures.
_Define = Callable[[Mapping[str, Any], "CurveFigures | None"], str]


@dataclass(frozen=True)
class _Figure:
    key: str
    name: str  # as in running text ("base+fog", "Dmax"); {low}/{high}: the net density levels
    quantity: str  # key of _UNITS
    digits: int
    define: _Define
    signed: bool = False
    printed: bool = True  # in the reports' figure table; else detail that only the window lists
    optional: bool = False  # computed only when asked for (air kerma per step, a reference speed point)
    qualifier: str = ""  # what a table without a definition column adds to the name; {speed}: its net level


def _net(name: str) -> Callable[[Mapping[str, Any]], str]:
    return lambda s: f"{_target(s, name):.2f}"


_LOW, _HIGH, _SPEED = _net("gradient_low"), _net("gradient_high"), _net("speed_net_density")

# Display order.  Detail rows sit beside the figure they belong to; the CSV
# puts them after the printed figures (see FIGURE_COLUMNS).  Decimals are
# those the strip report has always printed, which users know: mid-density
# and density difference to 0.01 OD as a densitometer reads them (common
# practice), base+fog and Dmax to 0.001 OD (base+fog is judged on rises of a
# few hundredths), gradients and gamma to 0.01, the speed point to 0.001
# log E (0.01 log E is 2 % in speed) and spans to 0.01 log E.  Processor QC
# prints its three quantities to 0.001 OD on purpose: its verdicts turn on
# limits such as ±0.15, and a deviation of 0.152 must not read as 0.15.
# A printed definition fits one line of the report's definition column (two
# at most), so the page keeps its room for the curve and the warnings.
_FIGURES: tuple[_Figure, ...] = (
    _Figure("base_fog", "base+fog", "density", 3,
            lambda s, f: "Density of processed but unexposed film beside the steps: base plus fog."),
    _Figure("dmax", "Dmax", "density", 3,
            lambda s, f: "Highest step density read within the calibrated range"
                         + ("; this strip is denser than that range." if f is not None and _above_range(f) else ".")),
    _Figure("speed_log_exposure", "speed point", "log_exposure", 3,
            lambda s, f: f"Log E where the density reaches base+fog + {_SPEED(s)} (ISO 9236-1).",
            qualifier="(net {speed})"),
    _Figure("average_gradient", "average gradient", "slope", 2,
            lambda s, f: f"Slope of the line joining net densities {_LOW(s)} and {_HIGH(s)}{_iso_levels(s)}."),
    _Figure("gradient_low_log_exposure", "log E at net {low}", "log_exposure", 3,
            lambda s, f: f"Log E where the curve reaches net density {_LOW(s)}, "
                         "the lower end of the average gradient.", printed=False),
    _Figure("gradient_high_log_exposure", "log E at net {high}", "log_exposure", 3,
            lambda s, f: f"Log E where the curve reaches net density {_HIGH(s)}, "
                         "the upper end of the average gradient.", printed=False),
    _Figure("gamma", "gamma", "slope", 2,
            lambda s, f: "Greatest slope dD/d(log E) of the curve"
                         + (f", reached at log E {f.gamma_log_exposure:.2f}."
                            if f is not None and f.gamma_log_exposure is not None else "."),
            qualifier="(maximum slope)"),
    _Figure("gamma_log_exposure", "log E of maximum slope", "log_exposure", 2,
            lambda s, f: "Log E where the curve is steepest (gamma).", printed=False),
    _Figure("latitude_log_exposure", "latitude", "log_exposure", 2,
            lambda s, f: f"Log E span between net densities {_LOW(s)} and {_HIGH(s)}."),
    _Figure("mid_density", "mid-density", "density", 2,
            lambda s, f: f"Density of the step closest to {_target(s, 'mid_density_target'):.2f} OD"
                         + _in_brackets(_steps(f, "mid_density"))
                         + ", followed daily in QC."),
    _Figure("density_difference", "density difference", "density", 2,
            lambda s, f: f"Step closest to {_target(s, 'dd_high_target'):.2f} OD minus step closest to "
                         f"{_target(s, 'dd_low_target'):.2f} OD"
                         + _in_brackets(_steps(f, "density_difference"))
                         + ": a contrast index for processor QC."),
    _Figure("iso_speed", "ISO speed", "number", 0,
            lambda s, f: f"S = 1 mGy / K_S, K_S the air kerma giving net density {_SPEED(s)} (ISO 9236-1).",
            optional=True),
    _Figure("relative_speed_percent", "relative speed", "percent", 1,
            lambda s, f: "Speed against the reference film's speed point, in per cent; + is faster.",
            signed=True, optional=True, qualifier="(+ = faster)"),
)
_BY_KEY = {figure.key: figure for figure in _FIGURES}


def _unit(figure: _Figure, units: UnitStyle) -> str:
    short, long = _UNITS[figure.quantity]
    return short if units == "short" else long


def figure_name(key: str, *, qualified: bool = False, settings: Mapping[str, Any] | None = None) -> str:
    """The figure's name as running text writes it (``base+fog``, ``speed point``).

    Parameters
    ----------
    key : str
        A key of :data:`FIGURE_KEYS`.
    qualified : bool
        Add what a table without a definition column needs to know
        (``speed point (net 1.00)``, ``gamma (maximum slope)``,
        ``relative speed (+ = faster)``), as the lot comparison shows them.
    settings : mapping, optional
        The net density levels named (default: ISO 9236-1's).

    Raises
    ------
    KeyError
        For a key that is no figure.
    """
    figure, targets = _BY_KEY[key], settings or {}
    name = figure.name.format(low=_LOW(targets), high=_HIGH(targets))
    if qualified and figure.qualifier:
        name += " " + figure.qualifier.format(speed=_SPEED(targets))
    return name


def _label(key: str, settings: Mapping[str, Any]) -> str:
    """The name as the first column of a figure table shows it: capitalised ("Base+fog", "Dmax")."""
    name = figure_name(key, settings=settings)
    return name[:1].upper() + name[1:]


def figure_unit(key: str, units: UnitStyle = "long") -> str:
    """The figure's unit in the style asked for (see :data:`UnitStyle`); empty for plain numbers."""
    return _unit(_BY_KEY[key], units)


def figure_digits(key: str) -> int:
    """Decimals a printed value of the figure shows (stored and exported values keep them all)."""
    return _BY_KEY[key].digits


#: Every figure, in display order.
FIGURE_KEYS: tuple[str, ...] = tuple(_BY_KEY)

#: CSV columns of the figures export, in order, with their (long) units: the
#: printed figures first, then the detail, then the steps the QC figures use.
FIGURE_COLUMNS: tuple[tuple[str, str], ...] = tuple(
    (f.key, _unit(f, "long")) for f in sorted(_FIGURES, key=lambda f: not f.printed)  # sorted() is stable
) + (("mid_density_step", ""), ("dd_high_step", ""), ("dd_low_step", ""))


@dataclass(frozen=True)
class FigureRow:
    """One figure as a table shows it.

    Attributes
    ----------
    key : str
        Field of :class:`~stripscan.core.records.CurveFigures`.
    label : str
        Name as shown.
    value : float or None
        The core's number, unrounded; None when there is none.
    text : str
        ``value`` at the shown precision, or why it is missing.
    unit : str
        Unit in the style asked for (empty for plain numbers).
    definition : str
        One line saying what the figure is, with the targets used.
    steps : str
        The steps a QC figure was read from (``step 11``,
        ``step 13 − step 10``); empty for the other figures.
    """

    key: str
    label: str
    value: float | None
    text: str
    unit: str
    definition: str
    steps: str = ""


def format_value(value: float | None, digits: int, *, missing: str = NOT_REACHED, signed: bool = False) -> str:
    """``value`` with ``digits`` decimals, or ``missing`` for None and non-finite values.

    Parameters
    ----------
    value : float or None
    digits : int
        Decimals shown.
    missing : str
        Text for a missing value.
    signed : bool
        Show ``+`` before positive values.
    """
    if value is None or not math.isfinite(float(value)):
        return missing
    return f"{float(value):+.{digits}f}" if signed else f"{float(value):.{digits}f}"


def _text(figure: _Figure, figures: CurveFigures | None) -> str:
    if figures is None:
        return NO_VALUE
    value = getattr(figures, figure.key)
    if value is None and figure.optional:
        return NO_VALUE  # not asked for, or not computable without its speed point (the notes say which)
    if figure.key == "dmax" and _above_range(figures):
        return ABOVE_RANGE
    missing = NOT_READ if figure.key == "base_fog" else NOT_REACHED
    return format_value(value, figure.digits, missing=missing, signed=figure.signed)


def figure_rows(figures: CurveFigures | None, *, units: UnitStyle = "long",
                settings: Mapping[str, Any] | None = None, keys: Sequence[str] | None = None) -> list[FigureRow]:
    """The rows of a strip's figures.

    Parameters
    ----------
    figures : CurveFigures or None
        None: no strip; every row shows :data:`NO_VALUE`.
    units : {"long", "short"}
        Units as the archive writes them (reports, CSV) or as the window shows them.
    settings : mapping, optional
        Targets to state when ``figures`` is None (e.g. the window's
        density levels); a strip's own settings are used otherwise.  Targets
        not given are :class:`~stripscan.core.curve.FigureSettings`' defaults.
    keys : sequence of str, optional
        The figures wanted, in the order given.  Default: the reports'
        figures, with ISO speed and relative speed only when computed.

    Raises
    ------
    KeyError
        For a key that is no figure.
    """
    targets: Mapping[str, Any] = figures.settings if figures is not None else (settings or {})
    if keys is None:
        chosen = [f for f in _FIGURES if f.printed and not (
            f.optional and (figures is None or getattr(figures, f.key) is None))]
    else:
        chosen = [_BY_KEY[key] for key in keys]
    return [
        FigureRow(f.key, _label(f.key, targets), getattr(figures, f.key) if figures is not None else None,
                  _text(f, figures), _unit(f, units), f.define(targets, figures), _steps(figures, f.key))
        for f in chosen
    ]


#: The short reason a table shows after "not used:", per ``StepDensity.flag``.
STEP_FLAG_WORDS = {
    "outside_range": "outside range",
    "too_noisy": "too noisy",
    "saturated": "saturated",
    "dark_floor": "at the dark floor",
    "stray_light": "stray light",
    "flare_plateau": "flare plateau",
}


def step_flag(step: StepDensity, figures: CurveFigures | None = None) -> str:
    """Why a step is not on the curve, or which QC role it plays; empty when neither.

    A step the reading kept off the curve says ``not used:`` and the reason
    (``StepDensity.flag``: outside the calibrated range, too noisy,
    saturated, at the dark floor, stray light, flare plateau); the
    analysis' warnings say it in full.  The roles ``MD``, ``DD high`` and
    ``DD low`` need ``figures``.
    """
    if step.excluded:
        return "excluded"
    if not math.isfinite(step.od):
        return "not read"
    if not step.in_range:
        reason = STEP_FLAG_WORDS.get(step.flag, "")
        return f"not used: {reason}" if reason else "not used"
    if figures is None:
        return ""
    roles = []
    if step.step == figures.mid_density_step:
        roles.append("MD")
    if step.step == figures.dd_high_step:
        roles.append("DD high")
    if step.step == figures.dd_low_step:
        roles.append("DD low")
    return ", ".join(roles)


#: What a step's ± sd leaves out when the strip was read without a calibration (direct mode), said
#: beside the uncertainty column of every step table (the window's, the command line's, the reports').
NOISE_ONLY_NOTE = (
    "noise only: read without a calibration (direct mode), the ± sd is the reading noise alone and leaves "
    "out the error of having no calibration (the scanner's flare and response, larger on denser steps)"
)


def read_in_direct_mode(strip: StripResult | None) -> bool:
    """Whether the strip was read without a calibration (its warnings carry the UNCALIBRATED one)."""
    from stripscan.core.reading import UNCALIBRATED

    return strip is not None and UNCALIBRATED in strip.warnings


def uncertainty_title(title: str, strip: StripResult | None) -> str:
    """The uncertainty column's title for ``strip``: ``title``, plus ", noise only" in direct mode."""
    return f"{title}, noise only" if read_in_direct_mode(strip) else title
