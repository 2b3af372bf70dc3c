"""Loading scans: formats, resolution tags, sRGB decoding, channel rules, bad files."""

from __future__ import annotations

import gc
import tracemalloc

import numpy as np
import pytest
import tifffile

from stripscan.core.scan import decode_srgb, load_scan, reduce_channels
from stripscan.core.scan_files import ScanError


def _ramp(shape=(40, 60), top=65535, dtype=np.uint16):
    return (np.linspace(0, top, shape[0] * shape[1]).reshape(shape)).astype(dtype)


@pytest.mark.parametrize(
    "kwargs",
    [
        {},
        {"compression": "zlib"},
        {"compression": "lzw"},
        {"tile": (16, 16)},
        {"tile": (16, 16), "compression": "zlib"},
    ],
)
def test_16bit_grey_tiff_is_linear_and_scaled(tmp_path, kwargs):
    image = _ramp()
    path = tmp_path / "scan.tif"
    tifffile.imwrite(path, image, resolution=(300, 300), resolutionunit="INCH", **kwargs)
    scan = load_scan(path)
    assert scan.info.bits == 16 and scan.info.decoding == "linear" and scan.info.channel == "grey"
    np.testing.assert_allclose(scan.signal, image / 65535.0, rtol=0, atol=1e-7)
    assert scan.info.dpi == pytest.approx(300.0)
    assert (scan.info.width, scan.info.height) == (60, 40)


def test_resolution_in_centimetres_becomes_dpi(tmp_path):
    path = tmp_path / "cm.tif"
    tifffile.imwrite(path, _ramp(), resolution=(118.11, 118.11), resolutionunit="CENTIMETER")
    # 118.11 px/cm * 2.54 cm/inch = 300 dpi
    assert load_scan(path).info.dpi == pytest.approx(300.0, abs=0.01)


def test_dpi_override_wins(tmp_path):
    path = tmp_path / "scan.tif"
    tifffile.imwrite(path, _ramp(), resolution=(300, 300), resolutionunit="INCH")
    assert load_scan(path, dpi=600).info.dpi == 600


def test_srgb_decoding_matches_scikit_image_reference():
    # Reference implementation: scikit-image's rgb2xyz linearises sRGB (IEC 61966-2-1)
    # and then applies its matrix; undo the matrix to get its linear values.
    from skimage.color import rgb2xyz
    from skimage.color.colorconv import xyz_from_rgb

    encoded = np.linspace(0, 1, 256, dtype=np.float64)
    rgb = np.stack([encoded] * 3, axis=-1).reshape(1, -1, 3)
    linear_ref = rgb2xyz(rgb).reshape(-1, 3) @ np.linalg.inv(xyz_from_rgb).T
    np.testing.assert_allclose(decode_srgb(encoded), linear_ref[:, 0], atol=2e-6)


def test_8bit_rgb_is_decoded_from_srgb_and_channels_averaged(tmp_path):
    rng = np.random.default_rng(0)
    image = rng.integers(0, 256, size=(32, 48, 3), dtype=np.uint8)
    path = tmp_path / "rgb.tif"
    tifffile.imwrite(path, image, photometric="rgb")
    scan = load_scan(path)
    assert scan.info.bits == 8 and scan.info.decoding == "srgb" and scan.info.channel == "mean"
    expected = decode_srgb(image / 255.0).mean(axis=-1)
    np.testing.assert_allclose(scan.signal, expected, atol=1e-6)


def test_rgba_png_and_channel_choice(tmp_path):
    import imageio.v3 as iio

    image = np.zeros((32, 40, 4), dtype=np.uint8)
    image[..., 0], image[..., 1], image[..., 2], image[..., 3] = 200, 100, 50, 255
    path = tmp_path / "scan.png"
    iio.imwrite(path, image)
    green = load_scan(path, channel="green")
    assert green.info.channel == "green"
    np.testing.assert_allclose(green.signal, decode_srgb(np.full((32, 40), 100 / 255.0)), atol=1e-6)


def test_jpeg_loads(tmp_path):
    import imageio.v3 as iio

    path = tmp_path / "scan.jpg"
    iio.imwrite(path, np.full((32, 32), 128, dtype=np.uint8))
    scan = load_scan(path)
    assert scan.info.bits == 8 and scan.signal.shape == (32, 32)


def test_gamma_decoding_option(tmp_path):
    path = tmp_path / "g.tif"
    tifffile.imwrite(path, np.full((20, 20), 128, dtype=np.uint8))
    scan = load_scan(path, decoding="gamma", gamma=2.2)
    assert scan.signal[0, 0] == pytest.approx((128 / 255) ** 2.2, rel=1e-5)


def test_luminance_weights_are_rec709():
    rgb = np.zeros((2, 2, 3), dtype=np.float32)
    rgb[..., 1] = 1.0
    # IEC 61966-2-1 / Rec. 709: Y = 0.2126 R + 0.7152 G + 0.0722 B
    signal, used = reduce_channels(rgb, "luminance")
    assert used == "luminance" and signal[0, 0] == pytest.approx(0.7152)


def test_saturated_pixels_are_marked(tmp_path):
    image = np.full((20, 20), 30000, dtype=np.uint16)
    image[:5] = 65535
    image[-5:] = 0
    path = tmp_path / "sat.tif"
    tifffile.imwrite(path, image)
    scan = load_scan(path)
    assert scan.saturated[:5].all() and scan.saturated[-5:].all() and not scan.saturated[5:15].any()


@pytest.mark.parametrize(
    "make, message",
    [
        (lambda p: p.write_bytes(b""), "empty"),
        (lambda p: p.write_bytes(b"this is not an image at all\n" * 20), "cannot be read"),
        (lambda p: tifffile.imwrite(p, np.zeros((1, 1), np.uint16)), "too small"),
        (lambda p: tifffile.imwrite(p, np.full((20, 20), 5.0, np.float32)), "floating-point"),
        (lambda p: tifffile.imwrite(p, np.zeros((20, 20), np.int32)), "unsupported sample type"),
    ],
)
def test_bad_files_name_the_file_and_the_problem(tmp_path, make, message):
    path = tmp_path / "bad.tif"
    make(path)
    with pytest.raises(ScanError) as info:
        load_scan(path)
    assert str(path) in str(info.value) and message in str(info.value)


def test_truncated_tiff_is_refused(tmp_path):
    path = tmp_path / "cut.tif"
    tifffile.imwrite(path, _ramp((200, 200)))
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 3])
    with pytest.raises(ScanError, match="cut.tif"):
        load_scan(path)


def test_missing_file(tmp_path):
    with pytest.raises(ScanError, match="no such file"):
        load_scan(tmp_path / "nothing.tif")


def _written_image(kind: str, rng: np.random.Generator) -> tuple[np.ndarray, dict]:
    """A noisy test image of 45 x 70 pixels and the imwrite options that store it as ``kind``.

    45 rows and 70 columns are no multiple of the strip or tile sizes used
    below, so the last strip and the edge tiles are partial.
    """
    if kind == "grey16":
        return rng.normal(30000, 2000, (45, 70)).clip(0, 65535).astype(np.uint16), {"photometric": "minisblack"}
    image = rng.integers(0, 256, size=(45, 70, 3), dtype=np.uint8)
    if kind == "rgb8":
        return image, {"photometric": "rgb", "planarconfig": "contig"}
    return np.moveaxis(image, -1, 0).copy(), {"photometric": "rgb", "planarconfig": "separate"}


@pytest.mark.parametrize("kind", ["grey16", "rgb8", "rgb8-planar"])
@pytest.mark.parametrize("layout", [{"rowsperstrip": 7}, {"tile": (16, 32)}], ids=["striped", "tiled"])
@pytest.mark.parametrize("predictor", [False, True], ids=["plain", "predictor"])
@pytest.mark.parametrize("compression", ["lzw", "zlib"])
def test_compressed_tiff_decodes_exactly_like_tifffile(tmp_path, compression, predictor, layout, kind):
    image, options = _written_image(kind, np.random.default_rng(11))
    path = tmp_path / "scan.tif"
    tifffile.imwrite(path, image, compression=compression, predictor=predictor, **options, **layout)
    with tifffile.TiffFile(path) as tif:  # the file really has the layout under test
        page = tif.pages[0]
        # TIFF 6.0 and Adobe's Deflate note: LZW is 5, Deflate 8, horizontal differencing 2 (from memory)
        assert page.compression == {"lzw": 5, "zlib": 8}[compression]
        assert page.predictor == (2 if predictor else 1)
        assert page.is_tiled == ("tile" in layout) and len(page.dataoffsets) > 1
    expected = tifffile.imread(path)  # reference: tifffile.imread, general-purpose TIFF library
    if kind == "rgb8-planar":
        expected = np.moveaxis(expected, 0, -1)  # the scan keeps its samples last
    raw = load_scan(path).raw
    assert raw.dtype == expected.dtype and raw.shape == expected.shape  # reference: tifffile.imread
    np.testing.assert_array_equal(raw, expected)  # reference: tifffile.imread


def test_lzw_scan_is_decoded_in_little_more_memory_than_its_pixels(tmp_path):
    # 16-bit scanner noise barely compresses, so the file is almost as large
    # as the pixels: holding all of its bytes while decoding would show.
    image = np.random.default_rng(5).normal(30000, 400, (4000, 4000)).astype(np.uint16)
    path = tmp_path / "noisy.tif"
    tifffile.imwrite(path, image, compression="lzw")
    assert path.stat().st_size > 0.5 * image.nbytes
    image_bytes = image.nbytes
    del image
    gc.collect()
    tracemalloc.start()
    try:
        scan = load_scan(path)
        _ = scan.info  # waits for the file's hash, so its reads fall inside the trace too
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert scan.raw.nbytes == image_bytes
    # reference: tracemalloc (Python standard library) against ndarray.nbytes;
    # 1.8 is our memory budget: the pixels once plus buffers of a few MB.
    assert peak < 1.8 * image_bytes, f"peak {peak / image_bytes:.2f} x the image"


@pytest.mark.parametrize("compression", ["lzw", "zlib"])
def test_truncated_compressed_tiff_is_refused(tmp_path, compression):
    path = tmp_path / "cut.tif"
    image = np.random.default_rng(3).normal(30000, 400, (600, 500)).astype(np.uint16)
    tifffile.imwrite(path, image, compression=compression, rowsperstrip=16)
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(ScanError, match="cut.tif: cannot be read as an image"):
        load_scan(path)


@pytest.mark.parametrize("kind", ["grey16", "grey8", "rgb16", "big_endian", "zlib", "planar_rgb", "strips"])
def test_file_is_read_once_for_its_pixels_and_its_hash(tmp_path, kind):
    import hashlib

    rng = np.random.default_rng(4)
    shape = (150, 90, 3) if "rgb" in kind else (150, 90)
    image = rng.integers(0, 256 if kind == "grey8" else 65536, size=shape).astype(np.uint8 if kind == "grey8" else np.uint16)
    options = {"big_endian": {"byteorder": ">"}, "zlib": {"compression": "zlib"}, "strips": {"rowsperstrip": 16},
               "planar_rgb": {"planarconfig": "separate"}}.get(kind, {})
    path = tmp_path / f"{kind}.tif"
    tifffile.imwrite(path, np.moveaxis(image, -1, 0) if kind == "planar_rgb" else image,
                     photometric="rgb" if "rgb" in kind else "minisblack", **options)
    scan = load_scan(path)
    assert np.array_equal(scan.raw, image)
    assert scan.info.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()  # hashlib reference
    if kind in ("grey16", "grey8", "rgb16", "strips"):
        # Uncompressed and stored in one piece: the pixels are a view into the file's bytes, read once.
        assert not scan.raw.flags.owndata and isinstance(scan.raw.base, (bytearray, memoryview, np.ndarray))


def test_a_scan_read_once_keeps_no_second_copy(tmp_path):
    image = np.random.default_rng(5).integers(0, 65536, size=(1000, 800), dtype=np.uint16)
    path = tmp_path / "page.tif"
    tifffile.imwrite(path, image)
    gc.collect()
    tracemalloc.start()
    try:
        scan = load_scan(path)
        assert scan.info.sha256  # the hash is done
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 1.2 * image.nbytes


def test_colour_page_is_decoded_in_slabs_without_float_channels(tmp_path, monkeypatch):
    from stripscan.core import scan as scan_module

    rng = np.random.default_rng(6)
    image = rng.integers(0, 65536, size=(600, 500, 3), dtype=np.uint16)
    image[10, 10] = 65535
    path = tmp_path / "rgb.tif"
    tifffile.imwrite(path, image, photometric="rgb")
    monkeypatch.setattr(scan_module, "_SLAB_VALUES", 30_000)  # many slabs even on a small page
    scan = load_scan(path)
    expected = image.astype(np.float64).mean(axis=2) / 65535.0  # the mean of the channels ("auto")
    gc.collect()
    tracemalloc.start()
    try:
        signal = scan.signal
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert signal.dtype == np.float32 and signal.shape == (600, 500)
    np.testing.assert_allclose(signal, expected, rtol=1e-6, atol=1e-7)
    # The one-channel output and a slab besides it; decoding the whole page at once held its three
    # float channels too (four times the output).
    assert peak < 1.3 * signal.nbytes
    assert scan.saturated[10, 10] and scan.saturated.sum() == np.any((image == 0) | (image == 65535), axis=2).sum()
    reduced, _ = reduce_channels(image.astype(np.float32) / 65535.0, "mean")
    np.testing.assert_allclose(reduced, expected, rtol=1e-6, atol=1e-7)
