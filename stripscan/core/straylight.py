"""Stray light (veiling glare) of a flatbed scanner: the model, its fit and the correction.

A flatbed scanner spreads a small fraction of the light that passes the film
over centimetres (reflections in the glass, the lens and the housing).  A
dense step therefore reads lighter when much light lies around it and
denser when its neighbours are dark, so a map from signal to density that
was fitted on a tablet in one set of surroundings is wrong for a strip in
others.  This module models that light and takes it off each reading.

Model
-----
In the light that reaches the sensor, divided by the lamp's profile across
the carriage, the scanner sees::

    seen(p) = (1 - f) T(p) + sum_k f_k (G_k * T)(p),        f = sum_k f_k

where ``T`` is the transmittance of whatever lies on the platen (1 on the
open platen), ``G_k`` are normalised Gaussians of standard deviation
``sigma_k`` (a sum of a few Gaussians, chosen by the fit from a fixed set of
widths from 4 to 64 mm) and ``f_k >= 0`` their fractions.  The lamp is a
quadratic in the position across the carriage, ``1 + a u + b u**2`` with
``u`` in units of 100 mm.

This is the additive spread-function model behind the deconvolution
correction of veiling glare in radiographic imaging chains (Seibert,
Nalcioglu and Roeck, Med Phys 12 (1985) 281 — cited from memory): the
spread light is a wide convolution of the image, estimated from the
image itself and subtracted.

Correction
----------
The spread term is a wide blur, so it is computed on a reduced image (cells
of :data:`CELL_MM`), where the model is inverted by a fixed-point iteration
(it converges geometrically with ratio ``f / (1 - f)``, well under 1 %), and
the convolution is done by FFT on an edge-padded grid.  Each reading then
loses the spread light at its own place: ``T = (seen - F) / (1 - f)``.

Fit
---
The map from signal to density is free (a monotone curve through the
tablet's steps), so the tablet's step *means* cannot tell spread light from
the sensor's response.  The fit uses what can: how the light varies *inside*
areas of one transmittance — sub-areas of each tablet step, the open platen,
other uniform film — where only spread light and the lamp make it vary.
Those variations are regressed on the spread the model predicts for each
kernel width (non-negative fractions) and on the lamp's quadratic.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable, Sequence

import numpy as np

from stripscan.core.numerics import bilinear, fast_fft_length

__all__ = [
    "BASIS_SIGMA_MM",
    "CELL_MM",
    "LAMP_SCALE_MM",
    "ReducedScan",
    "SpreadField",
    "StrayLight",
    "Observation",
    "fit_stray_light",
    "platen_observations",
    "reduce_scan",
    "spread_field",
]

#: Side of the cells the spread light is computed on, mm.
CELL_MM = 2.0
#: Widths (standard deviations) of the Gaussians the kernel is built from, mm.
BASIS_SIGMA_MM = (4.0, 8.0, 16.0, 32.0, 64.0)
#: The lamp's quadratic is written in units of this many mm.
LAMP_SCALE_MM = 100.0
#: Smallest relative uncertainty given to the spread light a scan adds over
#: the tablet's: the kernel's true shape is not a sum of our Gaussians
#: (measured on simulated scans with exponential and two-width kernels).
SHAPE_UNCERTAINTY = 0.15
#: Share of a quantisation step that the mean of quantised pixels may be off by
#: where the noise is below one step (a dither bias that averaging does not remove).
QUANTISATION_BIAS = 0.15
#: How far (mm) beyond the positions it was fitted over the lamp's quadratic is used.
LAMP_REACH_MM = 5.0
#: Samples per cell side when the scan is reduced (a stride through the pixels).
_SAMPLES_PER_CELL = 8
#: Largest total fraction the fit may find; beyond it the scanner is unusable anyway.
_MAX_FRACTION = 0.05


@dataclass(frozen=True)
class StrayLight:
    """A scanner's stray light and lamp profile, as fitted from a scan.

    Attributes
    ----------
    sigmas_mm : tuple of float
        Widths of the Gaussian kernels, mm.
    fractions : tuple of float
        Fraction of the light each kernel spreads (same order), >= 0.
    relative_sd : float
        Relative standard uncertainty of the spread light from the kernel's
        shape, applied to the spread a scan has over what the tablet had at
        the same density.
    fraction_sd : float
        Standard uncertainty of the total fraction from the fit itself
        (absolute), applied to the spread per unit fraction a scan has over
        what the tablet had: it keeps a fraction fitted too small from
        passing unseen.
    lamp : (float, float)
        ``(a, b)`` of the lamp profile ``1 + a u + b u**2``, u = x / 100 mm,
        x the position across the carriage (the image's columns) in mm.
    lamp_span_mm : (float, float) or None
        Range of x (mm) the lamp was fitted over; None when the scan held
        no open platen to fit it on (the lamp is then taken as flat).
    cell_mm : float
        Cell size the model was fitted with, mm.
    source : str
        What it was fitted from.
    """

    sigmas_mm: tuple[float, ...]
    fractions: tuple[float, ...]
    relative_sd: float
    fraction_sd: float = 0.0
    lamp: tuple[float, float] = (0.0, 0.0)
    lamp_span_mm: tuple[float, float] | None = None
    cell_mm: float = CELL_MM
    source: str = ""

    def __post_init__(self) -> None:
        if len(self.sigmas_mm) != len(self.fractions) or not self.sigmas_mm:
            raise ValueError("stray light needs one fraction per kernel width")
        values = (*self.sigmas_mm, *self.fractions, self.relative_sd, self.fraction_sd, *self.lamp, self.cell_mm)
        if not all(math.isfinite(v) for v in values):
            raise ValueError("stray light values must be finite numbers")
        if min(self.sigmas_mm) <= 0 or min(self.fractions) < 0 or sum(self.fractions) >= 0.5:
            raise ValueError("kernel widths must be positive and fractions non-negative (total under 0.5)")
        if self.relative_sd < 0 or self.fraction_sd < 0 or self.cell_mm <= 0:
            raise ValueError("uncertainty and cell size must be positive")

    @property
    def total(self) -> float:
        """Total fraction of the light spread, f."""
        return float(sum(self.fractions))

    @property
    def shape(self) -> tuple[float, ...]:
        """Weights of the kernels in the spread per unit fraction (sum 1).

        Without any spread found, the middle width stands in: the fit's own
        uncertainty still needs a shape to act through.
        """
        if self.total > 0:
            return tuple(f / self.total for f in self.fractions)
        middle = len(self.sigmas_mm) // 2
        return tuple(1.0 if k == middle else 0.0 for k in range(len(self.sigmas_mm)))

    def lamp_factor(self, x_mm: np.ndarray | float) -> np.ndarray:
        """Relative lamp brightness at x (mm across the carriage)."""
        u = np.asarray(x_mm, dtype=np.float64) / LAMP_SCALE_MM
        a, b = self.lamp
        return 1.0 + a * u + b * u * u

    def to_dict(self) -> dict[str, Any]:
        return {
            "model": "gaussian sum",
            "sigmas_mm": list(self.sigmas_mm),
            "fractions": [float(f) for f in self.fractions],
            "total_fraction": self.total,
            "relative_sd": self.relative_sd,
            "fraction_sd": self.fraction_sd,
            "lamp": list(self.lamp),
            "lamp_span_mm": list(self.lamp_span_mm) if self.lamp_span_mm else None,
            "cell_mm": self.cell_mm,
            "source": self.source,
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "StrayLight":
        span = data.get("lamp_span_mm")
        return cls(
            sigmas_mm=tuple(float(v) for v in data["sigmas_mm"]),
            fractions=tuple(float(v) for v in data["fractions"]),
            relative_sd=float(data["relative_sd"]),
            fraction_sd=float(data.get("fraction_sd", 0.0)),
            lamp=(float(data["lamp"][0]), float(data["lamp"][1])),
            lamp_span_mm=(float(span[0]), float(span[1])) if span else None,
            cell_mm=float(data.get("cell_mm", CELL_MM)),
            source=str(data.get("source", "")),
        )


# --------------------------------------------------------------------------- reduced scan


@dataclass(frozen=True)
class ReducedScan:
    """A scan averaged over cells of about :data:`CELL_MM`.

    Attributes
    ----------
    signal : ndarray, shape (R, C)
        Mean linear signal of the pixels sampled in each cell.
    sem : ndarray, shape (R, C)
        Standard error of that mean.
    rows_px, cols_px : ndarray, shape (R,) and (C,)
        Centre of each cell row / column, in pixels of the full scan.
    cell_px : float
        Cell side, pixels of the full scan.
    pixel_mm : float
        Pixel pitch of the full scan, mm.
    """

    signal: np.ndarray
    sem: np.ndarray
    rows_px: np.ndarray
    cols_px: np.ndarray
    cell_px: float
    pixel_mm: float

    @property
    def cell_mm(self) -> float:
        return self.cell_px * self.pixel_mm

    def cells_of(self, rc: np.ndarray) -> np.ndarray:
        """Fractional (row, col) cell indices of full-scan positions, shape (2, n).

        Positions beyond the outermost cell centres belong to the outermost cells.
        """
        rc = np.atleast_2d(np.asarray(rc, dtype=np.float64))
        r = np.interp(rc[:, 0], self.rows_px, np.arange(self.rows_px.size, dtype=np.float64))
        c = np.interp(rc[:, 1], self.cols_px, np.arange(self.cols_px.size, dtype=np.float64))
        return np.vstack((r, c))


def _block_stats(values: np.ndarray, block: int, axis: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    starts = np.arange(0, values.shape[axis], block)
    counts = np.diff(np.append(starts, values.shape[axis]))
    return starts, counts, np.add.reduceat(values, starts, axis=axis)


def reduce_scan(scan: Any, *, cell_mm: float = CELL_MM) -> ReducedScan:
    """Average a scan over cells of about ``cell_mm``, from a stride through its pixels.

    Parameters
    ----------
    scan : Scan
        Needs ``raw``, ``decode`` and ``pixel_mm``.
    cell_mm : float

    Returns
    -------
    ReducedScan

    Notes
    -----
    Only about 8 x 8 pixels per cell are decoded (every ``stride``-th
    pixel), so a 600-dpi page costs a fraction of a full decode; the spread
    light is smooth over centimetres, so the cell means need no more.
    """
    pixel_mm = scan.pixel_mm
    if not pixel_mm:
        raise ValueError("the scan's resolution is unknown; stray light is computed in millimetres")
    cell_px = cell_mm / pixel_mm
    stride = max(1, int(round(cell_px / _SAMPLES_PER_CELL)))
    block = max(1, int(round(cell_px / stride)))
    sample = np.asarray(scan.decode(scan.raw[::stride, ::stride]), dtype=np.float64)
    r_starts, r_counts, sums = _block_stats(sample, block, 0)
    c_starts, c_counts, sums = _block_stats(sums, block, 1)
    _, _, squares = _block_stats(np.square(sample), block, 0)
    _, _, squares = _block_stats(squares, block, 1)
    n = r_counts[:, None] * c_counts[None, :]
    mean = sums / n
    var = np.maximum(squares / n - mean * mean, 0.0) * n / np.maximum(n - 1, 1)
    rows_px = stride * (r_starts + 0.5 * (r_counts - 1))
    cols_px = stride * (c_starts + 0.5 * (c_counts - 1))
    return ReducedScan(mean, np.sqrt(var / n), rows_px.astype(np.float64), cols_px.astype(np.float64),
                       float(block * stride), float(pixel_mm))


# --------------------------------------------------------------------------- convolution


class _Blur:
    """Gaussian blurs of one grid by FFT on an edge-padded copy (the edge cells extend outwards)."""

    def __init__(self, shape: tuple[int, int], cell_mm: float, sigmas_mm: Sequence[float]):
        self.shape = shape
        sig_cells = np.asarray(sigmas_mm, dtype=np.float64) / cell_mm
        self.pad = int(math.ceil(3.0 * sig_cells.max())) + 1
        rows, cols = shape[0] + 2 * self.pad, shape[1] + 2 * self.pad
        # Sizes with small prime factors keep the FFT fast.
        self.full = (fast_fft_length(rows), fast_fft_length(cols))
        fr = np.fft.fftfreq(self.full[0])[:, None]
        fc = np.fft.rfftfreq(self.full[1])[None, :]
        # Transfer function of a sampled Gaussian (continuous approximation, exact to
        # well under 1e-3 for sd >= 1 cell).
        self.transfer = [np.exp(-2.0 * math.pi**2 * s * s * (fr * fr + fc * fc)) for s in sig_cells]

    def _spectrum(self, image: np.ndarray, mode: str = "edge") -> np.ndarray:
        padded = np.pad(image, self.pad, mode=mode)
        padded = np.pad(padded, ((0, self.full[0] - padded.shape[0]), (0, self.full[1] - padded.shape[1])),
                        mode=mode)
        return np.fft.rfft2(padded)

    def _back(self, spectrum: np.ndarray) -> np.ndarray:
        out = np.fft.irfft2(spectrum, s=self.full)
        p = self.pad
        return out[p : p + self.shape[0], p : p + self.shape[1]]

    def each(self, image: np.ndarray) -> list[np.ndarray]:
        spectrum = self._spectrum(image)
        return [self._back(spectrum * t) for t in self.transfer]

    def weighted(self, image: np.ndarray, weights: Sequence[float], *, mode: str = "edge") -> np.ndarray:
        """The weighted sum of the blurs; ``mode`` "constant" takes nothing from beyond the edges."""
        spectrum = self._spectrum(image, mode)
        total = sum(w * t for w, t in zip(weights, self.transfer) if w > 0)
        if isinstance(total, int):
            return np.zeros(self.shape)
        return self._back(spectrum * total)


def _invert(seen: np.ndarray, blur: _Blur, fractions: Sequence[float], *, iterations: int = 4) -> np.ndarray:
    """Transmittance T with (1 - f) T + sum f_k G_k * T = seen, by fixed-point iteration."""
    f = float(sum(fractions))
    if f <= 0:
        return seen.copy()
    t = seen.copy()
    for _ in range(iterations):
        t = np.maximum((seen - blur.weighted(t, fractions)) / (1.0 - f), 0.0)
    return t


@dataclass(frozen=True)
class SpreadField:
    """The spread light over one scan, ready to be read at any place.

    Attributes
    ----------
    spread : ndarray, shape (R, C)
        Spread light per cell, in units of the open platen's light (lamp divided out).
    unit : ndarray, shape (R, C)
        Spread per unit fraction (the kernel's shape applied to the scan).
    outside : ndarray, shape (R, C)
        The part of ``spread`` that comes from beyond the scan's edges, where
        the scan is taken to go on as its edge cells are; what really lies
        there is not known, so this part is uncertain.
    reduced : ReducedScan
        The grid it lives on.
    model : StrayLight
    """

    spread: np.ndarray
    unit: np.ndarray
    outside: np.ndarray
    reduced: ReducedScan
    model: StrayLight

    def values_at(self, rc: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Spread, spread per unit fraction, spread from beyond the edges and lamp at positions.

        Values are bilinear between cell centres.  The lamp's quadratic is not
        extrapolated: beyond the positions it was fitted over (plus
        :data:`LAMP_REACH_MM`) the lamp is taken as at their end, and the
        analysis warns that the place was not measured.

        Parameters
        ----------
        rc : ndarray, shape (n, 2)
            Full-scan positions (row, col), px.

        Returns
        -------
        spread, unit, outside, lamp : ndarray, shape (n,)
        """
        rc = np.atleast_2d(np.asarray(rc, dtype=np.float64))
        coords = self.reduced.cells_of(rc)
        values = [bilinear(a, *coords) for a in (self.spread, self.unit, self.outside)]
        x = rc[:, 1] * self.reduced.pixel_mm
        span = self.model.lamp_span_mm
        if span is not None:
            x = np.clip(x, span[0] - LAMP_REACH_MM, span[1] + LAMP_REACH_MM)
        return values[0], values[1], values[2], self.model.lamp_factor(x)


def _seen_light(reduced: ReducedScan, to_light: Callable[[np.ndarray], np.ndarray], model: StrayLight) -> np.ndarray:
    light = to_light(reduced.signal.ravel()).reshape(reduced.signal.shape)
    return light / model.lamp_factor(reduced.cols_px * reduced.pixel_mm)[None, :]


def spread_field(reduced: ReducedScan, to_light: Callable[[np.ndarray], np.ndarray], model: StrayLight) -> SpreadField:
    """The spread light over a scan, by inverting the model on its reduced image.

    Parameters
    ----------
    reduced : ReducedScan
    to_light : callable
        Linear signal -> light seen (1 for the open platen), the calibration's
        inverse response; applied to the cell means.
    model : StrayLight
    """
    seen = _seen_light(reduced, to_light, model)
    blur = _Blur(seen.shape, reduced.cell_mm, model.sigmas_mm)
    t = _invert(seen, blur, model.fractions)
    spread = blur.weighted(t, model.fractions)
    inside = blur.weighted(t, model.fractions, mode="constant")
    unit = blur.weighted(t, model.shape)
    return SpreadField(spread, unit, np.maximum(spread - inside, 0.0), reduced, model)


# --------------------------------------------------------------------------- fit


@dataclass(frozen=True)
class Observation:
    """Light read in sub-areas of one area of uniform transmittance.

    Attributes
    ----------
    rc : ndarray, shape (n, 2)
        Centres of the sub-areas, full-scan pixels (row, col).
    signal : ndarray, shape (n,)
        Mean linear signal of each sub-area.
    sem : ndarray, shape (n,)
        Standard error of each mean.
    """

    rc: np.ndarray
    signal: np.ndarray
    sem: np.ndarray


def platen_observations(reduced: ReducedScan, to_light: Callable[[np.ndarray], np.ndarray],
                        *, exclude: np.ndarray | None = None, max_density: float = 0.03) -> Observation | None:
    """Open-platen cells of a reduced scan: light cells away from any film edge.

    ``exclude`` (bool, shape (R, C)) marks cells to leave out (e.g. a tablet).
    """
    light = to_light(reduced.signal.ravel()).reshape(reduced.signal.shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        density = -np.log10(np.clip(light, 1e-9, None))
    # The lamp alone can take a few hundredths off the platen at its ends, so
    # the threshold is relative to the brightest cells of each column.
    top = np.percentile(light, 95.0, axis=0)[None, :]
    platen = (density < max_density + 0.05) & (light > top * 10.0 ** (-max_density))
    if exclude is not None:
        platen &= ~exclude
    # Keep cells whose neighbours are platen too: the optics blur film edges.
    from scipy import ndimage  # fitting only: the analysis of a scan does without scipy (see numerics.py)

    platen = ndimage.binary_erosion(platen, structure=np.ones((3, 3), bool), border_value=1)
    if np.count_nonzero(platen) < 20:
        return None
    rr, cc = np.nonzero(platen)
    rc = np.column_stack((reduced.rows_px[rr], reduced.cols_px[cc]))
    return Observation(rc, reduced.signal[rr, cc], np.maximum(reduced.sem[rr, cc], 1e-9))


def fit_stray_light(
    reduced: ReducedScan,
    to_light: Callable[[np.ndarray], np.ndarray],
    light_slope: Callable[[np.ndarray], np.ndarray],
    areas: Sequence[Observation],
    *,
    platen: Observation | None = None,
    sigmas_mm: Sequence[float] = BASIS_SIGMA_MM,
    code_step: Callable[[np.ndarray], np.ndarray] | None = None,
    source: str = "",
) -> tuple[StrayLight, dict[str, Any]]:
    """Fit the stray light and lamp from light variations inside uniform areas.

    Parameters
    ----------
    reduced : ReducedScan
        The whole scan, reduced (the light that spreads comes from all of it).
    to_light : callable
        Signal -> light seen (1 = open platen), vectorised.
    light_slope : callable
        Signal -> d(light)/d(signal), vectorised; converts signal errors.
    areas : sequence of Observation
        Areas of one transmittance each (tablet steps, uniform film).
    platen : Observation, optional
        Open-platen cells (also a uniform area; they carry the lamp profile).
    sigmas_mm : sequence of float
        Kernel widths to build the model from.
    code_step : callable, optional
        Signal -> quantisation step of the scan at that signal; each
        observation's uncertainty is floored at :data:`QUANTISATION_BIAS` of
        it, since means of coarsely quantised pixels are biased by a
        pattern that follows the signal level (8-bit scans).
    source : str
        Recorded with the model.

    Returns
    -------
    model : StrayLight
    info : dict
        ``chi2``, ``n`` and ``fraction_sd`` of the fit.

    Notes
    -----
    Light in an area of one transmittance T_j varies only through the lamp
    and the spread light: ``light_c = lamp_c ((1 - f) T_j + F_c)``.  Taking
    each area's mean off leaves ``light_c - mean = L_j (lamp_c - mean) + (F_c - mean)``,
    linear in the lamp's two coefficients and in the fractions f_k given the
    blurred images ``G_k * T`` (T from the previous pass).  Three passes.
    """
    from scipy.optimize import lsq_linear  # fitting only: the analysis of a scan does without scipy

    groups = [a for a in areas if a.signal.size >= 3]
    if platen is not None and platen.signal.size >= 3:
        groups = groups + [platen]
    if not groups:
        raise ValueError("no uniform areas to fit the stray light on")
    model = StrayLight(tuple(sigmas_mm), tuple(0.0 for _ in sigmas_mm), SHAPE_UNCERTAINTY, source=source)
    blur = _Blur(reduced.signal.shape, reduced.cell_mm, sigmas_mm)
    info: dict[str, Any] = {}
    for _ in range(3):
        seen = _seen_light(reduced, to_light, model)
        t = _invert(seen, blur, model.fractions)
        basis = blur.each(t)
        rows_a, rows_b = [], []
        for g in groups:
            light = to_light(g.signal)
            sem = g.sem if code_step is None else np.hypot(g.sem, QUANTISATION_BIAS * code_step(g.signal))
            sd = np.abs(light_slope(g.signal)) * sem
            u = g.rc[:, 1] * reduced.pixel_mm / LAMP_SCALE_MM
            coords = reduced.cells_of(g.rc)
            spreads = [bilinear(b, *coords) for b in basis]
            level = float(np.mean(light))
            cols = [level * (u - u.mean()), level * (u * u - np.mean(u * u))]
            cols += [s - s.mean() for s in spreads]
            design = np.column_stack(cols)
            # Floor the weights: a few cells read extremely well, but the model is not that exact.
            weight = 1.0 / np.maximum(sd, 1e-6)
            rows_a.append(design * weight[:, None])
            rows_b.append((light - light.mean()) * weight)
        a = np.vstack(rows_a)
        b = np.concatenate(rows_b)
        k = len(sigmas_mm)
        lower = np.array([-np.inf, -np.inf] + [0.0] * k)
        upper = np.array([np.inf, np.inf] + [_MAX_FRACTION] * k)
        solution = lsq_linear(a, b, bounds=(lower, upper), method="bvls")
        x = solution.x
        residual = b - a @ x
        dof = max(a.shape[0] - np.count_nonzero(np.abs(x) > 0), 1)
        chi2 = float(residual @ residual) / dof
        fractions = tuple(max(float(v), 0.0) for v in x[2:])  # the solver may return -1e-19
        # Uncertainty of the total fraction from the whole design, bounds ignored: how well
        # the data pin the total down whatever the kernel's shape (a fraction held at its
        # bound of 0 could as well be larger), scaled by how well the model fits.
        try:
            cov = np.linalg.pinv(a.T @ a) * max(chi2, 1.0)
            pick = np.array([0.0, 0.0] + [1.0] * k)
            fraction_sd = float(math.sqrt(max(pick @ cov @ pick, 0.0)))
        except np.linalg.LinAlgError:
            fraction_sd = float("inf")
        span = None
        if platen is not None and platen.signal.size >= 3:
            x_mm = platen.rc[:, 1] * reduced.pixel_mm
            span = (float(x_mm.min()), float(x_mm.max()))
        lamp = (float(x[0]), float(x[1])) if span is not None else (0.0, 0.0)
        model = StrayLight(
            tuple(float(s) for s in sigmas_mm),
            fractions,
            SHAPE_UNCERTAINTY,
            fraction_sd=fraction_sd if math.isfinite(fraction_sd) else _MAX_FRACTION,
            lamp=lamp,
            lamp_span_mm=span,
            cell_mm=reduced.cell_mm,
            source=source,
        )
        info = {"chi2": chi2, "n": int(a.shape[0]), "fraction_sd": fraction_sd}
    return model, info
