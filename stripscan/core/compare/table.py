"""The lot comparison's table: which figures it compares, and the tolerances B − A is judged by.

Plain data and the :class:`Tolerance` record, kept apart from the
comparison's arithmetic (which needs numpy and scipy) so that the command
line's help can show the default tolerances without importing a heavy
library.  The figures' names, units and printed decimals are those of the
one figure table, :mod:`stripscan.core.figures`.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

__all__ = ["FIGURES", "Tolerance", "DEFAULT_TOLERANCES"]

#: Figures of the comparison table, in display order (keys of :data:`stripscan.core.figures.FIGURE_KEYS`).
FIGURES: tuple[str, ...] = (
    "base_fog",
    "speed_log_exposure",
    "relative_speed_percent",
    "average_gradient",
    "gamma",
    "dmax",
    "latitude_log_exposure",
    "mid_density",
    "density_difference",
)

# --------------------------------------------------------------------------
# Tolerances


@dataclass(frozen=True)
class Tolerance:
    """How far B may differ from A and still count as the same.

    Attributes
    ----------
    amount : float
        Size of the band, in the figure's unit, or per cent of set A's mean
        when ``percent`` is True.
    percent : bool
        The band is ``amount`` % of A's mean (e.g. average gradient ±5 %).
    rise_only : bool
        Only an increase counts (base+fog: a lower fog is never a fault);
        the band is then (−∞, +amount].
    source : str
        Where the value comes from, shown with the table.
    """

    amount: float
    percent: bool = False
    rise_only: bool = False
    source: str = ""

    def __post_init__(self) -> None:
        amount = self.amount
        if isinstance(amount, bool) or not isinstance(amount, (int, float)) or not math.isfinite(amount) or amount <= 0:
            raise ValueError(f"a tolerance must be a positive number, got {amount!r}")
        object.__setattr__(self, "amount", float(amount))

    def bounds(self, reference: float | None) -> tuple[float, float] | None:
        """(lower, upper) limits of B − A; None when a per-cent band has no reference mean."""
        if self.percent:
            if reference is None or not math.isfinite(reference):
                return None
            size = self.amount * abs(reference) / 100.0
        else:
            size = self.amount
        return (-math.inf if self.rise_only else -size, size)

    def text(self) -> str:
        """The band in plain words, e.g. ``±0.05``, ``±5 %`` or ``+0.03 (rise only)``."""
        number = f"{self.amount:g} %" if self.percent else f"{self.amount:g}"
        return f"+{number} (rise only)" if self.rise_only else f"±{number}"

    @classmethod
    def parse(cls, text: str, *, source: str = "set by the user") -> "Tolerance":
        """Read ``0.05``, ``5%`` (per cent of A's mean) or ``+0.03`` (rise only)."""
        raw = text.strip()
        rise_only = raw.startswith("+")
        body = raw.lstrip("+±").strip()
        percent = body.endswith("%")
        try:
            amount = float(body.rstrip("%").strip())
        except ValueError:
            raise ValueError(f"tolerance {text!r} is not a number (write e.g. 0.05, 5% or +0.03)") from None
        return cls(amount, percent=percent, rise_only=rise_only, source=source)

    def to_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> "Tolerance":
        return cls(**{f.name: data[f.name] for f in dataclasses.fields(cls) if f.name in data})


#: Default tolerances and their sources.  Set local values: these are a start,
#: not acceptance criteria.  Gamma, Dmax and latitude have no default.
DEFAULT_TOLERANCES: dict[str, Tolerance] = {
    "base_fog": Tolerance(
        0.03, rise_only=True,
        source="the rise 21 CFR 900.12(e)(1) allows processor base+fog over its operating level",
    ),
    "speed_log_exposure": Tolerance(
        0.05, source="common practice, from memory: 0.05 log E, about 12 % in speed; set a local value",
    ),
    "average_gradient": Tolerance(
        5.0, percent=True, source="common practice, from memory: ±5 % of A's mean; set a local value",
    ),
    "mid_density": Tolerance(0.15, source="the mid-density control limit of 21 CFR 900.12(e)(1)"),
    "density_difference": Tolerance(0.15, source="the density difference control limit of 21 CFR 900.12(e)(1)"),
}
