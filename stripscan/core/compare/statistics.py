"""Per-figure statistics of a lot comparison: mean ± sd per set, the difference B − A, its interval and verdict.

The interval is Welch's t interval, which does not assume equal variances:
``Δ ± t(0.975, ν) · √(s_A²/n_A + s_B²/n_B)`` with the Welch–Satterthwaite
degrees of freedom ν.  A set with a single strip gives no interval.

The verdict puts the whole interval against the tolerance band: inside it,
"same within tolerance"; wholly outside, "differs"; across an edge,
"cannot tell (interval spans the tolerance)".  Proving sameness thus needs
enough strips for a narrow interval, which is the point of replicates.

Names, units and printed decimals of the figures come from the one figure
table, :mod:`stripscan.core.figures`.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from stripscan.core.compare.table import Tolerance
from stripscan.core.curve import relative_speed_percent
from stripscan.core.figures import figure_digits, figure_name, figure_unit, format_value
from stripscan.core.records import clean_float

__all__ = ["VERDICTS", "FigureSummary", "WelchInterval", "welch_interval", "judge", "FigureRow"]

#: Verdict codes and the words shown for them.
VERDICTS: dict[str, str] = {
    "same": "same within tolerance",
    "differs": "differs",
    "unclear": "cannot tell (interval spans the tolerance)",
    "single": "cannot tell (one strip: no interval)",
    "no_tolerance": "no tolerance set",
    "missing": "not read in both sets",
}

# Decimal boundaries: an interval edge at exactly the tolerance counts as inside.
_TOL = 1e-9


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
    :func:`~stripscan.core.compare.comparison.compare_sets`).

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


def _num(value: float | None, digits: int, *, sign: bool = False) -> str:
    # The figure table's formatting; a missing number is a dash in the comparison's cells.
    return format_value(value, digits, missing="-", signed=sign)


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
        Key of :data:`~stripscan.core.compare.table.FIGURES`.
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
        """The figure's name as the comparison table shows it (``speed point (net 1.00)``)."""
        return figure_name(self.figure, qualified=True)

    @property
    def unit(self) -> str:
        """The figure's short unit (``OD``, ``log E``, ``%``)."""
        return figure_unit(self.figure, "short")

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
        label, unit, digits = self.label, self.unit, figure_digits(self.figure)
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

