"""The loaders meet generated files and answer only with the program's own errors.

Hypothesis edits valid calibration JSON and archive export JSON the way a
hand, a script or a damaged copy might: any field set to any JSON value
(NaN and infinity included), fields dropped, lists cut or reordered, whole
files of arbitrary JSON.  Whatever comes out, reading it either works, and
what was read is usable, or raises the program's own error naming the file
(``CalibrationError``, ``ArchiveError``); anything else would reach the
user as a traceback.  Certificate CSV files of any bytes are fed in
``tests/core/test_damaged_files.py``.
"""

from __future__ import annotations

import json
import math
import tempfile
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from stripscan.archive import Archive, ArchiveError
from stripscan.cli.main import main
from stripscan.core.calibration_files import load_calibration
from stripscan.core.certificate import CalibrationError
from stripscan.sim.demo_data import demo_files

_SCALARS = st.one_of(
    st.none(), st.booleans(), st.integers(-(2**70), 2**70),
    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=12),
)
_VALUES = st.recursive(_SCALARS, lambda inner: st.one_of(st.lists(inner, max_size=4),
                                                         st.dictionaries(st.text(max_size=6), inner, max_size=4)),
                       max_leaves=12)

# One edit of a JSON document: (path choice, action, new value, cut).
_EDITS = st.lists(st.tuples(st.lists(st.integers(0, 10_000), min_size=1, max_size=4),
                            st.sampled_from(["set", "drop", "cut", "reverse"]), _VALUES, st.integers(0, 25)),
                  min_size=1, max_size=4)

_SETTINGS = settings(max_examples=60, deadline=None,
                     suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


def _apply(document: Any, edits: list) -> Any:
    """Walk into ``document`` by the chosen indices and change what is found there."""
    for choices, action, value, cut in edits:
        parent, key = None, None
        node = document
        for choice in choices:
            if isinstance(node, dict) and node:
                key = sorted(node)[choice % len(node)]
            elif isinstance(node, list) and node:
                key = choice % len(node)
            else:
                break
            parent, node = node, node[key]
        if parent is None:
            continue
        if action == "set":
            parent[key] = value
        elif action == "drop":
            del parent[key]
        elif action == "cut" and isinstance(node, list):
            parent[key] = node[: cut % (len(node) + 1)]
        elif action == "reverse" and isinstance(node, list):
            parent[key] = node[::-1]
    return document


@pytest.fixture(scope="module")
def demo():
    return demo_files()


@pytest.fixture(scope="module")
def calibration_data(demo) -> dict:
    return json.loads(Path(demo.calibration).read_text(encoding="utf-8"))


def _load_calibration_or_refuse(path: Path) -> None:
    try:
        calibration = load_calibration(path)
    except CalibrationError as exc:
        assert str(path) in str(exc)  # the message names the file
        return
    # What loads is a usable, monotone map: denser film reads denser, in range or flagged.
    signal = np.geomspace(1e-4, 1.0, 50)
    od, in_range = calibration.density(signal)
    finite = od[np.isfinite(od)]
    assert finite.size and np.all(np.diff(finite) <= 1e-9) and in_range.dtype == bool
    lo, hi = calibration.valid_od
    assert math.isfinite(lo) and math.isfinite(hi) and lo <= hi


@_SETTINGS
@given(edits=_EDITS)
def test_an_edited_calibration_loads_usable_or_is_refused_by_name(tmp_path, calibration_data, edits):
    document = _apply(json.loads(json.dumps(calibration_data)), edits)
    path = tmp_path / "calibration.json"
    path.write_text(json.dumps(document), encoding="utf-8")
    _load_calibration_or_refuse(path)


@_SETTINGS
@given(document=_VALUES)
def test_any_json_as_a_calibration_is_refused_by_name(tmp_path, document):
    path = tmp_path / "calibration.json"
    path.write_text(json.dumps(document), encoding="utf-8")
    _load_calibration_or_refuse(path)


@pytest.fixture(scope="module")
def export_data(tmp_path_factory, demo) -> dict:
    """An export of a small archive: three calibrated snapshots and a QC day."""
    folder = tmp_path_factory.mktemp("export")
    archive, export = folder / "archive.sqlite3", folder / "export.json"
    for argv in (["archive", "add", demo.lot_a_scan, "--lot", "M-2610-A", "--calibration", demo.calibration,
                  "--processor", "P1"],
                 ["qc", "add", "--processor", "P1", "--date", "2026-11-02", "--base-fog", "0.19",
                  "--mid-density", "1.21", "--density-difference", "1.85"],
                 ["archive", "export", "--format", "json", "-o", export]):
        assert main([str(a) for a in argv] + ["--archive", str(archive)]) == 0
    return json.loads(export.read_text(encoding="utf-8"))


@_SETTINGS
@given(edits=_EDITS)
def test_an_edited_export_imports_or_is_refused_by_name(export_data, edits):
    document = _apply(json.loads(json.dumps(export_data)), edits)
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "export.json"
        path.write_text(json.dumps(document), encoding="utf-8")
        with Archive.open(Path(folder) / "archive.sqlite3") as archive:
            try:
                archive.import_json(path)
            except ArchiveError as exc:
                assert str(path) in str(exc)
                assert archive.list_snapshots(include_retired=True, include_superseded=True) == []  # nothing stored
                return
            for summary in archive.list_snapshots(include_retired=True, include_superseded=True):
                archive.get_snapshot(summary.id)  # what was imported reads back
