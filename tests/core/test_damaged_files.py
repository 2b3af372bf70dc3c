"""Damaged files give the program's own error naming the file, never another exception.

Hypothesis cuts and corrupts small valid scan files and certificates: a
scanner's file cut short by a full disk or a copy, a flipped byte on a
stick, a certificate edited by hand.  Whatever comes out, reading it either
works or raises ``ScanError`` / ``CalibrationError`` with the file's name
(the project's rule for bad input); a crash of another kind would reach the
user as a traceback.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import tifffile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from stripscan.core.certificate import CalibrationError, read_certificate
from stripscan.core.scan import ScanError, load_scan

_RNG = np.random.default_rng(7)
_IMAGE = (_RNG.normal(30000, 2000, (96, 80))).clip(0, 65535).astype(np.uint16)
_LAYOUTS = {
    "striped, uncompressed": {},
    "striped, LZW with predictor": {"compression": "lzw", "predictor": True, "rowsperstrip": 16},
    "tiled, zlib": {"compression": "zlib", "tile": (32, 32)},
}


def _valid_tiff(tmp_path_factory, layout: str) -> bytes:
    path = tmp_path_factory.mktemp("valid") / "scan.tif"
    tifffile.imwrite(path, _IMAGE, resolution=(300, 300), resolutionunit="INCH", **_LAYOUTS[layout])
    return path.read_bytes()


@pytest.fixture(scope="module")
def valid_files(tmp_path_factory) -> dict[str, bytes]:
    return {layout: _valid_tiff(tmp_path_factory, layout) for layout in _LAYOUTS}


def _read_or_refuse(path) -> None:
    try:
        scan = load_scan(path)
    except ScanError as exc:
        assert str(path) in str(exc)  # the message names the file
        return
    assert scan.shape[0] >= 16 and scan.shape[1] >= 16  # what loads is a usable image
    _ = scan.info  # the provenance hash finishes too


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(layout=st.sampled_from(sorted(_LAYOUTS)), cut=st.floats(0.0, 0.999))
def test_a_scan_cut_short_is_read_or_refused_by_name(tmp_path, valid_files, layout, cut):
    data = valid_files[layout]
    path = tmp_path / "cut short.tif"
    path.write_bytes(data[: int(cut * len(data))])
    _read_or_refuse(path)


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(layout=st.sampled_from(sorted(_LAYOUTS)),
       flips=st.lists(st.tuples(st.floats(0.0, 0.999), st.integers(1, 255)), min_size=1, max_size=6))
def test_a_scan_with_damaged_bytes_is_read_or_refused_by_name(tmp_path, valid_files, layout, flips):
    data = bytearray(valid_files[layout])
    for where, mask in flips:
        data[int(where * len(data))] ^= mask
    path = tmp_path / "damaged.tif"
    path.write_bytes(bytes(data))
    _read_or_refuse(path)


_CERTIFICATE_LINE = st.one_of(
    st.builds(lambda s, d: f"{s},{d}", st.integers(-2, 25), st.one_of(st.floats(-1, 5), st.sampled_from([float("nan"), float("inf")]))),
    st.sampled_from(["step,density", "# certificate", "", "1;0.05", "1,0.05,0.01", "x,y", "1,", ",0.3", "1,0,05"]),
    st.text(max_size=20),
)


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(lines=st.lists(_CERTIFICATE_LINE, max_size=25))
def test_a_hand_edited_certificate_is_read_or_refused_by_name(tmp_path, lines):
    path = tmp_path / "certificate.csv"
    path.write_text("\n".join(lines), encoding="utf-8", errors="surrogatepass")
    _certificate_read_or_refused(path)


def _certificate_read_or_refused(path) -> None:
    try:
        certificate = read_certificate(path)
    except CalibrationError as exc:
        assert str(path) in str(exc)
        return
    # What is accepted is a certificate the calibration can use (DESIGN: steps 1..N, densities rising).
    assert list(certificate.steps) == list(range(1, len(certificate.steps) + 1))
    assert all(math.isfinite(d) for d in certificate.densities)
    assert all(b > a for a, b in zip(certificate.densities, certificate.densities[1:]))
    assert certificate.uncertainties is None or all(math.isfinite(u) for u in certificate.uncertainties)


_SCALAR_TEXT = st.one_of(st.none(), st.integers(-(2**70), 2**70), st.floats(), st.text(max_size=12)).map(str)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(raw=st.one_of(st.binary(max_size=300),
                     st.builds(lambda lines, encoding: "\n".join(lines).encode(encoding, errors="replace"),
                               st.lists(st.one_of(st.builds(lambda s, d, u: f"{s},{d},{u}", _SCALAR_TEXT,
                                                            _SCALAR_TEXT, _SCALAR_TEXT),
                                                  st.text(max_size=20)), max_size=12),
                               st.sampled_from(["utf-8", "utf-16", "latin-1", "cp1252"]))))
def test_any_bytes_as_a_certificate_are_read_or_refused_by_name(tmp_path, raw):
    # A spreadsheet may save UTF-16 or Latin-1; a wrong file may be anything at all.
    path = tmp_path / "certificate.csv"
    path.write_bytes(raw)
    _certificate_read_or_refused(path)
