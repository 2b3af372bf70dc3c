"""Simulated flatbed scans of sensitometric strips and step tablets, with exact ground truth.

The simulator renders the transmittance T of each film piece on the pixel
grid, passes it through a model of a flatbed scanner in transmission mode
(blur, flare, lamp falloff, sensor non-linearity, noise, encoding) and
returns the image as the scanner would write it, together with the exact
truth: densities per step, the continuous model's figures and the geometry.

Conventions
-----------
Optical density D = -log10 T (ISO 5-2).  The platen is given in millimetres,
x to the right and y down from its top-left corner.  Pixel (r, c) has its
centre at (row r, col c) and covers r - 0.5 .. r + 0.5 (scipy / skimage
convention), so a platen point (x, y) mm lies at
``col = x / pitch - 0.5, row = y / pitch - 0.5`` with ``pitch = 25.4 / dpi``.
Geometry truth follows :class:`~stripscan.core.records.StripGeometry`: ``u``
runs from the outer edge of step 1 towards step N, ``v`` across the step band
from its edge away from the unexposed band (v = 0) towards it.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Any, NamedTuple, Sequence

import numpy as np
from numpy.typing import ArrayLike
from scipy import ndimage
from scipy.signal import fftconvolve

from stripscan.core.records import StripGeometry

from stripscan.sim.objects import ScannerModel, SimulatedScan, StripSpec, TabletSpec

__all__ = [
    "simulate_scan",
    "render_transmittance", "expected_signal", "srgb_encode", "write_tiff", "write_certificate",
]

_CHUNK_ROWS = 256  # rows rendered at a time: bounds the temporaries for large boxes



# --------------------------------------------------------------------------- layout


class _Layout(NamedTuple):
    """An object in pixel units: a grid of constant-T cells in its (u, v) frame."""

    geometry: StripGeometry
    u_range: tuple[float, float]  # extent of the film piece along u, px
    v_range: tuple[float, float]
    breaks_u: np.ndarray  # cell boundaries along u, px, increasing
    breaks_v: np.ndarray
    table: np.ndarray  # (len(breaks_u)+1, len(breaks_v)+1) float32 T; outer cells are open platen
    clear_density: float  # density left where a scratch takes the emulsion off

    def film_outline_rc(self) -> list[tuple[float, float]]:
        (u0, u1), (v0, v1) = self.u_range, self.v_range
        return [self.geometry.point_rc(u, v) for u, v in ((u0, v0), (u1, v0), (u1, v1), (u0, v1))]


def _direction(angle_deg: float) -> tuple[float, float]:
    """(cos, sin) of the angle, exact at multiples of 90 degrees."""
    if angle_deg % 90.0 == 0.0:
        return ((1.0, 0.0), (0.0, 1.0), (-1.0, 0.0), (0.0, -1.0))[int(round(angle_deg / 90.0)) % 4]
    a = math.radians(angle_deg)
    return math.cos(a), math.sin(a)


def _layout(obj: StripSpec | TabletSpec, pitch: float) -> _Layout:
    cos, sin = _direction(obj.angle_deg)
    axis = (-sin, cos)  # (d_row, d_col): counter-clockwise on screen, rows grow downwards
    if isinstance(obj, StripSpec):
        densities = np.asarray(obj.film.density(obj.log_exposures), dtype=np.float64)
        surround, width, side = obj.film.base_fog, obj.band_width_mm, obj.side_margin_mm
        v_edges_mm = [-side, 0.0, width, obj.film_width_mm - side]
        normal = (-cos, -sin) if obj.flip else (cos, sin)
        clear = obj.film.base_fog
    elif isinstance(obj, TabletSpec):
        densities = np.asarray(obj.densities, dtype=np.float64)
        surround, width = obj.end_density, obj.width_mm
        v_edges_mm = [0.0, width]
        normal = (cos, sin)
        clear = obj.end_density
    else:
        raise TypeError(f"expected StripSpec or TabletSpec, got {type(obj).__name__}")
    n, step, margin = len(densities), obj.step_length_mm, obj.end_margin_mm
    u_edges_mm = [-margin] + [step * k for k in range(n + 1)] + [n * step + margin]
    bu = np.unique(np.asarray(u_edges_mm) / pitch)
    bv = np.unique(np.asarray(v_edges_mm) / pitch)
    # Place the film piece's centre at center_mm: origin = centre - u_c * axis - v_c * normal.
    u_c, v_c = 0.5 * (bu[0] + bu[-1]), 0.5 * (bv[0] + bv[-1])
    x_mm, y_mm = obj.center_mm
    row_c, col_c = y_mm / pitch - 0.5, x_mm / pitch - 0.5
    origin = (row_c - u_c * axis[0] - v_c * normal[0], col_c - u_c * axis[1] - v_c * normal[1])

    step_px, band_px = step / pitch, width / pitch
    table = np.ones((len(bu) + 1, len(bv) + 1), dtype=np.float64)
    for i in range(1, len(bu)):
        u_mid = 0.5 * (bu[i - 1] + bu[i])
        for j in range(1, len(bv)):
            v_mid = 0.5 * (bv[j - 1] + bv[j])
            in_steps = 0.0 < u_mid < n * step_px and 0.0 < v_mid < band_px
            d = densities[int(u_mid // step_px)] if in_steps else surround
            table[i, j] = 10.0 ** -d
    film_v_end = bv[-1]
    geometry = StripGeometry(
        origin_rc=(float(origin[0]), float(origin[1])),
        axis_rc=(float(axis[0]), float(axis[1])),
        normal_rc=(float(normal[0]), float(normal[1])),
        step_pitch_px=float(step_px),
        n_steps=n,
        band_width_px=float(band_px),
        base_fog_v_px=(float(band_px), float(film_v_end)) if film_v_end > band_px else None,
    )
    return _Layout(geometry, (float(bu[0]), float(bu[-1])), (float(bv[0]), float(bv[-1])), bu, bv,
                   table.astype(np.float32), float(clear))


def _truth(obj: StripSpec | TabletSpec, lay: _Layout) -> dict[str, Any]:
    geom = lay.geometry

    def rc(point: tuple[float, float]) -> list[float]:
        return [float(point[0]), float(point[1])]

    common = {
        "angle_deg": geom.angle_deg,
        "step_centers_rc": [rc(geom.step_center_rc(k)) for k in range(1, geom.n_steps + 1)],
        "outline_rc": [rc(p) for p in geom.outline_rc()],
        "film_outline_rc": [rc(p) for p in lay.film_outline_rc()],
        "step_length_px": geom.step_pitch_px,
        "band_width_px": geom.band_width_px,
        "geometry": {**geom.to_dict(), "origin_rc": rc(geom.origin_rc), "axis_rc": rc(geom.axis_rc),
                     "normal_rc": rc(geom.normal_rc),
                     "base_fog_v_px": list(geom.base_fog_v_px) if geom.base_fog_v_px else None},
    }
    if isinstance(obj, TabletSpec):
        od = [float(d) for d in obj.densities]
        return {"kind": "tablet", "n_steps": len(od), "od": od, "end_density": obj.end_density, **common}
    od = [float(d) for d in obj.film.density(obj.log_exposures)]
    bf = geom.base_fog_v_px
    return {
        "kind": "strip",
        "n_steps": obj.n_steps,
        "increment": obj.increment,
        "log_exposure": [float(x) for x in obj.log_exposures],
        "od": od,
        "base_fog": obj.film.base_fog,
        "dmax_strip": max(od),
        "figures": obj.film.truth(),
        "flip": obj.flip,
        "base_fog_center_rc": rc(geom.point_rc(0.5 * geom.length_px, 0.5 * (bf[0] + bf[1]))) if bf else None,
        **common,
    }


# --------------------------------------------------------------------------- rendering


def _footprint(direction: tuple[float, float]) -> tuple[float, float]:
    """A unit pixel projected on a unit direction is the sum of two uniforms: their widths, larger first."""
    p, q = abs(direction[0]), abs(direction[1])
    return max(p, q), min(p, q)


def _fraction_below(t: np.ndarray, a: float, b: float) -> np.ndarray:
    """Area fraction of a unit pixel on the low side of a straight edge.

    ``t`` is the edge's position minus the pixel centre along the edge normal,
    whose components are ``a >= b`` in absolute value.  The pixel projects to a
    trapezoid (two uniform distributions of widths a and b), whose CDF is exact.
    """
    t = t.astype(np.float32)
    at = np.abs(t)
    if b < 1e-9:
        low = np.clip(0.5 - at / a, 0.0, 1.0)
    else:
        g = np.maximum(0.5 * (a + b) - at, 0.0)
        low = np.where(at <= 0.5 * (a - b), 0.5 - at / a, g * g / (2.0 * a * b))
    return np.where(t < 0, low, 1.0 - low)


def _row_span(corners: np.ndarray, r0: float, r1: float) -> tuple[float, float] | None:
    """Column extent of a convex polygon (corners (row, col)) within rows r0..r1."""
    cols = [c for r, c in corners if r0 <= r <= r1]
    for (ra, ca), (rb, cb) in zip(corners, np.roll(corners, -1, axis=0)):
        for r in (r0, r1):
            if min(ra, rb) <= r <= max(ra, rb) and ra != rb:
                cols.append(ca + (r - ra) * (cb - ca) / (rb - ra))
    return (min(cols), max(cols)) if cols else None


def _render_object(T: np.ndarray, lay: _Layout) -> None:
    """Multiply T by the object's transmittance, by area coverage, within its outline only."""
    geom = lay.geometry
    corners = np.asarray(lay.film_outline_rc())
    a, b = _footprint(geom.axis_rc)
    if np.diff(lay.breaks_u).min(initial=np.inf) < a + b or np.diff(lay.breaks_v).min(initial=np.inf) < a + b:
        raise ValueError("a feature of the object is narrower than about 1.5 px at this resolution")
    mid_u = 0.5 * (lay.breaks_u[:-1] + lay.breaks_u[1:])
    mid_v = 0.5 * (lay.breaks_v[:-1] + lay.breaks_v[1:])
    flat = lay.table.ravel()
    nv = lay.table.shape[1]
    rows, cols = T.shape
    top = max(0, math.floor(corners[:, 0].min()) - 1)
    bottom = min(rows, math.ceil(corners[:, 0].max()) + 2)
    (r_o, c_o), (ar, ac), (nr, nc) = geom.origin_rc, geom.axis_rc, geom.normal_rc
    for start in range(top, bottom, _CHUNK_ROWS):
        stop = min(bottom, start + _CHUNK_ROWS)
        span = _row_span(corners, start - 1.0, stop)
        if span is None:
            continue
        left, right = max(0, math.floor(span[0]) - 1), min(cols, math.ceil(span[1]) + 2)
        if left >= right:
            continue
        dr = np.arange(start, stop, dtype=np.float64)[:, None] - r_o
        dc = np.arange(left, right, dtype=np.float64)[None, :] - c_o
        u, v = dr * ar + dc * ac, dr * nr + dc * nc
        ju, jv = np.searchsorted(mid_u, u), np.searchsorted(mid_v, v)  # nearest cell boundary
        fu = _fraction_below(lay.breaks_u[ju] - u, a, b)
        fv = _fraction_below(lay.breaks_v[jv] - v, a, b)
        k = ju * nv + jv  # cell below both boundaries; +nv steps along u, +1 along v
        t_obj = fu * (fv * flat[k] + (1 - fv) * flat[k + 1])
        t_obj += (1 - fu) * (fv * flat[k + nv] + (1 - fv) * flat[k + nv + 1])
        T[start:stop, left:right] *= t_obj


def render_transmittance(
    objects: Sequence[StripSpec | TabletSpec], *, platen_mm: tuple[float, float] = (110.0, 175.0), dpi: float = 300.0
) -> np.ndarray:
    """Noiseless transmittance of the platen, (rows, cols) float32, before the optics.

    Overlapping film pieces multiply their transmittances; the open platen has T = 1.
    """
    pitch = 25.4 / dpi
    return _render(platen_mm, pitch, [_layout(obj, pitch) for obj in objects])


def _render(platen_mm: tuple[float, float], pitch: float, layouts: list[_Layout]) -> np.ndarray:
    T = np.ones((round(platen_mm[1] / pitch), round(platen_mm[0] / pitch)), dtype=np.float32)
    for lay in layouts:
        _render_object(T, lay)
    return T


def _box(T: np.ndarray, points: np.ndarray, pad: float) -> tuple[slice, slice, np.ndarray, np.ndarray] | None:
    r0, c0 = np.floor(points.min(axis=0) - pad).astype(int)
    r1, c1 = np.ceil(points.max(axis=0) + pad).astype(int) + 1
    r0, c0, r1, c1 = max(r0, 0), max(c0, 0), min(r1, T.shape[0]), min(c1, T.shape[1])
    if r0 >= r1 or c0 >= c1:
        return None
    return slice(r0, r1), slice(c0, c1), np.arange(r0, r1, dtype=np.float64), np.arange(c0, c1, dtype=np.float64)


def _stamp_disc(T: np.ndarray, center: np.ndarray, radius: float, factor: float) -> None:
    """Multiply T by ``factor`` inside a disc, area coverage by 4 x 4 supersampling."""
    box = _box(T, center[None, :], radius + 1.0)
    if box is None:
        return
    rs, cs, rr, cc = box
    sub = (np.arange(4) + 0.5) / 4 - 0.5
    fr = (rr[:, None] + sub[None, :]).ravel() - center[0]
    fc = (cc[:, None] + sub[None, :]).ravel() - center[1]
    inside = (fr[:, None] ** 2 + fc[None, :] ** 2) <= radius * radius
    cover = inside.reshape(len(rr), 4, len(cc), 4).mean(axis=(1, 3))
    T[rs, cs] *= (1.0 - (1.0 - factor) * cover).astype(np.float32)


def _line_cover(T: np.ndarray, points: np.ndarray, half_width: float) -> tuple[slice, slice, np.ndarray] | None:
    """Coverage (0..1) of the pixels near a polyline of the given half width, px."""
    box = _box(T, points, half_width + 1.5)
    if box is None:
        return None
    rs, cs, rr, cc = box
    dist = np.full((len(rr), len(cc)), np.inf)
    for p, q in zip(points[:-1], points[1:]):
        w = q - p
        t = np.clip(((rr[:, None] - p[0]) * w[0] + (cc[None, :] - p[1]) * w[1]) / max(w @ w, 1e-12), 0.0, 1.0)
        dist = np.minimum(dist, np.hypot(rr[:, None] - p[0] - t * w[0], cc[None, :] - p[1] - t * w[1]))
    # Overlap of the line's cross-section with the pixel's unit width (good for thin lines).
    cover = np.clip(np.minimum(dist + half_width, 0.5) - np.maximum(dist - half_width, -0.5), 0.0, 1.0)
    return rs, cs, cover.astype(np.float32)


def _add_defects(T: np.ndarray, layouts: list[_Layout], sc: ScannerModel, rng: np.random.Generator,
                 pitch: float) -> list[dict[str, Any]]:
    """Draw dust, scratches and hairs on T (before the optics); return their truth."""
    defects: list[dict[str, Any]] = []

    def place() -> tuple[np.ndarray, int | None]:
        if not layouts:
            return rng.uniform((0, 0), T.shape), None
        index = int(rng.integers(len(layouts)))
        lay = layouts[index]
        u, v = rng.uniform(*lay.u_range), rng.uniform(*lay.v_range)
        return np.asarray(lay.geometry.point_rc(u, v)), index

    def heading() -> np.ndarray:
        a = rng.uniform(0.0, math.pi)
        return np.array([math.sin(a), math.cos(a)])

    for _ in range(sc.dust):
        center, index = place()
        radius = rng.uniform(0.03, 0.12) / pitch
        _stamp_disc(T, center, radius, 0.1)
        defects.append({"kind": "dust", "object": index, "center_rc": center.tolist(), "radius_px": radius})
    for _ in range(sc.scratches):
        center, index = place()
        half = 0.5 * rng.uniform(3.0, 12.0) / pitch * heading()
        ends = np.stack([center - half, center + half])
        half_width = 0.5 * rng.uniform(0.02, 0.06) / pitch
        depth = rng.uniform(0.6, 1.0)
        cover = _line_cover(T, ends, half_width)
        if cover is not None:
            rs, cs, cov = cover
            t_clear = np.float32(10.0 ** -(layouts[index].clear_density if index is not None else 0.0))
            T[rs, cs] += np.maximum(t_clear - T[rs, cs], 0) * (depth * cov)
        defects.append({"kind": "scratch", "object": index, "ends_rc": ends.tolist(), "width_px": 2 * half_width})
    for _ in range(sc.hairs):
        center, index = place()
        length = rng.uniform(8.0, 30.0) / pitch
        along = heading()
        bend = rng.uniform(-0.3, 0.3) * length * np.array([along[1], -along[0]])
        p0, p2 = center - 0.5 * length * along, center + 0.5 * length * along
        t = np.linspace(0.0, 1.0, 41)[:, None]
        points = (1 - t) ** 2 * p0 + 2 * t * (1 - t) * (center + bend) + t**2 * p2  # quadratic Bezier
        half_width = 0.5 * rng.uniform(0.05, 0.10) / pitch
        cover = _line_cover(T, points, half_width)
        if cover is not None:
            rs, cs, cov = cover
            T[rs, cs] *= 1.0 - 0.95 * cov
        defects.append({"kind": "hair", "object": index, "points_rc": points.tolist(), "width_px": 2 * half_width})
    return defects


# --------------------------------------------------------------------------- scanner pipeline


def _block_mean(image: np.ndarray, factor: int) -> np.ndarray:
    """Means of ``factor`` x ``factor`` blocks (the last row and column of blocks may be smaller)."""
    small = image
    for axis in (0, 1):
        starts = np.arange(0, image.shape[axis], factor)
        counts = np.diff(np.append(starts, image.shape[axis])).astype(np.float32)
        small = np.add.reduceat(small, starts, axis=axis) / (counts[:, None] if axis == 0 else counts)
    return small


def _exponential_kernel(scale: float, *, tail: float = 12.0, oversample: int = 5) -> np.ndarray:
    """Discrete kernel ∝ exp(-r / scale) (r, scale in pixels), weights summing to 1.

    Each weight is the kernel's mean over its pixel (``oversample`` points a
    side), so the cusp at r = 0 is not over-weighted; it is cut off at
    ``tail * scale``, where the weight left outside is (1 + tail) e**-tail
    (below 1e-4 for 12).
    """
    radius = max(1, int(math.ceil(tail * scale)))
    sub = (np.arange(oversample) + 0.5) / oversample - 0.5
    x = (np.arange(-radius, radius + 1)[:, None] + sub[None, :]).ravel()
    r = np.hypot(x[:, None], x[None, :])
    n = 2 * radius + 1
    kernel = np.exp(-r / scale).reshape(n, oversample, n, oversample).mean(axis=(1, 3))
    return kernel / kernel.sum()


def _wide_flare(image: np.ndarray, sc: ScannerModel, pitch: float) -> tuple[np.ndarray, np.ndarray]:
    """The flare kernel applied to the image, as two factors: ``rows @ across`` is the result.

    The kernel runs on a block-averaged image (blocks about a third of the
    kernel's narrowest scale), the platen's edge continued outwards
    (``nearest``); the factors upsample the result bilinearly, so the
    full-resolution image is made a band at a time and the memory stays that
    of the reduced image.
    """
    sigma_px = sc.flare_sigma_mm / pitch
    narrowest = 0.5 * sigma_px if sc.flare_kernel == "two_gaussian" else sigma_px
    factor = max(1, int(narrowest // 3))
    small = _block_mean(image, factor)

    def gaussian(sigma: float) -> np.ndarray:
        # The block mean is itself a box filter of variance factor**2 / 12: take it off the kernel.
        sigma_small = math.sqrt(max(sigma**2 - factor**2 / 12.0, 0.0)) / factor
        return ndimage.gaussian_filter(small.astype(np.float32), sigma_small, mode="nearest")

    if sc.flare_kernel == "gaussian":
        small = gaussian(sigma_px)
    elif sc.flare_kernel == "two_gaussian":
        small = 0.7 * gaussian(0.5 * sigma_px) + 0.3 * gaussian(2.0 * sigma_px)
    else:  # exponential: no separable form, so an FFT convolution of the reduced image
        kernel = _exponential_kernel(sigma_px / factor)
        pad = kernel.shape[0] // 2
        padded = np.pad(small.astype(np.float64), pad, mode="edge")
        small = fftconvolve(padded, kernel, mode="valid")
    small = small.astype(np.float32)

    def upsample(n_full: int, n_small: int) -> np.ndarray:
        """(n_full, n_small) bilinear weights from block centres to full-resolution pixels."""
        pos = np.clip((np.arange(n_full) - 0.5 * (factor - 1)) / factor, 0, n_small - 1)
        i0 = np.minimum(pos.astype(int), max(n_small - 2, 0))
        w = pos - i0
        matrix = np.zeros((n_full, n_small), dtype=np.float32)
        np.add.at(matrix, (np.arange(n_full), i0), 1 - w)
        np.add.at(matrix, (np.arange(n_full), np.minimum(i0 + 1, n_small - 1)), w)
        return matrix

    return upsample(image.shape[0], small.shape[0]) @ small, upsample(image.shape[1], small.shape[1]).T


def _optics(T: np.ndarray, sc: ScannerModel, pitch: float) -> np.ndarray:
    """Optical blur, then veiling flare s = (1 - f) T + f * K(T), K the wide kernel of total weight 1.

    Without blur it works in place on T: the caller gives T up.
    """
    flare = _wide_flare(T, sc, pitch) if sc.flare_fraction > 0 else None
    s = ndimage.gaussian_filter(T, sc.blur_sigma_px, mode="nearest") if sc.blur_sigma_px > 0 else T
    if flare is not None:
        rows, across = flare
        rows *= np.float32(sc.flare_fraction)
        s *= np.float32(1.0 - sc.flare_fraction)
        for start in range(0, s.shape[0], _CHUNK_ROWS):
            s[start:start + _CHUNK_ROWS] += rows[start:start + _CHUNK_ROWS] @ across
    return s


def _lamp(col: ArrayLike, width: int, falloff: float, platen_px: float | None = None) -> np.ndarray:
    """Lamp profile across the carriage: 1 - falloff * ((x - mid) / half) ** 2.

    ``mid`` and ``half`` are the scan's own (width in columns), or those of
    a platen ``platen_px`` columns wide that starts at column 0.
    """
    x = np.asarray(col, dtype=np.float64)
    if platen_px is not None:
        return 1.0 - falloff * ((x + 0.5 - 0.5 * platen_px) / (0.5 * platen_px)) ** 2
    return 1.0 - falloff * ((x - 0.5 * (width - 1)) / (0.5 * width)) ** 2


def _power(x: np.ndarray, p: float, out: np.ndarray | None = None) -> np.ndarray:
    """x ** p for x >= 0; float32 arrays go through exp(p log x), several times faster than pow."""
    if x.dtype != np.float32:
        return np.power(np.maximum(x, 0.0), p, out=out)
    out = np.maximum(x, np.float32(1e-30), out=out)
    np.log(out, out=out)
    out *= np.float32(p)
    return np.exp(out, out=out)


def srgb_encode(linear: ArrayLike) -> np.ndarray:
    """sRGB transfer function (IEC 61966-2-1 OETF) of linear values 0..1; float32 stays float32."""
    x = np.asarray(linear)
    x = x if x.dtype == np.float32 else x.astype(np.float64)
    v = _power(x, 1 / 2.4)
    v *= 1.055
    v -= 0.055
    return np.where(x <= 0.0031308, 12.92 * x, v)


def expected_signal(T: ArrayLike, scanner: ScannerModel, *, col: ArrayLike | None = None, width: int | None = None,
                    channel: int = 0, dpi: float | None = None) -> float | np.ndarray:
    """Noiseless linear signal (0..1 of full scale, before encoding) for a uniform field of transmittance T.

    ``col`` (with the image ``width``) applies the lamp profile; without it the
    midline gain is used.  Flare leaves a uniform field unchanged.
    """
    lamp = 1.0
    if col is not None:
        if width is None:
            raise ValueError("give the image width with col")
        if scanner.lamp_platen_mm is not None and dpi is None:
            raise ValueError("give the dpi with col for a lamp fixed to the platen")
        platen_px = scanner.lamp_platen_mm * dpi / 25.4 if scanner.lamp_platen_mm is not None else None
        lamp = _lamp(col, width, scanner.lamp_falloff, platen_px)
    gain = scanner.gain * scanner.channel_gain(channel) * scanner.warmup_gain
    signal = np.clip(gain * lamp * np.power(np.asarray(T, dtype=np.float64), scanner.response_gamma)
                     + scanner.dark_offset, 0.0, 1.0)
    return float(signal) if signal.ndim == 0 else signal


def _sensor(s: np.ndarray, sc: ScannerModel, rng: np.random.Generator, pitch: float) -> np.ndarray:
    """Sensor response, noise, clipping, encoding and quantisation, a band of rows at a time.

    Consumes ``s``.  Noise is drawn band by band, channel by channel, so a
    seed gives the same image every time.
    """
    rows, cols = s.shape
    platen_px = sc.lamp_platen_mm / pitch if sc.lamp_platen_mm is not None else None
    lamp = _lamp(np.arange(cols), cols, sc.lamp_falloff, platen_px).astype(np.float32)
    gains = [np.float32(sc.gain * sc.channel_gain(ch) * sc.warmup_gain) * lamp for ch in range(sc.channels)]
    dtype, top = (np.uint8, 255) if sc.bits == 8 else (np.uint16, 65535)
    out = np.empty((rows, cols, 3) if sc.channels == 3 else (rows, cols), dtype=dtype)
    noisy = sc.noise_sd > 0 or sc.shot_noise > 0
    for start in range(0, rows, _CHUNK_ROWS):
        band = _power(s[start:start + _CHUNK_ROWS], sc.response_gamma, out=s[start:start + _CHUNK_ROWS])
        for ch, gain in enumerate(gains):
            signal = band * gain
            signal += np.float32(sc.dark_offset)
            if noisy:
                sd = np.maximum(signal, 0)
                sd *= np.float32(sc.shot_noise**2)
                sd += np.float32(sc.noise_sd**2)
                signal += np.sqrt(sd, out=sd) * rng.standard_normal(signal.shape, dtype=np.float32)
            np.clip(signal, 0.0, 1.0, out=signal)
            encoded = srgb_encode(signal) if sc.encoding == "srgb" else signal
            encoded *= np.float32(top)
            np.rint(encoded, out=encoded)
            if sc.channels == 3:
                out[start:start + _CHUNK_ROWS, :, ch] = encoded
            else:
                out[start:start + _CHUNK_ROWS] = encoded
    return out


def simulate_scan(
    objects: Sequence[StripSpec | TabletSpec],
    *,
    platen_mm: tuple[float, float] = (110.0, 175.0),
    dpi: float = 300.0,
    scanner: ScannerModel = ScannerModel(),
) -> SimulatedScan:
    """Simulate a transmission scan of strips and tablets lying on the platen.

    Parameters
    ----------
    objects : sequence of StripSpec or TabletSpec
        Film pieces on the platen; overlapping pieces multiply transmittances.
    platen_mm : (float, float)
        Scanned area, (width x, height y) in mm.  The open platen has T = 1.
    dpi : float
        Resolution; the image has ``round(height / pitch)`` rows and
        ``round(width / pitch)`` columns, pitch = 25.4 / dpi mm.
    scanner : ScannerModel
        Scanner settings and defects; ``seed`` makes the result deterministic.

    Returns
    -------
    SimulatedScan
        Its ``truth`` holds one dict per object.  A strip's: ``kind`` "strip",
        ``n_steps``, ``increment``, ``log_exposure`` and ``od`` (true gross OD)
        per step, ``base_fog``, ``dmax_strip``, ``figures`` (:meth:`FilmModel.truth`),
        ``angle_deg`` (in (-180, 180]), ``flip``, ``step_centers_rc``,
        ``outline_rc`` (step band, from step 1's outer corner at v = 0),
        ``film_outline_rc``, ``base_fog_center_rc`` (None without unexposed band),
        ``step_length_px``, ``band_width_px`` and ``geometry``
        (``StripGeometry.from_dict`` reads it).  A tablet's: ``kind`` "tablet",
        ``n_steps``, ``od``, ``end_density`` and the same geometry keys.
    """
    pitch = 25.4 / dpi
    layouts = [_layout(obj, pitch) for obj in objects]
    T = _render(platen_mm, pitch, layouts)
    noise_seed, defect_seed = np.random.SeedSequence(scanner.seed).spawn(2)
    defects = _add_defects(T, layouts, scanner, np.random.default_rng(defect_seed), pitch)
    s = _optics(T, scanner, pitch)
    del T
    image = _sensor(s, scanner, np.random.default_rng(noise_seed), pitch)
    truth = tuple(_truth(obj, lay) for obj, lay in zip(objects, layouts))
    return SimulatedScan(image=image, dpi=float(dpi), scanner=scanner, truth=truth, defects=tuple(defects))


# --------------------------------------------------------------------------- files


def write_tiff(path: str | os.PathLike[str], scan: SimulatedScan, *, compression: str | None = "zlib") -> None:
    """Write the scan as a TIFF with its resolution (dpi, unit inch), grey or RGB photometric."""
    import tifffile

    tifffile.imwrite(
        path,
        scan.image,
        photometric="rgb" if scan.image.ndim == 3 else "minisblack",
        compression=compression,
        resolution=(scan.dpi, scan.dpi),
        resolutionunit="INCH",
        software="stripscan simulator",
        metadata=None,
    )


def write_certificate(path: str | os.PathLike[str], densities: Sequence[float], *, header: bool = True) -> None:
    """Write a step tablet certificate in our CSV: a ``step,density`` column line, then one row per step.

    With ``header`` the file opens with comment lines starting with '#'.
    Densities are written in full (shortest round-trip form), so they read
    back exactly.
    """
    lines = []
    if header:
        lines += ["# Step tablet certificate (simulated by stripscan)",
                  "# Diffuse transmission density (ISO 5-2), step 1 least dense"]
    lines.append("step,density")
    lines += [f"{k},{float(d)!r}" for k, d in enumerate(densities, start=1)]
    Path(path).write_text("\n".join(lines) + "\n", encoding="utf-8")
