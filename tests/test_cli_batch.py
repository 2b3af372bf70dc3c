"""Several scans in one command: ``analyze``, ``archive add`` and ``qc add`` over a list or a folder."""

from __future__ import annotations

import json
import os
import pty
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

import stripscan
from stripscan import CAUTION
from stripscan.cli.main import main
from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec, TabletSpec
from stripscan.sim.simulate import simulate_scan, write_tiff

ROOT = Path(stripscan.__file__).resolve().parent.parent
TABLET_OD = tuple(round(0.05 + 0.15 * k, 3) for k in range(21))  # common practice: 21 steps 0.05..3.05


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    """A calibration, and scans of two strips each (two films) to copy into each test's folder."""
    folder = tmp_path_factory.mktemp("made")
    tablet = TabletSpec(densities=TABLET_OD, step_length_mm=7.5, center_mm=(40.0, 95.0), angle_deg=90.0)
    write_tiff(folder / "tablet.tif", simulate_scan([tablet], platen_mm=(80.0, 190.0), dpi=150.0,
                                                    scanner=ScannerModel(seed=1)))
    (folder / "cert.csv").write_text("step,density\n" + "".join(f"{k + 1},{d}\n" for k, d in enumerate(TABLET_OD)))
    assert main(["calibrate", str(folder / "tablet.tif"), "--densities", str(folder / "cert.csv"),
                 "-o", str(folder / "cal.json")]) == 0
    for k in range(2):
        strips = [StripSpec(film=FilmModel(log_e_mid=1.5 + 0.1 * k), center_mm=(30.0 + 55.0 * j, 100.0),
                            angle_deg=90.0) for j in range(2)]
        write_tiff(folder / f"film_{k}.tif", simulate_scan(strips, platen_mm=(120.0, 200.0), dpi=150.0,
                                                           scanner=ScannerModel(seed=2 + k)))
    return folder


def _folder(made: Path, target: Path, names: list[str], bad: str | None = None) -> Path:
    target.mkdir()
    for k, name in enumerate(names):
        shutil.copyfile(made / f"film_{k % 2}.tif", target / name)
    if bad:
        (target / bad).write_bytes(b"II*\x00 a damaged file, not an image")
    return target


def _without_path(data: dict) -> dict:
    data = json.loads(json.dumps(data))
    data["scan"].pop("path")
    return data


def test_analyze_a_folder_writes_each_result_and_skips_the_bad_file(made, tmp_path, capsys):
    scans = _folder(made, tmp_path / "in", ["a.tif", "b.tif", "d.tif"], bad="c.tif")
    out = tmp_path / "out"
    status = main(["analyze", str(scans), "-o", str(out), "--calibration", str(made / "cal.json"), "--workers", "2"])
    captured = capsys.readouterr()
    assert status == 1  # a file failed
    assert captured.out.splitlines()[0].startswith("3 of 4 scans analysed, 1 failed (")
    assert f"Caution: {CAUTION}" in captured.out
    (failure,) = captured.err.splitlines()  # one line, naming the file and what is wrong with it
    assert failure.startswith(f"stripscan: error: {scans / 'c.tif'}: ") and "image" in failure
    assert sorted(p.name for p in out.iterdir()) == ["a.results.json", "b.results.json", "d.results.json"]
    # Each file holds what the one-scan form writes for that scan.
    for name in ("a", "b"):
        assert main(["analyze", str(scans / f"{name}.tif"), "-o", str(tmp_path / f"{name}.json"),
                     "--calibration", str(made / "cal.json")]) == 0
        single = json.loads((tmp_path / f"{name}.json").read_text(encoding="utf-8"))
        batch = json.loads((out / f"{name}.results.json").read_text(encoding="utf-8"))
        assert _without_path(batch) == _without_path(single)
        assert batch["scan"]["path"] == str(scans / f"{name}.tif")


def test_analyze_several_named_scans_all_good_exits_zero(made, tmp_path, capsys):
    scans = _folder(made, tmp_path / "in", ["x.tif", "y.tif"])
    out = tmp_path / "out"
    assert main(["analyze", str(scans / "x.tif"), str(scans / "y.tif"), "-o", str(out), "--workers", "1"]) == 0
    captured = capsys.readouterr()
    assert captured.out.startswith("2 of 2 scans analysed (") and captured.err == ""
    assert "UNCALIBRATED" in captured.out
    assert sorted(p.name for p in out.iterdir()) == ["x.results.json", "y.results.json"]


@pytest.mark.parametrize("extra, message", [
    ([], "several scans, or a folder of them: give -o FOLDER"),
    (["-o", "OUT", "--json"], "--json prints the result of one scan"),
    (["-o", "FILE"], "is a file; with several scans -o names the folder"),
])
def test_analyze_batch_refusals_write_nothing(made, tmp_path, capsys, extra, message):
    scans = _folder(made, tmp_path / "in", ["x.tif", "y.tif"])
    (tmp_path / "FILE").write_text("mine")
    extra = [str(tmp_path / e) if e in ("OUT", "FILE") else e for e in extra]
    assert main(["analyze", str(scans), *extra]) == 1
    assert message in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["FILE", "in"]


def test_two_scans_of_one_name_are_refused_before_reading(made, tmp_path, capsys):
    a = _folder(made, tmp_path / "a", ["same.tif"])
    b = _folder(made, tmp_path / "b", ["same.tif"])
    assert main(["analyze", str(a / "same.tif"), str(b / "same.tif"), "-o", str(tmp_path / "out")]) == 1
    assert "would both be written to" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()


def test_workers_must_be_a_positive_count(made, tmp_path, capsys):
    with pytest.raises(SystemExit) as exit_info:
        main(["analyze", str(made / "film_0.tif"), "--workers", "0"])
    assert exit_info.value.code == 2 and "give at least 1" in capsys.readouterr().err


def _run_on_terminal(args: list[str], cwd: Path) -> tuple[int, str]:
    """Run ``stripscan ARGS`` with its standard error on a pseudo-terminal; the exit status and what it showed."""
    leader, follower = pty.openpty()
    env = dict(os.environ, PYTHONPATH=str(ROOT), COLUMNS="100")
    process = subprocess.Popen([sys.executable, "-m", "stripscan", *args], stdout=subprocess.DEVNULL,
                               stderr=follower, cwd=cwd, env=env)
    os.close(follower)
    shown = b""
    while True:
        try:
            chunk = os.read(leader, 4096)
        except OSError:  # the terminal closed with the process
            break
        if not chunk:
            break
        shown += chunk
    os.close(leader)
    return process.wait(timeout=120), shown.decode("utf-8", "replace")


def test_progress_line_on_a_terminal_only(made, tmp_path):
    scans = _folder(made, tmp_path / "in", ["a.tif", "b.tif", "c.tif"])
    status, shown = _run_on_terminal(["analyze", str(scans), "-o", "out", "--workers", "2"], tmp_path)
    assert status == 0
    assert "\r[0/3] starting" in shown and "\r[3/3] 0:00 left  " in shown
    assert any(f"[{k}/3]" in shown for k in (1, 2))
    status, shown = _run_on_terminal(["analyze", str(scans), "-o", "out2", "--quiet"], tmp_path)
    assert status == 0 and "[" not in shown
    # Not a terminal (a pipe, a log file): no progress line, the summary alone.
    done = subprocess.run([sys.executable, "-m", "stripscan", "analyze", str(scans), "-o", "out3"], cwd=tmp_path,
                          capture_output=True, text=True, env=dict(os.environ, PYTHONPATH=str(ROOT)))
    assert done.returncode == 0 and done.stderr == "" and done.stdout.startswith("3 of 3 scans analysed")


# -- archive add ---------------------------------------------------------------------------------------------

def _snapshots(archive: Path) -> list:
    from stripscan.archive import Archive

    with Archive.open(archive, read_only=True) as opened:
        return [opened.get_snapshot(s.id) for s in opened.list_snapshots()]


def test_archive_add_stores_each_scan_in_the_order_given_and_skips_the_bad_ones(made, tmp_path, capsys):
    scans = _folder(made, tmp_path / "in", ["a.tif", "b.tif"], bad="c.tif")
    archive = tmp_path / "lots.db"
    common = ["--lot", "L-1", "--archive", str(archive), "--calibration", str(made / "cal.json")]
    assert main(["archive", "add", str(scans / "a.tif"), *common]) == 0  # one scan, as before
    capsys.readouterr()
    # The folder again: a.tif is stored already (refused by name), c.tif is no image, b.tif is stored.
    status = main(["archive", "add", str(scans), *common, "--workers", "2"])
    captured = capsys.readouterr()
    assert status == 1
    assert "1 of 3 scans stored, 2 failed" in captured.out
    errors = captured.err.splitlines()
    assert len(errors) == 2 and "a.tif" in errors[0] and "stored already" in errors[0] and "c.tif" in errors[1]
    stored = _snapshots(archive)
    assert [(Path(s.scan.path).name, s.strip.index) for s in stored] == [("a.tif", 1), ("a.tif", 2),
                                                                         ("b.tif", 1), ("b.tif", 2)]
    # The batch stores what the one-scan form stores for that scan.
    single = tmp_path / "single.db"
    assert main(["archive", "add", str(scans / "b.tif"), "--lot", "L-1", "--archive", str(single),
                 "--calibration", str(made / "cal.json")]) == 0
    assert [s.figures for s in _snapshots(single)] == [s.figures for s in stored[2:]]
    assert [s.strip for s in _snapshots(single)] == [s.strip for s in stored[2:]]


def test_archive_add_of_bad_files_only_leaves_no_new_archive(made, tmp_path, capsys):
    scans = tmp_path / "in"
    scans.mkdir()
    for name in ("x.tif", "y.tif"):
        (scans / name).write_bytes(b"not an image")
    archive = tmp_path / "new.db"
    assert main(["archive", "add", str(scans), "--lot", "L-1", "--archive", str(archive)]) == 1
    assert "0 of 2 scans stored, 2 failed" in capsys.readouterr().out
    assert not archive.exists()


# -- qc add -------------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def demo():
    from stripscan.sim.demo_data import demo_files

    return demo_files()


def _entries(archive: Path, processor: str) -> list:
    from stripscan.archive import Archive

    with Archive.open(archive, read_only=True) as opened:
        return opened.list_qc_entries(processor)


def test_qc_add_stores_several_days_in_date_order_each_day_from_its_name(demo, tmp_path, capsys):
    days = list(demo.daily_scans)[:4]
    scans = tmp_path / "in"
    scans.mkdir()
    # Names that do not sort by day: the log must still take the days in date order.
    for k, (day, path) in enumerate(days):
        shutil.copyfile(path, scans / f"{'zyxw'[k]}_{day.isoformat()}.tif")
    (scans / f"q_{days[-1][0] + (days[1][0] - days[0][0])}.tif").write_bytes(b"not an image")
    archive = tmp_path / "qc.db"
    status = main(["qc", "add", str(scans), "--processor", "P-1", "--new-processor", "--archive", str(archive),
                   "--calibration", str(demo.calibration)])
    captured = capsys.readouterr()
    assert status == 1 and "4 of 5 scans stored, 1 failed" in captured.out
    assert "q_" in captured.err and len(captured.err.splitlines()) == 1
    assert captured.out.count("that day: baseline") == 4
    entries = _entries(archive, "P-1")
    assert [e.date for e in entries] == [d.isoformat() for d, _ in days]
    # Each day holds what the one-scan form stores for that scan and day.
    single = tmp_path / "single.db"
    for day, path in days:
        assert main(["qc", "add", str(path), "--date", day.isoformat(), "--processor", "P-1", "--new-processor",
                     "--archive", str(single), "--calibration", str(demo.calibration)]) == 0
    capsys.readouterr()
    one_by_one = _entries(single, "P-1")
    for quantity in ("base_fog", "mid_density", "density_difference"):
        assert [getattr(e, quantity) for e in entries] == [getattr(e, quantity) for e in one_by_one]


@pytest.mark.parametrize("names, extra, message", [
    (["a_2026-11-02.tif", "b.tif"], [], "b.tif: no date in its name"),
    (["a_2026-11-02_2026-11-03.tif", "b_2026-11-04.tif"], [], "2 dates (2026-11-02, 2026-11-03) in its name"),
    (["a_2026-11-02.tif", "b_2026-11-31.tif"], [], "'2026-11-31' is not a calendar date"),
    (["a_2026-11-02.tif", "b_2026-11-03.tif"], ["--note", "fresh chemistry"], "--note belongs to one day"),
    (["a_2026-11-02.tif", "b_2026-11-03.tif"], ["--date", "2026-11-02"], "--date belongs to one day"),
])
def test_qc_add_batch_refusals_store_nothing(demo, tmp_path, capsys, names, extra, message):
    scans = tmp_path / "in"
    scans.mkdir()
    for name in names:
        shutil.copyfile(demo.daily_scans[0][1], scans / name)
    archive = tmp_path / "qc.db"
    assert main(["qc", "add", *(str(scans / n) for n in names), "--processor", "P-1", "--new-processor",
                 "--archive", str(archive), "--calibration", str(demo.calibration), *extra]) == 1
    assert message in capsys.readouterr().err
    assert not archive.exists()
