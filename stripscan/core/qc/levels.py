"""Processor QC's baseline: the steps chosen once, the day's values read at them, and the operating levels.

The steps are chosen once, at baseline (:func:`choose_qc_steps`), and then
kept the same every day.  The operating levels are the mean of the first
five days (:func:`establish_levels`).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from stripscan.core.qc.names import QUANTITIES, STEP_RULES
from stripscan.core.qc.records import (
    _DIGITS,
    _TOL,
    OperatingLevels,
    QCEntry,
    QCSteps,
    QCValues,
    _as_finite,
    _check_choice,
    _check_days,
)

__all__ = ["closest_step", "choose_qc_steps", "qc_values_from_steps", "establish_levels"]


def _mean_values(values: Sequence[QCValues]) -> QCValues:
    return QCValues(
        **{q: round(float(np.mean([getattr(v, q) for v in values])), _DIGITS) for q in QUANTITIES}
    )


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

