"""QC-film crossover: a new box of QC film takes over the operating levels of the old one.

Strips of old and new film are processed together, and the operating
levels move by the mean difference between them.
"""

from __future__ import annotations

import datetime
from collections.abc import Sequence

from stripscan import CAUTION
from stripscan.core.qc.levels import _mean_values
from stripscan.core.qc.names import BASE_FOG_RULES
from stripscan.core.qc.records import (
    _DIGITS,
    CrossoverResult,
    OperatingLevels,
    QCLimits,
    QCValues,
    _check_choice,
    _check_date,
    _combine,
)
from stripscan.core.qc.rules import evaluate_day

__all__ = ["crossover"]


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
