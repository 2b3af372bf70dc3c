"""Checks that a strip's reading looks like a sensitometric strip, said as plain warnings.

A wrong step count, a film that never reaches the density-difference
targets or a calibrated range that stops short of them still gives
numbers; these checks say when the numbers are not the usual ones, so that
nothing wrong passes silently.  They look at the densities only (the step
count against the film's length is checked where the steps are found,
:func:`stripscan.core.locate.given_count_notes`).

* Step 1, the least exposed step, normally lies near base+fog (common
  practice: a sensitometer's first steps fall in the toe); far above it,
  the strip was most likely read with too few steps.
* The mid-density and density-difference steps are the steps closest to
  their targets (1.20; 2.20 and 0.45 OD, common practice); when no usable
  step lies near a target, the chosen step is merely the nearest end of
  the strip and the figure is not the usual one.
* Dmax below the density-difference high target puts the high step on the
  shoulder, below its target.

Plain Python over the core's records; no Qt.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from stripscan.core.records import CurveFigures, StepDensity

__all__ = ["STEP_ONE_ABOVE_BASE_FOG", "TARGET_REACH", "reading_notes"]

#: How far step 1 may read above base+fog before the step count is doubted, OD.  Our own choice: a
#: 21-step strip's first steps differ from base+fog by a few hundredths; 0.25 OD is a clearly exposed step.
STEP_ONE_ABOVE_BASE_FOG = 0.25

#: How far a target may lie beyond the usable densities before its step is called far from it, OD (our own
#: choice: about a densitometer's reading step of 0.01 times five).
TARGET_REACH = 0.05


def _usable(steps: Sequence[StepDensity]) -> list[StepDensity]:
    return [s for s in steps if s.in_range and not s.excluded and math.isfinite(s.od)]


def reading_notes(steps: Sequence[StepDensity], figures: CurveFigures) -> list[str]:
    """Warnings when a strip's reading does not look like a whole sensitometric strip.

    Parameters
    ----------
    steps : sequence of StepDensity
        The strip's steps, step 1 (least exposed) first.
    figures : CurveFigures
        The figures read from them; their ``settings`` give the targets.

    Returns
    -------
    list of str
        Plain sentences, empty when all is as usual.
    """
    notes: list[str] = []
    usable = _usable(steps)
    if not usable:
        return notes
    first = steps[0] if steps else None
    if (figures.base_fog is not None and first is not None and first in usable
            and first.od - figures.base_fog > STEP_ONE_ABOVE_BASE_FOG):
        notes.append(
            f"step 1 reads {first.od:.2f} OD, {first.od - figures.base_fog:.2f} above base+fog "
            f"({figures.base_fog:.2f}): the least exposed step of a strip normally lies near base+fog, so the "
            "strip was probably read with too few steps (check --steps) or its light end is cut off"
        )
    settings = figures.settings or {}
    od = {s.step: s.od for s in usable}
    lightest, densest = min(od.values()), max(od.values())
    high_target = float(settings.get("dd_high_target", 2.20))
    shoulder = False
    if figures.dmax is not None and figures.dmax < high_target and figures.dd_high_step in od:
        shoulder = True
        high = od[figures.dd_high_step]
        notes.append(
            f"Dmax ({figures.dmax:.2f} OD) is below the density-difference high target {high_target:.2f}: the "
            f"high step (step {figures.dd_high_step}) lands on the shoulder at {high:.2f} OD, "
            f"{high_target - high:.2f} below its target, so this density difference is smaller than the usual one"
        )
    for name, target, step in (
        ("mid-density", float(settings.get("mid_density_target", 1.20)), figures.mid_density_step),
        ("density-difference high", high_target, None if shoulder else figures.dd_high_step),
        ("density-difference low", float(settings.get("dd_low_target", 0.45)), figures.dd_low_step),
    ):
        if step not in od:
            continue
        if target < lightest - TARGET_REACH:
            why = f"the lightest usable step already reads {lightest:.2f} OD"
        elif target > densest + TARGET_REACH:
            why = f"the densest usable step reads only {densest:.2f} OD"
        else:
            continue
        notes.append(
            f"the {name} step (step {step}, {od[step]:.2f} OD) is {abs(od[step] - target):.2f} OD from its "
            f"target {target:.2f}: no usable step lies near it ({why}), so the {name.split()[0]} figure is "
            "not the usual one"
        )
    return notes
