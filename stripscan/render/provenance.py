"""Where a reading's densities come from, in the words a report prints.

A report states its calibration's provenance: the tablet scan it was
fitted on, the certificate, when, the density range the tablet covered and
the range read within the accuracy goal, the held-out residual, and the stray light.
A calibration reaches the reports in one of three shapes, and all three
are handled:

* the full record (``Calibration.to_dict()``, as saved by ``stripscan
  calibrate`` and usually kept in the archive);
* the summary every analysis carries (``Calibration.summary()``), when an
  archive stored only that;
* the direct-mode summary of an uncalibrated reading.

This module is Qt-free.
"""

from __future__ import annotations

import datetime as dt
import math
from pathlib import PurePath
from typing import Any

from stripscan.core.calibration import ACCURACY_GOAL

__all__ = ["calibration_lines", "valid_range", "is_uncalibrated", "short_hash", "when"]


def short_hash(digest: Any, length: int = 12) -> str:
    """The first ``length`` hex digits of a digest and an ellipsis; '-' when there is none."""
    if not digest:
        return "-"
    text = str(digest)
    return text[:length] + "\u2026" if len(text) > length else text


def when(stamp: Any) -> str:
    """An ISO date-time as ``YYYY-MM-DD HH:MM UTC``; other text is returned as it is."""
    if not stamp:
        return "-"
    text = str(stamp)
    try:
        moment = dt.datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        return text
    if moment.tzinfo is None:
        return f"{moment:%Y-%m-%d %H:%M}"
    return f"{moment.astimezone(dt.timezone.utc):%Y-%m-%d %H:%M} UTC"


def _od(value: Any, digits: int = 2) -> str:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return "?"
    return f"{number:.{digits}f}" if math.isfinite(number) else "?"


def _span(pair: Any) -> str:
    if not isinstance(pair, (list, tuple)) or len(pair) != 2:
        return "not recorded"
    return f"{_od(pair[0])} to {_od(pair[1])} OD"


def is_uncalibrated(calibration: dict[str, Any] | None) -> bool:
    """True for a direct-mode (uncalibrated) reading."""
    return isinstance(calibration, dict) and calibration.get("mode") == "direct"


def valid_range(calibration: dict[str, Any] | None) -> tuple[float, float] | None:
    """(lowest, highest) density read within the accuracy goal, when the calibration says."""
    if not isinstance(calibration, dict) or is_uncalibrated(calibration):
        return None
    pair = calibration.get("valid_od")
    if pair is None and calibration.get("od_min") is not None:
        pair = (calibration.get("od_min"), calibration.get("od_max"))
    try:
        low, high = float(pair[0]), float(pair[1])  # type: ignore[index]
    except (TypeError, ValueError, IndexError):
        return None
    return (low, high) if math.isfinite(low) and math.isfinite(high) else None


def calibration_lines(calibration: dict[str, Any] | None, digest: str | None = None) -> list[tuple[str, str]]:
    """``(label, text)`` lines describing a calibration's provenance.

    Parameters
    ----------
    calibration : dict or None
        Full record, summary or direct-mode summary; None when unknown.
    digest : str, optional
        The calibration's content hash as the caller knows it (the
        archive's hash for a snapshot, the summary's for a fresh analysis).
    """
    if calibration is None:
        return [("Calibration", "NOT RECORDED: the densities' calibration is unknown; do not rely on them")]
    if is_uncalibrated(calibration):
        return [
            ("Calibration", "NONE - uncalibrated direct mode: densities are log10(I0/I) straight from the "
                            "scanner, not traced to a certified step tablet"),
            ("I0, dark", f"{_od(calibration.get('i0'), 5)}, {_od(calibration.get('dark'), 5)} (of full scale)"),
        ]
    digest = digest or calibration.get("sha256")
    lines: list[tuple[str, str]] = []
    full = "certificate" in calibration
    if full:
        scan_name = PurePath(str(calibration.get("scan_path") or "-")).name
        lines.append(("Tablet scan", f"{scan_name} (sha256 {short_hash(calibration.get('scan_sha256'))})"))
        cert = calibration.get("certificate") or {}
        densities = cert.get("densities") or []
        source = PurePath(str(cert.get("source") or "")).name or "source not recorded"
        span = f"{_od(min(densities), 3)} to {_od(max(densities), 3)} OD" if densities else "no densities"
        lines.append(("Certificate", f"{source}: {len(densities)} certified steps, {span}"))
    else:
        lines.append(("Tablet scan", f"sha256 {short_hash(calibration.get('tablet_scan_sha256'))} "
                                     "(summary only: the full calibration record is not available)"))
    lines.append(("Calibrated on", when(calibration.get("created"))))
    covered = calibration.get("covered_od")
    valid = valid_range(calibration)
    valid_text = f"{valid[0]:.2f} to {valid[1]:.2f} OD" if valid else "not recorded"
    lines.append(("Density range", f"tablet covers {_span(covered)}; read within \u00b1{ACCURACY_GOAL:.2f} OD "
                                   f"from {valid_text}"))
    rms = calibration.get("rms_residual")
    lines.append(("Residual RMS", f"{_od(rms, 4)} OD (held out, tablet steps in the valid range)" if rms is not None
                  else "not available (too few tablet steps)"))
    settings = []
    if calibration.get("bits"):
        settings.append(f"{calibration['bits']}-bit")
    if calibration.get("channel"):
        settings.append(str(calibration["channel"]))
    if calibration.get("decoding"):
        settings.append(str(calibration["decoding"]))
    if calibration.get("dpi"):
        settings.append(f"{float(calibration['dpi']):g} dpi")
    extra = ", ".join(settings)
    lines.append(("Calibration id", f"sha256 {short_hash(digest)}" + (f"; scanned {extra}" if extra else "")))
    stray = calibration.get("stray_light")
    if isinstance(stray, dict):
        lamp = ("lamp measured across the carriage" if stray.get("lamp_span_mm")
                else "lamp not measured (no open platen beside the tablet)")
        lines.append(("Stray light", f"{100 * float(stray.get('total_fraction', 0.0)):.3f} % of the light spread "
                                     f"(±{100 * float(stray.get('fraction_sd', 0.0)):.3f} %), corrected on every "
                                     f"scan; {lamp}"))
    elif calibration.get("stray_light_fraction") is not None:
        lines.append(("Stray light", f"{100 * float(calibration['stray_light_fraction']):.3f} % of the light spread, "
                                     "corrected on every scan"))
    if calibration.get("tablet_on_scan"):
        lines.append(("Tablet", "on the same scan as the strips"))
    if full and calibration.get("flat_field_sha256"):
        lines.append(("Flat field", f"blank scan sha256 {short_hash(calibration['flat_field_sha256'])}"))
    if full and calibration.get("note"):
        lines.append(("Note", str(calibration["note"])))
    return lines


def calibration_brief(calibration: dict[str, Any] | None, digest: str | None = None) -> str:
    """The provenance on one line (for pages that name several calibrations)."""
    if calibration is None:
        return "calibration NOT RECORDED: do not rely on these densities"
    if is_uncalibrated(calibration):
        return "NONE - uncalibrated direct mode (log10(I0/I) from the scanner, not traced to a step tablet)"
    lines = dict(calibration_lines(calibration, digest))
    parts = [lines["Calibration id"].split(";")[0], f"tablet scan {lines['Tablet scan']}"]
    if "Certificate" in lines:
        parts.append(f"certificate {lines['Certificate']}")
    parts += [f"calibrated {lines['Calibrated on']}", lines["Density range"], f"residual RMS {lines['Residual RMS']}"]
    return "; ".join(parts)
