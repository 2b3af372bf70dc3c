"""Archive upkeep from the command line (issue 13, "Missing for the real job" item 1): lot details,
revising and retiring snapshots with a reason, and ``archive add`` reading strips as ``analyze`` does
(``--increment``, ``--exposures``, ``--sensitometer``, ``--low/--high``).

The scans are the bundled demo's (invented scenario, stripscan/sim/demo_data.py).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from stripscan.archive import Archive
from stripscan.cli.main import main
from stripscan.sim.demo_data import demo_files


def _run(capsys: pytest.CaptureFixture[str], *argv: object) -> str:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    assert code == 0, err
    return out


def _refused(capsys: pytest.CaptureFixture[str], *argv: object) -> str:
    code = main([str(a) for a in argv])
    _, err = capsys.readouterr()
    assert code == 1 and err.startswith("stripscan: error: "), err
    return err.strip()


@pytest.fixture(scope="module")
def files():
    return demo_files()


@pytest.fixture
def stocked(files, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> Path:
    path = tmp_path / "upkeep.sqlite3"
    _run(capsys, "archive", "add", files.lot_a_scan, "--archive", path, "--lot", "M-2610-A", "--calibration",
         files.calibration, "--processor", "Processor 1", "--processed", "2026-10-13")
    return path


def test_lot_details_are_stored_shown_and_filled_in_later(stocked: Path, capsys) -> None:
    out = _run(capsys, "archive", "lot", "M-2610-A", "--archive", stocked, "--film-type", "Green screen film",
               "--expires", "2027-06-30")
    assert "film type Green screen film; expires 2027-06-30; received -" in out
    _run(capsys, "archive", "lot", "M-2610-A", "--archive", stocked, "--received", "2026-10-01")
    lots = _run(capsys, "archive", "lots", "--archive", stocked).splitlines()
    assert lots[0].split()[:4] == ["lot", "film", "type", "expires"]
    row = next(line for line in lots if line.startswith("M-2610-A"))
    assert "Green screen film" in row and "2027-06-30" in row and "2026-10-01" in row and " 3 " in row
    with pytest.raises(SystemExit):
        main(["archive", "lot", "M-2610-A", "--archive", str(stocked), "--expires", "2027-02-30"])
    assert "date '2027-02-30' is not a calendar date" in capsys.readouterr().err
    with Archive.open(stocked) as archive:
        assert archive.get_lot("M-2610-A").expiry_date == "2027-06-30"
        assert archive.verify().ok


def test_a_snapshot_is_revised_and_another_retired_with_their_reasons(stocked: Path, capsys) -> None:
    out = _run(capsys, "archive", "revise", "1", "--archive", stocked, "--processed", "2026-10-12",
               "--reason", "processing date typed wrong")
    assert out.startswith("snapshot 4 revises snapshot 1 (processing date typed wrong)")
    out = _run(capsys, "archive", "retire", "2", "--archive", stocked, "--reason", "strip scratched")
    assert "snapshot 2 retired" in out and "strip scratched" in out
    listing = _run(capsys, "archive", "list", "--archive", stocked, "--all")
    rows = {line.split()[0]: line for line in listing.splitlines()[1:-1]}
    assert rows["1"].endswith("revised by snapshot 4") and "retired" in rows["2"] and "strip scratched" in rows["2"]
    with Archive.open(stocked) as archive:
        old, new = archive.get_snapshot(1), archive.get_snapshot(4)
        assert new.processed_on == "2026-10-12" and new.revises == 1
        assert new.strip == old.strip and new.calibration_hash == old.calibration_hash  # the reading is kept
    assert "already been revised by snapshot 4" in _refused(capsys, "archive", "retire", "1", "--archive", stocked,
                                                            "--reason", "again")
    assert "say what the revision changes" in _refused(capsys, "archive", "revise", "3", "--archive", stocked,
                                                       "--reason", "nothing")


def test_a_revision_can_read_the_strip_again(stocked: Path, files, capsys) -> None:
    out = _run(capsys, "archive", "revise", "3", files.lot_a_scan, "--archive", stocked, "--calibration",
               files.calibration, "--low", "0.50", "--high", "1.50", "--reason", "gradient between 0.5 and 1.5")
    assert out.startswith("snapshot 4 revises snapshot 3")
    with Archive.open(stocked) as archive:
        new = archive.get_snapshot(4)
    assert new.strip.index == 3
    assert (new.settings["figures"]["gradient_low"], new.settings["figures"]["gradient_high"]) == (0.5, 1.5)


def test_archive_add_reads_with_the_sensitometers_table_and_keeps_its_name(files, tmp_path: Path, capsys) -> None:
    path = tmp_path / "sensitometer.sqlite3"
    # An invented light sensitometer whose steps are not all 0.15 apart.
    table = np.round(np.arange(21) * 0.15 + np.where(np.arange(21) > 10, 0.02, 0.0), 4)
    exposures = tmp_path / "S-7.txt"
    exposures.write_text("# step log exposure\n" + "\n".join(f"{v:.4f}" for v in table) + "\n", encoding="utf-8")
    out = _run(capsys, "archive", "add", files.lot_a_scan, "--archive", path, "--lot", "M-2610-A", "--calibration",
               files.calibration, "--sensitometer", "S-7", "--exposures", exposures)
    assert "sensitometer 'S-7' was not in the archive; added it with the 21-step" in out
    # A second scan names the stored sensitometer only; its table is used again.
    _run(capsys, "archive", "add", files.lot_b_scan, "--archive", path, "--lot", "M-2702-B", "--calibration",
         files.calibration, "--sensitometer", "S-7")
    other = tmp_path / "other.txt"
    other.write_text("\n".join(f"{v:.4f}" for v in np.arange(21) * 0.15) + "\n", encoding="utf-8")
    line = _refused(capsys, "archive", "add", files.lot_b_scan, "--archive", path, "--lot", "M-2702-B",
                    "--calibration", files.calibration, "--sensitometer", "S-7", "--exposures", other)
    assert "differs from the one stored for sensitometer 'S-7'" in line
    with Archive.open(path) as archive:
        assert archive.get_sensitometer("S-7").log_exposures == tuple(table)
        snapshots = archive.all_snapshots()
    assert {s.sensitometer for s in snapshots} == {"S-7"}
    for snapshot in snapshots:
        assert [st.log_exposure for st in snapshot.strip.steps] == pytest.approx(table, abs=1e-9)


def test_archive_add_takes_the_increment_per_step(files, tmp_path: Path, capsys) -> None:
    path = tmp_path / "increment.sqlite3"
    _run(capsys, "archive", "add", files.lot_a_scan, "--archive", path, "--lot", "M-2610-A", "--calibration",
         files.calibration, "--increment", "0.30")
    with Archive.open(path) as archive:
        snapshot = archive.get_snapshot(1)
    steps = [st.log_exposure for st in snapshot.strip.steps]
    # common practice: an 11-step tablet's steps are 0.30 log E apart; here the step given is what is used
    assert np.diff(steps) == pytest.approx(np.full(len(steps) - 1, 0.30), abs=1e-9)
    assert snapshot.settings["increment"] == 0.30 and snapshot.sensitometer is None
