"""Bad input through the command line: a clear one-line message naming the file, nothing written.

Each row of the matrix is a thing a physicist might feed the program by
mistake; none of them may crash it or leave a partial result.
"""

from __future__ import annotations

import numpy as np
import pytest
import tifffile

from stripscan.cli.main import main
from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec
from stripscan.sim.simulate import simulate_scan, write_tiff


def run(argv, capsys):
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def write_grey(path, image):
    tifffile.imwrite(path, image, resolution=(150, 150), resolutionunit="INCH")
    return path


def paper_page(shape=(1200, 900), seed=0):
    """A reflection scan of a printed page: white paper, lines of dark characters."""
    rng = np.random.default_rng(seed)
    page = np.full(shape, 0.86)
    for top in range(80, shape[0] - 80, 40):
        left = 60
        while left < shape[1] - 100:
            width = int(rng.integers(6, 14))
            page[top : top + 18, left : left + width] = rng.uniform(0.02, 0.1)
            left += width + int(rng.integers(3, 12))
    return (page * 65535).astype(np.uint16)


CASES = {
    "empty file": (lambda p: p.write_bytes(b""), "the file is empty"),
    "not an image": (lambda p: p.write_text("step,density\n1,0.05\n"), "cannot be read as an image"),
    "truncated TIFF": (
        lambda p: (write_grey(p, np.full((400, 400), 30000, np.uint16)), p.write_bytes(p.read_bytes()[:5000])),
        "cannot be read as an image",
    ),
    "1 x 1 image": (lambda p: write_grey(p, np.zeros((1, 1), np.uint16)), "too small"),
    "32-bit float out of 0..1": (lambda p: write_grey(p, np.full((64, 64), 40000.0, np.float32)), "floating-point"),
    "blank platen, no strip": (lambda p: write_grey(p, np.full((600, 400), 60000, np.uint16)), "no film found"),
    "all saturated": (lambda p: write_grey(p, np.full((600, 400), 65535, np.uint16)), "white (saturated)"),
    "all black": (lambda p: write_grey(p, np.zeros((600, 400), np.uint16)), "black almost everywhere"),
    "reflection scan of paper": (lambda p: write_grey(p, paper_page()), "no strip found"),
}


@pytest.mark.parametrize("case", list(CASES))
def test_bad_scan_gives_one_clear_line(tmp_path, capsys, case):
    make, message = CASES[case]
    path = tmp_path / "input.tif"
    make(path)
    out_json = tmp_path / "result.json"
    code, _, err = run(["analyze", path, "--steps", "21", "-o", out_json], capsys)
    assert code == 1
    assert err.count("\n") == 1 and str(path) in err and message in err, err
    assert not out_json.exists()


def test_float_scan_in_range_is_read(tmp_path, capsys):
    # 32-bit float samples 0..1 are linear signal: read, with the direct-mode warning
    spec = StripSpec(film=FilmModel(), center_mm=(60.0, 100.0), angle_deg=90.0)
    sim = simulate_scan([spec], platen_mm=(120.0, 200.0), dpi=100.0, scanner=ScannerModel(seed=4))
    path = write_grey(tmp_path / "float.tif", (sim.image / 65535.0).astype(np.float32))
    code, out, _ = run(["analyze", path], capsys)
    assert code == 0 and "Strip 1: 21 steps" in out and "UNCALIBRATED" in out


def test_strip_cut_at_its_light_end_reads_the_rest(tmp_path, capsys):
    # Step 1 runs off the top of the platen: the steps still on it are numbered
    # from the dense end and read; those beyond the edge are not.
    spec = StripSpec(film=FilmModel(), center_mm=(60.0, 60.0), angle_deg=-90.0)
    sim = simulate_scan([spec], platen_mm=(120.0, 200.0), dpi=100.0, scanner=ScannerModel(seed=5))
    path = tmp_path / "cut.tif"
    write_tiff(path, sim)
    code, out, _ = run(["analyze", path, "--steps", "21", "--json"], capsys)
    assert code == 0
    import json

    data = json.loads(out)
    strip = data["strips"][0]
    assert any("touches the scan's edge" in w for w in strip["warnings"])
    assert any("run off the scan and are not read" in w for w in strip["warnings"])
    truth_rc = sim.truth[0]["step_centers_rc"]
    for step in strip["steps"]:
        x, y = step["center_px"]
        tr, tc = truth_rc[step["step"] - 1]
        assert abs(y - tr) < 5 and abs(x - tc) < 5  # numbered right: within 1.3 mm at 100 dpi


def test_strip_cut_at_its_dense_end_is_not_numbered(tmp_path, capsys):
    # The dense end runs off the bottom: without it the steps cannot be numbered.
    spec = StripSpec(film=FilmModel(), center_mm=(60.0, 150.0), angle_deg=-90.0)
    sim = simulate_scan([spec], platen_mm=(120.0, 200.0), dpi=100.0, scanner=ScannerModel(seed=5))
    path = tmp_path / "cut.tif"
    write_tiff(path, sim)
    code, out, _ = run(["analyze", path, "--steps", "21", "--json"], capsys)
    assert code == 0
    import json

    strip = json.loads(out)["strips"][0]
    assert any("dense end is cut off by the scan's edge" in w for w in strip["warnings"])
    assert not any(s["in_range"] for s in strip["steps"])
    assert strip["metrics"]["speed_log_exposure"] is None


@pytest.mark.parametrize("folder", ["Größe 放射線 ü", "x" * 120 + "/" + "y" * 120])
def test_unicode_and_very_long_paths(tmp_path, capsys, folder):
    where = tmp_path / folder
    where.mkdir(parents=True)
    spec = StripSpec(film=FilmModel(), center_mm=(60.0, 100.0), angle_deg=90.0)
    path = where / "strip ß.tif"
    write_tiff(path, simulate_scan([spec], platen_mm=(120.0, 200.0), dpi=100.0, scanner=ScannerModel(seed=6)))
    code, out, _ = run(["analyze", path], capsys)
    assert code == 0 and str(path) in out
    code, _, err = run(["analyze", where / "missing ß.tif"], capsys)
    assert code == 1 and "missing ß.tif: no such file" in err
