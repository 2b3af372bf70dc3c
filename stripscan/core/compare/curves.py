"""Mean characteristic curves of a set of strips, and the grids they are drawn on.

Each strip's curve is the core's :class:`~stripscan.core.curve.CharacteristicCurve`
through its usable steps; a set's mean ± sd is drawn only over the span every
one of its strips covers, never extrapolated.  Density is read against log E
(ΔD(log E) between sets), log E against *net* density (Δlog E, the speed
difference at that density).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from stripscan.core.curve import CharacteristicCurve
from stripscan.core.records import clean_float

__all__ = ["MeanCurve"]

# Grids: fine enough that a plot looks smooth, coarse enough for JSON.
_LOG_E_STEP = 0.01
_NET_STEP = 0.02
# Slack on a strip's own log E span, so that a grid point on its end counts as inside.
_TOL = 1e-9

@dataclass(frozen=True)
class MeanCurve:
    """Mean ± sd of a quantity over a set's strips on a grid.

    Attributes
    ----------
    x : tuple of float
        The grid (log E for density curves, net density OD for exposure curves).
    mean, sd : tuple of float
        Mean and sample sd at each grid point; NaN where not every strip of
        the set reaches (sd also NaN with a single strip).
    """

    x: tuple[float, ...]
    mean: tuple[float, ...]
    sd: tuple[float, ...]

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The grid, mean and sd as float arrays."""
        return np.asarray(self.x, float), np.asarray(self.mean, float), np.asarray(self.sd, float)

    def to_dict(self) -> dict[str, Any]:
        return {k: [clean_float(v, 6) for v in getattr(self, k)] for k in ("x", "mean", "sd")}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> "MeanCurve":
        def back(values: Sequence[float | None]) -> tuple[float, ...]:
            return tuple(math.nan if v is None else float(v) for v in values)
        return cls(back(data["x"]), back(data["mean"]), back(data["sd"]))


def _mean_curve(grid: np.ndarray, rows: np.ndarray) -> MeanCurve:
    """Column mean and sd of ``rows`` (strips × grid), NaN wherever a strip is missing."""
    covered = np.all(np.isfinite(rows), axis=0)
    mean, sd = np.full(grid.size, np.nan), np.full(grid.size, np.nan)
    if covered.any():
        mean[covered] = rows[:, covered].mean(axis=0)
        if rows.shape[0] >= 2:
            sd[covered] = rows[:, covered].std(axis=0, ddof=1)
    return MeanCurve(tuple(grid.tolist()), tuple(mean.tolist()), tuple(sd.tolist()))


def _density_rows(curves: Sequence[CharacteristicCurve], grid: np.ndarray) -> np.ndarray:
    rows = np.full((len(curves), grid.size), np.nan)
    for k, curve in enumerate(curves):
        # Never extrapolate beyond the strip's own usable steps.
        inside = (grid >= curve.log_exposure[0] - _TOL) & (grid <= curve.log_exposure[-1] + _TOL)
        rows[k, inside] = curve(np.clip(grid[inside], curve.log_exposure[0], curve.log_exposure[-1]))
    return rows


def _exposure_rows(curves: Sequence[CharacteristicCurve], base_fogs: Sequence[float], grid: np.ndarray) -> np.ndarray:
    rows = np.full((len(curves), grid.size), np.nan)
    for k, (curve, bf) in enumerate(zip(curves, base_fogs)):
        top = float(curve.density.max()) - bf
        for j, net in enumerate(grid):
            if net <= top + _TOL:
                value = curve.log_exposure_at(bf + float(net))
                rows[k, j] = math.nan if value is None else value
    return rows


def _grid(low: float, high: float, step: float) -> np.ndarray:
    """Multiples of ``step`` from ``low`` up to ``high`` (so net 1.00 is on the net grid)."""
    first, last = math.ceil(low / step - 1e-9), math.floor(high / step + 1e-9)
    return np.round(np.arange(first, last + 1) * step, 6) if last >= first else np.zeros(0)

