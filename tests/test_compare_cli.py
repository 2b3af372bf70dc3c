"""``stripscan compare`` and ``stripscan crossover`` end to end: scans, the archive, the QC log."""

from __future__ import annotations

import datetime
import hashlib
import json
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from stripscan import CAUTION
from stripscan.archive import Archive, EmulsionLot, FilmType, NewSnapshot, Processor, QcEntry
from stripscan.cli.main import main
from stripscan.cli.compare import levels_in_force
from stripscan.services.comparison_sets import SetError, parse_set
from stripscan.core.compare.comparison import compare_sets
from stripscan.core.compare.sets import StripSet
from stripscan.core.calibration_files import load_calibration
from stripscan.core.curve import compute_figures, step_log_exposures
from stripscan.core.pipeline import analyze_scan
from stripscan.core.records import ScanInfo, StepDensity, StripGeometry, StripResult
from stripscan.core.qc.records import QCSteps
from stripscan.sim.demo_data import SCENARIO, demo_files
from stripscan.services.qc_log import QcSetup, StepChoice

PROCESSOR = SCENARIO["processor"]["name"]
LOT_A, LOT_B, LOT_ODD = "M-2610-A", "M-2702-B", "M-2703-C"
DAY = "2026-11-20"


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def hand_strip(index: int, *, base_fog: float, mid: float, dd: float, n_steps: int = 21,
               readable: bool = True) -> StripResult:
    """A 21-step strip through exact densities: step 6 = 0.45, step 10 = ``mid``, step 13 = 0.45 + ``dd``."""
    log_e = step_log_exposures(n_steps)
    anchors = ((1, base_fog + 0.01), (6, 0.45), (10, mid), (13, 0.45 + dd), (n_steps, 3.0)) if n_steps == 21 \
        else ((1, base_fog + 0.01), (n_steps, 2.8))
    od = np.interp(np.arange(1, n_steps + 1), *zip(*anchors))
    steps = tuple(StepDensity(k, float(log_e[k - 1]), float(od[k - 1]), 0.004, 900, readable, (40.0 * k, 300.0))
                  for k in range(1, n_steps + 1))
    figures = compute_figures(log_e, od, [readable] * n_steps, base_fog=base_fog)
    geometry = StripGeometry((20.0, 300.0), (1.0, 0.0), (0.0, 1.0), 40.0, n_steps, 20.0)
    return StripResult(index, geometry, steps, None, figures)


def scan_info(name: str) -> ScanInfo:
    return ScanInfo(f"/invented/fernhill/{name}.tif", hashlib.sha256(name.encode()).hexdigest(),
                    1200, 800, 150.0, 16, 1, "grey", "linear")


def reference_data(archive: Archive) -> None:
    archive.add_film_type(FilmType("Type M", SCENARIO["film_type"]))
    for lot in (LOT_A, LOT_B, LOT_ODD):
        archive.add_lot(EmulsionLot(lot, "Type M"))
    archive.add_processor(Processor(PROCESSOR, SCENARIO["processor"]["place"]))


# Hand-worked crossover (common practice, mammography QC manuals, from memory:
# 5 old + 5 new strips processed together; new level = old level + (mean new - mean old)).
#
#   old film, 5 strips:  base+fog 0.18 0.19 0.18 0.19 0.21   mean 0.95 / 5 = 0.19
#                        mid-density 1.20 1.22 1.19 1.21 1.18 mean 6.00 / 5 = 1.20
#                        density diff 1.70 1.72 1.69 1.71 1.68 mean 8.50 / 5 = 1.70
#   new film, 5 strips:  base+fog 0.20 0.21 0.20 0.22 0.22   mean 1.05 / 5 = 0.21
#                        mid-density 1.26 1.27 1.25 1.28 1.24 mean 6.30 / 5 = 1.26
#                        density diff 1.75 1.77 1.76 1.74 1.78 mean 8.80 / 5 = 1.76
#   differences new - old: base+fog +0.02, mid-density +0.06, density difference +0.06
#   operating levels before (mean of 5 daily strips, below): 0.18, 1.23, 1.72
#   new levels: mid-density 1.23 + 0.06 = 1.29; density difference 1.72 + 0.06 = 1.78;
#               base+fog = new film's mean 0.21 (or, shifted, 0.18 + 0.02 = 0.20)
OLD = ((0.18, 1.20, 1.70), (0.19, 1.22, 1.72), (0.18, 1.19, 1.69), (0.19, 1.21, 1.71), (0.21, 1.18, 1.68))
NEW = ((0.20, 1.26, 1.75), (0.21, 1.27, 1.77), (0.20, 1.25, 1.76), (0.22, 1.28, 1.74), (0.22, 1.24, 1.78))
# Five days of daily QC: means 0.18, 1.23, 1.72 (FDA guidance for MQSA: levels from 5 days).
DAILY = ((0.17, 1.22, 1.71), (0.18, 1.24, 1.73), (0.19, 1.23, 1.72), (0.18, 1.23, 1.72), (0.18, 1.23, 1.72))
STEPS = {"mid_step": 10, "dd_high_step": 13, "dd_low_step": 6}


def crossover_archive(path: Path, *, daily: bool = True, steps: bool = True) -> Path:
    with Archive.open(path) as archive:
        reference_data(archive)
        drafts = [NewSnapshot(lot, scan_info(f"{lot}-{k}"), hand_strip(k + 1, base_fog=bf, mid=md, dd=dd),
                              processor=PROCESSOR, processed_on=DAY)
                  for lot, rows in ((LOT_A, OLD), (LOT_B, NEW)) for k, (bf, md, dd) in enumerate(rows)]
        # An earlier strip of the old lot: a crossover must leave it out.
        drafts.append(NewSnapshot(LOT_A, scan_info("earlier"), hand_strip(1, base_fog=0.3, mid=1.5, dd=1.9),
                                  processor=PROCESSOR, processed_on="2026-11-02"))
        archive.add_snapshots(drafts)
        if daily:
            for k, (bf, md, dd) in enumerate(DAILY):
                archive.add_qc_entry(QcEntry(PROCESSOR, f"2026-11-{2 + k:02d}", bf, md, dd, "manual"))
        if steps:
            # Kept as the QC log keeps the steps chosen at baseline.
            choice = StepChoice(datetime.date(2026, 11, 2), QCSteps.from_dict(STEPS), "baseline strip")
            archive.set_qc_settings(PROCESSOR, QcSetup(step_choices=(choice,)).to_settings())
    return path


@pytest.fixture(scope="module")
def demo():
    files = demo_files()
    calibration = load_calibration(files.calibration)
    return files, {lot: analyze_scan(path, calibration=calibration)
                   for lot, path in ((LOT_A, files.lot_a_scan), (LOT_B, files.lot_b_scan))}, calibration


@pytest.fixture(scope="module")
def archive_path(tmp_path_factory, demo) -> Path:
    """The demo lots stored as snapshots 1-3 (A) and 4-6 (B); an 11-step strip (7) and an unreadable one (8)."""
    _, analyses, calibration = demo
    path = tmp_path_factory.mktemp("archive") / "fernhill.sqlite3"
    with Archive.open(path) as archive:
        reference_data(archive)
        for lot, analysis in analyses.items():
            archive.add_analysis(analysis, lot, calibration=calibration.to_dict(), processor=PROCESSOR,
                                 processed_on="2026-11-19")
        archive.add_snapshots([
            NewSnapshot(LOT_ODD, scan_info("eleven"), hand_strip(1, base_fog=0.2, mid=1.2, dd=1.8, n_steps=11)),
            NewSnapshot(LOT_ODD, scan_info("fogged"), hand_strip(2, base_fog=0.2, mid=1.2, dd=1.8, readable=False)),
        ])
    return path


# ------------------------------------------------------------------ naming sets


def test_set_names(tmp_path):
    scan = tmp_path / "a#b.tif"
    scan.write_bytes(b"x")
    assert parse_set("snapshot:12-14,20").numbers == (12, 13, 14, 20)
    assert parse_set("lot:M-2610-A").target == "M-2610-A"
    spec = parse_set(f"scan:{scan}#1,3")
    assert (spec.kind, spec.target, spec.numbers) == ("scan", str(scan), (1, 3))
    assert parse_set(str(scan)).target == str(scan)  # a '#' in a file name stays in the path
    with pytest.raises(SetError, match="'nothing.tif': no such file, and not a set; write scan:PATH"):
        parse_set("nothing.tif")
    with pytest.raises(SetError, match="'x' is not a list of snapshot numbers"):
        parse_set("snapshot:x")
    with pytest.raises(SetError, match="runs backwards"):
        parse_set("snapshot:5-2")


# ------------------------------------------------------------------ compare


def test_compare_two_scans_prints_the_table_and_the_caution(capsys, demo):
    files, _, _ = demo
    code, out, err = run(capsys, "compare", f"scan:{files.lot_a_scan}", f"scan:{files.lot_b_scan}",
                         "--calibration", files.calibration)
    assert code == 0, err
    for label in ("base+fog", "speed point", "relative speed", "average gradient", "gamma", "Dmax", "latitude",
                  "mid-density", "density difference"):
        assert f"\n  {label}" in out
    assert "95 % interval" in out and "B − A" in out
    assert "positive = B faster" in out
    assert "21 CFR 900.12(e)(1)" in out and "from memory" in out
    assert CAUTION in out


def test_compare_json_differences_match_scipy(capsys, demo):
    files, _, _ = demo
    code, out, err = run(capsys, "compare", f"scan:{files.lot_a_scan}", f"scan:{files.lot_b_scan}#1,2",
                         str(files.lot_b_scan), "--calibration", files.calibration, "--json")
    assert code == 0, err
    data = json.loads(out)
    assert [(s["name"], s["n"]) for s in data["sets"]] == [
        (f"scan:{files.lot_a_scan}", 3), (f"scan:{files.lot_b_scan}#1,2", 2), (str(files.lot_b_scan), 3)]
    assert set(data["sets"][0]["figures"]["speed_log_exposure"]) >= {"mean", "sd", "n"}
    assert len(data["comparisons"]) == 2
    assert data["differences"] == data["comparisons"][0]["differences"]
    assert data["caution"] == CAUTION
    for pair in data["comparisons"]:
        for figure in ("base_fog", "speed_log_exposure", "average_gradient", "mid_density"):
            row = pair["differences"][figure]
            assert row["difference"] == pytest.approx(row["b"] - row["a"], abs=2e-6)
            # Reference: scipy.stats.ttest_ind(equal_var=False), Welch's interval of b - a.
            ci = stats.ttest_ind(row["set_b"]["values"], row["set_a"]["values"],
                                 equal_var=False).confidence_interval(0.95)
            # The JSON's values are rounded to 6 decimals; an interval computed from them
            # can move by a few 1e-6 (t * sd / sqrt(n) amplifies the rounding).
            assert row["ci95"] == pytest.approx([ci.low, ci.high], abs=2e-5)
    rel, speed = data["differences"]["relative_speed_percent"], data["differences"]["speed_log_exposure"]
    # Arithmetic: relative speed = 100 * (10^(-Δlog E) - 1); the demo's lot B is faster.
    assert rel["difference"] == pytest.approx(100 * (10 ** -speed["difference"] - 1), abs=1e-3)
    assert rel["difference"] > 0


def test_archived_sets_read_the_same_strips_as_the_scans(capsys, demo, archive_path):
    files, analyses, _ = demo
    code, out, err = run(capsys, "compare", f"lot:{LOT_A}", f"scan:{files.lot_a_scan}", "snapshot:4-6",
                         "--archive", archive_path, "--calibration", files.calibration, "--json")
    assert code == 0, err
    data = json.loads(out)
    same, lot_b = data["comparisons"]
    # The archive keeps densities to 0.0001 OD and figures to 0.00001.
    assert same["differences"]["speed_log_exposure"]["difference"] == pytest.approx(0.0, abs=1e-5)
    assert same["differences"]["mid_density"]["difference"] == pytest.approx(0.0, abs=1e-4)
    (scans,) = compare_sets([StripSet("a", analyses[LOT_A].strips), StripSet("b", analyses[LOT_B].strips)])
    for figure in ("speed_log_exposure", "average_gradient", "base_fog", "density_difference"):
        assert lot_b["differences"][figure]["difference"] == pytest.approx(scans.row(figure).difference, abs=1e-4)


def test_tolerances_set_on_the_command_line(capsys, archive_path):
    args = ("compare", "snapshot:1-3", "snapshot:4-6", "--archive", archive_path, "--json")
    base = json.loads(run(capsys, *args)[1])["differences"]["speed_log_exposure"]
    wide = json.loads(run(capsys, *args, "--tolerance", "speed_log_exposure=0.5")[1])["differences"]
    assert wide["speed_log_exposure"]["ci95"] == base["ci95"]
    assert wide["speed_log_exposure"]["verdict"] == "same"  # the demo's shift is ~0.05, far inside ±0.5
    gamma = json.loads(run(capsys, *args, "--tolerance", "gamma=5%")[1])["differences"]["gamma"]
    assert gamma["tolerance"]["upper"] == pytest.approx(0.05 * gamma["a"], abs=1e-6)
    code, _, err = run(capsys, *args, "--tolerance", "speed=0.5")
    assert code == 1 and "--tolerance 'speed=0.5': write FIGURE=VALUE" in err


@pytest.mark.parametrize("sets, message", [
    (("snapshot:1", "snapshot:99"), "set 'snapshot:99': {archive}: snapshot 99 is not in the archive"),
    (("lot:M-2610-A", "lot:M-0000-Z"), "set 'lot:M-0000-Z': {archive}: lot 'M-0000-Z' is not in the archive"),
    (("snapshot:1-3", "snapshot:7"), "set 'snapshot:7' has 11-step strips but set 'snapshot:1-3' has 21-step"),
    (("snapshot:1-3", "snapshot:8"), "set 'snapshot:8': no readable strip (snapshot 8: fewer than two usable"),
    (("snapshot:1-3", "lot"), "set 'lot': no such file, and not a set"),
    (("snapshot:1-3",), "compare needs at least two sets"),
])
def test_compare_bad_input_gives_one_clear_line(capsys, archive_path, sets, message):
    code, out, err = run(capsys, "compare", *sets, "--archive", archive_path)
    assert code == 1 and out == ""
    assert err.startswith("stripscan: error: ") and err.count("\n") == 1
    assert message.format(archive=archive_path) in err


def test_compare_scan_strip_that_is_not_there(capsys, demo):
    files, _, _ = demo
    code, _, err = run(capsys, "compare", f"scan:{files.lot_a_scan}#2,7", f"scan:{files.lot_b_scan}",
                       "--calibration", files.calibration)
    assert code == 1 and "has 3 strip(s), no strip 7" in err


def test_compare_missing_archive_is_named(capsys, tmp_path):
    code, _, err = run(capsys, "compare", "lot:M-2610-A", "lot:M-2702-B", "--archive", tmp_path / "none.sqlite3")
    assert code == 1 and "none.sqlite3 does not exist" in err
    assert not (tmp_path / "none.sqlite3").exists()


# ------------------------------------------------------------------ crossover


def test_crossover_end_to_end_into_the_qc_log(capsys, tmp_path):
    path = crossover_archive(tmp_path / "qc.sqlite3")
    code, out, err = run(capsys, "crossover", "--processor", PROCESSOR, "--old", f"lot:{LOT_A}",
                         "--new", f"lot:{LOT_B}", "--date", DAY, "--archive", path)
    assert code == 0, err
    # The hand-worked example above: old means, new means, differences, old and new levels.
    assert "  base+fog                 0.190     0.210     +0.020      0.180      0.210" in out
    assert "  mid-density              1.200     1.260     +0.060      1.230      1.290" in out
    assert "  density difference       1.700     1.760     +0.060      1.720      1.780" in out
    assert "steps from the QC steps kept in the processor's log" in out and CAUTION in out
    with Archive.open(path, read_only=True) as archive:
        (stored,) = archive.list_crossovers(PROCESSOR)
        (event,) = archive.list_qc_events(PROCESSOR)
        levels = stored.record["result"]["new_levels"]
        assert (levels["base_fog"], levels["mid_density"], levels["density_difference"]) == \
            pytest.approx((0.21, 1.29, 1.78), abs=1e-9)
        assert levels["steps"] == STEPS and levels["established"] == DAY
        assert len(stored.record["old"]["strips"]) == len(stored.record["new"]["strips"]) == 5
        assert (event.kind, event.date) == ("crossover", DAY)
        assert "mid-density 1.290" in event.note and f"crossover record {stored.id}" in event.note
        # The QC log now judges the processor against the crossover's levels.
        after, _, source = levels_in_force(archive, PROCESSOR, datetime.date(2026, 11, 21))
        assert (after.mid_density, after.density_difference, after.base_fog) == pytest.approx((1.29, 1.78, 0.21))
        assert "crossover on 2026-11-20" in source
    code, _, err = run(capsys, "crossover", "--processor", PROCESSOR, "--old", f"lot:{LOT_A}",
                       "--new", f"lot:{LOT_B}", "--date", DAY, "--archive", path)
    assert code == 1 and "already has a crossover on 2026-11-20" in err


def test_crossover_shift_rule_and_steps_chosen_on_the_old_film(capsys, tmp_path):
    path = crossover_archive(tmp_path / "qc.sqlite3", steps=False)
    code, out, err = run(capsys, "crossover", "--processor", PROCESSOR, "--old", "snapshot:1-5",
                         "--new", "snapshot:6-10", "--date", DAY, "--archive", path, "--base-fog-rule", "shift")
    assert code == 0, err
    assert "chosen now on the old film's mean densities" in out
    # Common practice: steps closest to 1.20, 2.20 and 0.45 OD are steps 10, 13 and 6 of these strips.
    assert "mid-density step 10, density difference step 13 − step 6" in out
    # Hand-worked: base+fog shifted, 0.18 + 0.02 = 0.20.
    assert "  base+fog                 0.190     0.210     +0.020      0.180      0.200" in out


def test_crossover_stores_both_or_neither(capsys, tmp_path, monkeypatch):
    path = crossover_archive(tmp_path / "qc.sqlite3")

    def refuse(self, conn, event):
        raise OSError("disk full while writing the event")
    monkeypatch.setattr(Archive, "_insert_qc_event", refuse)
    code, _, err = run(capsys, "crossover", "--processor", PROCESSOR, "--old", f"lot:{LOT_A}",
                       "--new", f"lot:{LOT_B}", "--date", DAY, "--archive", path)
    assert code == 1 and "disk full" in err
    monkeypatch.undo()
    with Archive.open(path, read_only=True) as archive:
        assert archive.list_crossovers() == [] and archive.list_qc_events() == []


@pytest.mark.parametrize("extra, setup, message", [
    (("--strips", "6"), {}, "crossover needs 6 strips of old film, have 5"),
    ((), {"daily": False}, "processor 'Processor 1' has no operating levels to cross over from on 2026-11-20"),
    (("--date", "2026-11-21"), {}, "lot 'M-2610-A' has no current snapshots on processor 'Processor 1' dated "
                                   "2026-11-21"),
    (("--processor", "Processor 9"), {}, "processor 'Processor 9' is not in the archive"),
    (("--old", "snapshot:1-5", "--new", "snapshot:6-10", "--date", "2026-11-05"), {},
     "the crossover of 2026-11-05 is before the latest QC entry of processor 'Processor 1' (2026-11-06)"),
    # Common practice: old and new film are processed together; other days' strips carry the processor's own change.
    (("--old", "snapshot:1-4,11", "--new", "snapshot:6-10"), {},
     "the strips were processed on 2026-11-02, 2026-11-20; a crossover needs the old and the new film processed "
     "together on one day"),
    (("--old", "snapshot:1-5", "--new", "snapshot:6-10", "--date", "2026-11-25"), {},
     "the strips were processed on 2026-11-20 but the crossover is dated 2026-11-25; give --date 2026-11-20"),
    (("--old", "snapshot:1-4,6", "--new", "snapshot:7-10"), {}, "set 'snapshot:1-4,6' mixes emulsion lots"),
])
def test_crossover_bad_input_stores_nothing(capsys, tmp_path, extra, setup, message):
    path = crossover_archive(tmp_path / "qc.sqlite3", **setup)
    args = ["crossover", "--processor", PROCESSOR, "--old", f"lot:{LOT_A}", "--new", f"lot:{LOT_B}",
            "--date", DAY, "--archive", path]
    code, _, err = run(capsys, *args, *extra)
    assert code == 1 and message in err, err
    with Archive.open(path, read_only=True) as archive:
        assert archive.list_crossovers() == [] and archive.list_qc_events() == []


def _shaded_pixels(png: Path) -> int:
    """Pixels of the grey that marks the days that set the operating levels (over white)."""
    import imageio.v3 as iio

    from stripscan.render.qc_chart import BASELINE_COLOUR, BASELINE_OPACITY

    grey = int(BASELINE_COLOUR[1:3], 16)
    shade = round(255 + (grey - 255) * BASELINE_OPACITY)  # #808080 at 0.2 over white: #E6E6E6
    rgb = iio.imread(png)[..., :3].astype(int)
    return int((np.abs(rgb - shade).max(axis=-1) <= 1).sum())


def test_days_after_a_crossover_are_not_shaded_as_setting_the_levels(capsys, tmp_path):
    """Issue 13, wrong output 1: after a crossover the chart, the monthly report and the window shade only
    days that really set the operating levels; the crossover's levels were set by no day of December."""
    path = crossover_archive(tmp_path / "qc.sqlite3")
    code, _, err = run(capsys, "crossover", "--processor", PROCESSOR, "--old", f"lot:{LOT_A}",
                       "--new", f"lot:{LOT_B}", "--date", DAY, "--archive", path)
    assert code == 0, err
    for date in ("2026-12-01", "2026-12-02"):
        code, _, err = run(capsys, "qc", "add", "--archive", path, "--processor", PROCESSOR, "--date", date,
                           "--base-fog", "0.21", "--mid-density", "1.29", "--density-difference", "1.78")
        assert code == 0, err
    pictures = {}
    for month in ("2026-11", "2026-12"):
        pictures[month] = tmp_path / f"{month}.png"
        code, _, err = run(capsys, "qc", "chart", "--archive", path, "--processor", PROCESSOR, "--month", month,
                           "-o", pictures[month])
        assert code == 0, err
    # November's five baseline days (FDA guidance for MQSA: levels from 5 days) are shaded; December's days,
    # judged against levels a crossover set, are not, and the legend does not speak of shaded days.
    # (Thin grid lines come near the shade's grey too; a shaded day column is some 10^5 pixels.)
    assert _shaded_pixels(pictures["2026-11"]) > 100_000
    assert _shaded_pixels(pictures["2026-12"]) < 20_000
    from stripscan.render.qc_chart import legend_entries
    from stripscan.services.qc_chart import chart_data
    from stripscan.services.qc_log import load_processor_log

    with Archive.open(path, read_only=True) as archive:
        plog = load_processor_log(archive, PROCESSOR)
    december = chart_data(plog, month="2026-12")
    assert [p.baseline_dates for p in december.periods] == [()]
    # The monthly report and the window draw from the same chart data and legend.
    assert "baseline_days" not in {e.key for e in legend_entries(december)}
    november = chart_data(plog, month="2026-11")
    assert november.periods[0].baseline_dates == tuple(datetime.date(2026, 11, d) for d in range(2, 7))


def test_a_comparison_says_when_lot_and_processing_day_are_mixed(capsys, tmp_path):
    """Issue 13, missing 3: when every strip of lot A was processed on other days than lot B's, the lot
    comparison says the difference may be the processor's, not the film's."""
    shared = crossover_archive(tmp_path / "shared.sqlite3")  # both lots processed together on 2026-11-20
    code, out, err = run(capsys, "compare", f"lot:{LOT_A}", f"lot:{LOT_B}", "--archive", shared)
    assert code == 0, err
    assert "lot and processing day are mixed" not in out
    apart = tmp_path / "apart.sqlite3"
    with Archive.open(apart) as archive:
        reference_data(archive)
        archive.add_snapshots([
            NewSnapshot(lot, scan_info(f"{lot}-{k}"), hand_strip(k + 1, base_fog=bf, mid=md, dd=dd),
                        processor=PROCESSOR, processed_on=day)
            for lot, rows, day in ((LOT_A, OLD, "2026-11-18"), (LOT_B, NEW, "2026-11-20"))
            for k, (bf, md, dd) in enumerate(rows)])
    code, out, err = run(capsys, "compare", f"lot:{LOT_A}", f"lot:{LOT_B}", "--archive", apart)
    assert code == 0, err
    # Common practice: films are compared on strips processed together, or the processor's drift is in it.
    note = [line for line in out.splitlines() if "lot and processing day are mixed" in line]
    assert len(note) == 1 and "2026-11-18" in note[0] and "2026-11-20" in note[0]
    assert "may be the processor's" in note[0]
    code, out, err = run(capsys, "compare", f"lot:{LOT_A}", f"lot:{LOT_B}", "--archive", apart, "--json")
    assert code == 0, err
    (pair,) = json.loads(out)["comparisons"]
    assert any("lot and processing day are mixed" in n for n in pair["notes"])


def test_the_window_shades_no_day_after_a_crossover(capsys, tmp_path, qtbot):
    """Issue 13, wrong output 1, in the window: the QC page shades the baseline days that set the first levels,
    and no day judged against levels a crossover set."""
    from PySide6.QtWidgets import QGraphicsRectItem

    from stripscan.gui.panels.qc_panel import QcPanel
    from stripscan.render.qc_chart import BASELINE_OPACITY

    path = crossover_archive(tmp_path / "qc.sqlite3")
    assert run(capsys, "crossover", "--processor", PROCESSOR, "--old", f"lot:{LOT_A}", "--new", f"lot:{LOT_B}",
               "--date", DAY, "--archive", path)[0] == 0
    for date in ("2026-12-01", "2026-12-02"):
        assert run(capsys, "qc", "add", "--archive", path, "--processor", PROCESSOR, "--date", date, "--base-fog",
                   "0.21", "--mid-density", "1.29", "--density-difference", "1.78")[0] == 0
    panel = QcPanel(path)
    qtbot.addWidget(panel)
    panel.resize(1000, 900)
    panel.show()
    qtbot.waitUntil(lambda: not panel.busy, timeout=20_000)  # the panel reads the archive off the UI thread
    assert [p.baseline_dates for p in panel.data.periods] == [
        tuple(datetime.date(2026, 11, d) for d in range(2, 7)), ()]
    for plot in panel.plots.values():
        shaded = [item for item in plot.items if isinstance(item, QGraphicsRectItem)
                  and abs(item.brush().color().alphaF() - BASELINE_OPACITY) < 0.01]
        assert len(shaded) == 1  # November's five baseline days, one column
    panel.grab().save(str(tmp_path / "qc-page.png"))
