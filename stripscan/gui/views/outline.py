"""Strip outlines as the screen handles them: rectangles with a position, size and angle.

pyqtgraph draws a rotatable rectangle from its corner, size and angle in
view coordinates (x = column, y = row).  Its second side always turns +90°
from the first, while a strip's ``normal_rc`` may point either way (it points
towards the unexposed film when there is some on that side), so a strip is
drawn from whichever corner makes the two agree.  No Qt here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from stripscan.core.records import StripGeometry

__all__ = ["Frame", "frame_of", "geometry_from_corners", "strip_coords", "step_at", "hand_drawn_corners"]


@dataclass(frozen=True)
class Frame:
    """A rotated rectangle in view coordinates.

    Attributes
    ----------
    pos_xy : tuple of float
        The corner the rectangle turns about, (x, y) = (col, row), px.
    size : tuple of float
        (along, across) lengths, px.
    angle_deg : float
        Rotation of the first side from +x towards +y, degrees.
    flipped : bool
        True when the rectangle's second side runs against the strip's
        ``normal_rc`` (it then starts at the band's far edge).
    """

    pos_xy: tuple[float, float]
    size: tuple[float, float]
    angle_deg: float
    flipped: bool


def frame_of(geometry: StripGeometry) -> Frame:
    """The rectangle that draws ``geometry``'s step band."""
    ar, ac = geometry.axis_rc
    angle = math.degrees(math.atan2(ar, ac))
    # The rectangle's second side, (row, col), after turning +x by +90° towards +y.
    side_rc = (ac, -ar)
    flipped = float(np.dot(side_rc, geometry.normal_rc)) < 0
    corner = geometry.point_rc(0.0, geometry.band_width_px if flipped else 0.0)
    return Frame((corner[1], corner[0]), (geometry.length_px, geometry.band_width_px), angle, flipped)


def geometry_from_corners(
    old: StripGeometry, corners_xy: Sequence[tuple[float, float]], *, flipped: bool
) -> StripGeometry:
    """The strip after its rectangle was moved, turned or stretched.

    Parameters
    ----------
    old : StripGeometry
        The strip before the edit (step count, base+fog area, sampling).
    corners_xy : sequence of 4 (x, y)
        The rectangle's corners in its own order: its turning corner, then
        along its first side, across, and back.
    flipped : bool
        As in the :class:`Frame` the rectangle was made from.

    Returns
    -------
    StripGeometry
        Marked ``manual``; the base+fog area keeps its distance from the band.
    """
    pts = np.asarray([(y, x) for x, y in corners_xy], dtype=np.float64)
    if pts.shape != (4, 2):
        raise ValueError("an outline needs four corners")
    if flipped:
        # The rectangle starts at the band's far edge: v = 0 is its second pair.
        origin, far, far_across, across = pts[3], pts[2], pts[1], pts[0]
    else:
        origin, far, far_across, across = pts
    along = far - origin
    length = float(np.hypot(*along))
    width = float(np.hypot(*(across - origin)))
    if length < 2.0 or width < 2.0:
        raise ValueError("the outline is too small to hold steps")
    axis = along / length
    normal = (across - origin) / width
    base_fog = old.base_fog_v_px
    if base_fog is not None and min(base_fog) >= old.band_width_px - 1e-6:
        # Unexposed film beyond the far edge: keep the same gap to it.
        shift = width - old.band_width_px
        base_fog = (float(base_fog[0]) + shift, float(base_fog[1]) + shift)
    return old.replace(
        origin_rc=(float(origin[0]), float(origin[1])),
        axis_rc=(float(axis[0]), float(axis[1])),
        normal_rc=(float(normal[0]), float(normal[1])),
        step_pitch_px=length / old.n_steps,
        band_width_px=width,
        base_fog_v_px=base_fog,
        manual=True,
    )


def strip_coords(geometry: StripGeometry, point_rc: tuple[float, float]) -> tuple[float, float]:
    """(u, v) of an image point in the strip's own frame, px."""
    d = np.asarray(point_rc, dtype=np.float64) - np.asarray(geometry.origin_rc)
    return float(np.dot(d, geometry.axis_rc)), float(np.dot(d, geometry.normal_rc))


def step_at(geometry: StripGeometry, point_rc: tuple[float, float], *, margin_px: float = 0.0) -> int | None:
    """The step (1-based) under an image point, or None when it is off the band."""
    u, v = strip_coords(geometry, point_rc)
    if not (-margin_px <= v <= geometry.band_width_px + margin_px):
        return None
    if not (0.0 <= u < geometry.length_px):
        return None
    return int(u // geometry.step_pitch_px) + 1


def hand_drawn_corners(points_rc: Sequence[tuple[float, float]]) -> np.ndarray:
    """Four band corners from three clicks.

    Parameters
    ----------
    points_rc : sequence of 3 (row, col)
        The outer corner of step 1, the far end of the band along the same
        edge, then any point on the band's other edge.

    Returns
    -------
    ndarray, shape (4, 2)
        Corners in the order :func:`stripscan.core.locate.geometry_from_outline` takes.
    """
    a, b, c = (np.asarray(p, dtype=np.float64) for p in points_rc)
    along = b - a
    length = float(np.hypot(*along))
    if length < 2.0:
        raise ValueError("the two ends of the band are too close together")
    axis = along / length
    normal = np.array([-axis[1], axis[0]])
    width = float(np.dot(c - a, normal))
    if abs(width) < 2.0:
        raise ValueError("the third point must lie on the band's other edge, away from the first edge")
    across = normal * width
    return np.array([a, b, b + across, a + across])
