"""Calibration files: written whole, read back with their content hash and every field checked."""

from __future__ import annotations

import hashlib
import json
import math
import os
from pathlib import Path
from typing import Any


from stripscan._shared import atomic

from stripscan.core.calibration import FORMAT, Calibration
from stripscan.core.certificate import MAX_STEPS, CalibrationError

__all__ = ["save_calibration", "load_calibration", "check_calibration_data", "MAX_CALIBRATION_BYTES"]


def save_calibration(calibration: Calibration, path: str | os.PathLike[str]) -> None:
    """Write a calibration as JSON, atomically (never half written).

    The file carries its own content hash (``"sha256"``, see
    :attr:`Calibration.sha256`), so that an edit made by hand is found when
    it is read back (:func:`check_calibration_data`).
    """
    path = Path(path)
    text = json.dumps({**calibration.to_dict(), "sha256": calibration.sha256}, indent=1) + "\n"
    try:
        atomic.write_text(path, text)
    except OSError as exc:
        raise CalibrationError(f"{path}: cannot write the calibration ({exc.strerror or exc})") from None


def _json_hash(data: dict[str, Any]) -> str:
    # As Calibration.sha256: canonical JSON of the content.
    text = json.dumps(data, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def check_calibration_data(data: dict[str, Any], *, source: str = "<calibration>") -> None:
    """Refuse a calibration file's content that no fit can have made.

    Checks the fields the map and every later reading rest on: the knots are
    finite, the signals rise and the densities fall with them (a monotone
    map), the valid range lies within the knots, the certificate runs 1..N
    with rising densities, the numbers that describe the scan are sane, and,
    when the file carries its own ``"sha256"``, that the content still
    matches it.  Keys it does not know are left alone.

    Raises
    ------
    CalibrationError
        Naming ``source`` and the first field at fault.
    """

    def fail(message: str) -> None:
        raise CalibrationError(f"{source}: {message}")

    def number(value: Any, what: str, *, optional: bool = False) -> float | None:
        if value is None and optional:
            return None
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            fail(f"{what} is {value!r}, not a finite number")
        return float(value)

    def numbers(name: str, *, size: int | None = None, low: int = 1) -> list[float]:
        values = data.get(name)
        if not isinstance(values, list):
            fail(f"{name} is missing or not a list (the file is incomplete or damaged)")
        if size is not None and len(values) != size:
            fail(f"{name} has {len(values)} values, not {size}")
        if not low <= len(values) <= MAX_STEPS:
            fail(f"{name} has {len(values)} values; a tablet has {low} to {MAX_STEPS} steps")
        return [number(v, f"{name}[{k}]") for k, v in enumerate(values)]  # type: ignore[misc]

    if data.get("format") != FORMAT:
        fail("not a stripscan calibration file")
    version = data.get("format_version")
    if isinstance(version, bool) or not isinstance(version, int) or version < 1:
        fail(f"format_version is {version!r}, not a version number of this file format")
    # A newer format is refused by Calibration.from_dict, which knows which
    # formats this version reads.
    log_signal = numbers("log_signal", low=4)
    od = numbers("od", size=len(log_signal))
    if any(b <= a for a, b in zip(log_signal, log_signal[1:])):
        fail("log_signal does not rise from knot to knot; the file was edited or damaged")
    if any(b >= a for a, b in zip(od, od[1:])):
        fail("od does not fall as the signal rises (a denser step passes less light); "
             "the file was edited or damaged")
    if log_signal[-1] > 0.01 or not (-0.1 <= od[-1] and od[0] <= 8.0):
        fail("the knots lie outside signals 0..1 or densities -0.1..8 OD")
    low, high = numbers("covered_od", size=2, low=2)
    # In format 1 the knots are the certified densities the fit covers.
    if version == 1 and not (od[-1] - 1e-6 <= low <= high <= od[0] + 1e-6):
        fail(f"covered_od {low:g}..{high:g} does not lie within the calibrated densities {od[-1]:g}..{od[0]:g}")
    lo, hi = numbers("valid_od", size=2, low=2)
    if not (low - 1e-6 <= lo <= hi <= high + 1e-6):
        fail(f"valid_od {lo:g}..{hi:g} does not lie within the covered densities {low:g}..{high:g}")
    residuals = data.get("residuals")
    if not isinstance(residuals, list) or len(residuals) > MAX_STEPS:
        fail("residuals is missing or not a list")
    for k, value in enumerate(residuals):  # type: ignore[arg-type]
        number(value, f"residuals[{k}]", optional=True)
    rms = number(data.get("rms_residual"), "rms_residual", optional=True)
    if rms is not None and rms < 0:
        fail(f"rms_residual is {rms:g}, below zero")
    excluded = data.get("excluded_steps")
    if not isinstance(excluded, list) or not all(isinstance(v, int) and not isinstance(v, bool) for v in excluded):
        fail("excluded_steps is not a list of step numbers")
    _check_certificate_data(data.get("certificate"), fail)
    if not isinstance(data.get("readings"), list) or not all(isinstance(r, dict) for r in data["readings"]):
        fail("readings is not a list of step readings")
    for name in ("scan_sha256", "scan_path", "created", "channel", "decoding"):
        if not isinstance(data.get(name), str):
            fail(f"{name} is {data.get(name)!r}, not text")
    if not isinstance(data.get("bits"), int) or data["bits"] not in (8, 16, 32, 64):
        fail(f"bits is {data.get('bits')!r}, not 8, 16, 32 or 64")
    dpi = number(data.get("dpi"), "dpi", optional=True)
    if dpi is not None and not 10.0 <= dpi <= 20000.0:
        fail(f"dpi {dpi:g} is not a plausible resolution")
    numbers("tablet_center_rc", size=2, low=2)
    lateral = data.get("lateral")
    if lateral is not None:
        if not isinstance(lateral, dict) or lateral.get("axis", "col") not in ("col", "row"):
            fail("lateral is not a lateral response (c_per_mm2, midline_px, axis 'col' or 'row')")
        number(lateral.get("c_per_mm2"), "lateral c_per_mm2")
        number(lateral.get("midline_px"), "lateral midline_px")
    for name in ("note", "flat_field_sha256"):
        if data.get(name) is not None and not isinstance(data[name], str):
            fail(f"{name} is {data[name]!r}, not text")
    stored = data.get("sha256")
    if stored is not None and stored != _json_hash({k: v for k, v in data.items() if k != "sha256"}):
        fail("the content no longer matches the sha256 it was saved with; the file was edited after "
             "'stripscan calibrate' made it (make the calibration again)")


def _check_certificate_data(certificate: Any, fail: Any) -> None:
    """The certificate inside a calibration file: steps 1..N, rising finite densities."""
    if not isinstance(certificate, dict):
        fail(f"certificate is {certificate!r}, not the tablet's certificate")
    steps, densities = certificate.get("steps"), certificate.get("densities")
    if not isinstance(steps, list) or not isinstance(densities, list) or len(steps) != len(densities):
        fail("the certificate's steps and densities are missing or of different lengths")
    if not 3 <= len(steps) <= MAX_STEPS or steps != list(range(1, len(steps) + 1)):
        fail(f"the certificate's steps do not run 1..N with N from 3 to {MAX_STEPS}")
    if not all(isinstance(d, (int, float)) and not isinstance(d, bool) and math.isfinite(d) for d in densities):
        fail("the certificate's densities are not all finite numbers")
    if any(b <= a for a, b in zip(densities, densities[1:])):
        fail("the certificate's densities do not rise with the step")
    unc = certificate.get("uncertainties")
    if unc is not None and (not isinstance(unc, list) or len(unc) != len(steps) or not all(
            isinstance(u, (int, float)) and not isinstance(u, bool) and math.isfinite(u) and u >= 0 for u in unc)):
        fail("the certificate's uncertainties are not one finite number per step")


#: Largest calibration file read, bytes (a 100-step calibration is about 20 kB).
MAX_CALIBRATION_BYTES = 4 << 20


def load_calibration(path: str | os.PathLike[str]) -> Calibration:
    """Read a calibration JSON file, checked with :func:`check_calibration_data`."""
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read(MAX_CALIBRATION_BYTES + 1)
        if len(raw) > MAX_CALIBRATION_BYTES:
            raise CalibrationError(f"{path}: over {MAX_CALIBRATION_BYTES >> 20} MB, too large for a calibration file")
        data = json.loads(raw.decode("utf-8"))
    except FileNotFoundError:
        raise CalibrationError(f"{path}: no such calibration file") from None
    except IsADirectoryError:
        raise CalibrationError(f"{path}: is a folder, not a calibration file") from None
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise CalibrationError(f"{path}: not a calibration file (invalid JSON)") from None
    except RecursionError:
        raise CalibrationError(f"{path}: not a calibration file (JSON nested too deeply)") from None
    except OSError as exc:
        raise CalibrationError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    if not isinstance(data, dict):
        raise CalibrationError(f"{path}: not a stripscan calibration file")
    check_calibration_data(data, source=str(path))
    return Calibration.from_dict(data, source=str(path))
