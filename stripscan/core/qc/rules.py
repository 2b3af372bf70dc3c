"""Daily processor quality control and QC-film crossover arithmetic.

Each day one sensitometric strip is processed and three numbers are tracked:

* **base+fog** (OD) read from unexposed film beside the steps;
* **mid-density** (MD, OD): the density of the step closest to 1.20 gross;
* **density difference** (DD, OD): the step closest to 2.20 minus the step
  closest to 0.45.

The steps are chosen once, at baseline (:func:`choose_qc_steps`), and then
kept the same every day.  The operating levels are the mean of the first
five days (:func:`establish_levels`).  21 CFR 900.12(e)(1) sets the control
limits: MD and DD within ±0.15 of their operating levels, base+fog no more
than 0.03 above its level.  Many programmes add a ±0.10 warning tier for MD
and DD.  All limits are site settings (:class:`QCLimits`).

Boundaries are decided in decimal terms: deviations are rounded to
``1e-6`` OD and then compared with a tolerance of ``1e-9``.  Without this,
1.35 - 1.20 (0.15000000000000013 in binary) would break a ±0.15 limit.
The run and drift rules also ignore deviations and changes smaller than
:data:`TREND_DEAD_BAND` (half a densitometer's 0.01 OD reading step).

A baseline starts again after each :class:`QCEvent` (new chemistry, service,
new film type...).  A box of new QC film is brought in with a
:func:`crossover`, which moves the operating levels by the mean difference
between strips of old and new film processed together.

Everything here is pure: plain frozen records in, plain frozen records out,
each with ``to_dict`` / ``from_dict`` for JSON (dates as ISO strings).
"""

from __future__ import annotations

import dataclasses
import datetime
import math
import numbers
import types
import typing
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any, Self

import numpy as np

from stripscan import CAUTION

from stripscan.core.qc.names import (
    BASE_FOG_RULES,
    EVENT_KINDS,
    QUANTITIES,
    SOURCES,
    STEP_RULES,
    TREND_RULE_NAMES,
    VERDICTS,
)

__all__ = [
    "QUANTITIES",
    "TREND_DEAD_BAND",
    "VERDICTS",
    "EVENT_KINDS",
    "ADVICE",
    "WARNING_CAUSES",
    "QCLimits",
    "QCValues",
    "QCEntry",
    "QCSteps",
    "OperatingLevels",
    "QCEvent",
    "DayVerdict",
    "TrendRules",
    "TrendFinding",
    "QCDay",
    "LevelPeriod",
    "ProcessorStatus",
    "QCLog",
    "CrossoverResult",
    "choose_qc_steps",
    "qc_values_from_steps",
    "establish_levels",
    "evaluate_day",
    "apply_trend_rules",
    "crossover",
]


#: What is usually done next, by verdict (common practice).  A warning's
#: advice starts with what raised it (:data:`WARNING_CAUSES`) and ends with
#: ``"warning"`` when only the warning tier did, ``"trend"`` when a trend
#: rule did.
ADVICE = {
    "ok": "Within control limits: the processor may be used.",
    "warning": "Repeat the strip if in doubt and watch the next strips.",
    "trend": (
        "The processor may be shifting: look for the cause (temperature, replenishment, chemistry) "
        "before a control limit is reached; repeat the strip if in doubt."
    ),
    "action": (
        "Outside a control limit: repeat the strip; if confirmed, stop clinical "
        "processing and correct the processor before patient films are processed."
    ),
}

#: Why a strip within the control limits is a warning, in plain words: the
#: warning tier on the strip itself (``"tier"``) or a trend rule, sized by
#: the site's :class:`TrendRules`.
WARNING_CAUSES = {
    "tier": "the warning tier (this strip is past it)",
    "run": "the run rule ({run_length} or more strips in a row on one side of the operating level)",
    "drift": "the drift rule ({drift_length} or more strips in a row, each moving the same way)",
    "two_warnings": (
        "the repeated-warnings rule ({warning_count} of {warning_window} consecutive strips past the warning tier)"
    ),
}

_LABELS = {
    "base_fog": "base+fog",
    "mid_density": "mid-density",
    "density_difference": "density difference",
}
_EVENT_LABELS = {
    "new_chemistry": "new chemistry",
    "service": "processor service",
    "new_film_type": "new film type",
    "new_sensitometer": "new sensitometer",
    "crossover": "crossover",
    "other": "change",
}

# Densities mean something to 0.001 OD at best; rounding to 1e-6 removes
# binary noise without moving any decimal boundary.
_DIGITS = 6
_TOL = 1e-9

#: Dead band of the run and drift rules, OD.  Densitometers read to 0.01 OD
#: (common practice), so a deviation, or a change from one strip to the
#: next, smaller than half of that is not a side of the level or a step in
#: any direction: such a strip is on its level and breaks a run; such a
#: change is flat and breaks a drift.  Without it a deviation of -0.001 OD
#: (a level that is the mean of five strips rarely falls on a reading)
#: counts as "below" and keeps a run alive after the processor is repaired.
TREND_DEAD_BAND = 0.005


# --------------------------------------------------------------------------
# JSON support shared by every record


def _encode(value: Any) -> Any:
    if isinstance(value, _Record):
        return value.to_dict()
    if isinstance(value, datetime.date):
        return value.isoformat()
    if isinstance(value, (tuple, list)):
        return [_encode(item) for item in value]
    return value


def _decode(hint: Any, value: Any) -> Any:
    if value is None:
        return None
    origin, args = typing.get_origin(hint), typing.get_args(hint)
    if origin in (typing.Union, types.UnionType):
        (inner,) = [arg for arg in args if arg is not type(None)]
        return _decode(inner, value)
    if origin is tuple:
        if len(args) == 2 and args[1] is Ellipsis:
            return tuple(_decode(args[0], item) for item in value)
        return tuple(_decode(arg, item) for arg, item in zip(args, value, strict=True))
    if hint is datetime.date:
        return datetime.date.fromisoformat(value)
    if isinstance(hint, type) and issubclass(hint, _Record):
        return hint.from_dict(value)
    if hint is float:
        return float(value)
    return value


class _Record:
    """Gives a frozen dataclass JSON-ready ``to_dict`` and ``from_dict``."""

    def to_dict(self) -> dict[str, Any]:
        """Return the record as JSON-ready data (dates as ISO strings)."""
        return {f.name: _encode(getattr(self, f.name)) for f in dataclasses.fields(self)}  # type: ignore[arg-type]

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Self:
        """Rebuild the record from :meth:`to_dict` output."""
        hints = typing.get_type_hints(cls)
        names = {f.name for f in dataclasses.fields(cls)}  # type: ignore[arg-type]
        unknown = sorted(set(data) - names)
        if unknown:
            raise ValueError(f"{cls.__name__}: unknown field(s) {', '.join(unknown)}")
        try:
            return cls(**{key: _decode(hints[key], value) for key, value in data.items()})
        except TypeError as exc:
            raise ValueError(f"{cls.__name__}: {exc}") from None


# --------------------------------------------------------------------------
# Small checks and arithmetic


def _check_choice(what: str, value: Any, allowed: Sequence[str]) -> None:
    if value not in allowed:
        raise ValueError(f"unknown {what} {value!r}; expected one of: {', '.join(allowed)}")


def _check_date(what: str, value: Any) -> None:
    # A datetime is a date subclass but will not compare with plain dates.
    if isinstance(value, datetime.datetime) or not isinstance(value, datetime.date):
        raise ValueError(f"{what} must be a datetime.date, got {value!r}")


def _as_finite(what: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        raise ValueError(f"{what} must be a finite number, got {value!r}")
    return float(value)


def _set(record: Any, name: str, value: Any) -> None:
    object.__setattr__(record, name, value)


def _beyond(size: float, limit: float) -> bool:
    """True when ``size`` is strictly past ``limit`` in decimal terms."""
    return size > limit + _TOL


def _side(value: float) -> int:
    """+1 or -1 for a deviation or change of at least :data:`TREND_DEAD_BAND`, 0 for a smaller one."""
    edge = TREND_DEAD_BAND - _TOL
    return 1 if value >= edge else -1 if value <= -edge else 0


def _worse(a: str, b: str) -> str:
    return a if VERDICTS.index(a) >= VERDICTS.index(b) else b


def _fmt_limit(value: float) -> str:
    # Limits are usually set to 0.01 OD; show "0.10", not "0.1", but keep
    # finer site settings such as 0.125 whole.
    text = f"{value:.2f}"
    return text if float(text) == value else f"{value:g}"


# --------------------------------------------------------------------------
# Records


@dataclass(frozen=True)
class QCLimits(_Record):
    """Control limits and warning tiers of one site, OD.

    Attributes
    ----------
    md_dd_action : float
        Control limit for mid-density and density difference, ± OD around
        the operating level (21 CFR 900.12(e)(1): 0.15).
    md_dd_warning : float or None
        Warning tier for mid-density and density difference, ± OD (many
        programmes: 0.10); None for no warning tier.
    base_fog_action : float
        How far base+fog may rise above its operating level, OD
        (21 CFR 900.12(e)(1): 0.03).  A fall is never a fault.
    base_fog_warning : float or None
        Optional warning tier for a base+fog rise, OD.
    """

    md_dd_action: float = 0.15
    md_dd_warning: float | None = 0.10
    base_fog_action: float = 0.03
    base_fog_warning: float | None = None

    def __post_init__(self) -> None:
        for prefix in ("md_dd", "base_fog"):
            action = _as_finite(f"{prefix}_action", getattr(self, f"{prefix}_action"))
            if action <= 0:
                raise ValueError(f"{prefix}_action must be positive, got {action}")
            _set(self, f"{prefix}_action", action)
            warning = getattr(self, f"{prefix}_warning")
            if warning is not None:
                warning = _as_finite(f"{prefix}_warning", warning)
                if not 0 < warning < action:
                    raise ValueError(
                        f"{prefix}_warning ({warning}) must be positive and below "
                        f"{prefix}_action ({action})"
                    )
                _set(self, f"{prefix}_warning", warning)


@dataclass(frozen=True)
class QCValues(_Record):
    """The three tracked numbers of one strip, or deviations of them, OD."""

    base_fog: float
    mid_density: float
    density_difference: float

    def __post_init__(self) -> None:
        for name in QUANTITIES:
            _set(self, name, _as_finite(name, getattr(self, name)))


def _combine(func: Callable[..., float], *records: Any) -> QCValues:
    """Apply ``func`` quantity by quantity across records with the three fields."""
    return QCValues(**{q: func(*(getattr(r, q) for r in records)) for q in QUANTITIES})


def _mean_values(values: Sequence[QCValues]) -> QCValues:
    return QCValues(
        **{q: round(float(np.mean([getattr(v, q) for v in values])), _DIGITS) for q in QUANTITIES}
    )


def _deviations(values: QCValues, levels: OperatingLevels) -> QCValues:
    return _combine(lambda value, level: round(value - level, _DIGITS), values, levels)


@dataclass(frozen=True)
class QCEntry(_Record):
    """One day's QC strip.

    Attributes
    ----------
    date : datetime.date
        Day the strip was processed.
    values : QCValues
        Base+fog, mid-density and density difference, OD.
    source : str
        ``"scan"`` (read by this program) or ``"manual"`` (typed in).
    note : str
        Free remark (e.g. "repeat strip after fresh replenisher").
    action : str
        Corrective action taken that day, if any.
    """

    date: datetime.date
    values: QCValues
    source: str
    note: str = ""
    action: str = ""

    def __post_init__(self) -> None:
        _check_date("QC entry date", self.date)
        _check_choice("entry source", self.source, SOURCES)
        if not isinstance(self.values, QCValues):
            raise ValueError(f"QC entry values must be QCValues, got {self.values!r}")


@dataclass(frozen=True)
class QCSteps(_Record):
    """The 1-based step numbers used for processor QC, kept from baseline on."""

    mid_step: int
    dd_high_step: int
    dd_low_step: int

    def __post_init__(self) -> None:
        for name in ("mid_step", "dd_high_step", "dd_low_step"):
            step = getattr(self, name)
            if isinstance(step, bool) or not isinstance(step, numbers.Integral) or step < 1:
                raise ValueError(f"{name} must be a step number of 1 or more, got {step!r}")
            _set(self, name, int(step))
        if self.dd_high_step <= self.dd_low_step:
            raise ValueError(
                f"density difference high step ({self.dd_high_step}) must be more exposed "
                f"than the low step ({self.dd_low_step})"
            )


@dataclass(frozen=True)
class OperatingLevels(_Record):
    """Operating levels against which each day is judged, OD.

    Attributes
    ----------
    base_fog, mid_density, density_difference : float
        The levels, OD.
    established : datetime.date
        Day the levels took effect (last baseline day, or crossover day).
    n_days : int
        Strips averaged to set the levels.
    reason : str
        Why the levels were set (initial baseline, after service, crossover...).
    steps : QCSteps or None
        The steps used for mid-density and density difference, when known.
    """

    base_fog: float
    mid_density: float
    density_difference: float
    established: datetime.date
    n_days: int
    reason: str
    steps: QCSteps | None = None

    def __post_init__(self) -> None:
        for name in QUANTITIES:
            _set(self, name, _as_finite(f"operating level {name}", getattr(self, name)))
        _check_date("established", self.established)
        if isinstance(self.n_days, bool) or not isinstance(self.n_days, int) or self.n_days < 1:
            raise ValueError(f"n_days must be a whole number of 1 or more, got {self.n_days!r}")

    @property
    def values(self) -> QCValues:
        """The three levels as :class:`QCValues`."""
        return _combine(float, self)


@dataclass(frozen=True)
class QCEvent(_Record):
    """A change to the processor or its QC that restarts the baseline.

    An event dated D applies from the strip of day D on.  A ``levels`` record
    (typically from :func:`crossover`) sets the new operating levels at once
    instead of waiting for a new baseline.

    Attributes
    ----------
    date : datetime.date
        Day of the change.
    kind : str
        One of ``EVENT_KINDS``.
    note : str
        Free remark.
    levels : OperatingLevels or None
        Levels to use from this day on; None to establish them afresh.
    """

    date: datetime.date
    kind: str
    note: str = ""
    levels: OperatingLevels | None = None

    def __post_init__(self) -> None:
        _check_date("event date", self.date)
        _check_choice("event kind", self.kind, EVENT_KINDS)

    @property
    def label(self) -> str:
        """Plain words for the event, e.g. ``"processor service on 2025-03-10"``."""
        return f"{_EVENT_LABELS[self.kind]} on {self.date.isoformat()}"


@dataclass(frozen=True)
class DayVerdict(_Record):
    """How one day's strip compares with the operating levels.

    Attributes
    ----------
    deviations : QCValues
        Value minus operating level for each quantity, OD, rounded to 1e-6.
    verdict : str
        ``"ok"``, ``"warning"`` (past a warning tier) or ``"action"`` (past a
        control limit).
    reasons : tuple of str
        One plain sentence per quantity past a tier.
    rules : tuple of str
        ``"rule:quantity"`` for each trend rule that fired on this day's
        strip.  A day judged within its period (:attr:`QCLog.days`) carries
        them, and its ``verdict`` is then at least ``"warning"``: the one
        verdict the status, the list, the chart and the reports show.
        :func:`evaluate_day` alone judges the strip only and leaves it empty.
    """

    deviations: QCValues
    verdict: str
    reasons: tuple[str, ...] = ()
    rules: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        _check_choice("verdict", self.verdict, VERDICTS)
        _set(self, "reasons", tuple(self.reasons))
        _set(self, "rules", tuple(self.rules))


@dataclass(frozen=True)
class TrendRules(_Record):
    """Which trend rules to apply, and their sizes.

    Rules (each within one period of constant operating levels; for base+fog
    only rises are reported, since a fall is never a fault):

    * ``run``: ``run_length`` strips in a row on the same side of the
      operating level (a strip on its level, less than
      :data:`TREND_DEAD_BAND` off, breaks the run);
    * ``drift``: ``drift_length`` strips in a row, each higher (or each
      lower) than the one before (a flat step, a change of less than
      :data:`TREND_DEAD_BAND`, breaks the drift);
    * ``two_warnings``: ``warning_count`` of ``warning_window`` consecutive
      strips past the warning tier on the same side.

    Attributes
    ----------
    rules : tuple of str
        Rules to apply, from ``("run", "drift", "two_warnings")``.
    run_length : int
        Strips needed for a run (7 by default, common in control charting).
    drift_length : int
        Strips needed for a drift (5 by default).
    warning_count, warning_window : int
        ``two_warnings`` fires on ``warning_count`` of ``warning_window``
        strips (2 of 3 by default).
    quantities : tuple of str
        Quantities the rules watch.
    """

    rules: tuple[str, ...] = TREND_RULE_NAMES
    run_length: int = 7
    drift_length: int = 5
    warning_count: int = 2
    warning_window: int = 3
    quantities: tuple[str, ...] = QUANTITIES

    def __post_init__(self) -> None:
        _set(self, "rules", tuple(self.rules))
        _set(self, "quantities", tuple(self.quantities))
        for rule in self.rules:
            _check_choice("trend rule", rule, TREND_RULE_NAMES)
        for quantity in self.quantities:
            _check_choice("quantity", quantity, QUANTITIES)
        for name in ("run_length", "drift_length"):
            if getattr(self, name) < 2:
                raise ValueError(f"{name} must be at least 2, got {getattr(self, name)}")
        if not 1 <= self.warning_count <= self.warning_window:
            raise ValueError(
                f"warning_count ({self.warning_count}) must be between 1 and "
                f"warning_window ({self.warning_window})"
            )


@dataclass(frozen=True)
class TrendFinding(_Record):
    """A trend rule that fired: which rule, on what, on which days, in words."""

    rule: str
    quantity: str
    dates: tuple[datetime.date, ...]
    message: str


@dataclass(frozen=True)
class QCDay(_Record):
    """One entry with its verdict (None while the baseline is incomplete)."""

    entry: QCEntry
    verdict: DayVerdict | None


@dataclass(frozen=True)
class LevelPeriod(_Record):
    """A stretch of days judged against one set of operating levels.

    Attributes
    ----------
    event : QCEvent or None
        Event that opened the period; None for the first period.
    levels : OperatingLevels or None
        The period's levels; None while its baseline is incomplete.
    n_days : int
        Strips a baseline needs.
    days : tuple of QCDay
        The period's entries, in date order.
    findings : tuple of TrendFinding
        Trend rules fired within the period.
    """

    event: QCEvent | None
    levels: OperatingLevels | None
    n_days: int
    days: tuple[QCDay, ...]
    findings: tuple[TrendFinding, ...] = ()

    @property
    def baseline_in_progress(self) -> bool:
        return self.levels is None

    @property
    def setting_days(self) -> tuple[QCDay, ...]:
        """The days whose strips set the period's operating levels, oldest first.

        The first ``n_days`` strips of a baseline; none when the levels came
        with the event that opened the period (a crossover moves the levels
        by the films' difference: no day of this period set them), and none
        while the baseline is in progress.
        """
        if self.levels is None or (self.event is not None and self.event.levels is not None):
            return ()
        return self.days[: self.n_days]


@dataclass(frozen=True)
class ProcessorStatus(_Record):
    """Where the processor stands on its latest strip.

    Attributes
    ----------
    latest_date : datetime.date or None
        Day of the latest strip taken into account.
    values, deviations : QCValues or None
        That strip's values and deviations from the operating levels, OD.
    verdict : str
        ``"ok"``, ``"warning"`` or ``"action"``.  Never ``"ok"`` while a
        baseline is in progress or no strip follows the latest event; a trend
        rule firing on the latest strip makes it at least ``"warning"``.
    rules_fired : tuple of str
        ``"rule:quantity"`` for each trend rule that fired on the latest strip.
    advice : str
        What to do, in plain words, ending with :data:`stripscan.CAUTION`.
    levels : OperatingLevels or None
        Levels in force; None while a baseline is in progress.
    baseline_in_progress : bool
        True while fewer than the required strips follow the latest event.
    baseline_days, baseline_needed : int
        Strips so far and strips needed for the baseline in progress
        (both 0 when levels are set).
    findings : tuple of TrendFinding
        The findings behind ``rules_fired``.
    """

    latest_date: datetime.date | None
    values: QCValues | None
    deviations: QCValues | None
    verdict: str
    rules_fired: tuple[str, ...]
    advice: str
    levels: OperatingLevels | None
    baseline_in_progress: bool = False
    baseline_days: int = 0
    baseline_needed: int = 0
    findings: tuple[TrendFinding, ...] = ()


@dataclass(frozen=True)
class CrossoverResult(_Record):
    """Outcome of a QC-film crossover.

    Attributes
    ----------
    old_means, new_means : QCValues
        Mean of the old film's and the new film's strips, OD.
    differences : QCValues
        ``new_means - old_means``, OD.
    new_levels : OperatingLevels
        Operating levels for the new film.
    n_old, n_new : int
        Strips of each film.
    rule : str
        How the base+fog level was set: ``"new_mean"`` or ``"shift"``.
    notes : tuple of str
        Cautions, e.g. when the old film was out of its own limits.
    """

    old_means: QCValues
    new_means: QCValues
    differences: QCValues
    new_levels: OperatingLevels
    n_old: int
    n_new: int
    rule: str
    notes: tuple[str, ...] = ()


# --------------------------------------------------------------------------
# Choosing the steps


def closest_step(densities: Sequence[float], target: float) -> int:
    """1-based step whose density is closest to ``target``; decimal ties go to the lower step.

    NaN marks a step that was not read; it is never chosen.
    """
    d = np.asarray(densities, dtype=float)
    # Rounded distances make decimal ties real ties (|1.05 - 1.20| and
    # |1.35 - 1.20| differ in binary); argmin then keeps the lower step.
    distance = np.round(np.abs(d - target), _DIGITS)
    distance[np.isnan(distance)] = np.inf
    return int(np.argmin(distance)) + 1


def _lightest_not_below(d: np.ndarray, target: float) -> int:
    """1-based step of the lowest density at or above ``target`` (closest to it but not less)."""
    rounded = np.round(d, _DIGITS)
    with np.errstate(invalid="ignore"):
        allowed = rounded >= target - _TOL
    if not allowed.any():
        raise ValueError(f"no step has a density at or above {target:g}")
    # argmin keeps the first, i.e. lower, step on ties.
    return int(np.argmin(np.where(allowed, rounded, np.inf))) + 1


def choose_qc_steps(
    densities: Sequence[float],
    *,
    mid_target: float = 1.20,
    dd_high_target: float = 2.20,
    dd_low_target: float = 0.45,
    rule: str = "closest",
) -> QCSteps:
    """Choose the mid-density and density-difference steps of a baseline strip.

    Parameters
    ----------
    densities : sequence of float
        Gross optical density of each step, step 1 (least exposed) first.
        NaN marks a step that was not read; it is never chosen.
    mid_target : float
        Mid-density target, OD gross.
    dd_high_target, dd_low_target : float
        Density-difference targets, OD gross.
    rule : {"closest", "bounded"}
        ``"closest"``: the steps closest to each target.  ``"bounded"`` (used
        by some procedures; from memory, no published manual checked): the
        high step is still the closest to ``dd_high_target``, and only the
        low step is bounded: the lightest step not below ``dd_low_target``
        (closest to it but not less).  The mid-density step is always the
        closest to ``mid_target``.

    Returns
    -------
    QCSteps
        1-based step numbers.  Ties (equal in decimal terms, to 1e-6 OD) go
        to the lower step.

    Raises
    ------
    ValueError
        Unknown rule, fewer than 2 readable steps, infinite densities, no
        step within a bound, or steps that cannot form a density difference.
    """
    _check_choice("step rule", rule, STEP_RULES)
    d = np.asarray(densities, dtype=float)
    if d.ndim != 1 or np.count_nonzero(~np.isnan(d)) < 2:
        raise ValueError("need the densities of at least 2 readable steps, in one row")
    if np.isinf(d).any():
        raise ValueError(f"density of step {int(np.flatnonzero(np.isinf(d))[0]) + 1} is infinite")
    mid = closest_step(d, mid_target)
    high = closest_step(d, dd_high_target)
    if rule == "closest":
        low = closest_step(d, dd_low_target)
    else:
        low = _lightest_not_below(d, dd_low_target)
    if high <= low:
        raise ValueError(
            f"cannot form a density difference: high step {high} (OD {d[high - 1]:.3f}) is not "
            f"more exposed than low step {low} (OD {d[low - 1]:.3f}); is the strip reversed?"
        )
    return QCSteps(mid_step=mid, dd_high_step=high, dd_low_step=low)


def qc_values_from_steps(densities: Sequence[float], steps: QCSteps, base_fog: float) -> QCValues:
    """Read base+fog, mid-density and density difference off one strip.

    Parameters
    ----------
    densities : sequence of float
        Gross optical density of each step, step 1 first.
    steps : QCSteps
        The steps chosen at baseline.
    base_fog : float
        Base+fog density, OD.

    Returns
    -------
    QCValues
        OD; the density difference is rounded to 1e-6.
    """
    d = [float(x) for x in densities]
    for name in ("mid_step", "dd_high_step", "dd_low_step"):
        step = getattr(steps, name)
        if step > len(d):
            raise ValueError(f"{name} {step} is beyond the strip's {len(d)} steps")
        _as_finite(f"density of step {step}", d[step - 1])
    return QCValues(
        base_fog=base_fog,
        mid_density=d[steps.mid_step - 1],
        density_difference=round(d[steps.dd_high_step - 1] - d[steps.dd_low_step - 1], _DIGITS),
    )


# --------------------------------------------------------------------------
# Levels and daily verdicts


def _check_days(entries: Sequence[QCEntry]) -> None:
    for before, after in zip(entries, entries[1:]):
        if after.date == before.date:
            raise ValueError(
                f"two QC entries on {after.date.isoformat()}: keep one strip per day "
                "(a repeat strip replaces the day's entry)"
            )
        if after.date < before.date:
            raise ValueError(
                f"QC entries out of date order: {after.date.isoformat()} comes after "
                f"{before.date.isoformat()}"
            )


def establish_levels(
    entries: Sequence[QCEntry],
    *,
    n_days: int = 5,
    reason: str = "baseline",
    steps: QCSteps | None = None,
) -> OperatingLevels:
    """Set operating levels as the mean of the first ``n_days`` entries.

    Parameters
    ----------
    entries : sequence of QCEntry
        Entries in date order, one per day; only the first ``n_days`` count.
    n_days : int
        Strips to average (5: FDA guidance for MQSA).
    reason : str
        Why the levels are set, kept with them.
    steps : QCSteps or None
        The steps the values were read from, kept with the levels.

    Returns
    -------
    OperatingLevels
        Mean values, OD (rounded to 1e-6), established on the last day used.
    """
    if n_days < 1:
        raise ValueError(f"n_days must be 1 or more, got {n_days}")
    entries = tuple(entries)
    if not entries:
        raise ValueError("empty baseline: no QC entries to average")
    _check_days(entries)
    if len(entries) < n_days:
        raise ValueError(
            f"need {n_days} days to establish operating levels, have {len(entries)}"
        )
    used = entries[:n_days]
    mean = _mean_values([e.values for e in used])
    return OperatingLevels(
        **{q: getattr(mean, q) for q in QUANTITIES},
        established=used[-1].date,
        n_days=n_days,
        reason=reason,
        steps=steps,
    )


def evaluate_day(
    values: QCValues, levels: OperatingLevels, limits: QCLimits = QCLimits()
) -> DayVerdict:
    """Compare one strip with the operating levels.

    A deviation exactly at a limit is within it: with the default limits,
    mid-density 0.15 off is a warning, 0.151 off is an action; base+fog 0.03
    up is within, 0.031 up is an action.

    Parameters
    ----------
    values : QCValues
        The day's values, OD.
    levels : OperatingLevels
        Levels in force.
    limits : QCLimits
        The site's limits.

    Returns
    -------
    DayVerdict
    """
    deviations = _deviations(values, levels)
    verdict, reasons = "ok", []
    for q in QUANTITIES:
        d = getattr(deviations, q)
        if q == "base_fog":
            size, action, warning, sign = d, limits.base_fog_action, limits.base_fog_warning, "+"
        else:
            size, action, warning, sign = abs(d), limits.md_dd_action, limits.md_dd_warning, "±"
        if _beyond(size, action):
            tier, limit, word = "action", action, "control limit"
        elif warning is not None and _beyond(size, warning):
            tier, limit, word = "warning", warning, "warning tier"
        else:
            continue
        verdict = _worse(verdict, tier)
        reasons.append(
            f"{_LABELS[q].capitalize()} is {abs(d):.3f} {'above' if d > 0 else 'below'} "
            f"its operating level (beyond the {word} of {sign}{_fmt_limit(limit)})."
        )
    return DayVerdict(deviations=deviations, verdict=verdict, reasons=tuple(reasons))


# --------------------------------------------------------------------------
# Trend rules


def _streaks(flags: Sequence[bool]) -> list[tuple[int, int]]:
    """(first, last) indices of each maximal stretch of True."""
    spans, start = [], None
    for i, flag in enumerate([*flags, False]):
        if flag and start is None:
            start = i
        elif not flag and start is not None:
            spans.append((start, i - 1))
            start = None
    return spans


def _run_spans(devs: Sequence[float], side: int, length: int) -> list[list[int]]:
    spans = _streaks([_side(d) == side for d in devs])
    return [list(range(a, b + 1)) for a, b in spans if b - a + 1 >= length]


def _drift_spans(devs: Sequence[float], side: int, length: int) -> list[list[int]]:
    steps = [False] + [_side(devs[i] - devs[i - 1]) == side for i in range(1, len(devs))]
    # A stretch of steps a..b covers the strips a-1..b.
    return [list(range(a - 1, b + 1)) for a, b in _streaks(steps) if b - a + 2 >= length]


def _warning_spans(
    devs: Sequence[float], side: int, warning: float, count: int, window: int
) -> list[list[int]]:
    flagged = [_beyond(side * d, warning) for d in devs]
    spans: list[list[int]] = []
    for i, flag in enumerate(flagged):
        hits = [j for j in range(max(0, i - window + 1), i + 1) if flagged[j]]
        if not flag or len(hits) < count:
            continue
        # Windows that share a strip describe one episode: merge them.
        if spans and hits[0] <= spans[-1][-1]:
            spans[-1] = sorted(set(spans[-1]) | set(hits))
        else:
            spans.append(hits)
    return spans


def _rule_spans(
    rule: str, devs: Sequence[float], side: int, rules: TrendRules, warning: float | None
) -> list[list[int]]:
    if rule == "run":
        return _run_spans(devs, side, rules.run_length)
    if rule == "drift":
        return _drift_spans(devs, side, rules.drift_length)
    if warning is None:
        return []
    return _warning_spans(devs, side, warning, rules.warning_count, rules.warning_window)


def _trend_message(rule: str, quantity: str, side: int, dates: Sequence[datetime.date],
                   rules: TrendRules, warning: float | None) -> str:
    label = _LABELS[quantity].capitalize()
    first, last = dates[0].isoformat(), dates[-1].isoformat()
    where = "above" if side > 0 else "below"
    if rule == "run":
        return f"{label} was {where} its operating level on {len(dates)} strips in a row ({first} to {last})."
    if rule == "drift":
        how = "rose" if side > 0 else "fell"
        return f"{label} {how} on each of {len(dates)} strips in a row ({first} to {last})."
    listed = ", ".join(d.isoformat() for d in dates)
    return (
        f"{label} was more than {_fmt_limit(warning or 0.0)} {where} its operating level on "
        f"{listed}: at least {rules.warning_count} of {rules.warning_window} consecutive strips."
    )


def apply_trend_rules(
    history: Sequence[QCEntry],
    levels: OperatingLevels,
    rules: TrendRules = TrendRules(),
    *,
    limits: QCLimits = QCLimits(),
) -> tuple[TrendFinding, ...]:
    """Look for runs, drifts and repeated warnings in a series of strips.

    Parameters
    ----------
    history : sequence of QCEntry
        Strips in date order, one per day, all judged against ``levels``.
    levels : OperatingLevels
        Levels in force over the whole series.
    rules : TrendRules
        Which rules to apply and their sizes (see :class:`TrendRules`).
    limits : QCLimits
        Supplies the warning tiers for ``two_warnings``; with no warning
        tier for a quantity that rule stays silent on it.

    Returns
    -------
    tuple of TrendFinding
        One finding per episode (overlapping windows are merged), ordered by
        first date.
    """
    history = tuple(history)
    _check_days(history)
    dates = [e.date for e in history]
    all_devs = [_deviations(e.values, levels) for e in history]
    findings = []
    for q in rules.quantities:
        devs = [getattr(d, q) for d in all_devs]
        warning = limits.base_fog_warning if q == "base_fog" else limits.md_dd_warning
        for side in (1,) if q == "base_fog" else (1, -1):
            for rule in rules.rules:
                for span in _rule_spans(rule, devs, side, rules, warning):
                    span_dates = tuple(dates[i] for i in span)
                    message = _trend_message(rule, q, side, span_dates, rules, warning)
                    findings.append(TrendFinding(rule, q, span_dates, message))
    findings.sort(key=lambda f: (f.dates[0], TREND_RULE_NAMES.index(f.rule), QUANTITIES.index(f.quantity)))
    return tuple(findings)


def _ending_streak(flags: Sequence[bool]) -> list[int]:
    """Length of the stretch of True that ends at each index (0 where False)."""
    lengths, count = [], 0
    for flag in flags:
        count = count + 1 if flag else 0
        lengths.append(count)
    return lengths


def _fires_on(rule: str, devs: Sequence[float], side: int, rules: TrendRules, warning: float | None) -> list[bool]:
    """Whether ``rule`` fires on each strip over the strips up to it, as the status said on its day.

    The same arithmetic as :func:`_rule_spans` seen from each strip's day: a
    run or drift that has reached its length on this strip, or this strip
    past the warning tier with enough others in its window.  The first strips
    of a run are therefore not warnings after the fact.
    """
    if rule == "run":
        return [n >= rules.run_length for n in _ending_streak([_side(d) == side for d in devs])]
    if rule == "drift":
        moves = [False] + [_side(devs[i] - devs[i - 1]) == side for i in range(1, len(devs))]
        # n moves in a row cover n + 1 strips.
        return [n > 0 and n + 1 >= rules.drift_length for n in _ending_streak(moves)]
    if warning is None:
        return [False] * len(devs)
    flagged = [_beyond(side * d, warning) for d in devs]
    window = rules.warning_window
    return [flag and sum(flagged[max(0, i - window + 1): i + 1]) >= rules.warning_count
            for i, flag in enumerate(flagged)]


def _fired_each_day(
    history: Sequence[QCEntry], levels: OperatingLevels, rules: TrendRules, limits: QCLimits
) -> list[tuple[str, ...]]:
    """``"rule:quantity"`` of the trend rules that fire on each strip (see :func:`_fires_on`)."""
    all_devs = [_deviations(e.values, levels) for e in history]
    fired: list[list[str]] = [[] for _ in history]
    for rule in rules.rules:
        for q in rules.quantities:
            devs = [getattr(d, q) for d in all_devs]
            warning = limits.base_fog_warning if q == "base_fog" else limits.md_dd_warning
            for side in (1,) if q == "base_fog" else (1, -1):
                for i, fires in enumerate(_fires_on(rule, devs, side, rules, warning)):
                    if fires and f"{rule}:{q}" not in fired[i]:
                        fired[i].append(f"{rule}:{q}")
    return [tuple(f) for f in fired]


def _with_trends(verdict: DayVerdict, fired: tuple[str, ...]) -> DayVerdict:
    """A strip's verdict raised by the trend rules that fired on its day: at least a warning, rules named."""
    if not fired:
        return verdict
    return dataclasses.replace(verdict, verdict=_worse(verdict.verdict, "warning"), rules=fired)


# --------------------------------------------------------------------------
# The log


@dataclass(frozen=True)
class QCLog(_Record):
    """A processor's QC history: entries, events and the site's settings.

    Derived results (:attr:`periods`, :attr:`days`, :attr:`findings`,
    :meth:`status`) are computed on demand; the record itself holds inputs
    only, so ``to_dict`` stores what was measured, not what was concluded.

    Attributes
    ----------
    entries : tuple of QCEntry
        One strip per day.  Out-of-order entries are an error when
        ``require_sorted`` is True, otherwise they are sorted.  Two entries
        on one day are always an error.
    events : tuple of QCEvent
        Changes that restart the baseline.  Events on the same day apply in
        the order given; the last one governs.
    limits : QCLimits
        The site's limits.
    rules : TrendRules
        The site's trend rules.
    n_days : int
        Strips a baseline needs (5).
    require_sorted : bool
        Whether out-of-order input is an error.
    """

    entries: tuple[QCEntry, ...] = ()
    events: tuple[QCEvent, ...] = ()
    limits: QCLimits = field(default_factory=QCLimits)
    rules: TrendRules = field(default_factory=TrendRules)
    n_days: int = 5
    require_sorted: bool = True

    def __post_init__(self) -> None:
        if self.n_days < 1:
            raise ValueError(f"n_days must be 1 or more, got {self.n_days}")
        entries, events = tuple(self.entries), tuple(self.events)
        if not self.require_sorted:
            entries = tuple(sorted(entries, key=lambda e: e.date))
            events = tuple(sorted(events, key=lambda e: e.date))
        _check_days(entries)
        for before, after in zip(events, events[1:]):
            if after.date < before.date:
                raise ValueError(
                    f"QC events out of date order: {after.date.isoformat()} comes after "
                    f"{before.date.isoformat()}"
                )
        _set(self, "entries", entries)
        _set(self, "events", events)

    def _period(self, event: QCEvent | None, entries: tuple[QCEntry, ...]) -> LevelPeriod:
        if event is not None and event.levels is not None:
            levels: OperatingLevels | None = event.levels
        elif len(entries) >= self.n_days:
            reason = f"baseline after {event.label}" if event else "initial baseline"
            levels = establish_levels(entries, n_days=self.n_days, reason=reason)
        else:
            levels = None
        if levels is None:
            return LevelPeriod(event, None, self.n_days, tuple(QCDay(e, None) for e in entries))
        findings = apply_trend_rules(entries, levels, self.rules, limits=self.limits)
        fired = _fired_each_day(entries, levels, self.rules, self.limits)
        days = tuple(QCDay(e, _with_trends(evaluate_day(e.values, levels, self.limits), f))
                     for e, f in zip(entries, fired))
        return LevelPeriod(event, levels, self.n_days, days, findings)

    @cached_property
    def periods(self) -> tuple[LevelPeriod, ...]:
        """Periods of constant operating levels, oldest first."""
        starts: list[QCEvent | None] = [None, *self.events]
        periods = []
        for i, event in enumerate(starts):
            begin = event.date if event else datetime.date.min
            end = starts[i + 1].date if i + 1 < len(starts) else datetime.date.max  # type: ignore[union-attr]
            entries = tuple(e for e in self.entries if begin <= e.date < end)
            if event is None and not entries:
                continue
            periods.append(self._period(event, entries))
        return tuple(periods)

    @property
    def days(self) -> tuple[QCDay, ...]:
        """Every entry with its verdict, oldest first."""
        return tuple(day for period in self.periods for day in period.days)

    @property
    def findings(self) -> tuple[TrendFinding, ...]:
        """Every trend finding, oldest first."""
        return tuple(f for period in self.periods for f in period.findings)

    def status(self, today: datetime.date | None = None) -> ProcessorStatus:
        """Where the processor stands on the latest strip up to ``today``.

        Parameters
        ----------
        today : datetime.date or None
            Ignore entries and events after this day; when the latest strip
            is older, the advice says so.  None: use everything.

        Returns
        -------
        ProcessorStatus
        """
        log = self
        if today is not None:
            _check_date("today", today)
            log = dataclasses.replace(
                self,
                entries=tuple(e for e in self.entries if e.date <= today),
                events=tuple(e for e in self.events if e.date <= today),
            )
        return log._status(today)

    def _warning_advice(self, past_tier: bool, fired: Sequence[TrendFinding]) -> str:
        """What raised a warning (the warning tier, which trend rules) and what is usually done next."""
        sizes = dataclasses.asdict(self.rules)
        rules = [rule for rule in TREND_RULE_NAMES if any(f.rule == rule for f in fired)]
        causes = [WARNING_CAUSES[c].format(**sizes) for c in (["tier"] if past_tier else []) + rules]
        raised = ", ".join(causes[:-1]) + " and " + causes[-1] if len(causes) > 1 else causes[0]
        return f"Warning, within the control limits, raised by {raised}. {ADVICE['trend' if rules else 'warning']}"

    def _status(self, today: datetime.date | None) -> ProcessorStatus:
        period = self.periods[-1] if self.periods else None
        days = period.days if period else ()
        latest = days[-1] if days else None
        extra = []
        if latest is not None and today is not None and latest.entry.date < today:
            extra.append(
                f"The latest strip is from {latest.entry.date.isoformat()}; "
                f"none is recorded for {today.isoformat()}."
            )
        common = {
            "latest_date": latest.entry.date if latest else None,
            "values": latest.entry.values if latest else None,
        }
        if period is None or period.levels is None:
            since = f" since the {period.event.label}" if period and period.event else ""
            headline = (
                f"Baseline in progress ({len(days)} of {self.n_days} days){since}: operating "
                "levels are not set yet, so strips cannot be judged against control limits; "
                "process one strip a day until the baseline is complete."
            )
            return ProcessorStatus(
                **common, deviations=None, verdict="warning", rules_fired=(),
                advice=" ".join([headline, *extra, CAUTION]), levels=None,
                baseline_in_progress=True, baseline_days=len(days), baseline_needed=self.n_days,
            )
        if latest is None or latest.verdict is None:
            # Only an event carrying levels opens a judged period with no strips.
            headline = (
                f"No QC strip since the {period.event.label if period.event else 'levels were set'}: process a strip and check it "
                "before patient films are processed."
            )
            return ProcessorStatus(
                **common, deviations=None, verdict="warning", rules_fired=(),
                advice=" ".join([headline, CAUTION]), levels=period.levels,
            )
        fired = tuple(f for f in period.findings
                      if latest.entry.date in f.dates and f"{f.rule}:{f.quantity}" in latest.verdict.rules)
        # The day's verdict already counts the trend rules (computed once, in _period);
        # a warning's tier reasons say whether the strip itself was past the warning tier.
        verdict = latest.verdict.verdict
        headline = self._warning_advice(bool(latest.verdict.reasons), fired) if verdict == "warning" \
            else ADVICE[verdict]
        advice = [headline, *latest.verdict.reasons, *(f.message for f in fired), *extra, CAUTION]
        return ProcessorStatus(
            **common, deviations=latest.verdict.deviations, verdict=verdict,
            rules_fired=tuple(f"{f.rule}:{f.quantity}" for f in fired),
            advice=" ".join(advice), levels=period.levels, findings=fired,
        )


# --------------------------------------------------------------------------
# Crossover


def crossover(
    old: Sequence[QCValues],
    new: Sequence[QCValues],
    levels: OperatingLevels,
    *,
    date: datetime.date,
    base_fog_rule: str = "new_mean",
    n_required: int = 5,
    require_equal: bool = True,
    limits: QCLimits = QCLimits(),
) -> CrossoverResult:
    """Move the operating levels to a new box of QC film.

    Strips of old and new film are processed together.  For mid-density and
    density difference the new level is ``old level + (mean new - mean old)``.

    Parameters
    ----------
    old, new : sequence of QCValues
        The strips of old and new film, OD.
    levels : OperatingLevels
        The old film's operating levels.
    date : datetime.date
        Day of the crossover; the new levels apply from this day.
    base_fog_rule : {"new_mean", "shift"}
        ``"new_mean"``: the base+fog level is the new film's mean.
        ``"shift"``: it moves like the others, old level + difference.
    n_required : int
        Strips of each film needed (5).
    require_equal : bool
        Whether old and new must have as many strips each.
    limits : QCLimits
        Used to check that the old film still agreed with its own levels.

    Returns
    -------
    CrossoverResult
        With ``notes`` when the old film's mean was beyond a warning tier or
        control limit: the processor may not have been steady.
    """
    _check_choice("base+fog rule", base_fog_rule, BASE_FOG_RULES)
    _check_date("crossover date", date)
    old, new = tuple(old), tuple(new)
    for name, strips in (("old", old), ("new", new)):
        if len(strips) < n_required:
            raise ValueError(f"crossover needs {n_required} strips of {name} film, have {len(strips)}")
    if require_equal and len(old) != len(new):
        raise ValueError(f"crossover needs as many old as new strips, have {len(old)} and {len(new)}")
    old_means, new_means = _mean_values(old), _mean_values(new)
    differences = _combine(lambda a, b: round(b - a, _DIGITS), old_means, new_means)
    shifted = _combine(lambda level, diff: round(level + diff, _DIGITS), levels, differences)
    base_fog = new_means.base_fog if base_fog_rule == "new_mean" else shifted.base_fog
    new_levels = OperatingLevels(
        base_fog=base_fog,
        mid_density=shifted.mid_density,
        density_difference=shifted.density_difference,
        established=date,
        n_days=len(new),
        reason=f"crossover on {date.isoformat()}",
        steps=levels.steps,
    )
    check = evaluate_day(old_means, levels, limits)
    notes = ()
    if check.verdict != "ok":
        notes = (
            "The old film's mean is off its own operating levels: "
            + " ".join(check.reasons)
            + " The processor may not have been steady during the crossover; check it and "
            "consider repeating the crossover. " + CAUTION,
        )
    return CrossoverResult(
        old_means=old_means, new_means=new_means, differences=differences,
        new_levels=new_levels, n_old=len(old), n_new=len(new), rule=base_fog_rule, notes=notes,
    )
