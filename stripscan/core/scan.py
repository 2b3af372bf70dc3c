"""Loading scans: file bytes to a linear signal image.

A *signal* here is the scanner's reading made linear in light: 0 is no
light, 1 is the file's full scale.  8-bit files are almost always gamma
encoded and are decoded (sRGB by default); 16-bit files from a scanner with
its corrections switched off are linear and are only scaled.
"""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .records import ScanInfo

__all__ = ["ScanError", "Scan", "load_scan", "decode_srgb", "decode_gamma", "reduce_channels", "CHANNEL_RULES"]

CHANNEL_RULES = ("auto", "mean", "red", "green", "blue", "luminance")

# Rec. 709 / sRGB luminance weights for linear light (IEC 61966-2-1).
_LUMINANCE = np.array([0.2126, 0.7152, 0.0722], dtype=np.float32)


class ScanError(ValueError):
    """A scan file cannot be read or used; the message names the file."""


@dataclass(frozen=True, eq=False)
class Scan:
    """A loaded scan.

    Attributes
    ----------
    signal : ndarray, shape (rows, cols), float32
        Linear signal, 0..1 of full scale.
    saturated : ndarray, shape (rows, cols), bool
        Pixels at the top code (or bottom code) of any channel used.
    info : ScanInfo
        Provenance and format.
    """

    signal: np.ndarray
    saturated: np.ndarray
    info: ScanInfo

    @property
    def shape(self) -> tuple[int, int]:
        return self.signal.shape  # type: ignore[return-value]


def decode_srgb(encoded: np.ndarray) -> np.ndarray:
    """Undo the sRGB transfer function (IEC 61966-2-1).

    Parameters
    ----------
    encoded : ndarray
        Encoded values scaled to 0..1.

    Returns
    -------
    ndarray, float32
        Linear light, 0..1.
    """
    v = np.asarray(encoded, dtype=np.float32)
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4).astype(np.float32)


def decode_gamma(encoded: np.ndarray, gamma: float) -> np.ndarray:
    """Undo a pure power-law encoding ``v = L ** (1 / gamma)``."""
    if not gamma > 0:
        raise ValueError(f"gamma must be positive, got {gamma}")
    return np.power(np.asarray(encoded, dtype=np.float32), np.float32(gamma))


def reduce_channels(linear: np.ndarray, rule: str = "auto") -> tuple[np.ndarray, str]:
    """Reduce an (rows, cols, channels) linear image to one signal.

    Silver film is neutral, so every colour channel carries the same
    density; averaging them (``"mean"``, the ``"auto"`` choice) lowers noise
    and, on 8-bit files, the quantisation step.  A single channel can be
    chosen when one is known to be better behaved.

    Returns
    -------
    signal : ndarray, shape (rows, cols), float32
    used : str
        The rule actually applied (``"grey"`` for one-channel images).
    """
    if rule not in CHANNEL_RULES:
        raise ValueError(f"unknown channel rule {rule!r}; choose one of {', '.join(CHANNEL_RULES)}")
    if linear.ndim == 2:
        return linear.astype(np.float32, copy=False), "grey"
    colour = linear[..., :3]
    if colour.shape[-1] < 3:
        return colour[..., 0].astype(np.float32, copy=False), "grey"
    if rule in ("auto", "mean"):
        return colour.mean(axis=-1, dtype=np.float32), "mean"
    if rule == "luminance":
        return np.tensordot(colour, _LUMINANCE, axes=([-1], [0])).astype(np.float32), "luminance"
    index = {"red": 0, "green": 1, "blue": 2}[rule]
    return colour[..., index].astype(np.float32, copy=True), rule


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _tiff_dpi(page) -> float | None:
    """Resolution in dpi from a tifffile page's tags, or None."""
    tags = page.tags
    xres = tags.get("XResolution")
    if xres is None:
        return None
    value = xres.value
    num, den = value if isinstance(value, tuple) else (value, 1)
    if not den or not num:
        return None
    res = num / den
    unit_tag = tags.get("ResolutionUnit")
    unit = int(unit_tag.value) if unit_tag is not None else 2
    if unit == 3:  # per centimetre
        return res * 2.54
    if unit == 1:  # no absolute unit: the number is meaningless as dpi
        return None
    return float(res)


def _read_tiff(path: Path) -> tuple[np.ndarray, float | None, bool]:
    import tifffile

    with tifffile.TiffFile(path) as tif:
        if not tif.pages:
            raise ScanError(f"{path}: the TIFF file holds no image")
        page = tif.pages[0]
        dpi = _tiff_dpi(page)
        data = page.asarray()
        planar_rgb = data.ndim == 3 and data.shape[0] in (3, 4) and data.shape[-1] not in (3, 4)
    if planar_rgb:
        data = np.moveaxis(data, 0, -1)
    return data, dpi, True


def _read_other(path: Path) -> tuple[np.ndarray, float | None]:
    import imageio.v3 as iio

    data = iio.imread(path)
    dpi = None
    try:
        meta = iio.immeta(path)
        value = meta.get("dpi")
        if value:
            dpi = float(value[0] if isinstance(value, (tuple, list)) else value)
    except Exception:  # metadata is optional; the pixels are what matter
        dpi = None
    return data, dpi


def load_scan(
    path: str | os.PathLike[str],
    *,
    dpi: float | None = None,
    channel: str = "auto",
    decoding: str = "auto",
    gamma: float | None = None,
) -> Scan:
    """Read a scan file into a linear signal image.

    Parameters
    ----------
    path : path-like
        TIFF (8/16-bit, grey, RGB or RGBA, tiled or striped, compressed),
        PNG or JPEG.
    dpi : float, optional
        Resolution; overrides the file's tags.
    channel : str
        How colour channels become one signal, see :data:`CHANNEL_RULES`.
    decoding : {"auto", "linear", "srgb", "gamma"}
        Transfer function to undo.  ``"auto"``: 8-bit files are sRGB,
        16-bit and float files linear.
    gamma : float, optional
        Exponent for ``decoding="gamma"``.

    Returns
    -------
    Scan

    Raises
    ------
    ScanError
        When the file is missing, empty, not an image, too small, of an
        unsupported sample type, or unreadable; the message names the file.
    """
    path = Path(path)
    if not path.exists():
        raise ScanError(f"{path}: no such file")
    if path.is_dir():
        raise ScanError(f"{path}: is a folder, not a scan file")
    size = path.stat().st_size
    if size == 0:
        raise ScanError(f"{path}: the file is empty")
    suffix = path.suffix.lower()
    try:
        if suffix in (".tif", ".tiff"):
            data, file_dpi, _ = _read_tiff(path)
        else:
            data, file_dpi = _read_other(path)
    except ScanError:
        raise
    except MemoryError:
        raise ScanError(f"{path}: the image is too large to load in memory") from None
    except Exception as exc:  # every reader has its own exception types
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise ScanError(f"{path}: cannot be read as an image ({reason})") from None

    data = np.asarray(data)
    if data.ndim == 3 and data.shape[-1] == 1:
        data = data[..., 0]
    if data.ndim not in (2, 3) or (data.ndim == 3 and data.shape[-1] not in (2, 3, 4)):
        raise ScanError(f"{path}: unsupported image layout {data.shape}; expected grey, RGB or RGBA")
    if min(data.shape[:2]) < 16:
        raise ScanError(
            f"{path}: the image is only {data.shape[1]} x {data.shape[0]} pixels; too small to hold a strip"
        )
    channels = 1 if data.ndim == 2 else int(data.shape[-1])
    if data.ndim == 3 and channels == 2:  # grey + alpha
        data, channels = data[..., 0], 2

    kind = data.dtype.kind
    if data.dtype == np.uint8:
        bits, full = 8, 255.0
    elif data.dtype == np.uint16:
        bits, full = 16, 65535.0
    elif kind == "f":
        bits, full = data.dtype.itemsize * 8, 1.0
        finite = np.isfinite(data)
        if not finite.all():
            raise ScanError(f"{path}: the floating-point image holds NaN or infinite values")
        lo, hi = float(data.min()), float(data.max())
        if lo < 0 or hi > 1.0 + 1e-6:
            raise ScanError(
                f"{path}: floating-point samples span {lo:g}..{hi:g}; stripscan expects linear "
                "values scaled 0..1 (save the scan as 16-bit integers instead)"
            )
    else:
        raise ScanError(f"{path}: unsupported sample type {data.dtype}; use 8- or 16-bit scans")

    if decoding == "auto":
        decoding = "srgb" if bits == 8 else "linear"
    colour = data[..., :3] if data.ndim == 3 else data
    if kind == "f":
        saturated = colour >= 1.0
    else:
        saturated = (colour == full) | (colour == 0)
    if saturated.ndim == 3:
        saturated = saturated.any(axis=-1)

    scaled = colour.astype(np.float32) / np.float32(full) if kind != "f" else colour.astype(np.float32)
    if decoding == "linear":
        linear, decoding_used = scaled, "linear"
    elif decoding == "srgb":
        linear, decoding_used = decode_srgb(scaled), "srgb"
    elif decoding == "gamma":
        if gamma is None:
            raise ValueError("decoding='gamma' needs a gamma value")
        linear, decoding_used = decode_gamma(scaled, gamma), f"gamma {gamma:g}"
    else:
        raise ValueError(f"unknown decoding {decoding!r}; choose auto, linear, srgb or gamma")
    signal, used = reduce_channels(linear, channel)
    del scaled, linear

    if dpi is None:
        dpi = file_dpi
    if dpi is not None and not (10.0 <= dpi <= 20000.0):
        raise ScanError(f"{path}: implausible resolution {dpi:g} dpi; give the right one with --dpi")
    info = ScanInfo(
        path=str(path),
        sha256=_sha256(path),
        width=int(signal.shape[1]),
        height=int(signal.shape[0]),
        dpi=float(dpi) if dpi else None,
        bits=bits,
        channels=channels,
        channel=used,
        decoding=decoding_used,
    )
    return Scan(signal=np.ascontiguousarray(signal, dtype=np.float32), saturated=saturated, info=info)
