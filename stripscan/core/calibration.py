"""Scanner calibration against a reference step tablet, and direct mode.

A flatbed scanner's signal is not light transmitted in a densitometer's
sense: its sensor is not quite linear, stray light (flare) lifts dense
areas, and the lamp is uneven.  Scanning a step tablet with certified
densities under the same settings gives pairs (signal, density); a monotone
piecewise-cubic (PCHIP) curve through them, in log10 signal, maps any later
signal to density.

The map is only trusted between the tablet's lightest step and the densest
step that the scanner still tells apart from its neighbour with an error
within the accuracy goal (±0.02 OD, the usual expectation of a QC
densitometer, common practice): its held-out residual, and twice its
reading noise carried through the map's slope, must both stay within it.  Outside that range a density is still
computed, by a straight line in log signal, but it is flagged and never
used silently.

Per-step residuals are held out: each step is predicted from a curve fitted
without it — interpolated for the interior steps, extrapolated from the
others for the densest, so the range's top is tested too.  A curve through
all points has zero residual by construction, so that figure would say
nothing.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from stripscan.core.numerics import pchip
from stripscan.core.records import clean_float
from stripscan.core.straylight import StrayLight

from stripscan.core.certificate import CalibrationError, Certificate

__all__ = [
    "Calibration",
    "DirectMode",
    "LateralCorrection",
    "fit_lateral",
    "flat_field",
    "ACCURACY_GOAL",
]

#: Accuracy expected of a film-QC densitometer, OD (common practice).
ACCURACY_GOAL = 0.02

#: How far below the lightest tablet step a reading still counts as in range, OD: half
#: the accuracy goal, a short extension of the map where it is straightest.
LIGHT_END_TOLERANCE = 0.5 * ACCURACY_GOAL

FORMAT = "stripscan-calibration"
FORMAT_VERSION = 1
#: Files with a stray-light model: their knots hold the light the sensor saw,
#: which an older reader would take for certified densities, so they say so.
FORMAT_VERSION_STRAY = 2


@dataclass(frozen=True)
class LateralCorrection:
    """Across-carriage response of the scanner, OD(x) = c0 + c * x**2.

    ``x`` is the offset from the scanner's midline in mm along ``axis``
    (``"col"`` for the image's columns).  A flatbed's lamp and optics
    read a little denser away from the midline (Schoenfeld et al., Phys Med
    Biol 2016).  The calibration already holds the response at the tablet's
    place, so only the difference between the two places is corrected.

    Attributes
    ----------
    c_per_mm2 : float
        Curvature, OD per mm^2.
    midline_px : float
        Midline position along ``axis``, in pixels of the calibration's
        (tablet) scan.
    axis : str
        ``"col"`` or ``"row"``.
    """

    c_per_mm2: float
    midline_px: float
    axis: str = "col"

    def offset_od(
        self,
        position_rc: tuple[float, float],
        pixel_mm: float,
        reference_rc: tuple[float, float],
        reference_pixel_mm: float,
    ) -> float:
        """Extra density read at ``position_rc`` compared with ``reference_rc``.

        Parameters
        ----------
        position_rc : (float, float)
            Place of the reading, pixels of its own scan.
        pixel_mm : float
            Pixel pitch of that scan, mm.
        reference_rc : (float, float)
            Place of the tablet, pixels of the calibration's scan (as ``midline_px``).
        reference_pixel_mm : float
            Pixel pitch of the calibration's scan, mm.

        Notes
        -----
        Both scans are taken to start at the same corner of the platen;
        each position is turned into mm with its own scan's pitch, so a
        strip scanned at another resolution than the tablet is corrected
        for its true place on the platen.
        """
        index = 1 if self.axis == "col" else 0
        midline_mm = self.midline_px * reference_pixel_mm
        x = position_rc[index] * pixel_mm - midline_mm
        x_ref = reference_rc[index] * reference_pixel_mm - midline_mm
        return self.c_per_mm2 * (x * x - x_ref * x_ref)

    def to_dict(self) -> dict[str, Any]:
        return {"c_per_mm2": self.c_per_mm2, "midline_px": self.midline_px, "axis": self.axis}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> "LateralCorrection":
        return cls(float(data["c_per_mm2"]), float(data["midline_px"]), str(data.get("axis", "col")))


def fit_lateral(
    blank: np.ndarray, *, pixel_mm: float, axis: str = "col", midline_px: float | None = None
) -> LateralCorrection:
    """Fit OD(x) = c0 + c x**2 to a uniform scan (open platen or uniform film).

    Parameters
    ----------
    blank : ndarray, shape (rows, cols)
        Linear signal of a uniform scan.
    pixel_mm : float
        Pixel pitch, mm.
    axis : {"col", "row"}
        Across-carriage axis of the image.
    midline_px : float, optional
        Scanner midline; the image centre along ``axis`` by default.
    """
    if axis not in ("col", "row"):
        raise ValueError("axis must be 'col' or 'row'")
    profile = np.median(blank, axis=0 if axis == "col" else 1).astype(np.float64)
    if np.any(profile <= 0):
        raise CalibrationError("the uniform scan has dark columns; cannot fit a lateral response")
    od = -np.log10(profile)
    mid = (len(profile) - 1) / 2.0 if midline_px is None else float(midline_px)
    x = (np.arange(len(profile)) - mid) * pixel_mm
    design = np.column_stack((np.ones_like(x), x * x))
    (c0, c), *_ = np.linalg.lstsq(design, od, rcond=None)
    return LateralCorrection(float(c), mid, axis)


def flat_field(signal: np.ndarray, blank: np.ndarray, *, sigma_px: float = 8.0) -> np.ndarray:
    """Divide a scan by a smoothed, normalised blank-platen scan of the same size.

    Corrects lamp and sensor unevenness pixel by pixel; the blank is smoothed
    so that its noise is not printed onto the scan.
    """
    from scipy.ndimage import gaussian_filter

    if blank.shape != signal.shape:
        raise CalibrationError(
            f"the flat-field scan is {blank.shape[1]} x {blank.shape[0]} pixels but the scan is "
            f"{signal.shape[1]} x {signal.shape[0]}; scan both with the same area and resolution"
        )
    smooth = gaussian_filter(blank.astype(np.float32), sigma_px)
    level = float(np.median(smooth))
    if level <= 0:
        raise CalibrationError("the flat-field scan is dark; scan the open platen")
    gain = np.clip(smooth / level, 0.05, None)
    return (signal / gain).astype(np.float32)


@dataclass(frozen=True)
class Calibration:
    """A fitted signal-to-density map with its provenance.

    Attributes
    ----------
    log_signal : tuple of float
        Knots: log10 of the tablet steps' signals, increasing.
    od : tuple of float
        Certified densities at the knots (decreasing).
    valid_od : tuple of float
        (lowest, highest) density read within the accuracy goal.
    covered_od : tuple of float
        (lowest, highest) certified density used in the fit.
    residuals : tuple of (float or None)
        Held-out residual per used step (predicted - certified); None for the
        lightest step, which starts the range.
    excluded_steps : tuple of int
        Certificate steps not used (saturated or not distinguishable).
    rms_residual : float or None
        RMS of the held-out residuals of the steps within the valid
        range, OD; every reading's uncertainty includes it.
    certificate : Certificate
    readings : tuple of dict
        Tablet step readings (signal, sd, pixels) as read.
    scan_sha256, scan_path : str
        The tablet scan.
    created : str
        ISO date-time (UTC) of the fit.
    bits, channel, decoding : as the tablet scan was loaded
    dpi : float or None
    tablet_center_rc : tuple of float
        Where the tablet lay, for the lateral correction.
    lateral : LateralCorrection or None
    flat_field_sha256 : str or None
    note : str
    stray_light : StrayLight or None
        The scanner's stray light and lamp, fitted on the tablet scan.  With
        it, ``od`` holds the density the sensor *saw* at each knot (spread
        light and lamp included), and a reading becomes a density only
        after its own spread light is taken off.
    tablet_spread : tuple of (float, float, float) or None
        ``(certified density, spread light, spread per unit fraction)`` of
        each used tablet step, densest last: the surroundings the map was
        fitted in.
    """

    log_signal: tuple[float, ...]
    od: tuple[float, ...]
    valid_od: tuple[float, float]
    covered_od: tuple[float, float]
    residuals: tuple[float | None, ...]
    excluded_steps: tuple[int, ...]
    rms_residual: float | None
    certificate: Certificate
    readings: tuple[dict[str, Any], ...]
    scan_sha256: str
    scan_path: str
    created: str
    bits: int
    channel: str
    decoding: str
    dpi: float | None
    tablet_center_rc: tuple[float, float]
    lateral: LateralCorrection | None = None
    flat_field_sha256: str | None = None
    note: str = ""
    stray_light: StrayLight | None = None
    tablet_spread: tuple[tuple[float, float, float], ...] | None = None
    _interp: Any = field(default=None, compare=False, repr=False)
    _deriv: Any = field(default=None, compare=False, repr=False)

    def __post_init__(self) -> None:
        interp = pchip(self.log_signal, self.od, extrapolate=False)
        object.__setattr__(self, "_interp", interp)
        object.__setattr__(self, "_deriv", interp.slope)

    # -- using the map ---------------------------------------------------
    def seen_density(self, signal: np.ndarray | float) -> np.ndarray:
        """Density the sensor saw for linear signal(s): the map alone, before any stray-light correction.

        Outside the fitted signals the map is extended along its end slopes
        (straight lines in log signal).
        """
        s = np.atleast_1d(np.asarray(signal, dtype=np.float64))
        x = np.log10(np.clip(s, 1e-9, None))
        knots_x = np.asarray(self.log_signal)
        knots_od = np.asarray(self.od)
        od = self._interp(x)
        low = x < knots_x[0]
        high = x > knots_x[-1]
        slope_dense = (knots_od[1] - knots_od[0]) / (knots_x[1] - knots_x[0])
        slope_light = (knots_od[-1] - knots_od[-2]) / (knots_x[-1] - knots_x[-2])
        od = np.where(low, knots_od[0] + slope_dense * (x - knots_x[0]), od)
        od = np.where(high, knots_od[-1] + slope_light * (x - knots_x[-1]), od)
        return np.where(np.isfinite(s), od, np.nan)

    def light(self, signal: np.ndarray | float) -> np.ndarray:
        """Light the sensor saw (1 = open platen at the tablet's place) for linear signal(s)."""
        return 10.0 ** -self.seen_density(signal)

    def light_slope(self, signal: np.ndarray | float) -> np.ndarray:
        """d(light)/d(signal) at linear signal(s)."""
        s = np.atleast_1d(np.asarray(signal, dtype=np.float64))
        x = np.clip(np.log10(np.clip(s, 1e-9, None)), self.log_signal[0], self.log_signal[-1])
        return -self.light(s) * self._deriv(x) / np.clip(s, 1e-9, None)

    def reference_spread(self, od: np.ndarray | float, *, part: str = "spread") -> np.ndarray:
        """Spread light the tablet had at density ``od`` (0 without a stray-light model).

        ``part`` "unit" gives the spread per unit fraction there instead.
        """
        if not self.tablet_spread:
            return np.zeros(np.shape(np.atleast_1d(od)))
        table = np.asarray(self.tablet_spread, dtype=np.float64)
        column = {"spread": 1, "unit": 2}[part]
        return np.interp(np.atleast_1d(np.asarray(od, dtype=np.float64)), table[:, 0], table[:, column])

    def density(
        self, signal: np.ndarray | float, *, spread: np.ndarray | float | None = None, lamp: np.ndarray | float = 1.0
    ) -> tuple[np.ndarray, np.ndarray]:
        """Density for linear signal(s), and whether each lies in the valid range.

        Parameters
        ----------
        signal : float or ndarray
            Linear signal, 0..1 of full scale.
        spread : float or ndarray, optional
            Spread light at each reading's place (see
            :mod:`stripscan.core.straylight`); by default the tablet's own at
            the same density, i.e. the reading is taken to lie in surroundings
            like the tablet's.  Ignored without a stray-light model.
        lamp : float or ndarray
            Relative lamp brightness at each reading's place.

        Returns
        -------
        od : ndarray of float
        in_range : ndarray of bool
            False outside the valid range, and where the spread light
            accounts for all the light seen.
        """
        seen = self.seen_density(signal)
        if self.stray_light is None:
            od = seen
        else:
            f = self.stray_light.total
            light = 10.0 ** -seen / np.asarray(lamp, dtype=np.float64)
            if spread is None:
                # The tablet's own surroundings: its spread at the density read.
                guess = -np.log10(np.clip(light, 1e-12, None))
                for _ in range(3):
                    spread_now = self.reference_spread(guess)
                    guess = -np.log10(np.clip((light - spread_now) / (1.0 - f), 1e-12, None))
                spread = self.reference_spread(guess)
            transmitted = (light - np.asarray(spread, dtype=np.float64)) / (1.0 - f)
            with np.errstate(divide="ignore", invalid="ignore"):
                od = np.where(transmitted > 0, -np.log10(np.where(transmitted > 0, transmitted, 1.0)), np.inf)
            od = np.where(np.isfinite(seen), od, np.nan)
        lo, hi = self.valid_od
        tol = 1e-9
        # The lightest step starts the range, and the map is at its surest there: a reading a
        # little lighter (the tablet's own lightest step, read back with its noise) is in range.
        in_range = np.isfinite(od) & (od >= lo - LIGHT_END_TOLERANCE) & (od <= hi + tol)
        return od, in_range

    def slope(self, signal: float) -> float:
        """|dOD / dlog10 signal| at ``signal`` (1 for an ideal linear scanner)."""
        x = math.log10(max(signal, 1e-9))
        knots_x = np.asarray(self.log_signal)
        x = float(np.clip(x, knots_x[0], knots_x[-1]))
        return abs(float(self._deriv(x)))

    def summary(self) -> dict[str, Any]:
        """The few fields every result carries about its calibration."""
        return {
            "sha256": self.sha256,
            "od_min": clean_float(self.valid_od[0], 4),
            "od_max": clean_float(self.valid_od[1], 4),
            "covered_od": [clean_float(v, 4) for v in self.covered_od],
            "rms_residual": clean_float(self.rms_residual, 5),
            "created": self.created,
            "bits": self.bits,
            "tablet_scan_sha256": self.scan_sha256,
            "mode": "tablet",
            "stray_light_fraction": None if self.stray_light is None else clean_float(self.stray_light.total, 6),
        }

    # -- serialisation ---------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        return {
            "format": FORMAT,
            "format_version": FORMAT_VERSION if self.stray_light is None else FORMAT_VERSION_STRAY,
            "log_signal": list(self.log_signal),
            "od": list(self.od),
            "valid_od": list(self.valid_od),
            "covered_od": list(self.covered_od),
            "residuals": list(self.residuals),
            "excluded_steps": list(self.excluded_steps),
            "rms_residual": self.rms_residual,
            "certificate": self.certificate.to_dict(),
            "readings": list(self.readings),
            "scan_sha256": self.scan_sha256,
            "scan_path": self.scan_path,
            "created": self.created,
            "bits": self.bits,
            "channel": self.channel,
            "decoding": self.decoding,
            "dpi": self.dpi,
            "tablet_center_rc": list(self.tablet_center_rc),
            "lateral": self.lateral.to_dict() if self.lateral else None,
            "flat_field_sha256": self.flat_field_sha256,
            "note": self.note,
            **({} if self.stray_light is None else {
                "stray_light": self.stray_light.to_dict(),
                "tablet_spread": [list(row) for row in self.tablet_spread or ()],
            }),
        }

    @property
    def sha256(self) -> str:
        """Content hash of the calibration (canonical JSON)."""
        text = json.dumps(self.to_dict(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode("utf-8")).hexdigest()

    @classmethod
    def from_dict(cls, data: dict[str, Any], *, source: str = "<calibration>") -> "Calibration":
        if data.get("format") != FORMAT:
            raise CalibrationError(f"{source}: not a stripscan calibration file")
        if int(data.get("format_version", 0)) > FORMAT_VERSION_STRAY:
            raise CalibrationError(f"{source}: made by a newer stripscan (format {data['format_version']})")
        try:
            return cls(
                log_signal=tuple(float(v) for v in data["log_signal"]),
                od=tuple(float(v) for v in data["od"]),
                valid_od=(float(data["valid_od"][0]), float(data["valid_od"][1])),
                covered_od=(float(data["covered_od"][0]), float(data["covered_od"][1])),
                residuals=tuple(None if r is None else float(r) for r in data["residuals"]),
                excluded_steps=tuple(int(s) for s in data["excluded_steps"]),
                rms_residual=None if data["rms_residual"] is None else float(data["rms_residual"]),
                certificate=Certificate.from_dict(data["certificate"]),
                readings=tuple(data["readings"]),
                scan_sha256=str(data["scan_sha256"]),
                scan_path=str(data["scan_path"]),
                created=str(data["created"]),
                bits=int(data["bits"]),
                channel=str(data["channel"]),
                decoding=str(data["decoding"]),
                dpi=None if data["dpi"] is None else float(data["dpi"]),
                tablet_center_rc=(float(data["tablet_center_rc"][0]), float(data["tablet_center_rc"][1])),
                lateral=LateralCorrection.from_dict(data["lateral"]) if data.get("lateral") else None,
                flat_field_sha256=data.get("flat_field_sha256"),
                note=str(data.get("note", "")),
                stray_light=StrayLight.from_dict(data["stray_light"]) if data.get("stray_light") else None,
                tablet_spread=spread_table(data.get("tablet_spread"), len(data["log_signal"]))
                if data.get("stray_light") else None,
            )
        except (KeyError, TypeError, ValueError, IndexError, AttributeError) as exc:
            raise CalibrationError(f"{source}: calibration file is incomplete or damaged ({exc})") from None


def spread_table(rows: Any, knots: int) -> tuple[tuple[float, float, float], ...]:
    """The tablet's spread per used step, checked: one row of three finite numbers per knot, densities rising."""
    table = tuple(tuple(float(v) for v in row) for row in rows)
    if len(table) != knots or any(len(row) != 3 or not all(math.isfinite(v) for v in row) for row in table):
        raise ValueError(f"tablet_spread needs {knots} rows of (density, spread, spread per unit fraction)")
    if any(b[0] <= a[0] for a, b in zip(table, table[1:])) or any(row[1] < 0 or row[2] < 0 for row in table):
        raise ValueError("tablet_spread densities must rise and its spreads must not be negative")
    return table


@dataclass(frozen=True)
class DirectMode:
    """Uncalibrated densities, OD = log10((I0 - dark) / (I - dark)).

    Only meaningful for linear 16-bit scans with every automatic correction
    off; every result made with it says it is uncalibrated.

    Attributes
    ----------
    i0 : float
        Signal of unattenuated light (open platen or a clear area), 0..1.
    dark : float
        Signal with no light (the scanner's dark level), 0..1.
    floor_sd : float
        Noise of one pixel near dark; a step whose mean signal is within a
        few of these of the dark level is out of range.
    """

    i0: float
    dark: float = 0.0
    floor_sd: float = 0.0

    def density(self, signal: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
        s = np.atleast_1d(np.asarray(signal, dtype=np.float64))
        net = s - self.dark
        light = self.i0 - self.dark
        floor = max(5.0 * self.floor_sd, 1e-5)
        od = np.log10(light / np.clip(net, 1e-9, None))
        in_range = np.isfinite(s) & (net > floor) & (s < self.i0 * 1.05)
        return np.where(np.isfinite(s), od, np.nan), in_range

    def slope(self, signal: float) -> float:
        net = max(signal - self.dark, 1e-9)
        return signal / net

    def summary(self) -> dict[str, Any]:
        return {
            "sha256": None,
            "od_min": None,
            "od_max": None,
            "mode": "direct",
            "i0": clean_float(self.i0, 6),
            "dark": clean_float(self.dark, 6),
        }
