"""Processor QC's plain records: the day's values, limits, steps, levels, events, verdicts and results.

Each day one sensitometric strip is processed and three numbers are tracked:

* **base+fog** (OD) read from unexposed film beside the steps;
* **mid-density** (MD, OD): the density of the step closest to 1.20 gross;
* **density difference** (DD, OD): the step closest to 2.20 minus the step
  closest to 0.45.

Every record here is a frozen dataclass with ``to_dict`` / ``from_dict``
for JSON (dates as ISO strings); its checks run in ``__post_init__``, so a
record that exists is a valid one.  The arithmetic lives beside them:
steps and operating levels in :mod:`stripscan.core.qc.levels`, control
limits and trend rules in :mod:`stripscan.core.qc.rules`, the log and the
processor's status in :mod:`stripscan.core.qc.status`, the QC-film
crossover in :mod:`stripscan.core.qc.crossover`.

Boundaries are decided in decimal terms: deviations are rounded to
``1e-6`` OD and then compared with a tolerance of ``1e-9``.  Without this,
1.35 - 1.20 (0.15000000000000013 in binary) would break a ±0.15 limit.
"""

from __future__ import annotations

import dataclasses
import datetime
import math
import numbers
import types
import typing
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Self

from stripscan.core.qc.names import EVENT_KINDS, QUANTITIES, SOURCES, TREND_RULE_NAMES, VERDICTS

__all__ = [
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
    "CrossoverResult",
]

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
    (typically from :func:`~stripscan.core.qc.crossover.crossover`) sets the
    new operating levels at once instead of waiting for a new baseline.

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
        strip.  A day judged within its period
        (:attr:`~stripscan.core.qc.status.QCLog.days`) carries them, and
        its ``verdict`` is then at least ``"warning"``: the one verdict the
        status, the list, the chart and the reports show.
        :func:`~stripscan.core.qc.rules.evaluate_day` alone judges the
        strip only and leaves it empty.
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
      :data:`~stripscan.core.qc.rules.TREND_DEAD_BAND` off, breaks the run);
    * ``drift``: ``drift_length`` strips in a row, each higher (or each
      lower) than the one before (a flat step, a change of less than
      :data:`~stripscan.core.qc.rules.TREND_DEAD_BAND`, breaks the drift);
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
