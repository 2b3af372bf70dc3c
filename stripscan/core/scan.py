"""Loading scans: file bytes to a linear signal image.

A *signal* here is the scanner's reading made linear in light: 0 is no
light, 1 is the file's full scale.  8-bit files are almost always gamma
encoded and are decoded (sRGB by default); 16-bit files from a scanner with
its corrections switched off are linear and are only scaled.
"""

from __future__ import annotations

import dataclasses
import os
from pathlib import Path

import numpy as np

from stripscan.core.records import ScanInfo

from stripscan.core.scan_files import (
    DEFAULT_MAX_PIXELS,
    MAX_PIXELS_VARIABLE,
    ScanError,
    BackgroundHash,
    read_other,
    read_tiff,
    TIFF_LOG,
    pixel_limit,
)

__all__ = ["ScanError", "Scan", "load_scan", "pixel_limit", "DEFAULT_MAX_PIXELS", "MAX_PIXELS_VARIABLE", "decode_srgb", "decode_gamma", "reduce_channels", "channel_weights", "CHANNEL_RULES"]

CHANNEL_RULES = ("auto", "mean", "red", "green", "blue", "luminance")

# Rec. 709 / sRGB luminance weights for linear light (IEC 61966-2-1).
_LUMINANCE = np.array([0.2126, 0.7152, 0.0722], dtype=np.float32)


class Scan:
    """A loaded scan: the stored pixels and how to turn them into signal.

    The pixels are kept as the file stores them (usually uint16) and decoded
    only where they are needed: the strip search reads a sparse sample and
    each step only its own pixels, so a 600-dpi page never has to exist as
    a float image.  :attr:`signal` decodes everything, once, for displays.

    Parameters
    ----------
    raw : ndarray, shape (rows, cols) or (rows, cols, channels)
        Pixels as stored (uint8, uint16 or float32 0..1).
    info : ScanInfo
    lut : ndarray or None
        Linear signal for every integer code (float32); None for float data.
    weights : ndarray or None
        Channel weights that reduce colour to one signal (sum 1); None for grey.
    """

    def __init__(
        self,
        raw: np.ndarray,
        info: ScanInfo,
        lut: np.ndarray | None,
        weights: np.ndarray | None,
        pending_hash: "BackgroundHash | None" = None,
    ):
        self.raw = raw
        self._info = info
        self._pending_hash = pending_hash
        self._lut = lut
        self._weights = weights
        self._signal: np.ndarray | None = None
        self._saturated: np.ndarray | None = None
        self._top = None if lut is None else len(lut) - 1
        # A linear table is codes / full scale: dividing gives the same
        # float32 values twice as fast as looking them up.
        self._linear_full = None if lut is None or info.decoding != "linear" else np.float32(self._top)

    @property
    def info(self) -> ScanInfo:
        """Provenance and format; waits for the file's sha256 the first time."""
        if self._pending_hash is not None:
            self._info = dataclasses.replace(self._info, sha256=self._pending_hash.result())
            self._pending_hash = None
        return self._info

    @property
    def header(self) -> ScanInfo:
        """Provenance and format known at once; ``sha256`` may still be empty."""
        return self._info

    @property
    def dpi(self) -> float | None:
        """Resolution (available at once, without waiting for the hash)."""
        return self._info.dpi

    @property
    def pixel_mm(self) -> float | None:
        return self._info.pixel_mm

    @classmethod
    def from_signal(cls, signal: np.ndarray, info: ScanInfo) -> "Scan":
        """A scan whose pixels already are linear signal (e.g. after a flat-field)."""
        return cls(np.ascontiguousarray(signal, dtype=np.float32), info, None, None)

    @property
    def shape(self) -> tuple[int, int]:
        return self.raw.shape[:2]  # type: ignore[return-value]

    def decode(self, pixels: np.ndarray) -> np.ndarray:
        """Linear signal (float32) of stored pixels, shape (...) or (..., channels) -> (...)."""
        if self._linear_full is not None:
            values = pixels.astype(np.float32) / self._linear_full
        elif self._lut is not None:
            values = self._lut[pixels]
        else:
            values = pixels.astype(np.float32, copy=False)
        if self._weights is None:
            return values
        # einsum's own loop, not a BLAS product that may wait on worker threads.
        return np.einsum("...c,c->...", values[..., : len(self._weights)], self._weights)

    def code_step(self, signal: np.ndarray) -> np.ndarray:
        """Signal between neighbouring stored codes at linear signal(s): the quantisation step.

        0 for floating-point pixels.  Means of quantised pixels carry a bias of
        a fraction of this step where the noise is smaller than it (8-bit
        scans, dense areas), which no amount of averaging removes.
        """
        s = np.asarray(signal, dtype=np.float64)
        if self._lut is None:
            return np.zeros_like(s)
        lut = self._lut.astype(np.float64)
        k = np.clip(np.searchsorted(lut, s), 1, len(lut) - 1)
        return lut[k] - lut[k - 1]

    def read_masked(self, top_left: tuple[int, int], mask: np.ndarray, stride: int = 1) -> tuple[np.ndarray, np.ndarray]:
        """Signal (float32) and saturation flags of the pixels selected by a window mask.

        Parameters
        ----------
        top_left : (int, int)
            Image (row, col) of ``mask[0, 0]``.
        mask : ndarray of bool, shape (window_rows, window_cols)
            Lies inside the image.
        stride : int
            ``mask[i, j]`` stands for image pixel ``top_left + stride * (i, j)``.

        Returns
        -------
        signal, saturated : ndarray, shape (count,)
            In row-major order of the selected pixels.
        """
        pixels = self._window(top_left, mask, stride)[mask]
        return self.decode(pixels), self._flags(pixels)

    def read_histogram(self, top_left: tuple[int, int], mask: np.ndarray,
                       stride: int = 1) -> tuple[np.ndarray, np.ndarray, int] | None:
        """The selected pixels as a histogram of their signal, for single-channel integer scans.

        Parameters
        ----------
        top_left, mask, stride
            As :meth:`read_masked`.

        Returns
        -------
        levels : ndarray of float64, shape (k,)
            Linear signal of each stored code that occurs, increasing (the
            decoding table is increasing).
        counts : ndarray of int64, shape (k,)
            How many selected pixels hold each.
        saturated : int
            Selected pixels at the top or bottom code.

        None for colour or floating-point scans, whose signal is not one code per pixel.
        """
        if self._lut is None or self._weights is not None:
            return None
        pixels = self._window(top_left, mask, stride)[mask]
        if pixels.size == 0:
            return np.zeros(0), np.zeros(0, dtype=np.int64), 0
        low, high = int(pixels.min()), int(pixels.max())
        # Counting from the lowest code keeps the table as short as the codes' span.
        counts = np.bincount(np.subtract(pixels, low, dtype=np.intp), minlength=high - low + 1)
        codes = np.flatnonzero(counts)
        saturated = (int(counts[0]) if low == 0 else 0) + (int(counts[-1]) if high == self._top else 0)
        return self._lut[codes + low].astype(np.float64), counts[codes].astype(np.int64), saturated

    def _window(self, top_left: tuple[int, int], mask: np.ndarray, stride: int) -> np.ndarray:
        r0, c0 = top_left
        return self.raw[r0 : r0 + stride * mask.shape[0] : stride, c0 : c0 + stride * mask.shape[1] : stride]

    def _flags(self, pixels: np.ndarray) -> np.ndarray:
        """True where any used channel of stored pixels sits at the top or bottom code."""
        if self._weights is not None:
            pixels = pixels[..., : len(self._weights)]
        if self._top is None:
            flags = pixels >= 1.0
        else:
            flags = (pixels == 0) | (pixels == self._top)
        # Colour pixels carry their channels last.
        return flags.any(axis=-1) if self.raw.ndim == 3 else flags

    def sample(self, factor: int) -> np.ndarray:
        """A reduced signal image, one value per ``factor`` x ``factor`` block.

        Each value averages the two or three pixels at the block's centre
        along each axis instead of the whole block: that reads a few percent
        of the pixels, is centred on the block exactly like a block mean, and
        is plenty to find strips whose steps span tens of blocks.  Rows and
        columns beyond the last whole block are dropped.
        """
        if factor <= 1:
            return self.signal
        rows, cols = (self.shape[0] // factor) * factor, (self.shape[1] // factor) * factor
        half = factor // 2
        taps = (half - 1, half) if factor % 2 == 0 else (half - 1, half, half + 1)
        if self._linear_full is not None and self._weights is None:
            # Linear grey codes: added straight into one float32 sum, scaled once
            # (the same values to float32 rounding, without a temporary per tap).
            total = np.zeros((rows // factor, cols // factor), dtype=np.float32)
            for dr in taps:
                for dc in taps:
                    np.add(total, self.raw[dr:rows:factor, dc:cols:factor], out=total, casting="unsafe")
            total *= np.float32(1.0) / (self._linear_full * np.float32(len(taps) ** 2))
            return total
        total = None
        for dr in taps:
            for dc in taps:
                part = self.decode(self.raw[dr:rows:factor, dc:cols:factor])
                total = part if total is None else total + part
        return (total / np.float32(len(taps) ** 2)).astype(np.float32, copy=False)

    @property
    def signal(self) -> np.ndarray:
        """The whole image as linear signal, float32 (rows, cols); decoded once, in slabs of rows.

        A colour page is decoded slab by slab into the one-channel output: a
        1200-dpi A4 RGB page never exists as float channels (1.7 GB).
        """
        if self._signal is None:
            out = np.empty(self.shape, dtype=np.float32)
            for rows in _slabs(self.raw):
                out[rows] = self.decode(self.raw[rows])
            self._signal = out
        return self._signal

    @property
    def saturated(self) -> np.ndarray:
        """Pixels at the top or bottom code of any channel used, bool (rows, cols)."""
        if self._saturated is None:
            out = np.empty(self.shape, dtype=bool)
            for rows in _slabs(self.raw):
                out[rows] = self._flags(self.raw[rows])
            self._saturated = out
        return self._saturated


#: Values (pixels x channels) decoded at once when a whole image is decoded.
_SLAB_VALUES = 1 << 22


def _slabs(image: np.ndarray) -> list[slice]:
    """Slices of rows that each hold about :data:`_SLAB_VALUES` values of ``image``."""
    per_row = max(1, int(np.prod(image.shape[1:])))
    rows = max(1, _SLAB_VALUES // per_row)
    return [slice(r, r + rows) for r in range(0, image.shape[0], rows)]


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


def channel_weights(channels: int, rule: str = "auto") -> tuple[np.ndarray | None, str]:
    """Weights that reduce ``channels`` linear colour channels to one signal.

    Silver film is neutral, so every colour channel carries the same
    density; averaging them (``"mean"``, the ``"auto"`` choice) lowers noise
    and, on 8-bit files, the quantisation step.  A single channel can be
    chosen when one is known to be better behaved.  Alpha is ignored.

    Returns
    -------
    weights : ndarray of float32, shape (3,), or None for grey images
    used : str
        The rule actually applied (``"grey"`` for one-channel images).
    """
    if rule not in CHANNEL_RULES:
        raise ValueError(f"unknown channel rule {rule!r}; choose one of {', '.join(CHANNEL_RULES)}")
    if channels < 3:
        return None, "grey"
    if rule in ("auto", "mean"):
        return np.full(3, 1.0 / 3.0, dtype=np.float32), "mean"
    if rule == "luminance":
        return _LUMINANCE.copy(), "luminance"
    weights = np.zeros(3, dtype=np.float32)
    weights[{"red": 0, "green": 1, "blue": 2}[rule]] = 1.0
    return weights, rule


def reduce_channels(linear: np.ndarray, rule: str = "auto") -> tuple[np.ndarray, str]:
    """Reduce an (rows, cols[, channels]) linear image to one signal, see :func:`channel_weights`."""
    channels = linear.shape[-1] if linear.ndim == 3 else 1
    weights, used = channel_weights(channels, rule)
    if weights is None:
        single = linear if linear.ndim == 2 else linear[..., 0]
        return single.astype(np.float32, copy=False), used
    # Slab by slab into the float32 output: no float copy of all the channels at once.
    out = np.empty(linear.shape[:2], dtype=np.float32)
    for rows in _slabs(linear):
        out[rows] = np.einsum("...c,c->...", linear[rows, :, :3].astype(np.float32, copy=False), weights)
    return out, used


def load_scan(
    path: str | os.PathLike[str],
    *,
    dpi: float | None = None,
    channel: str = "auto",
    decoding: str = "auto",
    gamma: float | None = None,
    max_pixels: int | None = None,
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
    max_pixels : int, optional
        Largest image read, pixels, checked from the file's header before
        anything is decoded; by default :func:`pixel_limit` (400 million, or
        ``STRIPSCAN_MAX_PIXELS``).

    Returns
    -------
    Scan

    Raises
    ------
    ScanError
        When the file is missing, empty, not an image, too small, of an
        unsupported sample type, too large, or unreadable; the message names the file.
    """
    path = Path(path)
    limit = pixel_limit() if max_pixels is None else max_pixels
    if not path.exists():
        raise ScanError(f"{path}: no such file")
    if path.is_dir():
        raise ScanError(f"{path}: is a folder, not a scan file")
    size = path.stat().st_size
    if size == 0:
        raise ScanError(f"{path}: the file is empty")
    # Hash the file on a second thread while it is decoded: hashlib releases
    # the GIL, and for an uncompressed page the hash costs more than the read.
    # The hash is joined only when the scan's provenance is first asked for,
    # so it also overlaps the analysis.  An uncompressed TIFF page is read
    # with its file in one pass and hashed from that buffer.
    hashing: list[BackgroundHash] = []

    def start_hash(content: np.ndarray | None = None) -> None:
        if not hashing:
            hashing.append(BackgroundHash(path, content))

    try:
        scan = _decode_file(path, start_hash, dpi=dpi, channel=channel, decoding=decoding, gamma=gamma, limit=limit)
    except BaseException:
        for hasher in hashing:
            hasher.result_quietly()
        raise
    start_hash()  # a reader that failed to start it
    scan._pending_hash = hashing[0]
    return scan


def _decode_file(
    path: Path, start_hash, *, dpi: float | None, channel: str, decoding: str, gamma: float | None,
    limit: int = DEFAULT_MAX_PIXELS,
) -> Scan:
    suffix = path.suffix.lower()
    messages = TIFF_LOG.collect()
    try:
        if suffix in (".tif", ".tiff"):
            data, file_dpi, _ = read_tiff(path, limit, start_hash)
        else:
            start_hash()
            data, file_dpi = read_other(path, limit)
    except ScanError:
        raise
    except MemoryError:
        raise ScanError(f"{path}: the image is too large to load in memory") from None
    except Exception as exc:  # every reader has its own exception types
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        if messages:
            reason += f"; first problem found: {messages[0]}"
        raise ScanError(f"{path}: cannot be read as an image ({reason})") from None
    finally:
        TIFF_LOG.stop()

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
        bits, full = 8, 255
    elif data.dtype == np.uint16:
        bits, full = 16, 65535
    elif kind == "f":
        bits, full = data.dtype.itemsize * 8, 1
        finite = np.isfinite(data)
        if not finite.all():
            raise ScanError(f"{path}: the floating-point image holds NaN or infinite values")
        lo, hi = float(data.min()), float(data.max())
        if lo < 0 or hi > 1.0 + 1e-6:
            raise ScanError(
                f"{path}: floating-point samples span {lo:g}..{hi:g}; stripscan expects linear "
                "values scaled 0..1 (save the scan as 16-bit integers instead)"
            )
        data = data.astype(np.float32, copy=False)
    else:
        raise ScanError(f"{path}: unsupported sample type {data.dtype}; use 8- or 16-bit scans")

    if decoding == "auto":
        decoding = "srgb" if bits == 8 else "linear"
    if kind == "f":
        if decoding != "linear":
            raise ScanError(f"{path}: floating-point scans must be linear")
        lut, decoding_used = None, "linear"
    else:
        codes = np.arange(full + 1, dtype=np.float32) / np.float32(full)
        if decoding == "linear":
            lut, decoding_used = codes, "linear"
        elif decoding == "srgb":
            lut, decoding_used = decode_srgb(codes), "srgb"
        elif decoding == "gamma":
            if gamma is None:
                raise ValueError("decoding='gamma' needs a gamma value")
            lut, decoding_used = decode_gamma(codes, gamma), f"gamma {gamma:g}"
        else:
            raise ValueError(f"unknown decoding {decoding!r}; choose auto, linear, srgb or gamma")
    weights, used = channel_weights(data.shape[-1] if data.ndim == 3 else 1, channel)

    if dpi is None:
        dpi = file_dpi
    if dpi is not None and not (10.0 <= dpi <= 20000.0):
        raise ScanError(f"{path}: implausible resolution {dpi:g} dpi; give the right one with --dpi")
    info = ScanInfo(
        path=str(path),
        sha256="",
        width=int(data.shape[1]),
        height=int(data.shape[0]),
        dpi=float(dpi) if dpi else None,
        bits=bits,
        channels=channels,
        channel=used,
        decoding=decoding_used,
    )
    return Scan(data, info, lut, weights)
