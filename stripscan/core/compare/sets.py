"""Sets of replicate strips: one film (an emulsion lot, a box of QC film) exposed and processed together.

A :class:`StripSet` is what the user names; a :class:`SetSummary` is the
set's replicate statistics and mean curves, as
:func:`~stripscan.core.compare.comparison.compare_sets` sums them up.
Mid-density and density difference are read at the *same* steps on every
strip (as processor QC keeps its steps): those chosen on the first set's
mean step densities by :func:`stripscan.core.qc.levels.choose_qc_steps`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from stripscan.core.compare.curves import MeanCurve, _density_rows, _exposure_rows, _mean_curve
from stripscan.core.compare.statistics import FigureSummary
from stripscan.core.compare.table import FIGURES
from stripscan.core.curve import CharacteristicCurve, relative_speed_percent, strip_curve
from stripscan.core.qc.levels import choose_qc_steps, qc_values_from_steps
from stripscan.core.qc.records import QCSteps, QCValues
from stripscan.core.records import StripResult

__all__ = [
    "CompareError",
    "StripSet",
    "SetSummary",
    "processing_days_note",
    "mean_step_densities",
    "strip_qc_values",
]


class CompareError(ValueError):
    """The sets cannot be compared as given; the message names the set and the problem."""



@dataclass(frozen=True)
class StripSet:
    """Replicate strips of one film, as named by the user.

    Attributes
    ----------
    name : str
        How the set is called in tables and messages (e.g. ``lot:M-2610-A``).
    strips : tuple of StripResult
        The strips, all from a tablet of the same step count.
    labels : tuple of str
        One per strip, e.g. ``"strip 2"`` or ``"snapshot 14"``
        (default ``"strip <index>"``).
    source : str
        Where the strips came from, in plain words.
    processed_on : tuple of str or None
        Day each strip was processed (``YYYY-MM-DD``), when known; empty
        when no day is known for any strip.
    """

    name: str
    strips: tuple[StripResult, ...]
    labels: tuple[str, ...] = ()
    source: str = ""
    processed_on: tuple[str | None, ...] = ()

    def __post_init__(self) -> None:
        object.__setattr__(self, "strips", tuple(self.strips))
        labels = tuple(self.labels) or tuple(f"strip {s.index}" for s in self.strips)
        if len(labels) != len(self.strips):
            raise ValueError(f"set {self.name!r}: {len(labels)} labels for {len(self.strips)} strips")
        object.__setattr__(self, "labels", labels)
        days = tuple(self.processed_on)
        if days and len(days) != len(self.strips):
            raise ValueError(f"set {self.name!r}: {len(days)} processing days for {len(self.strips)} strips")
        object.__setattr__(self, "processed_on", days)

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "source": self.source, "labels": list(self.labels),
                "strips": [s.to_dict() for s in self.strips], "processed_on": list(self.processed_on)}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> "StripSet":
        return cls(data["name"], tuple(StripResult.from_dict(s) for s in data["strips"]),
                   tuple(data.get("labels", ())), data.get("source", ""), tuple(data.get("processed_on", ())))


def processing_days_note(a: StripSet, b: StripSet) -> str | None:
    """A warning when lot and processing day are mixed: no strip of A shares a processing day with B's.

    Two films are compared fairly only when their strips went through the
    processor together (common practice): otherwise the processor's own
    change from day to day is in the difference.  Said only when the day
    of every strip of both sets is known.

    Returns
    -------
    str or None
        The warning, or None when the sets share a day or a day is unknown.
    """
    days_a, days_b = set(a.processed_on), set(b.processed_on)
    if not a.processed_on or not b.processed_on or None in days_a | days_b or days_a & days_b:
        return None
    listed = {s.name: ", ".join(sorted(d for d in days if d)) for s, days in ((a, days_a), (b, days_b))}
    return (f"lot and processing day are mixed: every strip of {a.name!r} was processed on {listed[a.name]}, "
            f"every strip of {b.name!r} on {listed[b.name]}, never on the same day; the difference may be the "
            "processor's (its change from day to day), not the film's. Process strips of both films together "
            "on the same day to compare the films")


def mean_step_densities(strips: Sequence[StripResult]) -> np.ndarray:
    """Mean gross density of each step over the strips where it is usable, OD.

    Returns
    -------
    ndarray, shape (n_steps,)
        Step 1 first; NaN where no strip has the step usable.
    """
    n = strips[0].geometry.n_steps
    total, count = np.zeros(n), np.zeros(n)
    for strip in strips:
        for s in strip.steps:
            if s.in_range and not s.excluded and math.isfinite(s.od) and 1 <= s.step <= n:
                total[s.step - 1] += s.od
                count[s.step - 1] += 1
    out = np.full(n, np.nan)
    np.divide(total, count, out=out, where=count > 0)
    return out


def strip_qc_values(strip: StripResult, steps: QCSteps) -> QCValues:
    """Base+fog, mid-density and density difference of one strip at fixed steps, OD.

    Raises
    ------
    ValueError
        When the strip has no base+fog, or a chosen step is not usable
        (outside the calibrated range, excluded or unread).
    """
    if strip.figures.base_fog is None:
        raise ValueError("no base+fog was read")
    densities = [s.od if s.in_range and not s.excluded else math.nan for s in strip.steps]
    for name, step in (("mid-density", steps.mid_step), ("density difference high", steps.dd_high_step),
                       ("density difference low", steps.dd_low_step)):
        if step > len(densities) or not math.isfinite(densities[step - 1]):
            raise ValueError(f"{name} step {step} is not usable (outside the calibrated range or excluded)")
    return qc_values_from_steps(densities, steps, strip.figures.base_fog)


@dataclass(frozen=True)
class SetSummary:
    """One set's replicate statistics.

    Attributes
    ----------
    name, source : str
        As in :class:`StripSet`.
    labels : tuple of str
        The strips used.
    left_out : tuple of str
        Strips left out and why.
    n_steps : int
        Steps per strip.
    figures : dict of str to FigureSummary
        Keys of :data:`~stripscan.core.compare.table.FIGURES`; relative speed is per strip against set
        A's mean speed point.
    density_curve : MeanCurve
        Gross density mean ± sd against log E.
    exposure_curve : MeanCurve
        Log E mean ± sd against net density.
    """

    name: str
    source: str
    labels: tuple[str, ...]
    left_out: tuple[str, ...]
    n_steps: int
    figures: dict[str, FigureSummary]
    density_curve: MeanCurve
    exposure_curve: MeanCurve

    @property
    def n(self) -> int:
        """Strips used."""
        return len(self.labels)

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name, "source": self.source, "n": self.n, "labels": list(self.labels),
            "left_out": list(self.left_out), "n_steps": self.n_steps,
            "figures": {k: v.to_dict() for k, v in self.figures.items()},
            "density_curve": self.density_curve.to_dict(), "exposure_curve": self.exposure_curve.to_dict(),
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> "SetSummary":
        return cls(
            data["name"], data.get("source", ""), tuple(data["labels"]), tuple(data.get("left_out", ())),
            int(data["n_steps"]), {k: FigureSummary.from_dict(v) for k, v in data["figures"].items()},
            MeanCurve.from_dict(data["density_curve"]), MeanCurve.from_dict(data["exposure_curve"]),
        )


def _check_sets(sets: Sequence[StripSet]) -> None:
    if len(sets) < 2:
        raise CompareError(f"need at least two sets of strips to compare, got {len(sets)}")
    names = [s.name for s in sets]
    for name in names:
        if names.count(name) > 1:
            raise CompareError(f"two sets are both named {name!r}; name each set once")
    for s in sets:
        if not s.strips:
            raise CompareError(f"set {s.name!r} holds no strips")
        counts = sorted({strip.geometry.n_steps for strip in s.strips})
        if len(counts) > 1:
            detail = ", ".join(f"{lab}: {st.geometry.n_steps}" for lab, st in zip(s.labels, s.strips))
            raise CompareError(f"set {s.name!r} mixes strips of {' and '.join(map(str, counts))} steps ({detail})")
    first = sets[0]
    n_first = first.strips[0].geometry.n_steps
    for s in sets[1:]:
        n = s.strips[0].geometry.n_steps
        if n != n_first:
            raise CompareError(
                f"set {s.name!r} has {n}-step strips but set {first.name!r} has {n_first}-step strips; "
                "compare strips exposed through the same step tablet"
            )


def _readable(s: StripSet) -> tuple[list[tuple[str, StripResult, CharacteristicCurve]], list[str]]:
    kept, left_out = [], []
    for label, strip in zip(s.labels, s.strips):
        curve = strip_curve(strip)
        if curve is None:
            left_out.append(f"{label}: fewer than two usable steps")
        else:
            kept.append((label, strip, curve))
    if not kept:
        raise CompareError(f"set {s.name!r}: no readable strip ({'; '.join(left_out)})")
    return kept, left_out


def _choose_steps(strips: Sequence[StripResult]) -> tuple[QCSteps | None, str | None]:
    settings = strips[0].figures.settings
    try:
        steps = choose_qc_steps(
            list(mean_step_densities(strips)),
            mid_target=float(settings.get("mid_density_target", 1.20)),
            dd_high_target=float(settings.get("dd_high_target", 2.20)),
            dd_low_target=float(settings.get("dd_low_target", 0.45)),
            rule=str(settings.get("dd_rule", "closest")),
        )
    except ValueError as exc:
        return None, f"mid-density and density difference steps cannot be chosen on the first set: {exc}"
    return steps, None


def _base_fog(strip: StripResult, curve: CharacteristicCurve) -> float:
    # compute_figures falls back to the lightest usable step the same way.
    return float(curve.density.min()) if strip.figures.base_fog is None else float(strip.figures.base_fog)


def _summarize(s: StripSet, kept, left_out, steps: QCSteps | None, reference_speed: float | None,
               density_grid: np.ndarray, net_grid: np.ndarray, notes: list[str]) -> SetSummary:
    strips = [strip for _, strip, _ in kept]
    curves = [curve for _, _, curve in kept]
    values: dict[str, list[float]] = {name: [] for name in FIGURES}
    for label, strip, _ in kept:
        f = strip.figures
        for name in ("base_fog", "speed_log_exposure", "average_gradient", "gamma", "dmax", "latitude_log_exposure"):
            if getattr(f, name) is not None:
                values[name].append(float(getattr(f, name)))
        if f.speed_log_exposure is not None and reference_speed is not None:
            values["relative_speed_percent"].append(relative_speed_percent(f.speed_log_exposure - reference_speed))
        if steps is not None:
            try:
                qc = strip_qc_values(strip, steps)
            except ValueError as exc:
                notes.append(f"set {s.name!r}, {label}: no mid-density or density difference: {exc}")
            else:
                values["mid_density"].append(qc.mid_density)
                values["density_difference"].append(qc.density_difference)
    base_fogs = [_base_fog(strip, curve) for strip, curve in zip(strips, curves)]
    figures = {name: FigureSummary.of(v) for name, v in values.items()}
    own_speed = figures["speed_log_exposure"].mean
    if own_speed is not None and reference_speed is not None:
        # The set's relative speed is that of its mean speed point (A: exactly
        # 0 %), so B − A of the row is the speed shift's own relative speed;
        # the sd stays the spread of the strips' own relative speeds.
        rel = figures["relative_speed_percent"]
        figures["relative_speed_percent"] = FigureSummary(
            rel.values, relative_speed_percent(own_speed - reference_speed), rel.sd)
    return SetSummary(
        name=s.name, source=s.source, labels=tuple(label for label, _, _ in kept), left_out=tuple(left_out),
        n_steps=strips[0].geometry.n_steps,
        figures=figures,
        density_curve=_mean_curve(density_grid, _density_rows(curves, density_grid)),
        exposure_curve=_mean_curve(net_grid, _exposure_rows(curves, base_fogs, net_grid)),
    )


