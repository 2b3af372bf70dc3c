"""Emulsion lots side by side: every set of replicate strips against the first one, A.

A *set* is a few strips of one film (one emulsion lot, one box of QC film)
exposed on one sensitometer and processed together.  :func:`compare_sets`
compares every set with the first one, A, and gives for each pair:

* per set, the mean characteristic curve with ±1 sd over its replicate
  strips, on a log E grid shared by all sets (:mod:`stripscan.core.compare.curves`);
* the density difference ΔD(log E) = D_B − D_A of the mean curves;
* the horizontal shift Δlog E(D) = log E_B − log E_A at each *net* density
  (each strip's own base+fog taken off), i.e. the speed difference at that
  density; at net 1.00 it is the speed-point difference;
* a table of figures, mean ± sd (n) per set, the difference B − A with a
  95 % confidence interval and a verdict against a tolerance
  (:mod:`stripscan.core.compare.statistics`).

Conventions
-----------
Differences are always B − A.  The speed point is the log E at net density
1.00 (ISO 9236-1); a negative shift means B needs less exposure, so B is
faster.  Relative speed is ``100 · (10^(−Δlog E) − 1)`` per cent, positive =
B faster (:func:`stripscan.core.curve.relative_speed_percent`).

Tolerances are site settings;
:data:`~stripscan.core.compare.table.DEFAULT_TOLERANCES` says where each
default comes from.  Units: densities OD, exposures log10 relative exposure.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from stripscan.core.compare.curves import _LOG_E_STEP, _NET_STEP, _grid
from stripscan.core.compare.sets import (
    CompareError,
    SetSummary,
    StripSet,
    _base_fog,
    _check_sets,
    _choose_steps,
    _readable,
    _summarize,
    processing_days_note,
)
from stripscan.core.compare.statistics import FigureRow, _relative_speed_row, _row
from stripscan.core.compare.table import DEFAULT_TOLERANCES, FIGURES, Tolerance
from stripscan.core.qc.records import QCSteps
from stripscan.core.records import clean_float

__all__ = ["Comparison", "compare_sets"]


@dataclass(frozen=True)
class Comparison:
    """Set B against set A.

    Attributes
    ----------
    a, b : SetSummary
    rows : tuple of FigureRow
        In the order of :data:`~stripscan.core.compare.table.FIGURES`.
    delta_density : tuple of float
        D_B − D_A of the mean curves at each log E of ``a.density_curve.x``,
        OD; NaN where either mean is not drawn.
    delta_log_exposure : tuple of float
        log E_B − log E_A at each net density of ``a.exposure_curve.x``;
        negative = B faster there.
    qc_steps : QCSteps or None
        Steps of mid-density and density difference for every strip.
    notes : tuple of str
        Strips left out, missing figures, single strips.
    confidence : float
        Interval coverage (0.95).
    """

    a: SetSummary
    b: SetSummary
    rows: tuple[FigureRow, ...]
    delta_density: tuple[float, ...]
    delta_log_exposure: tuple[float, ...]
    qc_steps: QCSteps | None
    notes: tuple[str, ...] = ()
    confidence: float = 0.95

    def row(self, figure: str) -> FigureRow:
        """The table row of ``figure``."""
        for row in self.rows:
            if row.figure == figure:
                return row
        raise KeyError(f"no figure {figure!r} in the comparison; figures are {', '.join(FIGURES)}")

    def shift_at(self, net_density: float) -> float | None:
        """Δlog E (B − A) at a net density on the grid (nearest point), or None where not drawn."""
        grid = np.asarray(self.a.exposure_curve.x, float)
        if grid.size == 0:
            return None
        k = int(np.argmin(np.abs(grid - net_density)))
        value = self.delta_log_exposure[k]
        return None if abs(grid[k] - net_density) > _NET_STEP or not math.isfinite(value) else float(value)

    def to_dict(self) -> dict[str, Any]:
        return {
            "a": self.a.name, "b": self.b.name, "confidence": self.confidence,
            "differences": {row.figure: row.to_dict() for row in self.rows},
            "delta_density": {"log_exposure": [clean_float(v, 6) for v in self.a.density_curve.x],
                              "difference": [clean_float(v, 6) for v in self.delta_density]},
            "delta_log_exposure": {"net_density": [clean_float(v, 6) for v in self.a.exposure_curve.x],
                                   "difference": [clean_float(v, 6) for v in self.delta_log_exposure]},
            "qc_steps": self.qc_steps.to_dict() if self.qc_steps else None,
            "notes": list(self.notes),
            "set_a": self.a.to_dict(), "set_b": self.b.to_dict(),
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> "Comparison":
        def back(values: Sequence[float | None]) -> tuple[float, ...]:
            return tuple(math.nan if v is None else float(v) for v in values)
        return cls(
            SetSummary.from_dict(data["set_a"]), SetSummary.from_dict(data["set_b"]),
            tuple(FigureRow.from_dict(k, v) for k, v in data["differences"].items()),
            back(data["delta_density"]["difference"]), back(data["delta_log_exposure"]["difference"]),
            QCSteps.from_dict(data["qc_steps"]) if data.get("qc_steps") else None,
            tuple(data.get("notes", ())), float(data.get("confidence", 0.95)),
        )


def compare_sets(
    sets: Sequence[StripSet],
    *,
    tolerances: Mapping[str, Tolerance] | None = None,
    confidence: float = 0.95,
) -> tuple[Comparison, ...]:
    """Compare each set with the first one.

    Parameters
    ----------
    sets : sequence of StripSet
        Two or more sets; the first is the reference A, each later one is B
        in turn.  Every strip must come from a tablet of the same step count.
    tolerances : mapping of str to Tolerance, optional
        Bands per figure (keys of :data:`~stripscan.core.compare.table.FIGURES`; relative speed follows
        the speed point).  Default :data:`~stripscan.core.compare.table.DEFAULT_TOLERANCES`; a figure
        missing from the mapping gets no verdict.
    confidence : float
        Coverage of the intervals (0.95).

    Returns
    -------
    tuple of Comparison
        ``len(sets) - 1`` comparisons, set k against set 0.

    Raises
    ------
    CompareError
        Fewer than two sets, a set with no strips or no readable strip
        (fewer than two usable steps on every strip), strips of different
        step counts, two sets of the same name, an unknown figure.
    """
    sets = list(sets)
    tolerances = dict(DEFAULT_TOLERANCES if tolerances is None else tolerances)
    unknown = sorted(set(tolerances) - set(FIGURES) - {"relative_speed_percent"})
    if unknown or "relative_speed_percent" in tolerances:
        bad = unknown or ["relative_speed_percent"]
        raise CompareError(
            f"no tolerance can be set for {', '.join(bad)}; figures are "
            f"{', '.join(f for f in FIGURES if f != 'relative_speed_percent')} "
            "(relative speed follows the speed point)"
        )
    _check_sets(sets)
    readable = [_readable(s) for s in sets]
    # Notes about one set go with every pair it is in; general ones with all pairs.
    general: list[str] = []
    per_set: list[list[str]] = [[f"set {s.name!r}: {item}; left out" for item in left_out]
                                for s, (_, left_out) in zip(sets, readable)]
    steps, why = _choose_steps([strip for _, strip, _ in readable[0][0]])
    if why:
        general.append(why)

    all_curves = [(st, c) for kept, _ in readable for _, st, c in kept]
    density_grid = _grid(min(c.log_exposure[0] for _, c in all_curves),
                         max(c.log_exposure[-1] for _, c in all_curves), _LOG_E_STEP)
    net_low = min(float(c.density.min()) - _base_fog(st, c) for st, c in all_curves)
    net_high = max(float(c.density.max()) - _base_fog(st, c) for st, c in all_curves)
    net_grid = _grid(max(0.0, net_low), net_high, _NET_STEP)

    speeds = [st.figures.speed_log_exposure for _, st, _ in readable[0][0] if st.figures.speed_log_exposure is not None]
    reference_speed = float(np.mean(speeds)) if speeds else None
    if reference_speed is None:
        general.append(f"set {sets[0].name!r} never reaches net density 1.00: no relative speed")
    summaries = [_summarize(s, kept, left_out, steps, reference_speed, density_grid, net_grid, notes)
                 for s, (kept, left_out), notes in zip(sets, readable, per_set)]

    results = []
    a = summaries[0]
    for k, b in enumerate(summaries[1:], start=1):
        by_figure = {f: _row(f, a.figures[f], b.figures[f], tolerances.get(f), confidence)
                     for f in FIGURES if f != "relative_speed_percent"}
        by_figure["relative_speed_percent"] = _relative_speed_row(
            a.figures["relative_speed_percent"], b.figures["relative_speed_percent"], by_figure["speed_log_exposure"])
        rows = [by_figure[f] for f in FIGURES]
        pair_notes = [*general, *per_set[0], *per_set[k]]
        mixed = processing_days_note(sets[0], sets[k])
        if mixed is not None:
            pair_notes.insert(0, mixed)
        if min(a.n, b.n) == 1:
            pair_notes.append(
                f"set {(a if a.n == 1 else b).name!r} has a single strip: no interval and no verdict against "
                "a tolerance; use three or more strips per set"
            )
        for row in rows:
            if row.verdict == "missing":
                pair_notes.append(f"{row.label}: not read on every set (read on {row.a.n} of the {a.n} strips of "
                                  f"{a.name!r} and {row.b.n} of the {b.n} of {b.name!r})")
        _, da, _ = a.density_curve.arrays()
        _, db, _ = b.density_curve.arrays()
        _, ea, _ = a.exposure_curve.arrays()
        _, eb, _ = b.exposure_curve.arrays()
        results.append(Comparison(
            a=a, b=b, rows=tuple(rows),
            delta_density=tuple((db - da).tolist()), delta_log_exposure=tuple((eb - ea).tolist()),
            qc_steps=steps, notes=tuple(pair_notes), confidence=confidence,
        ))
    return tuple(results)

