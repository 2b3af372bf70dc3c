"""How the archive's records check and write their values: dates, UTC times, names, numbers,
previews, canonical JSON and the calibration hash, and the plain-record base class.

Dates are ISO 8601 calendar dates (``YYYY-MM-DD``), times UTC ISO 8601 with a ``Z`` suffix.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import hashlib
import json
import math
import re
from typing import Any


__all__ = ["SHA256_HEX", "PREVIEW_MAX_BYTES", "canonical_json", "calibration_text", "calibration_hash", "utc_now", "check_day", "check_time", "check_name", "check_text", "check_number", "check_preview", "check_id", "set_field", "fields_from", "PlainRecord"]

#: Largest preview image kept with a snapshot; the archive is for numbers,
#: the scan itself stays on disk and is identified by its sha256.
PREVIEW_MAX_BYTES = 64 * 1024

_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_DAY = re.compile(r"\d{4}-\d{2}-\d{2}")
_UTC_TIME = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d{1,6})?Z")
SHA256_HEX = re.compile(r"[0-9a-f]{64}")


def _json_default(value: Any) -> Any:
    # numpy scalars reach us from the pipeline; .item() gives the plain value.
    item = getattr(value, "item", None)
    if callable(item):
        return item()
    raise TypeError(f"{type(value).__name__} is not JSON data")


def canonical_json(data: Any) -> str:
    """Serialise ``data`` the one way the archive stores and hashes JSON.

    Keys are sorted and no spaces are written, so equal data gives equal
    text.  NaN and infinities are refused: JSON has no spelling for them.

    Raises
    ------
    ValueError
        When ``data`` holds a non-finite number or a value JSON cannot hold.
    """
    try:
        return json.dumps(
            data, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
            allow_nan=False, default=_json_default,
        )
    except (TypeError, ValueError) as exc:
        raise ValueError(f"not storable as JSON ({exc})") from None


def calibration_text(calibration: dict[str, Any]) -> str:
    """The canonical JSON text of a calibration, exactly as hashed and stored.

    This is ``json.dumps(d, sort_keys=True, separators=(",", ":"))`` with
    its default ASCII escaping, the form the whole program agrees on, so
    that anyone can check a stored calibration: sha256 of its text is its
    hash.
    """
    if not isinstance(calibration, dict):
        raise ValueError("a calibration must be a JSON object (dict)")
    try:
        return json.dumps(calibration, sort_keys=True, separators=(",", ":"),
                          allow_nan=False, default=_json_default)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"calibration is not storable as JSON ({exc})") from None


def calibration_hash(calibration: dict[str, Any]) -> str:
    """Content address of a calibration: sha256 of :func:`calibration_text`."""
    return hashlib.sha256(calibration_text(calibration).encode("ascii")).hexdigest()


def utc_now() -> str:
    """The current UTC time as stored in ``created_at`` columns."""
    return dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def check_day(value: str | None, what: str) -> None:
    """Refuse anything but None or a real ``YYYY-MM-DD`` date."""
    if value is None:
        return
    if not isinstance(value, str) or not _DAY.fullmatch(value):
        raise ValueError(f"{what} {value!r} is not a date written YYYY-MM-DD")
    try:
        dt.date.fromisoformat(value)
    except ValueError:
        raise ValueError(f"{what} {value!r} is not a calendar date") from None


def check_time(value: str | None, what: str) -> None:
    if value is not None and (not isinstance(value, str) or not _UTC_TIME.fullmatch(value)):
        raise ValueError(f"{what} {value!r} is not a UTC time written YYYY-MM-DDTHH:MM:SSZ")


def check_name(value: Any, what: str) -> None:
    if not isinstance(value, str) or not value.strip():
        raise ValueError(f"{what} must be a non-empty text")


def check_text(value: Any, what: str) -> None:
    if not isinstance(value, str):
        raise ValueError(f"{what} must be text, not {type(value).__name__}")


def check_number(value: Any, what: str, *, low: float | None = None,
                  high: float | None = None) -> None:
    if value is None:
        return
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ValueError(f"{what} must be a finite number, not {value!r}")
    if (low is not None and value <= low) or (high is not None and value >= high):
        raise ValueError(f"{what} {value!r} lies outside {low} .. {high}")


def check_preview(value: bytes | None) -> None:
    if value is None:
        return
    if not isinstance(value, (bytes, bytearray)):
        raise ValueError("preview must be PNG bytes")
    if not bytes(value[:8]) == _PNG_SIGNATURE:
        raise ValueError("preview is not a PNG image (its first bytes are not the PNG signature)")
    if len(value) > PREVIEW_MAX_BYTES:
        raise ValueError(f"preview is {len(value)} bytes; at most {PREVIEW_MAX_BYTES} are kept")


def set_field(record: Any, name: str, value: Any) -> None:
    # Normalising inside __post_init__ of a frozen dataclass.
    object.__setattr__(record, name, value)


def fields_from(cls: type, data: dict[str, Any]) -> dict[str, Any]:
    """Pick ``cls``'s fields out of ``data``; a missing required field is an error."""
    if not isinstance(data, dict):
        raise ValueError(f"{cls.__name__} data must be a JSON object")
    kwargs: dict[str, Any] = {}
    for f in dataclasses.fields(cls):
        if f.name in data:
            kwargs[f.name] = data[f.name]
        elif f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING:
            raise ValueError(f"{cls.__name__} data lacks the field {f.name!r}")
    return kwargs


class PlainRecord:
    """``to_dict`` / ``from_dict`` for records made only of JSON values."""

    def to_dict(self) -> dict[str, Any]:
        data = {}
        for f in dataclasses.fields(self):  # type: ignore[arg-type]
            value = getattr(self, f.name)
            data[f.name] = list(value) if isinstance(value, tuple) else value
        return data

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Any:
        return cls(**fields_from(cls, data))


def check_id(value: Any, what: str) -> None:
    if value is not None and (isinstance(value, bool) or not isinstance(value, int) or value < 1):
        raise ValueError(f"{what} must be a positive whole number, not {value!r}")
