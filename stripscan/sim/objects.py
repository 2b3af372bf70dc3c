"""What the simulator is told: the film's response, the strips and tablets on the platen, the scanner; and what it returns.

Plain records with exact meanings (densities per ISO 5-2, millimetres on
the platen); :mod:`stripscan.sim.simulate` renders them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike


__all__ = ["FilmModel", "StripSpec", "TabletSpec", "ScannerModel", "SimulatedScan", "FLARE_KERNELS"]

#: Shapes of the scanner's wide flare kernel (:class:`ScannerModel`).
FLARE_KERNELS = ("gaussian", "exponential", "two_gaussian")


# --------------------------------------------------------------------------- film


@dataclass(frozen=True)
class FilmModel:
    """H&D model: gross density vs log10 relative exposure.

    A generalised logistic (Richards) curve, so toe and shoulder can be
    asymmetric::

        D(x) = base_fog + (dmax - base_fog) * (1 + exp(-slope * (x - log_e_mid))) ** (-1 / asymmetry)
    """

    base_fog: float = 0.18  # gross density at zero exposure (x -> -inf)
    dmax: float = 3.6  # gross asymptote (x -> +inf)
    log_e_mid: float = 1.6  # location parameter, log E
    slope: float = 6.0  # steepness k per unit log E
    asymmetry: float = 0.6  # Richards nu: 1 symmetric, below 1 a longer toe

    def __post_init__(self) -> None:
        if not (0.0 <= self.base_fog < self.dmax):
            raise ValueError(f"need 0 <= base_fog < dmax, got {self.base_fog}, {self.dmax}")
        if not (self.slope > 0 and self.asymmetry > 0):
            raise ValueError("slope and asymmetry must be positive")

    @property
    def net_max(self) -> float:
        """Highest net density the film approaches, dmax - base_fog."""
        return self.dmax - self.base_fog

    def _z(self, log_e: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        z = -self.slope * (np.asarray(log_e, dtype=np.float64) - self.log_e_mid)
        return z, np.logaddexp(0.0, z)  # z and log(1 + e^z), stable at both ends

    def density(self, log_e: ArrayLike) -> np.ndarray:
        """Gross optical density at log relative exposure ``log_e``."""
        _, softplus = self._z(log_e)
        return self.base_fog + self.net_max * np.exp(-softplus / self.asymmetry)

    def gradient(self, log_e: ArrayLike) -> np.ndarray:
        """Analytic slope dD / dlog E."""
        z, softplus = self._z(log_e)
        nu = self.asymmetry
        return self.net_max * self.slope / nu * np.exp(z - (1.0 / nu + 1.0) * softplus)

    def log_e_at_net(self, net: float) -> float:
        """Exact log E where the net density (D - base_fog) equals ``net`` (closed form)."""
        frac = float(net) / self.net_max
        if not 0.0 < frac < 1.0:
            raise ValueError(f"net density {net} is not reached: it must lie in (0, {self.net_max:g})")
        return self.log_e_mid - math.log(math.expm1(-self.asymmetry * math.log(frac))) / self.slope

    @property
    def gamma_log_exposure(self) -> float:
        """Log E of the steepest point: d2D/dlogE2 = 0 gives exp(z) = nu."""
        return self.log_e_mid - math.log(self.asymmetry) / self.slope

    @property
    def gamma(self) -> float:
        """Maximum slope, (dmax - base_fog) * k * (1 + nu) ** (-(1 + nu) / nu)."""
        nu = self.asymmetry
        return self.net_max * self.slope * (1.0 + nu) ** (-(1.0 + nu) / nu)

    def truth(self, *, low: float = 0.25, high: float = 2.00, speed_net: float = 1.00) -> dict[str, Any]:
        """Exact figures of the continuous model, named as in :class:`CurveFigures`.

        The average gradient is (high - low) / (log E_high - log E_low) between
        the net densities ``low`` and ``high`` (ISO 9236-1: 0.25 and 2.00).
        Gamma and its position come from the closed form of the maximum of
        :meth:`gradient` (the tests confirm them numerically).  A figure the
        film cannot reach is None.
        """

        def reach(net: float) -> float | None:
            return self.log_e_at_net(net) if 0.0 < net < self.net_max else None

        x_low, x_high, x_speed = reach(low), reach(high), reach(speed_net)
        span = x_high - x_low if x_low is not None and x_high is not None else None
        return {
            "base_fog": self.base_fog,
            "speed_log_exposure": x_speed,
            "average_gradient": (high - low) / span if span else None,
            "gradient_low_log_exposure": x_low,
            "gradient_high_log_exposure": x_high,
            "gamma": self.gamma,
            "gamma_log_exposure": self.gamma_log_exposure,
            "latitude_log_exposure": span,
            "dmax_asymptote": self.dmax,
            "settings": {"low": low, "high": high, "speed_net": speed_net},
        }


# --------------------------------------------------------------------------- objects


@dataclass(frozen=True)
class StripSpec:
    """One processed sensitometric strip on its own piece of film, placed on the platen.

    The step band runs along one long side of the film piece (``side_margin_mm``
    from its edge); unexposed film (base+fog) fills the rest beside the band.
    ``angle_deg`` is the direction step 1 -> step N, degrees counter-clockwise
    from +x as seen on screen.  Unflipped, the unexposed band lies to the right
    of that direction on screen (below the steps at angle 0); ``flip`` mirrors
    the piece so it lies on the other side.
    """

    film: FilmModel = field(default_factory=FilmModel)
    n_steps: int = 21
    increment: float = 0.15
    log_e_first: float = 0.0
    step_length_mm: float = 7.0
    band_width_mm: float = 14.0
    film_width_mm: float = 35.0
    end_margin_mm: float = 12.0
    center_mm: tuple[float, float] = (60.0, 50.0)
    angle_deg: float = 0.0
    flip: bool = False
    side_margin_mm: float = 0.0  # unexposed film between the step band and the near film edge

    def __post_init__(self) -> None:
        if self.n_steps < 1 or self.step_length_mm <= 0 or self.band_width_mm <= 0:
            raise ValueError("a strip needs at least one step of positive length and width")
        if self.end_margin_mm < 0 or self.side_margin_mm < 0:
            raise ValueError("margins cannot be negative")
        if self.side_margin_mm + self.band_width_mm > self.film_width_mm:
            raise ValueError("the step band (plus side margin) is wider than the film piece")

    @property
    def log_exposures(self) -> np.ndarray:
        """Log relative exposure of each step, step 1 first."""
        return self.log_e_first + self.increment * np.arange(self.n_steps)


@dataclass(frozen=True)
class TabletSpec:
    """A reference step tablet (steps across its full width) with certified densities.

    ``end_density`` is the clear film base at both ends.
    """

    densities: tuple[float, ...] = tuple(round(0.05 + 0.15 * k, 3) for k in range(21))
    step_length_mm: float = 10.0
    width_mm: float = 20.0
    end_margin_mm: float = 5.0
    center_mm: tuple[float, float] = (60.0, 50.0)
    angle_deg: float = 0.0
    end_density: float = 0.04

    def __post_init__(self) -> None:
        if not self.densities or self.step_length_mm <= 0 or self.width_mm <= 0 or self.end_margin_mm < 0:
            raise ValueError("a tablet needs steps of positive size and non-negative end margins")


# --------------------------------------------------------------------------- scanner


@dataclass(frozen=True)
class ScannerModel:
    """A flatbed scanner in transmission mode, all automatic corrections off.

    Signal (0..1 of full scale) for blurred, flared transmittance s at column x::

        gain * channel_gain * lamp(x) * warmup_gain * s ** response_gamma + dark_offset

    with ``lamp(x) = 1 - lamp_falloff * ((x - mid) / half) ** 2`` across the
    carriage (columns) — centred on the scan itself, or, with
    ``lamp_platen_mm``, on a platen of that width whose left edge is the
    scan's first column (a real lamp is fixed to the platen, and a scan of
    part of it starts at its corner) — then noise of sd ``sqrt(noise_sd**2 + shot_noise**2 * signal)``,
    clipping, encoding and quantisation to ``2**bits - 1``.

    The flare is ``s = (1 - f) T + f K * T`` with ``f = flare_fraction`` and a
    wide kernel K of total weight 1 (a uniform field is unchanged), shaped by
    ``flare_kernel``:

    * ``"gaussian"``: a Gaussian of sd ``flare_sigma_mm``;
    * ``"exponential"``: ``K(r) ∝ exp(-r / flare_sigma_mm)``, a long tail;
    * ``"two_gaussian"``: 0.7 of a Gaussian of sd ``flare_sigma_mm / 2``
      plus 0.3 of one of sd ``2 * flare_sigma_mm``.

    The flare acts on T before the lamp profile (the lamp multiplies the
    flared image), not on the light the lamp lets through: changing the order
    would change every default image, which the sample scans and tests rely on.
    """

    bits: int = 16  # 8 or 16
    encoding: str = "linear"  # or "srgb" (IEC 61966-2-1), as 8-bit scanners write
    channels: int = 1  # 1 grey or 3 RGB
    dark_offset: float = 0.002  # fraction of full scale added to every signal
    response_gamma: float = 0.97  # sensor non-linearity
    gain: float = 0.92  # signal of the clear platen
    lamp_falloff: float = 0.015  # parabolic across the carriage (columns)
    flare_fraction: float = 0.0005  # fraction of light spread by a wide kernel (veiling glare)
    flare_sigma_mm: float = 8.0  # the kernel's scale, see flare_kernel
    flare_kernel: str = "gaussian"  # or "exponential", "two_gaussian" (see the class notes)
    blur_sigma_px: float = 0.7  # optical blur
    noise_sd: float = 0.0015  # additive read noise, fraction of full scale
    shot_noise: float = 0.002  # signal-dependent noise
    warmup_gain: float = 1.0  # e.g. 1.01 for a cold first scan
    dust: int = 0  # dark specks (small discs, T x 0.1)
    scratches: int = 0  # thin bright lines where the emulsion is off (T raised towards the clear film)
    hairs: int = 0  # thin dark curved lines
    seed: int = 0
    channel_gains: tuple[float, float, float] = (1.0, 0.99, 1.02)  # RGB only
    lamp_platen_mm: float | None = None  # lamp centred on a platen this wide; None: on the scan itself

    def __post_init__(self) -> None:
        if self.bits not in (8, 16):
            raise ValueError(f"bits must be 8 or 16, got {self.bits}")
        if self.encoding not in ("linear", "srgb"):
            raise ValueError(f"encoding must be 'linear' or 'srgb', got {self.encoding!r}")
        if self.channels not in (1, 3):
            raise ValueError(f"channels must be 1 or 3, got {self.channels}")
        if not 0.0 <= self.flare_fraction < 1.0 or self.response_gamma <= 0:
            raise ValueError("need 0 <= flare_fraction < 1 and response_gamma > 0")
        if self.flare_kernel not in FLARE_KERNELS:
            raise ValueError(f"flare_kernel must be one of {', '.join(FLARE_KERNELS)}, got {self.flare_kernel!r}")
        if self.flare_fraction > 0 and not self.flare_sigma_mm > 0:
            raise ValueError(f"flare_sigma_mm must be positive, got {self.flare_sigma_mm}")

    def channel_gain(self, channel: int) -> float:
        return self.channel_gains[channel] if self.channels == 3 else 1.0


@dataclass(frozen=True)
class SimulatedScan:
    """A simulated scan and its exact ground truth (see :func:`simulate_scan`)."""

    image: np.ndarray  # (rows, cols) or (rows, cols, 3), uint8 or uint16, as the scanner writes it
    dpi: float
    scanner: ScannerModel
    truth: tuple[dict[str, Any], ...]  # one dict per object, in the order given
    defects: tuple[dict[str, Any], ...] = ()  # dust, scratches, hairs: kind, object index, position in px
