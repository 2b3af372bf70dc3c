"""Reading scan files: TIFF (one pass, pixels and SHA-256 from the same bytes), PNG and JPEG.

Refuses what cannot be a scan before decoding it (too many pixels, colour
models and layouts a flatbed does not write) and names the file in every
message.  :func:`stripscan.core.scan.load_scan` turns what is read here into
a linear signal image.
"""

from __future__ import annotations

import hashlib
import logging
import os
import sys
import threading
from pathlib import Path

import numpy as np


__all__ = ["ScanError", "pixel_limit", "DEFAULT_MAX_PIXELS", "MAX_PIXELS_VARIABLE", "read_tiff", "read_other", "file_sha256",
           "BackgroundHash", "TIFF_LOG"]

#: Largest image read, in pixels, unless ``STRIPSCAN_MAX_PIXELS`` or the
#: ``max_pixels`` argument says otherwise.  An A4 page at 1200 dpi is about
#: 10 000 x 14 000 = 140 million pixels; the limit leaves room for a
#: larger platen at that resolution and refuses, before anything is
#: decoded, a small compressed file that would unpack to many gigabytes.
DEFAULT_MAX_PIXELS = 400_000_000

#: Environment variable that overrides :data:`DEFAULT_MAX_PIXELS`.
MAX_PIXELS_VARIABLE = "STRIPSCAN_MAX_PIXELS"


class ScanError(ValueError):
    """A scan file cannot be read or used; the message names the file."""


def file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 22), b""):
            digest.update(block)
    return digest.hexdigest()


class BackgroundHash:
    """sha256 of a file computed on a worker thread (hashlib releases the GIL).

    From the file itself, or from ``content``, the file's bytes already read
    (then the file is read once, for both its pixels and its hash).
    """

    def __init__(self, path: Path, content: np.ndarray | None = None):
        self._path = path
        self._content = content
        self._digest: str | None = None
        self._error: OSError | None = None
        self._thread = threading.Thread(target=self._run, name="stripscan-sha256", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        try:
            if self._content is not None:
                self._digest = hashlib.sha256(self._content).hexdigest()
            else:
                self._digest = file_sha256(self._path)
        except OSError as exc:
            self._error = exc
        finally:
            self._content = None  # the pixels may outlive the hash; the buffer is theirs now

    def result(self) -> str:
        self._thread.join()
        if self._error is not None:
            raise ScanError(f"{self._path}: cannot be read ({self._error.strerror or self._error})")
        assert self._digest is not None
        return self._digest

    def result_quietly(self) -> None:
        """Wait for the thread, ignoring its outcome (the load failed anyway)."""
        self._thread.join()


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


# Compressed bytes read from a TIFF file in one pass, per decoding thread.
# tifffile's default pass (256 MB) takes in every strip or tile of a scan at
# once and then copies each segment out of that buffer, so a compressed page
# peaked near three times its decoded size: the output, the file's bytes and
# their copies.  In small passes the output is still allocated once and
# filled segment by segment, and besides it only one pass (held twice) and
# the segments being decoded are alive.  A pass per thread keeps every thread
# of a many-core machine busy; on a 600-dpi A4 page such passes read a little
# faster than one big one.  A segment larger than a pass is read whole.
_TIFF_PASS_BYTES = 1 << 20


def pixel_limit() -> int:
    """The largest image :func:`load_scan` reads, in pixels (see :data:`DEFAULT_MAX_PIXELS`).

    Raises
    ------
    ScanError
        When ``STRIPSCAN_MAX_PIXELS`` is set to something other than a
        positive whole number.
    """
    text = os.environ.get(MAX_PIXELS_VARIABLE, "").strip()
    if not text:
        return DEFAULT_MAX_PIXELS
    try:
        value = int(text)
    except ValueError:
        value = 0
    if value < 1:
        raise ScanError(f"{MAX_PIXELS_VARIABLE}={text!r} is not a positive whole number of pixels")
    return value


def _check_pixels(path: Path, width: int, height: int, limit: int) -> None:
    if width * height > limit:
        raise ScanError(
            f"{path}: the image is {width} x {height} pixels ({width * height / 1e6:,.1f} million), more than the "
            f"{limit / 1e6:g} million stripscan reads (set {MAX_PIXELS_VARIABLE} to allow larger scans)")


class _TiffLog(logging.Filter):
    """Keeps tifffile's log messages about a damaged file off the terminal.

    tifffile logs each unreadable tag as a warning; a 200-byte file gave
    nine lines on stderr besides our own one.  While a file is read on a
    thread, its messages are collected here instead, and the first one
    explains a failed read.
    """

    def __init__(self) -> None:
        super().__init__()
        self._local = threading.local()

    def filter(self, record: logging.LogRecord) -> bool:
        sink = getattr(self._local, "sink", None)
        if sink is None:
            return True
        sink.append(record.getMessage())
        return False

    def collect(self) -> list[str]:
        self._local.sink = []
        return self._local.sink

    def stop(self) -> None:
        self._local.sink = None


TIFF_LOG = _TiffLog()
logging.getLogger("tifffile").addFilter(TIFF_LOG)

# TIFF photometric interpretations (TIFF 6.0, section 3-5).
_MINISWHITE, _MINISBLACK, _RGB, _PALETTE, _SEPARATED, _YCBCR = 0, 1, 2, 3, 5, 6
_COLOUR_MODELS = {4: "a transparency mask", _SEPARATED: "CMYK (separated) colour", 8: "CIE L*a*b* colour",
                  9: "ICC L*a*b* colour", 10: "ITU L*a*b* colour", 32844: "LogL", 32845: "LogLuv",
                  32803: "a raw colour filter array", 34892: "raw sensor data"}


def _main_pages(tif) -> int:
    """How many full images a TIFF file holds: pages that are not reduced copies or masks."""
    # NewSubfileType bit 0: a reduced-resolution copy (a preview); bit 2: a transparency mask.
    return sum(1 for page in tif.pages if not int(getattr(page, "subfiletype", 0) or 0) & 0b101)


def _apply_palette(path: Path, data: np.ndarray, colormap: np.ndarray | None) -> np.ndarray:
    """A palette (indexed colour) image as the grey or RGB samples its colour map gives.

    TIFF colour maps hold 16-bit values; a map made from 8-bit colours
    (each value a multiple of 257) gives 8-bit samples, so that a palette
    copy of an 8-bit grey scan reads exactly as the grey scan.
    """
    if colormap is None or colormap.ndim != 2 or colormap.shape[0] != 3 or data.dtype.kind != "u":
        raise ScanError(f"{path}: a palette image without a usable colour map")
    if int(data.max(initial=0)) >= colormap.shape[1]:
        raise ScanError(f"{path}: the palette image uses colours its colour map does not have")
    table = colormap.astype(np.uint16).T  # (colours, 3)
    if not np.any(table % 257):
        table = (table // 257).astype(np.uint8)
    if np.array_equal(table[:, 0], table[:, 1]) and np.array_equal(table[:, 0], table[:, 2]):
        return table[:, 0][data]
    return table[data]


def _read_whole(path: Path) -> np.ndarray:
    """Every byte of a file, read into one uint8 buffer (the read releases the GIL)."""
    size = path.stat().st_size
    # Not a bytearray: that would first write zeros over the whole page.
    content = np.empty(size, dtype=np.uint8)
    view = memoryview(content)
    done = 0
    with open(path, "rb", buffering=0) as fh:
        while done < size:
            got = fh.readinto(view[done:])
            if not got:
                break
            done += got
        more = fh.read(1)
    if done != size or more:
        raise ScanError(f"{path}: the file changed while it was read; read it again when it is complete")
    return content


def _plain_pixels(path: Path, page, byteorder: str, start_hash) -> np.ndarray | None:
    """An uncompressed page stored in one piece, read with its file in one pass; None for any other page.

    The whole file is read once into memory; its hash is started on that
    buffer and the pixels are a view into it, so the file is neither read
    twice nor held twice.
    """
    dtype = np.dtype(page.dtype) if page.dtype is not None else None
    if (dtype is None or dtype not in (np.uint8, np.uint16) or int(page.compression) != 1
            or int(page.predictor or 1) != 1 or int(page.fillorder or 1) != 1 or not page.is_contiguous
            or (int(page.samplesperpixel) > 1 and int(page.planarconfig) != 1)
            or (dtype.itemsize > 1 and byteorder != "<") or sys.byteorder != "little"):
        return None
    offset, count = int(page.dataoffsets[0]), int(np.prod(page.shape))
    content = _read_whole(path)
    if offset < 0 or offset + count * dtype.itemsize > len(content):
        return None  # a damaged file: tifffile's own reader names the problem
    start_hash(content)
    return np.frombuffer(content, dtype=dtype.newbyteorder("<"), count=count, offset=offset).reshape(page.shape)


def read_tiff(path: Path, limit: int = DEFAULT_MAX_PIXELS,
               start_hash=None) -> tuple[np.ndarray, float | None, bool]:
    """Pixels and resolution of a TIFF file's one image.

    Parameters
    ----------
    path : Path
        The TIFF file.
    limit : int
        Largest image read, pixels; checked from the header before decoding.
    start_hash : callable, optional
        Called once, before the pixels are decoded, to start hashing the
        file: with the file's bytes when they were read whole (an
        uncompressed page, whose pixels are then a view into them), else
        with nothing.

    Returns
    -------
    data : ndarray
        The page as ``tifffile``'s ``TiffPage.asarray()`` returns it, with
        planar colour samples moved last: (rows, cols) or (rows, cols, samples).
    dpi : float or None
        Resolution from the page's tags.
    is_tiff : bool
        Always True.

    Raises
    ------
    ScanError
        When the file holds no image, several images, an image larger than
        ``limit`` or one in a colour model other than grey, RGB or palette.
    """
    import tifffile

    with tifffile.TiffFile(path) as tif:
        if not tif.pages:
            raise ScanError(f"{path}: the TIFF file holds no image")
        page = tif.pages[0]
        _check_pixels(path, int(page.imagewidth), int(page.imagelength), limit)
        pages = _main_pages(tif)
        if pages > 1:
            raise ScanError(f"{path}: the TIFF file holds {pages} images; stripscan reads one scan per file "
                            "(save each page as a file of its own)")
        photometric = int(page.photometric)
        if photometric in _COLOUR_MODELS:
            raise ScanError(f"{path}: the image is stored as {_COLOUR_MODELS[photometric]}; "
                            "scan in grey or RGB")
        dpi = _tiff_dpi(page)
        start_hash = start_hash or (lambda content=None: None)
        data = _plain_pixels(path, page, tif.byteorder, start_hash)
        if data is None:
            start_hash()
            # A bounded pass changes only how much is read at once: every
            # compression, predictor and tiled, striped, chunky or planar
            # layout still goes through tifffile's own segment decoder, so
            # shape, dtype and error messages are asarray()'s.
            data = page.asarray(buffersize=_TIFF_PASS_BYTES * max(1, page.maxworkers))
        planar_rgb = data.ndim == 3 and data.shape[0] in (3, 4) and data.shape[-1] not in (3, 4)
        colormap = page.colormap if photometric == _PALETTE else None
    if planar_rgb:
        data = np.moveaxis(data, 0, -1)
    if photometric == _PALETTE:
        data = _apply_palette(path, data, colormap)
    elif photometric == _MINISWHITE and data.dtype.kind == "u":
        data = np.iinfo(data.dtype).max - data  # 0 is white: stored inverted
    return data, dpi, True


def read_other(path: Path, limit: int = DEFAULT_MAX_PIXELS) -> tuple[np.ndarray, float | None]:
    import warnings

    import imageio.v3 as iio
    from PIL import Image

    # The size from the header, before decoding; Pillow's own, smaller
    # alarm is left to our limit.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", Image.DecompressionBombWarning)
        try:
            with Image.open(path) as image:
                width, height = image.size
        except Image.DecompressionBombError:
            width, height = limit + 1, 1
    _check_pixels(path, width, height, limit)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", Image.DecompressionBombWarning)
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
