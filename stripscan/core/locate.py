"""Finding strips and step tablets on a scan, and their steps.

The search runs on a reduced copy of the scan (about 0.25 mm per pixel),
which is plenty to place steps several millimetres long; the readings are
then taken from the full-resolution image (:mod:`stripscan.core.sample`).

Method, per piece of film:

1. Film is found as connected areas denser than the open platen.
2. The long axis comes from the principal axes of the area's pixels.
3. The piece is resampled into its own frame; the step band is the part of
   the width where density changes along the length, the rest is
   unexposed film (base+fog).
4. Along the band the density profile is a staircase.  Its dense end is
   the strongest falling edge; the step pitch is the spacing that puts comb
   teeth on the rising step edges and not between them.
5. The step count is given, or counted from the visible edges and, when
   close, taken as one of the common tablet counts (21 or 11): the
   lightest steps of a strip often sit at base+fog and show no edge.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stripscan.core.numerics import bilinear, gaussian_smooth_1d, label, median, percentile
from stripscan.core.records import StripGeometry

__all__ = [
    "LocateError",
    "LocateOptions",
    "FoundStrip",
    "locate_strips",
    "locate_in_scan",
    "geometry_from_outline",
    "with_step_count",
    "given_count_notes",
    "working_factor",
]

COMMON_STEP_COUNTS = (21, 11)


class LocateError(ValueError):
    """No usable strip could be found."""


@dataclass(frozen=True)
class LocateOptions:
    """Settings of the strip search.

    Attributes
    ----------
    n_steps : int or None
        Fixed step count; None to count.
    working_mm : float
        Pixel size of the reduced search image, mm.
    film_threshold : float
        Density above the open platen that counts as film.
    min_pitch_mm, max_pitch_mm : float
        Plausible step lengths, mm.
    full_width_band : bool
        True for step tablets: the steps fill the whole width and there is
        no unexposed film beside them.
    inner_fraction : float
        Centred fraction of each step's length and width that is sampled.
    """

    n_steps: int | None = None
    working_mm: float = 0.25
    film_threshold: float = 0.03
    min_pitch_mm: float = 2.0
    max_pitch_mm: float = 40.0
    full_width_band: bool = False
    inner_fraction: float = 0.6


@dataclass(frozen=True)
class FoundStrip:
    """A located strip: its geometry and what the search noticed."""

    geometry: StripGeometry
    warnings: tuple[str, ...]
    touches_edge: bool
    dense_end_cut: bool = False


def working_factor(shape: tuple[int, int], dpi: float | None, working_mm: float) -> int:
    """Integer reduction factor that brings pixels near ``working_mm``."""
    if dpi:
        factor = dpi * working_mm / 25.4
    else:
        # Without a resolution, assume the scan spans a flatbed's ~200 mm.
        factor = max(shape) / (200.0 / working_mm)
    return max(1, int(round(factor)))


def _reduce(signal: np.ndarray, factor: int) -> np.ndarray:
    """Block mean by ``factor`` (edges cropped), float32."""
    if factor == 1:
        return signal.astype(np.float32, copy=False)
    rows, cols = (signal.shape[0] // factor) * factor, (signal.shape[1] // factor) * factor
    view = signal[:rows, :cols].reshape(rows // factor, factor, cols // factor, factor)
    return view.mean(axis=(1, 3), dtype=np.float32)


def _platen_level(working: np.ndarray) -> float:
    """Signal of the open platen: the bright end of the histogram."""
    # A strided subset is plenty for a percentile of a smooth histogram.
    step = max(1, int(np.sqrt(working.size / 100_000)))
    level = percentile(working[::step, ::step], 99.0)
    return level if level > 0 else 1.0


def _open_3x3(mask: np.ndarray) -> np.ndarray:
    """Binary opening by a 3 x 3 square, the image's edge pixels repeated outwards.

    The same result as ``ndimage.binary_opening`` with a 3 x 3 structure
    and edge replication, by logical operations on shifted views: a few
    times faster than rank filters or binary morphology on a page.
    """

    def along_both_axes(values: np.ndarray, combine) -> np.ndarray:
        padded = np.pad(values, 1, mode="edge")
        rows = combine(combine(padded[:, :-2], padded[:, 1:-1]), padded[:, 2:])
        return combine(combine(rows[:-2], rows[1:-1]), rows[2:])

    return along_both_axes(along_both_axes(mask, np.logical_and), np.logical_or)


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """Half-open index runs where a 1-D boolean mask is True."""
    padded = np.concatenate(([False], mask, [False]))
    edges = np.flatnonzero(np.diff(padded.astype(np.int8)))
    return list(zip(edges[::2], edges[1::2]))


def _parabolic_peak(values: np.ndarray, index: int) -> float:
    """Sub-sample position of a peak at ``index`` by a parabola through three samples."""
    if index <= 0 or index >= len(values) - 1:
        return float(index)
    a, b, c = values[index - 1], values[index], values[index + 1]
    denom = a - 2 * b + c
    return float(index) if denom == 0 else float(index + 0.5 * (a - c) / denom)


def _comb_pitch(rising: np.ndarray, end: float, start: float, lo: float, hi: float) -> tuple[float, float]:
    """Step pitch and refined end from a comb fitted to the rising edges.

    ``rising`` is the positive part of the profile's derivative, indexed by
    working pixel along the strip with density growing with the index;
    ``end`` is the dense end's falling edge.  Teeth sit at ``end - j * P``;
    the score subtracts the signal half a pitch away, so that half and
    double the true pitch score near zero.
    """
    x = np.arange(len(rising), dtype=np.float64)

    def score(pitch: np.ndarray, anchor: np.ndarray | float) -> np.ndarray:
        # Mean over teeth, not sum: half the true pitch would otherwise tie
        # with it (its extra teeth land on flat steps and cost nothing).
        # Every (anchor, pitch) pair and tooth at once: teeth along axis 0.
        pitch, anchor = np.broadcast_arrays(pitch, anchor)
        max_teeth = int((np.max(anchor) - start) / pitch.min()) + 2
        j = np.arange(1, max_teeth + 1).reshape((-1,) + (1,) * pitch.ndim)
        teeth = anchor - j * pitch
        valid = teeth >= start - 0.5 * pitch
        on = np.interp(teeth, x, rising, left=0.0, right=0.0)
        off = np.interp(teeth + 0.5 * pitch, x, rising, left=0.0, right=0.0)
        total = np.where(valid, on - off, 0.0).sum(axis=0)
        return total / np.maximum(valid.sum(axis=0), 1.0)

    hi = max(hi, lo + 1.0)
    # Any multiple of the pitch also puts every tooth on an edge, so the
    # comb only refines; the pitch itself is the first strong peak of the
    # edges' autocorrelation (half the pitch has no peak at all).
    segment = rising[max(0, int(start)) : int(end) + 3]
    lags = np.arange(len(segment))
    acf = np.correlate(segment, segment, mode="full")[len(segment) - 1 :]
    window = (lags >= lo) & (lags <= min(hi, len(segment) - 2))
    if not window.any():
        raise ValueError("the strip is too short for its step pitch")
    strongest = acf[window].max()
    peaks = [
        k for k in lags[window]
        if acf[k] >= acf[k - 1] and acf[k] >= acf[k + 1] and acf[k] >= 0.5 * strongest
    ]
    guess = _parabolic_peak(acf, int(peaks[0])) if peaks else float(lags[window][np.argmax(acf[window])])
    coarse = np.arange(max(lo, 0.9 * guess), min(hi, 1.1 * guess) + 0.1, 0.05)
    best = float(coarse[np.argmax(score(coarse, end))])
    fine = np.arange(best - 0.1, best + 0.1, 0.005)
    anchors = np.arange(end - 0.6, end + 0.61, 0.1)
    values = score(fine[None, :], anchors[:, None])
    # The first best pair in (anchor, pitch) order.
    a, k = np.unravel_index(int(np.argmax(values)), values.shape)
    return float(fine[k]), float(anchors[a])


def _choose_count(visible: int, room: float, fixed: int | None) -> tuple[int, list[str]]:
    """Step count from the visibly distinct steps and the room on the film."""
    notes: list[str] = []
    if fixed is not None:
        return fixed, notes
    count = visible
    # The lightest steps of a strip often sit at base+fog and the densest at
    # the scanner's ceiling, so neither shows an edge.  The room on the film
    # tells the counts apart: take the largest common count that fits.
    for common in sorted(COMMON_STEP_COUNTS, reverse=True):
        if 0.4 * common <= visible <= common and common <= room + 0.5:
            count = common
            break
    if count != visible:
        notes.append(
            f"{visible} steps are distinct; taken as a {count}-step strip with the lightest "
            "steps at base+fog (set the step count if this is wrong)"
        )
    return count, notes


def given_count_notes(n_steps: int, *, visible: int, room: float, pitch_mm: float) -> list[str]:
    """Warnings when a step count given by hand disagrees with the film: a wrong ``--steps`` reads nonsense.

    Steps are numbered from the dense end at the measured pitch, so a count
    smaller than the film holds reads only its densest steps as if they were
    a whole strip (step 1 is then far from the least exposed step).  A larger
    count is already reported as not fitting on the film.

    Parameters
    ----------
    n_steps : int
        The count given.
    visible : int
        Steps whose edges stand out along the film, counted from the dense end.
    room : float
        How many steps of the measured pitch fit between the dense end and
        the film's light end.
    pitch_mm : float
        The measured step pitch, mm.
    """
    # More distinct edges than steps given is sure; the room alone is not, since unexposed film often
    # runs on past step 1 (a few steps' worth): only a film with room for far more steps counts.
    if visible <= n_steps and room <= 1.4 * n_steps + 1.0:
        return []
    holds = int(round(room))
    return [
        f"{n_steps} steps were given, but the film has room for about {holds} steps of the measured pitch "
        f"({pitch_mm:.1f} mm; {visible} of them show distinct edges): only the {n_steps} densest are read and "
        "numbered from 1, so step 1 is not the least exposed step and every log E is shifted; check the step "
        "count (--steps), or leave it out to count the steps"
    ]


def _piece_geometry(
    dens: np.ndarray,
    coords: tuple[np.ndarray, np.ndarray],
    factor: int,
    opts: LocateOptions,
    pixel_mm: float,
) -> tuple[StripGeometry, list[str]]:
    """Geometry of one piece of film in full-resolution pixels."""
    notes: list[str] = []
    rows, cols = coords
    centre = np.array([rows.mean(), cols.mean()])
    # Principal axes from at most ~20 000 of the piece's pixels: the
    # direction is just as sure, and a 600-dpi page has 70 000 per strip.
    stride = max(1, rows.size // 20_000)
    sr, sc = rows[::stride] - centre[0], cols[::stride] - centre[1]
    # The scatter matrix by plain sums (its scale does not move the axes):
    # np.cov's BLAS product may wait on worker threads on a busy machine.
    scatter = np.array([[np.square(sr).sum(), (sr * sc).sum()], [(sr * sc).sum(), np.square(sc).sum()]])
    evals, evecs = np.linalg.eigh(scatter)
    e1 = evecs[:, np.argmax(evals)]
    e2 = np.array([-e1[1], e1[0]])
    dr, dc = rows - centre[0], cols - centre[1]
    u = dr * e1[0] + dc * e1[1]
    v = dr * e2[0] + dc * e2[1]
    u_min, u_max, v_min, v_max = float(u.min()), float(u.max()), float(v.min()), float(v.max())
    # Share of the oriented bounding rectangle that is film (touching pieces fill less).
    fill = rows.size / ((u_max - u_min + 1.0) * (v_max - v_min + 1.0))
    pad = 3.0
    u_grid = np.arange(u_min - pad, u_max + pad + 1.0)
    v_grid = np.arange(v_min - 1.0, v_max + 2.0)
    # The rectified grid (v down, u across) by broadcasting, without meshgrid's full-size copies.
    grid_rows = (centre[0] + u_grid * e1[0])[None, :] + (v_grid * e2[0])[:, None]
    grid_cols = (centre[1] + u_grid * e1[1])[None, :] + (v_grid * e2[1])[:, None]
    rect = bilinear(dens, grid_rows, grid_cols)

    # Along-strip extent of the film piece in the rectified frame.
    u_lo, u_hi = u_min - u_grid[0], u_max - u_grid[0]
    core = slice(int(u_lo + 0.08 * (u_hi - u_lo)), int(u_hi - 0.08 * (u_hi - u_lo)) + 1)
    v_lo, v_hi = v_min - v_grid[0], v_max - v_grid[0]

    # The step band: where density varies along the strip.
    spread = rect[:, core].std(axis=1)
    inside = (np.arange(len(v_grid)) >= v_lo) & (np.arange(len(v_grid)) <= v_hi)
    if spread[inside].max() < 0.02:
        raise ValueError("the film shows no steps: its density hardly changes along it")
    if opts.full_width_band:
        band = (v_lo + 0.5, v_hi + 0.5)
    else:
        level = 0.5 * spread[inside].max()
        runs = [r for r in _runs((spread > level) & inside)]
        b0, b1 = max(runs, key=lambda r: r[1] - r[0])
        band = (float(b0), float(b1))
    band_mid = 0.5 * (band[0] + band[1])
    half = 0.5 * (band[1] - band[0])
    inner = slice(int(round(band_mid - 0.6 * half)), int(round(band_mid + 0.6 * half)) + 1)
    profile = median(rect[inner, :], axis=0)

    # Dense end: density grows towards it.
    span = slice(int(u_lo), int(u_hi) + 1)
    seg = profile[span]
    quarter = max(1, len(seg) // 4)
    direction = 1 if seg[-quarter:].mean() >= seg[:quarter].mean() else -1
    if direction < 0:
        profile = profile[::-1]
        u_lo, u_hi = len(profile) - 1 - u_hi, len(profile) - 1 - u_lo
    # Where the film piece ends beyond the densest step there is unexposed
    # film (or the piece was trimmed there); exposed film right at the
    # piece's end, together with the scan's edge, means the end is cut off.
    tip = profile[max(int(u_hi) - 2, 0) : int(u_hi) + 1]
    dense_tip = median(tip) - percentile(profile[span], 5.0) > 0.3
    smooth = gaussian_smooth_1d(profile, 1.0)
    grad = np.gradient(smooth)
    end_index = int(np.argmin(grad))
    end = _parabolic_peak(-grad, end_index)
    rising = np.clip(grad, 0.0, None)

    lo = opts.min_pitch_mm / pixel_mm
    hi = min(opts.max_pitch_mm / pixel_mm, max(lo + 2.0, (end - u_lo) / 4.0))
    pitch, end = _comb_pitch(rising, end, u_lo, lo, hi)

    # An edge counts when it stands out of the profile's noise and is at
    # least a density step of about 0.01 (what a densitometer resolves; a
    # Gaussian-smoothed edge of height h peaks near 0.4 h per pixel).
    noise = max(1.4826 * median(np.abs(grad - median(grad))), 0.001)
    room = (end - u_lo) / pitch
    # Visible steps: up to the lightest clear step edge.  Flat runs (the
    # shoulder near Dmax, the toe at base+fog) show no edges, so do not stop
    # at the first miss; skip the film's own edge against the platen.
    # The lightest clear edge is either step 1's outer edge (then j steps)
    # or a boundary with more steps at base+fog beyond it (j + 1 or more):
    # take j, and let the common counts fill in steps that show no edge.
    visible = 1
    positions = np.arange(len(rising))
    for j in range(1, int(room) + 2):
        tooth = end - j * pitch
        if tooth < u_lo + 0.5 * pitch:
            break
        if np.interp(tooth, positions, rising) > 4.0 * noise:
            visible = j
    visible = min(visible, max(1, int(round(room))))
    if visible < 3 and opts.n_steps is None:
        raise ValueError("fewer than three distinct steps along the film")
    n_steps, count_notes = _choose_count(visible, room, opts.n_steps)
    notes += count_notes
    if opts.n_steps is not None:
        notes += given_count_notes(opts.n_steps, visible=visible, room=room, pitch_mm=pitch * pixel_mm)
    start = end - n_steps * pitch
    if start < u_lo - 0.5 * pitch:
        notes.append(
            f"{n_steps} steps of {pitch * pixel_mm:.1f} mm do not fit on the film piece; "
            "the lightest steps may be cut off"
        )

    # Back to the image: u index in the (possibly reversed) profile -> u coordinate.
    def u_coord(index: float) -> float:
        return float(u_grid[0] + (index if direction > 0 else len(u_grid) - 1 - index))

    axis = e1 * direction
    u_start = u_coord(start)
    v0, v1 = float(v_grid[0] + band[0] - 0.5), float(v_grid[0] + band[1] - 0.5)
    # Put v = 0 on the band edge such that the band lies at 0..width along the normal.
    normal = e2.copy()
    if np.cross(np.append(axis, 0), np.append(normal, 0))[2] < 0:
        normal = -normal
    if np.dot(normal, e2) > 0:
        v_origin, width = v0, v1 - v0
    else:
        v_origin, width = v1, v1 - v0
    origin_w = centre + u_start * e1 + v_origin * e2
    # Unexposed film beside the band, on the wider side.
    side_a = (v_min, v0)  # towards -e2
    side_b = (v1, v_max)  # towards +e2
    base_fog_v = None
    if not opts.full_width_band:
        lo_side, hi_side = max((side_a, side_b), key=lambda s: s[1] - s[0])
        side_width = hi_side - lo_side
        if side_width * pixel_mm >= 2.0:
            a = lo_side + 0.2 * side_width
            b = hi_side - 0.2 * side_width
            # Express in the new v (along ``normal`` from ``v_origin``).
            sign = 1.0 if np.dot(normal, e2) > 0 else -1.0
            va, vb = sorted(((a - v_origin) * sign, (b - v_origin) * sign))
            base_fog_v = (va * factor, vb * factor)
        else:
            notes.append("no unexposed film beside the steps wide enough to read base+fog")

    def to_full(rc: np.ndarray) -> tuple[float, float]:
        return (float((rc[0] + 0.5) * factor - 0.5), float((rc[1] + 0.5) * factor - 0.5))

    geometry = StripGeometry(
        origin_rc=to_full(origin_w),
        axis_rc=(float(axis[0]), float(axis[1])),
        normal_rc=(float(normal[0]), float(normal[1])),
        step_pitch_px=float(pitch * factor),
        n_steps=int(n_steps),
        band_width_px=float(width * factor),
        base_fog_v_px=base_fog_v,
        inner_fraction=opts.inner_fraction,
    )
    return geometry, notes, dense_tip, fill


def locate_strips(
    signal: np.ndarray,
    *,
    dpi: float | None = None,
    options: LocateOptions = LocateOptions(),
) -> list[FoundStrip]:
    """Find every strip (or step tablet) on a scan.

    Parameters
    ----------
    signal : ndarray, shape (rows, cols)
        Linear signal, 0..1.
    dpi : float, optional
        Resolution; without it a flatbed-sized scan is assumed.
    options : LocateOptions

    Returns
    -------
    list of FoundStrip
        Ordered top to bottom, then left to right, by the strip's centre.

    Raises
    ------
    LocateError
        When no piece of film with steps is found.
    """
    factor = working_factor(signal.shape, dpi, options.working_mm)
    return _locate_on(_reduce(signal, factor), factor, dpi, options)


def locate_in_scan(scan, options: LocateOptions = LocateOptions()) -> list[FoundStrip]:
    """Find every strip on a :class:`~stripscan.core.scan.Scan`, see :func:`locate_strips`.

    Only a sparse sample of the stored pixels is decoded (a few per
    0.25 mm block), which keeps the search cheap on 600-1200 dpi pages.
    """
    factor = working_factor(scan.shape, scan.dpi, options.working_mm)
    return _locate_on(scan.sample(factor), factor, scan.dpi, options)


def _locate_on(working: np.ndarray, factor: int, dpi: float | None, options: LocateOptions) -> list[FoundStrip]:
    pixel_mm = (25.4 / dpi) * factor if dpi else options.working_mm
    platen = _platen_level(working)
    # -log10(max(working / platen, 1e-6)) in float32, in place: one image, not five.
    dens = np.divide(working, np.float32(platen), dtype=np.float32)
    np.maximum(dens, np.float32(1e-6), out=dens)
    np.log10(dens, out=dens)
    np.negative(dens, out=dens)

    film = dens > options.film_threshold
    # Dust on the platen and thin hairs are not film (a 3 x 3 opening);
    # holes in film are film: background areas that do not reach the scan's
    # border are filled.
    film = _open_3x3(film)
    background, n_background, _ = label(~film)
    if n_background:
        # A lookup by label is much cheaper than np.isin over the image.
        enclosed = np.ones(n_background + 1, dtype=bool)
        enclosed[np.concatenate((background[0], background[-1], background[:, 0], background[:, -1]))] = False
        film |= enclosed[background]
    labels, count, boxes = label(film)
    if count == 0:
        raise LocateError("no film found on the scan: nothing is denser than the open platen")
    found: list[tuple[tuple[float, float], FoundStrip]] = []
    min_area = (10.0 / pixel_mm) * (4.0 / pixel_mm)
    for label_id, box in enumerate(boxes, start=1):
        # The bounding box's longer side is the piece's largest extent along an axis.
        spans = (box[0].stop - box[0].start - 1, box[1].stop - box[1].start - 1)
        if max(spans) * pixel_mm < 20.0 or (spans[0] + 1) * (spans[1] + 1) < min_area:
            continue
        rr, cc = np.nonzero(labels[box] == label_id)
        if rr.size < min_area:
            continue
        coords = ((rr + box[0].start).astype(np.float64), (cc + box[1].start).astype(np.float64))
        touches = (
            box[0].start == 0 or box[1].start == 0 or box[0].stop == labels.shape[0] or box[1].stop == labels.shape[1]
        )
        try:
            geometry, notes, dense_tip, fill = _piece_geometry(dens, coords, factor, options, pixel_mm)
        except ValueError:
            continue
        if touches:
            notes.append("the film touches the scan's edge; steps may be cut off")
        if fill < 0.85:
            notes.append(
                f"this piece of film is not a plain rectangle ({100 * fill:.0f} % of its outline is film): "
                "pieces may touch or overlap; lay the strips apart and scan again"
            )
        found.append((geometry.step_center_rc(1), FoundStrip(geometry, tuple(notes), touches, touches and dense_tip)))
    if not found:
        raise LocateError("no strip found on the scan: film was seen but no steps along it")
    # Rows of strips 20 mm apart read top to bottom, each row left to right.
    row_px = 20.0 / pixel_mm * factor
    found.sort(key=lambda item: (round(geometry_centre(item[1].geometry)[0] / row_px), geometry_centre(item[1].geometry)[1]))
    return [strip for _, strip in found]


def geometry_centre(geometry: StripGeometry) -> tuple[float, float]:
    """Centre (row, col) of the step band, px."""
    return geometry.point_rc(0.5 * geometry.length_px, 0.5 * geometry.band_width_px)


def geometry_from_outline(
    corners_rc: np.ndarray | list[tuple[float, float]],
    n_steps: int,
    *,
    base_fog_side: float | None = None,
    inner_fraction: float = 0.6,
) -> StripGeometry:
    """Geometry of a strip drawn by hand.

    Parameters
    ----------
    corners_rc : array_like, shape (4, 2)
        Corners (row, col) of the step band: the outer corner of step 1,
        the far corner along the strip, then the other two in order.
    n_steps : int
        Number of steps between the first and second corner.
    base_fog_side : float, optional
        Width (px) of unexposed film to sample beyond the band's far side,
        starting 20 % of that width away from it; None for no base+fog area.
    """
    corners = np.asarray(corners_rc, dtype=np.float64)
    if corners.shape != (4, 2):
        raise ValueError("an outline needs four (row, col) corners")
    if n_steps < 2:
        raise ValueError("a strip needs at least two steps")
    along = corners[1] - corners[0]
    across = corners[3] - corners[0]
    length = float(np.hypot(*along))
    width = float(np.hypot(*across))
    if length < 1 or width < 1:
        raise ValueError("the outline is too small")
    axis = along / length
    normal = np.array([-axis[1], axis[0]])
    if np.dot(normal, across) < 0:
        normal = -normal
    bf = None
    if base_fog_side:
        bf = (width + 0.2 * base_fog_side, width + 0.8 * base_fog_side)
    return StripGeometry(
        origin_rc=(float(corners[0][0]), float(corners[0][1])),
        axis_rc=(float(axis[0]), float(axis[1])),
        normal_rc=(float(normal[0]), float(normal[1])),
        step_pitch_px=length / n_steps,
        n_steps=int(n_steps),
        band_width_px=width,
        base_fog_v_px=bf,
        inner_fraction=inner_fraction,
        manual=True,
    )


def with_step_count(geometry: StripGeometry, n_steps: int) -> StripGeometry:
    """The same band divided into ``n_steps`` equal steps."""
    if n_steps < 2:
        raise ValueError("a strip needs at least two steps")
    return geometry.replace(step_pitch_px=geometry.length_px / n_steps, n_steps=int(n_steps))
