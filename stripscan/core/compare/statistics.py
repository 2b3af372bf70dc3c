"""Emulsion lots side by side: replicate statistics over sets of strips.

A *set* is a few strips of one film (one emulsion lot, one box of QC film)
exposed on one sensitometer and processed together.  :func:`compare_sets`
compares every set with the first one, A, and gives for each pair:

* per set, the mean characteristic curve with ±1 sd over its replicate
  strips, on a log E grid shared by all sets; each strip's curve is the
  core's :class:`~stripscan.core.curve.CharacteristicCurve` through its
  usable steps, and a set's mean is drawn only over the span every one of
  its strips covers;
* the density difference ΔD(log E) = D_B − D_A of the mean curves;
* the horizontal shift Δlog E(D) = log E_B − log E_A at each *net* density
  (each strip's own base+fog taken off), i.e. the speed difference at that
  density; at net 1.00 it is the speed-point difference;
* a table of figures, mean ± sd (n) per set, the difference B − A with a
  95 % confidence interval and a verdict against a tolerance.

Conventions
-----------
Differences are always B − A.  The speed point is the log E at net density
1.00 (ISO 9236-1); a negative shift means B needs less exposure, so B is
faster.  Relative speed is ``100 · (10^(−Δlog E) − 1)`` per cent, positive =
B faster (:func:`stripscan.core.curve.relative_speed_percent`).

The interval is Welch's t interval, which does not assume equal variances:
``Δ ± t(0.975, ν) · √(s_A²/n_A + s_B²/n_B)`` with the Welch–Satterthwaite
degrees of freedom ν.  A set with a single strip gives no interval.

The verdict puts the whole interval against the tolerance band: inside it,
"same within tolerance"; wholly outside, "differs"; across an edge,
"cannot tell (interval spans the tolerance)".  Proving sameness thus needs
enough strips for a narrow interval, which is the point of replicates.

Mid-density and density difference are read at the *same* steps on every
strip (as processor QC keeps its steps): those chosen on set A's mean step
densities by :func:`stripscan.core.qc.rules.choose_qc_steps`.

Tolerances are site settings; :data:`DEFAULT_TOLERANCES` says where each
default comes from.  Units: densities OD, exposures log10 relative exposure.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from stripscan.core.compare.table import DEFAULT_TOLERANCES, FIGURE_INFO, FIGURES, Tolerance
from stripscan.core.curve import CharacteristicCurve, relative_speed_percent, strip_curve
from stripscan.core.qc.rules import QCSteps, QCValues, choose_qc_steps, qc_values_from_steps
from stripscan.core.records import StripResult, clean_float

__all__ = [
    "CompareError",
    "processing_days_note",
    "FIGURES",
    "FIGURE_INFO",
    "VERDICTS",
    "DEFAULT_TOLERANCES",
    "Tolerance",
    "StripSet",
    "FigureSummary",
    "WelchInterval",
    "MeanCurve",
    "SetSummary",
    "FigureRow",
    "Comparison",
    "welch_interval",
    "judge",
    "strip_curve",
    "mean_step_densities",
    "strip_qc_values",
    "compare_sets",
]

#: Verdict codes and the words shown for them.
VERDICTS: dict[str, str] = {
    "same": "same within tolerance",
    "differs": "differs",
    "unclear": "cannot tell (interval spans the tolerance)",
    "single": "cannot tell (one strip: no interval)",
    "no_tolerance": "no tolerance set",
    "missing": "not read in both sets",
}

# Grids: fine enough that a plot looks smooth, coarse enough for JSON.
_LOG_E_STEP = 0.01
_NET_STEP = 0.02
# Decimal boundaries: an interval edge at exactly the tolerance counts as inside.
_TOL = 1e-9


class CompareError(ValueError):
    """The sets cannot be compared as given; the message names the set and the problem."""


# --------------------------------------------------------------------------
# Statistics


def _mean_sd(values: Sequence[float]) -> tuple[float | None, float | None]:
    if not values:
        return None, None
    arr = np.asarray(values, dtype=np.float64)
    return float(arr.mean()), (float(arr.std(ddof=1)) if arr.size >= 2 else None)


@dataclass(frozen=True)
class FigureSummary:
    """One figure over a set's strips.

    Build it with :meth:`of`; relative speed sets ``mean`` itself (see
    :func:`compare_sets`).

    Attributes
    ----------
    values : tuple of float
        The figure of each strip that reached it, in the figure's unit.
    mean, sd : float or None
        Mean and sample standard deviation (n − 1); sd is None for one strip.
    """

    values: tuple[float, ...]
    mean: float | None
    sd: float | None

    @classmethod
    def of(cls, values: Sequence[float]) -> "FigureSummary":
        """Mean and sd of ``values``."""
        values = tuple(float(v) for v in values)
        return cls(values, *_mean_sd(values))

    @property
    def n(self) -> int:
        return len(self.values)

    def to_dict(self) -> dict[str, Any]:
        return {"mean": clean_float(self.mean, 6), "sd": clean_float(self.sd, 6), "n": self.n,
                "values": [clean_float(v, 6) for v in self.values]}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> "FigureSummary":
        return cls(tuple(float(v) for v in data["values"]), data["mean"], data["sd"])


@dataclass(frozen=True)
class WelchInterval:
    """Welch's confidence interval of a difference of means B − A.

    Attributes
    ----------
    difference : float
        mean(B) − mean(A).
    low, high : float
        The interval's ends.
    df : float or None
        Welch–Satterthwaite degrees of freedom; None when neither set scatters.
    standard_error : float
        √(s_A²/n_A + s_B²/n_B).
    confidence : float
        Coverage asked for (0.95).
    """

    difference: float
    low: float
    high: float
    df: float | None
    standard_error: float
    confidence: float = 0.95

    def to_dict(self) -> dict[str, Any]:
        return {k: clean_float(v, 8) if isinstance(v, float) else v for k, v in dataclasses.asdict(self).items()}

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> "WelchInterval":
        return cls(**{f.name: data[f.name] for f in dataclasses.fields(cls)})


def welch_interval(a: Sequence[float], b: Sequence[float], *, confidence: float = 0.95) -> WelchInterval | None:
    """Confidence interval of mean(b) − mean(a) without assuming equal variances.

    Parameters
    ----------
    a, b : sequence of float
        Replicate values of one figure in sets A and B (any unit).
    confidence : float
        Two-sided coverage, 0 < confidence < 1.

    Returns
    -------
    WelchInterval or None
        None when either set has fewer than two values: one strip says
        nothing about scatter.  When neither set scatters at all the
        interval shrinks to the difference itself (``df`` None).
    """
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie between 0 and 1, got {confidence}")
    xa, xb = np.asarray(a, dtype=np.float64), np.asarray(b, dtype=np.float64)
    if xa.size < 2 or xb.size < 2:
        return None
    va, vb = xa.var(ddof=1) / xa.size, xb.var(ddof=1) / xb.size
    diff = float(xb.mean() - xa.mean())
    se = math.sqrt(va + vb)
    if se == 0.0:
        return WelchInterval(diff, diff, diff, None, 0.0, confidence)
    df = (va + vb) ** 2 / (va**2 / (xa.size - 1) + vb**2 / (xb.size - 1))
    half = float(stats.t.ppf(0.5 + confidence / 2.0, df)) * se
    return WelchInterval(diff, diff - half, diff + half, float(df), se, confidence)


def judge(difference: float | None, interval: tuple[float, float] | None, bounds: tuple[float, float] | None,
          *, single: bool = False) -> str:
    """Verdict code (a key of :data:`VERDICTS`) for a difference and its interval.

    Parameters
    ----------
    difference : float or None
        B − A; None when a set did not give the figure.
    interval : (float, float) or None
        The confidence interval; None when a set has one strip (``single``).
    bounds : (float, float) or None
        Lower and upper tolerance limits of B − A; None for no tolerance.
    single : bool
        A set has one strip, so there is no interval.
    """
    if difference is None:
        return "missing"
    if bounds is None:
        return "no_tolerance"
    if interval is None:
        return "single" if single else "no_tolerance"
    lower, upper = bounds
    low, high = interval
    if low >= lower - _TOL and high <= upper + _TOL:
        return "same"
    if low > upper + _TOL or high < lower - _TOL:
        return "differs"
    return "unclear"


# --------------------------------------------------------------------------
# Sets and curves


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


# --------------------------------------------------------------------------
# Results


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
        Keys of :data:`FIGURES`; relative speed is per strip against set
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


def _num(value: float | None, digits: int, *, sign: bool = False) -> str:
    if value is None or not math.isfinite(value):
        return "-"
    return f"{value:+.{digits}f}" if sign else f"{value:.{digits}f}"


def _summary_text(summary: FigureSummary, digits: int) -> str:
    if summary.mean is None:
        return "not read"
    spread = f" ± {_num(summary.sd, digits)}" if summary.sd is not None else ""
    return f"{_num(summary.mean, digits)}{spread} ({summary.n})"


@dataclass(frozen=True)
class FigureRow:
    """One line of the comparison table.

    Attributes
    ----------
    figure : str
        Key of :data:`FIGURES`.
    a, b : FigureSummary
        The figure in sets A and B.
    difference : float or None
        B − A of the means (relative speed: B's speed relative to A's, %).
    interval : WelchInterval or None
        95 % interval of the difference; None with one strip in a set.
    tolerance : Tolerance or None
        The band used, None when none is set.
    bounds : (float, float) or None
        The band's limits of B − A in the figure's unit (−inf for rise-only).
    verdict : str
        Key of :data:`VERDICTS`.
    """

    figure: str
    a: FigureSummary
    b: FigureSummary
    difference: float | None
    interval: WelchInterval | None
    tolerance: Tolerance | None
    bounds: tuple[float, float] | None
    verdict: str

    @property
    def label(self) -> str:
        return FIGURE_INFO[self.figure][0]

    @property
    def unit(self) -> str:
        return FIGURE_INFO[self.figure][1]

    @property
    def verdict_text(self) -> str:
        return VERDICTS[self.verdict]

    @property
    def ci95(self) -> tuple[float, float] | None:
        return (self.interval.low, self.interval.high) if self.interval else None

    def cells(self) -> dict[str, str]:
        """The row as text, as the command line and the desktop table show it.

        Keys: ``figure`` (label and unit), ``a`` and ``b`` (mean ± sd (n)),
        ``difference``, ``interval``, ``tolerance`` (limits of B − A) and
        ``verdict``.
        """
        label, unit, digits = FIGURE_INFO[self.figure]
        ci = self.ci95
        tolerance = "-"
        if self.bounds is not None:
            lower, upper = self.bounds
            tolerance = (f"up to {_num(upper, digits, sign=True)}" if math.isinf(lower)
                         else f"{_num(lower, digits, sign=True)} to {_num(upper, digits, sign=True)}")
        return {
            "figure": f"{label} ({unit})" if unit else label,
            "a": _summary_text(self.a, digits),
            "b": _summary_text(self.b, digits),
            "difference": _num(self.difference, digits, sign=True),
            "interval": f"{_num(ci[0], digits, sign=True)} to {_num(ci[1], digits, sign=True)}" if ci else "-",
            "tolerance": tolerance,
            "verdict": self.verdict_text,
        }

    def to_dict(self) -> dict[str, Any]:
        return {
            "label": self.label, "unit": self.unit,
            "a": clean_float(self.a.mean, 6), "b": clean_float(self.b.mean, 6),
            "n_a": self.a.n, "n_b": self.b.n,
            "difference": clean_float(self.difference, 6),
            "ci95": [clean_float(v, 6) for v in self.ci95] if self.ci95 else None,
            "df": clean_float(self.interval.df, 3) if self.interval else None,
            "tolerance": None if self.tolerance is None else {
                **self.tolerance.to_dict(), "text": self.tolerance.text(),
                "lower": clean_float(self.bounds[0], 6) if self.bounds else None,
                "upper": clean_float(self.bounds[1], 6) if self.bounds else None,
            },
            "verdict": self.verdict, "verdict_text": self.verdict_text,
            "interval": self.interval.to_dict() if self.interval else None,
            "set_a": self.a.to_dict(), "set_b": self.b.to_dict(),
        }

    @classmethod
    def from_dict(cls, figure: str, data: Mapping[str, Any]) -> "FigureRow":
        tol = data.get("tolerance")
        bounds = None
        if tol is not None and tol.get("upper") is not None:
            bounds = (-math.inf if tol.get("lower") is None else float(tol["lower"]), float(tol["upper"]))
        return cls(
            figure, FigureSummary.from_dict(data["set_a"]), FigureSummary.from_dict(data["set_b"]),
            data["difference"], WelchInterval.from_dict(data["interval"]) if data.get("interval") else None,
            Tolerance.from_dict(tol) if tol else None, bounds, data["verdict"],
        )


@dataclass(frozen=True)
class Comparison:
    """Set B against set A.

    Attributes
    ----------
    a, b : SetSummary
    rows : tuple of FigureRow
        In the order of :data:`FIGURES`.
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


# --------------------------------------------------------------------------
# The comparison


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


def _row(figure: str, a: FigureSummary, b: FigureSummary, tolerance: Tolerance | None,
         confidence: float) -> FigureRow:
    interval = welch_interval(a.values, b.values, confidence=confidence)
    diff = None if a.mean is None or b.mean is None else b.mean - a.mean
    bounds = tolerance.bounds(a.mean) if tolerance is not None else None
    single = diff is not None and min(a.n, b.n) == 1
    verdict = judge(diff, (interval.low, interval.high) if interval else None, bounds, single=single)
    return FigureRow(figure, a, b, diff, interval, tolerance, bounds, verdict)


def _relative_speed_row(a: FigureSummary, b: FigureSummary, speed: FigureRow) -> FigureRow:
    # Relative speed is the speed-point shift seen through 10^(−Δ): the
    # same interval (its ends swap, the map decreases) and the same verdict.
    diff = None if a.mean is None or b.mean is None else b.mean - a.mean
    interval = None
    if speed.interval is not None and diff is not None:
        si = speed.interval
        interval = WelchInterval(diff, relative_speed_percent(si.high), relative_speed_percent(si.low),
                                 si.df, si.standard_error, si.confidence)
    bounds = None
    if speed.bounds is not None:
        lower, upper = speed.bounds
        bounds = (relative_speed_percent(upper), relative_speed_percent(lower))
    return FigureRow("relative_speed_percent", a, b, diff, interval, speed.tolerance, bounds, speed.verdict)


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
        Bands per figure (keys of :data:`FIGURES`; relative speed follows
        the speed point).  Default :data:`DEFAULT_TOLERANCES`; a figure
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
