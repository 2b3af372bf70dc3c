"""The ``archive`` command group, run through a small parser built with :func:`register`.

``archive add`` needs the scan analysis and is covered at the API level
(``Archive.add_analysis``) instead.
"""

from __future__ import annotations

import argparse
import csv
import json
from pathlib import Path

import pytest
from archive_factory import LOTS, make_draft, make_strip

from stripscan.archive import Archive
from stripscan.cli.archive import register


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(prog="stripscan")
    register(parser.add_subparsers(dest="command", required=True))
    args = parser.parse_args(argv)
    return args.func(args)


@pytest.fixture
def stocked(archive: Archive, archive_path: Path) -> Path:
    archive.add_snapshots(make_draft(n, lot=LOTS[n % 2].lot_id) for n in range(4))
    archive.add_snapshot(make_draft(4, strip=make_strip(1, nan_step=3)))
    archive.revise(2, make_draft(1, notes="rescanned"), "dust on the glass")
    archive.retire(3, "strip fogged")
    archive.add_note(1, "agrees with densitometer", "Mira Testwood")
    return archive_path


def _lines(text: str) -> list[str]:
    return [line for line in text.splitlines() if line.strip()]


def test_list_shows_current_snapshots(stocked: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["archive", "list", "--archive", str(stocked)]) == 0
    out = _lines(capsys.readouterr().out)
    assert out[0].split()[:5] == ["id", "date", "lot", "processor", "strip"]
    assert [line.split()[0] for line in out[1:-1]] == ["1", "6", "4", "5"]  # film-date order
    assert out[-1].startswith("4 snapshot(s); ")
    assert main(["archive", "list", "--all", "--lot", LOTS[1].lot_id, "--archive", str(stocked)]) == 0
    out = _lines(capsys.readouterr().out)
    rows = {line.split()[0]: line for line in out[1:-1]}
    assert set(rows) == {"2", "4"}
    assert rows["2"].endswith("revised by snapshot 6")


def test_show_prints_figures_steps_chain_and_notes(stocked: Path, capsys: pytest.CaptureFixture[str]) -> None:
    with Archive.open(stocked) as archive:
        snapshot = archive.get_snapshot(6)
    assert main(["archive", "show", "6", "--archive", str(stocked)]) == 0
    out = capsys.readouterr().out
    assert out.startswith("snapshot 6 (current)")
    assert "corrects snapshot 2: dust on the glass" in out
    assert "revisions: 2 -> 6" in out
    assert f"base+fog {snapshot.figures.base_fog:.3f} OD" in out
    assert len([line for line in out.splitlines() if line.strip().split()[:1] in (["1"], ["21"])]) == 2
    assert main(["archive", "show", "5", "--archive", str(stocked)]) == 0
    assert "excluded" in capsys.readouterr().out  # the step marked unreadable


def test_show_says_when_a_snapshot_was_read_uncalibrated(stocked: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # DESIGN: a flatbed scanner is not a densitometer; densities read without a tablet
    # calibration (direct mode) must never pass for calibrated ones.
    from stripscan import CAUTION

    with Archive.open(stocked) as archive:
        direct = archive.add_snapshot(make_draft(9, calibration={"mode": "direct", "i0": 0.9, "dark": 0.0}))
        calibrated = archive.get_snapshot(1)
    assert main(["archive", "show", str(direct.id), "--archive", str(stocked)]) == 0
    out = capsys.readouterr().out
    assert "calibration NONE: UNCALIBRATED direct mode" in out and CAUTION in out
    assert main(["archive", "show", "1", "--archive", str(stocked)]) == 0
    out = capsys.readouterr().out
    assert f"calibration {calibrated.calibration_hash}" in out and "UNCALIBRATED" not in out


def test_show_json_is_the_stored_record(stocked: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["archive", "show", "1", "--json", "--archive", str(stocked)]) == 0
    data = json.loads(capsys.readouterr().out)
    with Archive.open(stocked) as archive:
        expected = json.loads(json.dumps(archive.get_snapshot(1).to_dict()))
    assert {k: v for k, v in data.items() if k not in ("history", "notes_added")} == expected
    assert data["history"] == [1] and data["notes_added"][0]["text"] == "agrees with densitometer"


def test_lots_lists_counts(stocked: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["archive", "lots", "--archive", str(stocked)]) == 0
    out = _lines(capsys.readouterr().out)
    assert out[0].split() == ["lot", "film", "type", "expires", "received", "snapshots", "first", "last"]
    counts = {line.split()[0]: line.split()[5] for line in out[1:]}  # film type "Alder G" is two words
    with Archive.open(stocked) as archive:
        assert counts == {s.lot.lot_id: str(s.snapshot_count) for s in archive.list_lots()}


def test_export_import_and_backup(stocked: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    exported, table = tmp_path / "out" / "all.json", tmp_path / "out" / "figures.csv"
    exported.parent.mkdir()
    assert main(["archive", "export", "--format", "json", "-o", str(exported), "--archive", str(stocked)]) == 0
    assert main(["archive", "export", "--format", "csv", "-o", str(table), "--archive", str(stocked)]) == 0
    with table.open(encoding="utf-8-sig", newline="") as handle:
        assert len(list(csv.reader(handle))) == 1 + 4
    other = tmp_path / "second site.sqlite3"
    assert main(["archive", "import", str(exported), "--archive", str(other)]) == 0
    out = capsys.readouterr().out
    assert f"imported {exported}: 1 film types, 2 emulsion lots" in out and "6 snapshots" in out
    backup = tmp_path / "nightly.sqlite3"
    assert main(["archive", "backup", str(backup), "--archive", str(other)]) == 0
    with Archive.open(backup) as copy, Archive.open(stocked) as original:
        assert copy.export_json(tmp_path / "b.json").read_bytes() == original.export_json(tmp_path / "o.json").read_bytes()
    assert main(["archive", "import", str(exported), "--archive", str(other)]) == 0
    assert "nothing new" in capsys.readouterr().out


@pytest.mark.parametrize("argv, message", [
    (["archive", "show", "99"], "snapshot 99 is not in the archive"),
    (["archive", "list", "--lot", "NOPE"], "lot 'NOPE' is not in the archive"),
    (["archive", "import", "{tmp}/missing.json"], "missing.json: cannot read: No such file or directory"),
    (["archive", "backup", "{archive}"], "a backup cannot overwrite the archive itself"),
    (["archive", "backup", "{tmp}/cal.json"], "cal.json already exists; choose another name"),
    (["archive", "export", "--format", "json", "--all", "-o", "{tmp}/x.json"], "--all applies to CSV only"),
])
def test_errors_are_one_line_on_stderr(stocked: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                       argv: list[str], message: str) -> None:
    (tmp_path / "cal.json").write_text("{}", encoding="utf-8")
    argv = [a.format(tmp=tmp_path, archive=stocked) for a in argv] + ["--archive", str(stocked)]
    assert main(argv) == 1
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("stripscan: error: ") and message in lines[0]


def test_damaged_or_missing_archive_is_named(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    damaged = tmp_path / "damaged.sqlite3"
    damaged.write_bytes(b"\x00garbage" * 100)
    assert main(["archive", "list", "--archive", str(damaged)]) == 1
    assert capsys.readouterr().err.rstrip("\n").startswith(f"stripscan: error: {damaged} is not an SQLite database")
    missing = tmp_path / "typo.sqlite3"
    assert main(["archive", "lots", "--archive", str(missing)]) == 1
    assert capsys.readouterr().err.startswith(f"stripscan: error: {missing} does not exist: there is no archive")
    assert not missing.exists()  # reading commands never create an archive


def test_default_archive_comes_from_the_environment(stocked: Path, monkeypatch: pytest.MonkeyPatch,
                                                    capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setenv("STRIPSCAN_ARCHIVE", str(stocked))
    assert main(["archive", "lots"]) == 0
    assert LOTS[0].lot_id in capsys.readouterr().out


def test_add_refuses_a_bad_calibration_file_or_date(stocked: Path, tmp_path: Path,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    bad = tmp_path / "cal.json"
    bad.write_text("{not json", encoding="utf-8")
    code = main(["archive", "add", str(tmp_path / "scan.tif"), "--lot", "ALD-1", "--calibration", str(bad),
                 "--archive", str(stocked)])
    assert code == 1
    err = capsys.readouterr().err
    assert err.startswith(f"stripscan: error: {bad}") and err.count("\n") == 1
    with pytest.raises(SystemExit):
        main(["archive", "add", "scan.tif", "--lot", "ALD-1", "--exposed", "3/10/2024"])
    assert "is not a date written YYYY-MM-DD" in capsys.readouterr().err


def _columns(text: str) -> list[dict[str, str]]:
    """The rows of a printed table by column title (titles are set apart by two spaces or more)."""
    import re

    lines = _lines(text)
    starts = [m.start() for m in re.finditer(r"(?:^|(?<=  ))\S", lines[0])]
    bounds = list(zip(starts, [*starts[1:], None]))
    titles = [lines[0][a:b].strip() for a, b in bounds]
    return [{t: line[a:b].strip() for t, (a, b) in zip(titles, bounds)} for line in lines[1:-1]]


def test_list_shows_the_steps_and_reads_a_lot_at_its_kept_steps(archive: Archive, archive_path: Path,
                                                                 capsys: pytest.CaptureFixture[str]) -> None:
    """Issue 13, wrong output 3: ``archive list`` shows the step numbers of mid-density and density difference,
    and by default reads every strip of a lot at the lot's kept steps (as the trends do)."""
    lot = LOTS[0].lot_id
    # The first strip chooses its steps; a faster later strip picks neighbouring steps on its own.
    archive.add_snapshot(make_draft(0, strip=make_strip(1, centre=1.55)))
    archive.add_snapshot(make_draft(1, strip=make_strip(1, centre=1.30)))
    first, later = (archive.get_snapshot(i) for i in (1, 2))
    assert first.figures.mid_density_step != later.figures.mid_density_step
    kept = (first.figures.mid_density_step, first.figures.dd_high_step, first.figures.dd_low_step)
    assert main(["archive", "list", "--lot", lot, "--archive", str(archive_path)]) == 0
    out = capsys.readouterr().out
    rows = {r["id"]: r for r in _columns(out)}
    assert "lot's kept steps" in out
    od = {s.step: s.od for s in later.strip.steps}
    for row in rows.values():
        assert (row["MD step"], row["DD steps"]) == (str(kept[0]), f"{kept[1]}-{kept[2]}")
    # Printed to 0.01 OD, as a densitometer reads (common practice) and every report prints them.
    assert float(rows["2"]["mid-dens"]) == pytest.approx(od[kept[0]], abs=5e-3)
    assert float(rows["2"]["dens diff"]) == pytest.approx(od[kept[1]] - od[kept[2]], abs=5e-3)
    # Each strip's own choice, on request, with its own step numbers beside.
    assert main(["archive", "list", "--lot", lot, "--own-steps", "--archive", str(archive_path)]) == 0
    rows = {r["id"]: r for r in _columns(capsys.readouterr().out)}
    assert rows["2"]["MD step"] == str(later.figures.mid_density_step)
    assert float(rows["2"]["mid-dens"]) == pytest.approx(later.figures.mid_density, abs=5e-3)
