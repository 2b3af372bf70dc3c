"""Every command that takes ``--archive`` works on a server location, and says what it says on a file.

The demo (two lots of strips, and Processor 1's QC month) is kept in a file
and copied to a fresh server database for each command; the command runs
on both, and its exit status, its output (locations aside) and the files it
writes must agree.  What is compared is the program with itself, the file
archive being the reference the server archive must match.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path
from typing import Any

import pytest

from stripscan.archive.copying import copy_location
from stripscan.cli.main import main
from stripscan.services.demo_archive import PROCESSOR, build_demo_archive
from stripscan.sim.demo_data import demo_files

LOT_A, LOT_B = "M-2610-A", "M-2702-B"


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = build_demo_archive(tmp_path_factory.mktemp("demo") / "demo.sqlite3")
    assert main(["qc", "demo", "--archive", str(path)]) == 0
    return path


def _files() -> dict[str, str]:
    files = demo_files()
    return {"CAL": str(files.calibration), "LOT_SCAN": str(files.lot_a_scan),
            "DAILY": str(files.daily_scans[-1][1])}


# Each command as a user types it; ARCHIVE, OUT and the _files() names are filled in.
COMMANDS: dict[str, list[str]] = {
    "archive list": ["archive", "list", "--all"],
    "archive show": ["archive", "show", "3"],
    "archive show --json": ["archive", "show", "3", "--json"],
    "archive lots": ["archive", "lots"],
    "archive add": ["archive", "add", "LOT_SCAN", "--lot", LOT_A, "--calibration", "CAL", "--again",
                    "--processor", PROCESSOR, "--processed", "2026-12-02", "--scanned", "2026-12-02"],
    "archive backup": ["archive", "backup", "OUT/backup.sqlite3"],
    "archive export json": ["archive", "export", "--format", "json", "-o", "OUT/all.json"],
    "archive export csv": ["archive", "export", "--format", "csv", "--all", "-o", "OUT/figures.csv"],
    "archive verify": ["archive", "verify"],
    "archive retire": ["archive", "retire", "3", "--reason", "strip fogged"],
    "archive revise": ["archive", "revise", "4", "--operator", "Mira Testwood", "--reason", "wrong name"],
    "archive lot": ["archive", "lot", LOT_B, "--received", "2026-10-21"],
    "report snapshots": ["report", "snapshot:1,2", "-o", "OUT/snapshots.pdf"],
    "report compare": ["report", "--compare", f"lot:{LOT_A}", f"lot:{LOT_B}", "-o", "OUT/lots.pdf"],
    "report qc": ["report", "--qc", PROCESSOR, "--month", "2026-11", "-o", "OUT/qc.pdf"],
    "compare": ["compare", f"lot:{LOT_A}", f"lot:{LOT_B}"],
    "compare --json": ["compare", f"lot:{LOT_A}", f"lot:{LOT_B}", "--json"],
    # The demo's last day: three strips of lot A (38-40) and two of lot B (41, 42) processed together.
    "crossover": ["crossover", "--processor", PROCESSOR, "--old", "snapshot:38,39", "--new", "snapshot:41,42",
                  "--strips", "2", "--date", "2026-12-01"],
    "qc add scan": ["qc", "add", "DAILY", "--processor", PROCESSOR, "--date", "2026-12-01", "--calibration", "CAL"],
    "qc add values": ["qc", "add", "--processor", PROCESSOR, "--date", "2026-12-01", "--base-fog", "0.19",
                      "--mid-density", "1.03", "--density-difference", "1.90"],
    "qc list": ["qc", "list", "--processor", PROCESSOR],
    "qc status": ["qc", "status", "--processor", PROCESSOR, "--json"],
    "qc chart": ["qc", "chart", "--processor", PROCESSOR, "-o", "OUT/chart.png"],
    "qc event": ["qc", "event", "--processor", PROCESSOR, "--date", "2026-12-01", "--kind", "service",
                 "--note", "rollers cleaned"],
    "qc limits": ["qc", "limits", "--processor", PROCESSOR, "--warning", "0.08", "--reason", "tighter warning"],
}

_STORED_AT = re.compile(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(\.\d+)?Z")

# Files whose bytes must agree (a picture or PDF may name its archive; those must just be there).
SAME_BYTES = (".json", ".csv")


def _run(capsys: pytest.CaptureFixture[str], argv: list[str], archive: str, out: Path) -> tuple[int, str, str]:
    names = _files()
    filled = [str(out) + a[3:] if a.startswith("OUT/") else names.get(a, a) for a in argv]
    code = main([*filled, "--archive", archive])
    captured = capsys.readouterr()

    def plain(text: str) -> str:
        # A time of storing is the clock's (the two runs are a moment apart).
        return _STORED_AT.sub("TIME", text.replace(archive, "ARCHIVE").replace(str(out), "OUT"))

    return code, plain(captured.out), plain(captured.err)


@pytest.mark.parametrize("name", list(COMMANDS))
def test_command_on_a_server_as_on_a_file(name: str, demo: Path, pg_database: Any, tmp_path: Path,
                                          capsys: pytest.CaptureFixture[str]) -> None:
    file = tmp_path / "demo.sqlite3"
    shutil.copyfile(demo, file)
    copy_location(demo, pg_database.url)
    on_file, on_server = tmp_path / "file", tmp_path / "server"
    on_file.mkdir()
    on_server.mkdir()
    argv = COMMANDS[name]
    expected = _run(capsys, argv, str(file), on_file)
    got = _run(capsys, argv, pg_database.url, on_server)
    assert expected[0] == 0, expected
    assert got == expected
    written = sorted(p.name for p in on_file.iterdir())
    assert sorted(p.name for p in on_server.iterdir()) == written
    for item in written:
        if item.endswith(SAME_BYTES):
            assert (on_server / item).read_bytes() == (on_file / item).read_bytes(), item
        else:
            assert (on_server / item).stat().st_size > 0
    # What the command stored, the server stored too.
    assert _export(capsys, str(file), tmp_path / "f.json") == _export(capsys, pg_database.url, tmp_path / "s.json")


def _export(capsys: pytest.CaptureFixture[str], archive: str, out: Path) -> Any:
    assert main(["archive", "export", "--format", "json", "-o", str(out), "--archive", archive]) == 0
    capsys.readouterr()
    # A crossover's record names the archive its strips were read from.
    data = json.loads(out.read_text(encoding="utf-8").replace(archive, "ARCHIVE"))
    # Times of storing are the clock's; both runs store the same records at nearly the same time.
    for section in data.values():
        if isinstance(section, list):
            for item in section:
                if isinstance(item, dict):
                    for key in ("created_at", "recorded_at", "updated_at", "retired_at"):
                        if key in item and item[key] is not None:
                            item[key] = item[key][:10]
    return data


@pytest.mark.parametrize("argv", [
    ["report", "snapshot:1,2", "-o", "OUT/snapshots.pdf"],
    ["archive", "list"],
    ["qc", "status", "--processor", PROCESSOR],
    ["compare", f"lot:{LOT_A}", f"lot:{LOT_B}"],
])
def test_a_server_named_by_the_environment(argv: list[str], demo: Path, pg_database: Any, tmp_path: Path,
                                           monkeypatch: pytest.MonkeyPatch,
                                           capsys: pytest.CaptureFixture[str]) -> None:
    copy_location(demo, pg_database.url)
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("STRIPSCAN_ARCHIVE", pg_database.url)
    assert main([str(tmp_path) + a[3:] if a.startswith("OUT/") else a for a in argv]) == 0, capsys.readouterr()
    # Nothing was taken for a file named like the server.
    assert [p.name for p in tmp_path.iterdir()] == (["snapshots.pdf"] if argv[0] == "report" else [])


def test_help_names_the_default_file_when_the_environment_names_a_server(monkeypatch: pytest.MonkeyPatch,
                                                                         capsys: pytest.CaptureFixture[str]) -> None:
    from stripscan.archive.service import user_data_folder

    monkeypatch.setenv("STRIPSCAN_ARCHIVE", "postgresql://ann@db.example/lots")
    with pytest.raises(SystemExit):
        main(["archive", "list", "--help"])
    help_text = " ".join(capsys.readouterr().out.split())
    assert f"(default: $STRIPSCAN_ARCHIVE or {user_data_folder() / 'archive.sqlite3'})" in help_text


def test_a_server_named_by_a_libpq_service(pg_database: Any, tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                          capsys: pytest.CaptureFixture[str]) -> None:
    # README "Shared archive": postgresql:///?service=NAME reads pg_service.conf (libpq's own file format).
    server = pg_database.server
    services = tmp_path / "pg_service.conf"
    services.write_text(f"[physics]\nhost={server.socket_dir}\nport=5432\ndbname={pg_database.name}\n"
                        "user=postgres\n", encoding="utf-8")
    monkeypatch.setenv("PGSERVICEFILE", str(services))
    monkeypatch.setenv("STRIPSCAN_ARCHIVE", "postgresql:///?service=physics")
    assert main(["qc", "add", "--processor", PROCESSOR, "--new-processor", "--date", "2026-11-02",
                 "--base-fog", "0.19", "--mid-density", "1.02", "--density-difference", "1.89"]) == 0
    assert "stored entry 1: 'Processor 1'" in capsys.readouterr().out
    assert main(["qc", "list", "--processor", PROCESSOR, "--archive", pg_database.url]) == 0
    assert "2026-11-02" in capsys.readouterr().out
