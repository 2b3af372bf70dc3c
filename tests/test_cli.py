"""The command line: calibrate and analyze end to end, JSON contract, one-line errors."""

from __future__ import annotations

import json
import math

import pytest

from stripscan import CAUTION
from stripscan.cli.main import main
import numpy as np

from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec, TabletSpec
from stripscan.sim.simulate import expected_signal, simulate_scan, write_certificate, write_tiff

TABLET_OD = tuple(round(0.05 + 0.15 * k, 3) for k in range(21))  # common practice: 21 steps 0.05..3.05


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    tablet = TabletSpec(densities=TABLET_OD, step_length_mm=7.5, center_mm=(40.0, 95.0), angle_deg=90.0)
    write_tiff(folder / "tablet.tif", simulate_scan([tablet], platen_mm=(80.0, 190.0), dpi=150.0, scanner=ScannerModel(seed=1)))
    write_certificate(folder / "cert.csv", TABLET_OD)
    strips = [StripSpec(film=FilmModel(), center_mm=(30.0 + 55.0 * k, 100.0), angle_deg=90.0) for k in range(2)]
    write_tiff(folder / "strips.tif", simulate_scan(strips, platen_mm=(120.0, 200.0), dpi=150.0, scanner=ScannerModel(seed=2)))
    return folder


def test_calibrate_then_analyze_json(files, capsys):
    cal = files / "cal.json"
    assert main(["calibrate", str(files / "tablet.tif"), "--densities", str(files / "cert.csv"), "-o", str(cal)]) == 0
    out = capsys.readouterr().out
    assert "Reads within ±0.02 OD from 0.05 to" in out and cal.exists()
    assert main(["analyze", str(files / "strips.tif"), "--calibration", str(cal), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert set(data["scan"]) >= {"path", "sha256", "width", "height", "dpi", "bits"}
    assert set(data["calibration"]) >= {"sha256", "od_min", "od_max"}
    assert len(data["strips"]) == 2 and data["caution"] == CAUTION
    strip = data["strips"][0]
    assert set(strip) >= {"index", "angle_deg", "outline_px", "steps", "metrics"}
    assert set(strip["steps"][0]) >= {"step", "log_exposure", "od", "od_sd", "pixels", "in_range", "center_px"}
    assert strip["steps"][1]["log_exposure"] == pytest.approx(0.15)  # common practice: 0.15 per step


def test_plain_output_has_tables_and_caution(files, capsys):
    cal = files / "cal2.json"
    main(["calibrate", str(files / "tablet.tif"), "--densities", str(files / "cert.csv"), "-o", str(cal)])
    capsys.readouterr()
    assert main(["analyze", str(files / "strips.tif"), "--calibration", str(cal), "--steps", "21"]) == 0
    out = capsys.readouterr().out
    assert "Strip 1: 21 steps" in out and "Strip 2: 21 steps" in out
    assert "average gradient (0.25-2.00)" in out and "Caution:" in out


def test_unreachable_figure_is_null_with_a_warning(files, capsys):
    # A film that never reaches net density 2.00: average gradient cannot be read.
    flat = FilmModel(dmax=1.9, log_e_mid=1.5, slope=4.0)
    write_tiff(files / "flat.tif", simulate_scan([StripSpec(film=flat, center_mm=(60.0, 100.0), angle_deg=90.0)],
                                                 platen_mm=(120.0, 200.0), dpi=150.0, scanner=ScannerModel(seed=3)))
    cal = files / "cal3.json"
    main(["calibrate", str(files / "tablet.tif"), "--densities", str(files / "cert.csv"), "-o", str(cal)])
    capsys.readouterr()
    assert main(["analyze", str(files / "flat.tif"), "--calibration", str(cal), "--steps", "21", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    metrics = data["strips"][0]["metrics"]
    assert metrics["average_gradient"] is None and metrics["latitude_log_exposure"] is None
    assert any("net density 2.00" in w for w in data["warnings"])


def test_uncalibrated_run_warns(files, capsys):
    assert main(["analyze", str(files / "strips.tif"), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["calibration"]["mode"] == "direct" and any("UNCALIBRATED" in w for w in data["warnings"])


@pytest.mark.parametrize(
    "argv, message",
    [
        (["analyze", "{d}/missing.tif"], "missing.tif: no such file"),
        (["analyze", "{d}/strips.tif", "--calibration", "{d}/cert.csv"], "not a calibration file"),
        (["calibrate", "{d}/tablet.tif", "--densities", "{d}/bad.csv", "-o", "{d}/out.json"], "listed twice"),
        (["calibrate", "{d}/strips.tif", "--densities", "{d}/cert.csv", "-o", "{d}/out.json"], "strips.tif"),
    ],
)
def test_bad_input_is_one_line_and_writes_nothing(files, capsys, argv, message):
    (files / "bad.csv").write_text("1,0.05\n2,0.2\n2,0.35\n")
    code = main([a.format(d=files) for a in argv])
    err = capsys.readouterr().err
    assert code != 0 and err.count("\n") == 1 and err.startswith("stripscan: error:") and message in err
    assert not (files / "out.json").exists()


def test_lateral_response_from_a_uniform_scan_is_kept(files, capsys):
    # A blank platen scanned with lamp falloff: the fit's curvature follows the
    # scanner's parabola (Schoenfeld et al. 2016 form OD = c0 + c x^2), so c > 0.
    blank = simulate_scan([], platen_mm=(120.0, 60.0), dpi=100.0,
                          scanner=ScannerModel(lamp_falloff=0.04, noise_sd=0.0002, shot_noise=0.0, seed=9))
    write_tiff(files / "blank.tif", blank)
    cal = files / "cal_lateral.json"
    assert main(["calibrate", str(files / "tablet.tif"), "--densities", str(files / "cert.csv"), "-o", str(cal),
                 "--lateral-from", str(files / "blank.tif")]) == 0
    assert "Lateral response: c = " in capsys.readouterr().out
    data = json.loads(cal.read_text())
    # falloff 4 % at the edge, 60 mm from the midline: c = -log10(0.96) / 60^2 = 4.9e-6 OD/mm^2
    assert data["lateral"]["c_per_mm2"] == pytest.approx(-math.log10(0.96) / 60.0**2, rel=0.1)


def test_direct_mode_clear_area(files, capsys):
    assert main(["analyze", str(files / "strips.tif"), "--clear-area", "2,2,40,300", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    # I0 is the mean signal of that open-platen area (columns 2..39, near the lamp's dim edge):
    # the simulator's noiseless signal there
    width = data["scan"]["width"]
    expected = float(np.mean(expected_signal(1.0, ScannerModel(seed=2), col=np.arange(2, 40), width=width)))
    assert data["calibration"]["i0"] == pytest.approx(expected, abs=0.001)
    assert main(["analyze", str(files / "strips.tif"), "--clear-area", "2,2,x"]) == 1
    assert "--clear-area wants X0,Y0,X1,Y1" in capsys.readouterr().err


@pytest.mark.parametrize("argv", [[], ["demo"]])
def test_window_without_a_display_is_a_plain_error(capsys, monkeypatch, argv):
    # Qt itself would abort the process with a message about platform plugins.
    for name in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setattr("sys.platform", "linux")
    assert main(argv) == 1
    err = capsys.readouterr().err
    assert err.startswith("stripscan: error: the desktop window needs a graphical session") and err.count("\n") == 1


def test_analyze_with_the_tablet_on_the_scan(tmp_path, capsys):
    """`analyze SCAN --tablet-certificate CERT.csv`: the tablet beside the strips calibrates the scan."""
    objects = [TabletSpec(densities=TABLET_OD, step_length_mm=7.5, center_mm=(25.0, 95.0), angle_deg=90.0),
               StripSpec(film=FilmModel(), center_mm=(80.0, 100.0), angle_deg=90.0)]
    write_tiff(tmp_path / "both.tif", simulate_scan(objects, platen_mm=(120.0, 200.0), dpi=150.0,
                                                    scanner=ScannerModel(seed=9)))
    write_certificate(tmp_path / "cert.csv", TABLET_OD)
    assert main(["analyze", str(tmp_path / "both.tif"), "--tablet-certificate", str(tmp_path / "cert.csv")]) == 0
    out = capsys.readouterr().out
    assert "from the tablet on this scan" in out and "Strip 1:" in out and "Strip 2:" not in out
    assert "UNCALIBRATED" not in out and "stray" in out
    assert main(["analyze", str(tmp_path / "both.tif"), "--tablet-certificate", str(tmp_path / "cert.csv"),
                 "--calibration", str(tmp_path / "cal.json")]) != 0
    assert "not both" in capsys.readouterr().err


def test_bounded_rule_bounds_only_the_low_density_difference_step(capsys):
    """Issue 13, wrong output 7: the "bounded" density-difference rule bounds only the low step (closest to
    0.45 but not less); the high step is the one closest to 2.20, as with the plain rule."""
    from stripscan.sim.demo_data import demo_files

    demo = demo_files()
    assert main(["analyze", str(demo.lot_a_scan), "--calibration", str(demo.calibration), "--dd-rule", "bounded",
                 "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    for strip in data["strips"]:
        usable = {s["step"]: s["od"] for s in strip["steps"] if s["in_range"]}
        metrics = strip["metrics"]
        # Common practice, from memory (no published QC manual checked): high step closest to 2.20 OD ...
        high = min(usable, key=lambda k: (abs(usable[k] - 2.20), k))
        # ... low step the lightest at or above 0.45 OD.
        low = min((k for k in usable if usable[k] >= 0.45), key=lambda k: (usable[k], k))
        assert (metrics["dd_high_step"], metrics["dd_low_step"]) == (high, low)
        assert metrics["density_difference"] == pytest.approx(usable[high] - usable[low], abs=1e-4)
    # On these films the step closest to 2.20 lies above it, which a cap at 2.20 would have passed over.
    assert any(s["od"] > 2.20 for strip in data["strips"] for s in strip["steps"]
               if s["step"] == strip["metrics"]["dd_high_step"])


@pytest.fixture(scope="module")
def demo_lot_archive(tmp_path_factory):
    """The demo's two lots stored from their scans, three strips each (snapshots 1-3: A, 4-6: B)."""
    from stripscan.sim.demo_data import demo_files

    demo = demo_files()
    path = tmp_path_factory.mktemp("lots") / "lots.sqlite3"
    for lot, scan in (("M-2610-A", demo.lot_a_scan), ("M-2702-B", demo.lot_b_scan)):
        assert main(["archive", "add", str(scan), "--lot", lot, "--calibration", str(demo.calibration),
                     "--processor", "Processor 1", "--processed", "2026-11-19", "--archive", str(path)]) == 0
    return path


def test_archive_show_prints_only_that_strips_warnings(capsys, demo_lot_archive):
    """Issue 13, wrong output 4: ``archive show`` of strip 1 of a scan prints strip 1's warnings, not those of
    strips 2 and 3 kept with the scan."""
    from stripscan.archive import Archive

    capsys.readouterr()
    with Archive.open(demo_lot_archive, read_only=True) as archive:
        first = archive.get_snapshot(1)
    assert first.strip.index == 1 and any(w.startswith("strip 2: ") for w in first.warnings)
    assert main(["archive", "show", "1", "--archive", str(demo_lot_archive)]) == 0
    shown = [line.strip()[2:] for line in capsys.readouterr().out.splitlines() if line.strip().startswith("! ")]
    assert shown and not any(line.startswith("strip ") for line in shown)
    assert set(first.strip.warnings) <= set(shown)
    # Nothing that is only another strip's: every line is scan-wide or strip 1's own.
    scan_wide = {w for w in first.warnings if not w.startswith("strip ")}
    assert set(shown) <= scan_wide | set(first.strip.warnings)


def test_dense_steps_clipped_at_the_dark_floor_are_not_called_saturated(tmp_path, capsys):
    """Issue 13, wrong output 8: dense steps crushed to the file's bottom code sit at the scanner's dark floor;
    they are not "the scanner saturates" (which is clear film clipped at full scale)."""
    # No dark offset and no flare: the dense steps' signal, 10^-4 of full scale and less, sinks into the read
    # noise and is clipped at code 0 (simulator ground truth).
    film = FilmModel(dmax=4.2)
    scan = tmp_path / "dense.tif"
    write_tiff(scan, simulate_scan([StripSpec(film=film, center_mm=(30.0, 100.0), angle_deg=90.0)],
                                   platen_mm=(60.0, 200.0), dpi=150.0,
                                   scanner=ScannerModel(dark_offset=0.0, flare_fraction=0.0, seed=4)))
    assert main(["analyze", str(scan), "--steps", "21"]) == 0
    out = capsys.readouterr().out
    assert "at the scanner's dark floor (too dense to read" in out
    assert "saturates" not in out


def test_a_latitude_not_reached_reads_as_plain_words(files, capsys):
    """Issue 13, wrong output 8: "latitude not reached", not "latitude not reached log E"."""
    # A film that never reaches net density 2.00 (ISO 9236-1's upper point): no latitude to read.
    flat = FilmModel(dmax=1.9, log_e_mid=1.5, slope=4.0)
    write_tiff(files / "flat2.tif", simulate_scan([StripSpec(film=flat, center_mm=(60.0, 100.0), angle_deg=90.0)],
                                                  platen_mm=(120.0, 200.0), dpi=150.0, scanner=ScannerModel(seed=3)))
    assert main(["analyze", str(files / "flat2.tif"), "--steps", "21"]) == 0
    lines = [line.split() for line in capsys.readouterr().out.splitlines() if line.strip().startswith("latitude")]
    assert lines == [["latitude", "not", "reached"]]


def test_window_without_the_xcb_cursor_library_names_the_package(capsys, monkeypatch):
    """Issue 13, missing 5: on an X11 desktop without libxcb-cursor Qt's xcb platform aborts the process; the
    command names the package instead, as the README's Quick start and window section do."""
    monkeypatch.delenv("QT_QPA_PLATFORM", raising=False)
    monkeypatch.delenv("WAYLAND_DISPLAY", raising=False)
    monkeypatch.setenv("DISPLAY", ":0")
    monkeypatch.setattr("sys.platform", "linux")
    monkeypatch.setattr("stripscan.cli.main._xcb_cursor_found", lambda: False)
    assert main([]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "libxcb-cursor0" in err


def test_readme_says_what_the_window_needs_and_where_the_archive_lives(monkeypatch, tmp_path):
    """Issue 13, missing 5: the README's Quick start and window section name the display, the package
    ``libxcb-cursor0`` and the default archive's place, which is where the program puts it."""
    from pathlib import Path

    from stripscan.archive import default_archive_path

    readme = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    quick = readme.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    window = readme.split("## The desktop window", 1)[1].split("\n## ", 1)[0]
    for section in (quick, window):
        assert "libxcb-cursor0" in section and "graphical session" in section
    monkeypatch.delenv("STRIPSCAN_ARCHIVE", raising=False)
    monkeypatch.delenv("XDG_DATA_HOME", raising=False)
    monkeypatch.setattr("sys.platform", "linux")
    monkeypatch.setenv("HOME", str(tmp_path))
    where = "~/" + default_archive_path().relative_to(tmp_path).as_posix()
    assert where == "~/.local/share/stripscan/archive.sqlite3"  # XDG base directory specification default
    assert f"`{where.rsplit('/', 1)[0]}/`" in window and "`archive.sqlite3` there" in window
    assert "logs/stripscan.log" in window


def test_direct_mode_uncertainty_column_says_what_it_leaves_out(files, capsys):
    """Issue 13, missing 4: without a calibration the ± sd column says it is the reading noise only and leaves
    out the error of having no calibration (not only the UNCALIBRATED banner says so)."""
    assert main(["analyze", str(files / "strips.tif"), "--steps", "21"]) == 0
    out = capsys.readouterr().out
    header = [line for line in out.splitlines() if line.split()[:1] == ["step"]]
    assert header and all("± sd, noise only" in line for line in header)
    assert "leaves out the error of having no calibration" in out


@pytest.fixture(scope="module")
def calibration_file(files):
    cal = files / "cal_checks.json"
    assert main(["calibrate", str(files / "tablet.tif"), "--densities", str(files / "cert.csv"), "-o", str(cal)]) == 0
    return cal


def _strip_warnings(files, calibration_file, capsys, scan, *extra) -> list[list[str]]:
    assert main(["analyze", str(files / scan), "--calibration", str(calibration_file), "--json", *extra]) == 0
    return [s["warnings"] for s in json.loads(capsys.readouterr().out)["strips"]]


def test_a_wrong_step_count_is_warned_of_not_read_as_a_whole_strip(files, calibration_file, capsys):
    """Issue 13, wrong output 2: ``--steps 11`` on 21-step strips reads the 11 densest steps as a whole strip;
    the count is checked against the measured pitch and the film's length, and step 1 far above base+fog and
    steps far from their targets are warned of."""
    capsys.readouterr()
    for warnings in _strip_warnings(files, calibration_file, capsys, "strips.tif", "--steps", "11"):
        text = " ".join(warnings)
        assert "11 steps were given, but the film has room for about" in text
        # Common practice: a sensitometric strip's step 1 lies in the toe, near base+fog.
        assert "step 1 reads" in text and "above base+fog" in text
        # Common practice: density difference low step closest to 0.45 OD; none is near it here.
        assert "density-difference low step (step 1," in text and "from its target 0.45" in text
    # The right count, given or counted, warns of none of this (simulator ground truth: 21 steps).
    for extra in ((), ("--steps", "21")):
        for warnings in _strip_warnings(files, calibration_file, capsys, "strips.tif", *extra):
            text = " ".join(warnings)
            assert "were given" not in text and "step 1 reads" not in text and "from its target" not in text


def test_dmax_below_the_density_difference_high_target_is_warned_of(files, calibration_file, capsys):
    """Issue 13, wrong output 2: a film whose Dmax is below the density-difference high target (2.20) puts the
    high step on the shoulder, below its target; that is said, not left silent."""
    low = FilmModel(dmax=1.95, log_e_mid=1.4, slope=5.0)  # simulator ground truth: never denser than 1.95 OD
    write_tiff(files / "low_dmax.tif", simulate_scan([StripSpec(film=low, center_mm=(60.0, 100.0), angle_deg=90.0)],
                                                     platen_mm=(120.0, 200.0), dpi=150.0,
                                                     scanner=ScannerModel(seed=5)))
    capsys.readouterr()
    (warnings,) = _strip_warnings(files, calibration_file, capsys, "low_dmax.tif", "--steps", "21")
    note = [w for w in warnings if w.startswith("Dmax (")]
    assert len(note) == 1 and "below the density-difference high target 2.20" in note[0]
    assert "lands on the shoulder" in note[0]
