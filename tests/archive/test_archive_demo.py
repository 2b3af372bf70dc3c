"""The demo archive: built by the real pipeline from simulated scans, in the folder given, repeatably."""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from stripscan.archive import FIGURES, Archive, ArchiveError, calibration_hash
from stripscan.services.demo_archive import (
    DEMO_ARCHIVE_NAME,
    FILM_TYPE,
    PROCESSOR,
    RETIRED,
    REVISED,
    SENSITOMETER,
    STRIPS_PER_SCAN,
    build_demo_archive,
    demo_schedule,
)
from stripscan.core.calibration_files import load_calibration
from stripscan.core.pipeline import analyze_scan
from stripscan.core.reading import AnalysisOptions
from stripscan.sim.demo_data import LOT_FILMS, SCENARIO, demo_files


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_demo_archive(tmp_path_factory.mktemp("demo"))


def _expected_counts() -> dict[str, int]:
    counts = {}
    for lot in SCENARIO["lots"]:
        scans = [s for s in demo_schedule() if s.lot == lot]
        counts[lot] = STRIPS_PER_SCAN * len(scans) - (1 if RETIRED.lot == lot else 0)
    return counts


def test_two_lots_with_the_planned_counts_and_dates(demo: Path) -> None:
    assert demo.name == DEMO_ARCHIVE_NAME
    with Archive.open(demo, read_only=True) as archive:
        lots = archive.list_lots()
        assert [s.lot.lot_id for s in lots] == ["M-2610-A", "M-2702-B"]
        counts = _expected_counts()
        for summary in lots:
            days = [s.day.isoformat() for s in demo_schedule() if s.lot == summary.lot.lot_id]
            assert summary.snapshot_count == counts[summary.lot.lot_id]
            assert (summary.first_date, summary.last_date) == (min(days), max(days))
            assert summary.lot.film_type == FILM_TYPE
            assert summary.lot.received_date == SCENARIO["lots"][summary.lot.lot_id]["received"]
            # Acceptance strips start only once the lot is in the house.
            assert summary.first_date >= summary.lot.received_date
        assert [p.name for p in archive.list_processors()] == [PROCESSOR]
        sensitometer = archive.get_sensitometer(SENSITOMETER)
        assert len(sensitometer.log_exposures) == SCENARIO["sensitometer"]["steps"]
        # 0.15 log E per step: the common √2 step of a 21-step sensitometer (common practice).
        assert sensitometer.log_exposures[1] - sensitometer.log_exposures[0] == pytest.approx(0.15)
        assert len(archive.list_snapshots()) == sum(counts.values())


def test_every_snapshot_names_the_demo_calibration(demo: Path) -> None:
    calibration = load_calibration(demo_files().calibration)
    digest = calibration_hash(calibration.to_dict())
    with Archive.open(demo, read_only=True) as archive:
        assert archive.list_calibrations() == [digest]
        snapshots = archive.all_snapshots()
    assert {s.calibration_hash for s in snapshots} == {digest}
    assert {s.processor for s in snapshots} == {PROCESSOR}
    assert {s.sensitometer for s in snapshots} == {SENSITOMETER}
    assert {s.operator for s in snapshots} <= {SCENARIO["physicist"], SCENARIO["technologist"]}


def test_trend_values_are_the_stored_figures(demo: Path) -> None:
    with Archive.open(demo, read_only=True) as archive:
        current = archive.list_snapshots()
        for figure in FIGURES:
            points = archive.trend(figure)
            assert len(points) == sum(getattr(s, figure) is not None for s in current)
            for point in points:
                stored = archive.get_snapshot(point.snapshot_id)
                assert point.date == stored.date and point.lot == stored.lot_id
                if figure not in ("mid_density", "density_difference"):
                    assert point.value == getattr(stored.figures, figure)
                    continue
                # Read at the lot's kept steps (common practice: the QC steps, once picked, are kept).
                md_step, hi_step, lo_step = archive.lot_qc_steps(stored.lot_id)
                od = {s.step: s.od for s in stored.strip.steps}
                expected = od[md_step] if figure == "mid_density" else od[hi_step] - od[lo_step]
                assert point.value == pytest.approx(expected, abs=1e-12)
        # Speed, contrast and the QC densities are read on every strip.
        for figure in ("base_fog", "speed_log_exposure", "average_gradient", "mid_density", "density_difference"):
            assert len(archive.trend(figure)) == len(current)


def test_snapshots_are_the_pipelines_reading_of_the_scans_they_name(demo: Path) -> None:
    calibration = load_calibration(demo_files().calibration)
    with Archive.open(demo, read_only=True) as archive:
        first = archive.get_snapshot(1)
        siblings = [s for s in archive.all_snapshots() if s.scan.sha256 == first.scan.sha256]
    path = Path(first.scan.path)
    assert path.parent == demo.parent / "demo_scans"
    # sha256 of the file's bytes (FIPS 180-4, via hashlib) is what the snapshot keeps.
    assert hashlib.sha256(path.read_bytes()).hexdigest() == first.scan.sha256
    again = analyze_scan(path, calibration=calibration, options=AnalysisOptions(n_steps=21))
    assert len(siblings) == len(again.strips) == STRIPS_PER_SCAN
    for stored, fresh in zip(sorted(siblings, key=lambda s: s.strip.index), again.strips):
        # Compared as stored: the archive keeps the records' own JSON form (rounded there).
        assert stored.strip.to_dict() == fresh.to_dict()


def test_the_demo_has_one_revision_and_one_retirement(demo: Path) -> None:
    with Archive.open(demo, read_only=True) as archive:
        everything = archive.list_snapshots(include_retired=True, include_superseded=True)
        revisions = [s for s in everything if s.revises is not None]
        retired = [s for s in everything if s.retired_at is not None]
        assert len(revisions) == 1 and len(retired) == 1
        chain = archive.history(revisions[0].id)
        assert [s.id for s in chain] == [revisions[0].revises, revisions[0].id]
        assert chain[1].revision_reason == REVISED.reason
        assert (chain[0].date, chain[0].lot_id, chain[0].strip.index) == (
            REVISED.day.isoformat(), REVISED.lot, REVISED.strip)
        excluded = [s.step for s in chain[1].strip.steps if s.excluded]
        assert excluded == [REVISED.step] and not any(s.excluded for s in chain[0].strip.steps)
        assert retired[0].retired_reason == RETIRED.reason and retired[0].lot_id == RETIRED.lot
        assert retired[0].id not in {s.id for s in archive.list_snapshots()}


def test_the_drift_and_the_lot_difference_show_on_the_trend(demo: Path) -> None:
    by_day: dict[tuple[str, str], list[float]] = {}
    with Archive.open(demo, read_only=True) as archive:
        for point in archive.trend("speed_log_exposure"):
            by_day.setdefault((point.lot, point.date), []).append(point.value)
    mean = {key: sum(v) / len(v) for key, v in by_day.items()}
    lot_a = sorted((day, value) for (lot, day), value in mean.items() if lot == "M-2610-A")
    # The developer tires until the change of 17 November: speed points creep to higher log E.
    assert lot_a[4][1] > lot_a[0][1]
    assert lot_a[5][1] < lot_a[4][1]  # fresh chemistry
    # The new lot sits ~0.05 log E to the left (faster), as the scenario's film models say.
    shift = LOT_FILMS["M-2702-B"].log_e_mid - LOT_FILMS["M-2610-A"].log_e_mid
    for day in ("2026-11-24", "2026-12-01"):
        assert mean[("M-2702-B", day)] - mean[("M-2610-A", day)] == pytest.approx(shift, abs=0.02)


def _content(path: Path) -> list[tuple]:
    with Archive.open(path, read_only=True) as archive:
        return [(s.id, s.lot_id, s.date, s.strip.index, s.operator, s.processor, s.scan.sha256,
                 s.calibration_hash, s.strip.to_dict(), s.revises, s.revision_reason, s.retired_reason)
                for s in archive.all_snapshots()]


def test_two_builds_hold_the_same_readings(demo: Path, tmp_path: Path) -> None:
    second = build_demo_archive(tmp_path / "again.sqlite3")
    assert second == tmp_path / "again.sqlite3"
    assert _content(second) == _content(demo)


def test_it_never_writes_where_the_users_archive_lives(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    real = tmp_path / "home" / "archive.sqlite3"
    monkeypatch.setenv("STRIPSCAN_ARCHIVE", str(real))
    for target in (real, real.parent, real.parent / "demo.sqlite3"):
        with pytest.raises(ArchiveError, match="your own archive"):
            build_demo_archive(target)
    assert not real.parent.exists()


def test_it_refuses_an_existing_file_and_leaves_it_alone(tmp_path: Path) -> None:
    existing = tmp_path / "mine.sqlite3"
    existing.write_bytes(b"someone's file")
    with pytest.raises(ArchiveError, match="already exists"):
        build_demo_archive(existing)
    assert existing.read_bytes() == b"someone's file"
    assert not (tmp_path / "demo_scans").exists()


def test_the_demo_archive_and_its_qc_month_verify_clean(demo: Path, tmp_path: Path,
                                                       capsys: pytest.CaptureFixture[str]) -> None:
    """Issue 15 item 20: the demo archive, with the demo QC month added, walks its hash chain clean."""
    import shutil

    from stripscan.cli.main import main

    copy = tmp_path / "demo-with-qc.sqlite3"
    shutil.copyfile(demo, copy)
    assert main(["qc", "demo", "--archive", str(copy)]) == 0
    capsys.readouterr()
    assert main(["archive", "verify", "--archive", str(copy)]) == 0
    out = capsys.readouterr().out
    with Archive.open(copy) as archive:
        report = archive.verify()
        stored = len(archive.all_snapshots()) + len(archive.list_qc_entries())
    assert report.ok and report.records > stored and f"all {report.records} records match" in out
