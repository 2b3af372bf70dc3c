"""Fitting the map from scanner signal to optical density on a step tablet's certified steps.

Held-out residuals judge the fit, and the density range where it reads within
the accuracy goal (±0.02 OD) is the range every later reading is checked against.
"""

from __future__ import annotations

import datetime as _dt
import math
from typing import Sequence

import numpy as np

from stripscan.core.numerics import pchip
from stripscan.core.records import StepReading, clean_float
from stripscan.core.straylight import StrayLight

from stripscan.core.calibration import ACCURACY_GOAL, Calibration, LateralCorrection
from stripscan.core.certificate import CalibrationError, Certificate

__all__ = ["fit_calibration"]


def _held_out_predictions(x: np.ndarray, od: np.ndarray) -> np.ndarray:
    """Each knot predicted by a PCHIP curve through all the others.

    Interior knots are interpolated (leave-one-out); the first knot — the
    densest step, the top of the range — is extrapolated one-sidedly from
    the rest, so the top of the range is tested too.  The last knot (the
    lightest step, the bottom of the range) is returned as NaN: it is the
    end the range starts from.
    """
    out = np.full(len(x), np.nan)
    for i in range(0, len(x) - 1):
        keep = np.ones(len(x), dtype=bool)
        keep[i] = False
        out[i] = float(pchip(x[keep], od[keep])(x[i]))
    return out


def fit_calibration(
    readings: Sequence[StepReading],
    certificate: Certificate,
    *,
    scan_sha256: str,
    scan_path: str,
    bits: int,
    channel: str,
    decoding: str,
    dpi: float | None,
    tablet_center_rc: tuple[float, float],
    lateral: LateralCorrection | None = None,
    flat_field_sha256: str | None = None,
    note: str = "",
    accuracy: float = ACCURACY_GOAL,
    max_saturated: float = 0.01,
    created: str | None = None,
    stray_light: StrayLight | None = None,
    seen: Sequence[tuple[float, float, float]] | None = None,
) -> Calibration:
    """Fit the signal-to-density map from a tablet's step readings.

    Parameters
    ----------
    readings : sequence of StepReading
        One per certificate step, step 1 (lightest) first.
    certificate : Certificate
    accuracy : float
        Accuracy goal, OD; the valid range ends before the first step whose
        held-out residual exceeds it.
    max_saturated : float
        Largest fraction of saturated pixels a usable step may have.
    stray_light : StrayLight, optional
        The scanner's stray light, fitted on the same scan.
    seen : sequence of (float, float, float), optional
        With ``stray_light``: ``(lamp, spread, unit)`` at each certificate
        step (relative lamp brightness, spread light, spread per unit
        fraction), so that the map's knots hold the light the sensor saw
        there, ``lamp * ((1 - f) 10**-D + spread)``.
    Other parameters record provenance.

    Raises
    ------
    CalibrationError
        When the readings and certificate do not match, or fewer than four
        steps are usable.

    Notes
    -----
    Residuals are held out: each step is predicted from a map fitted
    without it and compared with its certified density — interior steps by
    interpolation, the densest usable step by extrapolation from the
    others, so that the top of the valid range is a density that was
    tested, never merely the last step.  With a stray-light model the
    prediction is turned into a density exactly as a reading is (its
    spread light taken off), so the residual is in certified terms.
    """
    if len(readings) != len(certificate.densities):
        raise CalibrationError(
            f"the tablet shows {len(readings)} steps but the certificate lists {len(certificate.densities)}"
        )
    if (stray_light is None) != (seen is None) or (seen is not None and len(seen) != len(readings)):
        raise ValueError("give the stray-light model together with the lamp and spread of every step")
    signal = np.array([r.signal for r in readings], dtype=np.float64)
    sem = np.array([r.signal_sd / math.sqrt(max(r.pixels, 1)) for r in readings], dtype=np.float64)
    cert = np.asarray(certificate.densities, dtype=np.float64)
    usable = [0]
    excluded: list[int] = []
    if not np.isfinite(signal[0]) or signal[0] <= 0 or readings[0].saturated_fraction > max_saturated:
        raise CalibrationError("the tablet's lightest step cannot be read (off the scan or saturated)")
    for i in range(1, len(signal)):
        prev = usable[-1]
        ok = np.isfinite(signal[i]) and signal[i] > 0 and readings[i].saturated_fraction <= max_saturated
        # The signal must fall clearly, both against noise and by a relative
        # margin that a flare-capped or clipped scanner no longer reaches.
        margin = max(4.0 * math.hypot(sem[i], sem[prev]), 0.002 * signal[prev])
        if ok and signal[prev] - signal[i] > margin:
            usable.append(i)
        else:
            excluded.extend(range(i + 1, len(signal) + 1))
            break
    if len(usable) < 4:
        raise CalibrationError(
            f"only {len(usable)} tablet step{'' if len(usable) == 1 else 's'} give{'s' if len(usable) == 1 else ''} "
            "distinct signals; check the scan settings "
            "(16-bit linear, automatic corrections off)"
        )
    f = stray_light.total if stray_light is not None else 0.0
    lamp = np.array([p[0] for p in seen], dtype=np.float64)[usable] if seen else np.ones(len(usable))
    spread = np.array([p[1] for p in seen], dtype=np.float64)[usable] if seen else np.zeros(len(usable))
    used_cert = cert[usable]
    seen_od = -np.log10(lamp * ((1.0 - f) * 10.0 ** -used_cert + spread))
    x = np.log10(signal[usable])[::-1]
    od = seen_od[::-1]
    predicted_seen = _held_out_predictions(x, od)[::-1]  # back to step order
    with np.errstate(divide="ignore", invalid="ignore"):
        transmitted = (10.0 ** -predicted_seen / lamp - spread) / (1.0 - f)
        predicted = np.where(transmitted > 0, -np.log10(np.where(transmitted > 0, transmitted, 1.0)), np.inf)
    residuals: list[float | None] = [
        None if np.isnan(p) else float(predicted[k] - used_cert[k]) for k, p in enumerate(predicted_seen)
    ]
    # The tablet's own reading noise, carried through the map's slope (and
    # through the spread-light correction, which magnifies it by
    # seen / (seen - spread)), must also leave room for the goal at k = 2:
    # where the scanner's response flattens, a tiny signal error becomes a
    # large density error.
    slopes = np.abs(pchip(x, od).slope(x))[::-1]
    share = spread / ((1.0 - f) * 10.0 ** -used_cert + spread)
    noise_od = slopes * sem[usable] / (signal[usable] * math.log(10.0)) / (1.0 - share)
    # Valid range: from the lightest step up to the last step before the
    # held-out error or the noise first exceeds the goal.
    valid_hi_index = len(usable) - 1
    for k, res in enumerate(residuals):
        if (res is not None and not abs(res) <= accuracy) or 2.0 * noise_od[k] > accuracy:
            valid_hi_index = max(0, k - 1)
            break
    valid = (float(used_cert[0]), float(used_cert[valid_hi_index]))
    # The RMS goes into every reading's uncertainty, so it covers the valid
    # range only: residuals past its end are why the range ends there, not
    # the map's error inside it.
    interior = [r for r in residuals[: valid_hi_index + 1] if r is not None]
    rms = float(np.sqrt(np.mean(np.square(interior)))) if interior else None
    return Calibration(
        log_signal=tuple(float(v) for v in x),
        od=tuple(float(v) for v in od),
        valid_od=valid,
        covered_od=(float(used_cert[0]), float(used_cert[-1])),
        residuals=tuple(residuals),
        excluded_steps=tuple(excluded),
        rms_residual=rms,
        certificate=certificate,
        readings=tuple(
            {"step": r.step, "signal": clean_float(r.signal), "signal_sd": clean_float(r.signal_sd), "pixels": r.pixels}
            for r in readings
        ),
        scan_sha256=scan_sha256,
        scan_path=scan_path,
        created=created or _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
        bits=bits,
        channel=channel,
        decoding=decoding,
        dpi=dpi,
        tablet_center_rc=tablet_center_rc,
        lateral=lateral,
        flat_field_sha256=flat_field_sha256,
        note=note,
        stray_light=stray_light,
        tablet_spread=(
            tuple((float(d), float(sp), float(seen[k][2])) for d, sp, k in zip(used_cert, spread, usable))
            if seen is not None else None
        ),
    )
