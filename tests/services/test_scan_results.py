"""A batch's result files: the record the pipeline gives, written whole or not at all, one file per scan."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from stripscan import CAUTION
from stripscan.core.pipeline import analyze_scan
from stripscan.sim.objects import ScannerModel, StripSpec
from stripscan.sim.simulate import simulate_scan, write_tiff
from stripscan.services.scan_results import (
    analyse_into_folder,
    check_result_names,
    result_path,
)


@pytest.fixture(scope="module")
def scan(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("scan") / "strip.tif"
    write_tiff(path, simulate_scan([StripSpec(center_mm=(30.0, 60.0), angle_deg=90.0)], platen_mm=(60.0, 120.0),
                                   dpi=100.0, scanner=ScannerModel(seed=4)))
    return path


def test_result_file_holds_the_analysis_with_its_gradient_curve_and_the_caution(scan, tmp_path):
    written = analyse_into_folder(scan, folder=tmp_path)
    assert written.output == tmp_path / "strip.results.json" and written.strips == 1
    data = json.loads(written.output.read_text(encoding="utf-8"))
    direct = json.loads(json.dumps(analyze_scan(scan).to_dict()))
    assert data["caution"] == CAUTION
    assert [s["steps"] for s in data["strips"]] == [s["steps"] for s in direct["strips"]]
    assert all("gradient_curve" in s for s in data["strips"])  # None when no curve can be drawn (direct mode here)
    assert list(tmp_path.iterdir()) == [written.output]  # no .partial left beside it


def test_a_failed_write_leaves_nothing_and_names_the_file(scan, tmp_path):
    (tmp_path / "taken").write_text("a file, not a folder")
    with pytest.raises(OSError, match="strip.results.json: cannot write"):
        analyse_into_folder(scan, folder=tmp_path / "taken")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["taken"]


def test_two_scans_that_would_share_a_result_file_are_refused(tmp_path):
    check_result_names([Path("a/one.tif"), Path("a/two.tif")], tmp_path)
    with pytest.raises(ValueError, match="a/one.tif and b/one.tif would both be written to"):
        check_result_names([Path("a/one.tif"), Path("b/one.tif")], tmp_path)
    assert result_path("x/scan.tiff", tmp_path) == tmp_path / "scan.results.json"
