"""The targets the curve's figures are read at (light: the command line's defaults come from here).

Kept apart from :mod:`stripscan.core.curve`, which needs numpy and scipy, so
that building the command line's parser and the figure table imports no
heavy library; ``stripscan.core.curve.FigureSettings`` is this same class.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

__all__ = ["FigureSettings"]


@dataclass(frozen=True)
class FigureSettings:
    """Targets for the figures (all densities OD).

    Attributes
    ----------
    gradient_low, gradient_high : float
        Net densities between which average gradient and latitude are read
        (ISO 9236-1: 0.25 and 2.00).
    speed_net_density : float
        Net density of the speed point (ISO 9236-1: 1.00).
    mid_density_target : float
        Gross density the mid-density step is chosen near (common practice: 1.20).
    dd_high_target, dd_low_target : float
        Gross densities for the density difference steps (common practice: 2.20, 0.45).
    dd_rule : {"closest", "bounded"}
        ``closest``: steps closest to the targets; ``bounded``: the high step
        closest to the high target, the low step the lightest not below the
        low target (from memory).
    reference_speed_log_exposure : float or None
        Speed point of a reference film; gives relative speed in percent.
    """

    gradient_low: float = 0.25
    gradient_high: float = 2.00
    speed_net_density: float = 1.00
    mid_density_target: float = 1.20
    dd_high_target: float = 2.20
    dd_low_target: float = 0.45
    dd_rule: str = "closest"
    reference_speed_log_exposure: float | None = None

    def __post_init__(self) -> None:
        if not self.gradient_high > self.gradient_low:
            raise ValueError("the upper density point must be above the lower one")
        if self.dd_rule not in ("closest", "bounded"):
            raise ValueError("dd_rule must be 'closest' or 'bounded'")

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)
