"""``stripscan archive copy SOURCE DEST``: a whole archive between a file and a server, either way.

The measure of a copy is the archive's own JSON export, which holds every
record with its id, times and links: the copy's export must equal the
source's byte for byte.  Nothing half-written may be visible: a client
killed half way leaves no file under the destination's name and no row on
the server, and the copy can be run again.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import pytest
from archive_factory import make_draft, populate
from pg_rows import filled_archive

from stripscan.archive import Archive
from stripscan.archive.copying import TABLES
from stripscan.cli.main import main
from stripscan.services.demo_archive import build_demo_archive

REPO = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def every_kind(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A small file archive with a record of every kind (revisions, retirement, QC repeats, corrections...)."""
    return filled_archive(tmp_path_factory.mktemp("copy") / "linden-vale.sqlite3")


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_demo_archive(tmp_path_factory.mktemp("copy-demo") / "demo.sqlite3")


@pytest.fixture(scope="module")
def large(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Enough snapshots (about 30 000 step rows) that a copy takes a moment to kill it in."""
    path = tmp_path_factory.mktemp("copy-large") / "large.sqlite3"
    with Archive.open(path) as archive:
        populate(archive)
        archive.add_snapshots(make_draft(n) for n in range(1500))
    return path


def _export(location: str | Path, out: Path) -> bytes:
    assert main(["archive", "export", "--format", "json", "-o", str(out), "--archive", str(location)]) == 0
    return out.read_bytes()


def _rows_on_server(pg_database: Any) -> int:
    with pg_database.connect() as conn:
        return sum(conn.execute(f"SELECT count(*) FROM {table}").fetchone()[0] for table in TABLES)


def _empty_database(pg_server: Any, name: str) -> str:
    """A database with no tables at all, as an administrator makes it (the fixture's copy has the schema)."""
    pg_server.create_database(name)
    return pg_server.url(name)


def test_file_to_server_to_file_keeps_every_record(every_kind: Path, pg_database: Any, tmp_path: Path,
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["archive", "copy", str(every_kind), pg_database.url]) == 0
    out = capsys.readouterr().out
    assert out.startswith(f"copied {every_kind} to postgresql://")
    assert "3 snapshots, 1 notes, 4 QC entries, 1 QC events, 1 crossovers" in out
    back = tmp_path / "offline.sqlite3"
    assert main(["archive", "copy", pg_database.url, str(back)]) == 0
    source = _export(every_kind, tmp_path / "source.json")
    assert _export(pg_database.url, tmp_path / "server.json") == source
    assert _export(back, tmp_path / "back.json") == source
    for where in (pg_database.url, back):
        with Archive.open(where) as archive:
            assert archive.verify().ok
            # The copy is a working archive: the next id follows the copied ones.
            assert archive.add_snapshot(make_draft(9)).id == 4
    assert sorted(p.name for p in tmp_path.iterdir()) == ["back.json", "offline.sqlite3", "server.json",
                                                          "source.json"]


def test_a_server_database_without_tables_gets_them(every_kind: Path, pg_server: Any, tmp_path: Path) -> None:
    url = _empty_database(pg_server, f"copy_bare_{os.getpid()}")
    try:
        assert main(["archive", "copy", str(every_kind), url]) == 0
        assert _export(url, tmp_path / "server.json") == _export(every_kind, tmp_path / "source.json")
    finally:
        pg_server.drop_database(url.rsplit("/", 1)[1].split("?")[0])


def test_demo_archive_round_trip_sqlite_server_sqlite_is_identical(demo: Path, pg_database: Any,
                                                                   tmp_path: Path) -> None:
    back = tmp_path / "back.sqlite3"
    assert main(["archive", "copy", str(demo), pg_database.url]) == 0
    assert main(["archive", "copy", pg_database.url, str(back)]) == 0
    source = _export(demo, tmp_path / "demo.json")
    assert _export(pg_database.url, tmp_path / "server.json") == source
    assert _export(back, tmp_path / "back.json") == source
    with Archive.open(back) as archive:
        assert archive.verify().ok


def test_file_to_file(every_kind: Path, tmp_path: Path) -> None:
    copy = tmp_path / "site" / "copy.sqlite3"
    copy.parent.mkdir()
    assert main(["archive", "copy", f"sqlite:///{every_kind}", str(copy)]) == 0
    assert _export(copy, tmp_path / "copy.json") == _export(every_kind, tmp_path / "source.json")
    assert [p.name for p in copy.parent.iterdir()] == ["copy.sqlite3"]


def test_an_archive_made_by_init_may_be_filled(every_kind: Path, tmp_path: Path) -> None:
    copy = tmp_path / "new.sqlite3"
    assert main(["archive", "init", str(copy)]) == 0
    assert main(["archive", "copy", str(every_kind), str(copy)]) == 0
    assert _export(copy, tmp_path / "copy.json") == _export(every_kind, tmp_path / "source.json")


def test_a_destination_with_records_is_refused_and_left_alone(every_kind: Path, pg_database: Any, tmp_path: Path,
                                                             capsys: pytest.CaptureFixture[str]) -> None:
    other = tmp_path / "other.sqlite3"
    with Archive.open(other) as archive:
        populate(archive)
    before = other.read_bytes()
    assert main(["archive", "copy", str(every_kind), str(other)]) == 1
    err = capsys.readouterr().err
    assert err == f"stripscan: error: {other} already holds records; copy into a new, empty archive\n"
    assert other.read_bytes() == before
    with Archive.open(pg_database.url) as archive:
        populate(archive)
    rows = _rows_on_server(pg_database)
    assert main(["archive", "copy", str(every_kind), pg_database.url]) == 1
    assert "already holds records; copy into a new, empty archive" in capsys.readouterr().err
    assert _rows_on_server(pg_database) == rows


def test_plain_refusals(every_kind: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["archive", "copy", str(every_kind), str(every_kind)]) == 1
    assert "the copy and the archive copied are the same place" in capsys.readouterr().err
    missing = tmp_path / "nowhere.sqlite3"
    assert main(["archive", "copy", str(missing), str(tmp_path / "copy.sqlite3")]) == 1
    assert capsys.readouterr().err == f"stripscan: error: {missing} does not exist\n"
    assert main(["archive", "copy", str(every_kind), str(tmp_path)]) == 1
    assert capsys.readouterr().err == f"stripscan: error: {tmp_path} is a folder; give the copy a file name\n"
    assert main(["archive", "copy", str(every_kind), str(tmp_path / "no" / "copy.sqlite3")]) == 1
    assert "does not exist" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == []


# ------------------------------------------------------------ killed half way

def _start_copy(source: Path, dest: str | Path) -> subprocess.Popen[str]:
    env = dict(os.environ, PYTHONPATH=str(REPO))
    return subprocess.Popen([sys.executable, "-m", "stripscan", "archive", "copy", str(source), str(dest)],
                            env=env, text=True, stdout=subprocess.PIPE, stderr=subprocess.PIPE)


def _kill_when(child: subprocess.Popen[str], ready: Any) -> None:
    deadline = time.monotonic() + 120
    while not ready():
        assert child.poll() is None, child.communicate()
        assert time.monotonic() < deadline, "the copy never got going"
        time.sleep(0.005)
    os.kill(child.pid, signal.SIGKILL)
    child.communicate()
    assert child.returncode == -signal.SIGKILL


@pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL is POSIX")
def test_a_copy_to_a_server_killed_half_way_leaves_nothing_and_runs_again(large: Path, pg_database: Any,
                                                                         tmp_path: Path) -> None:
    watcher = pg_database.connect()

    def copying() -> bool:
        # Past the snapshots, in the middle of their steps.
        return watcher.execute("SELECT count(*) FROM pg_stat_activity WHERE datname = %s AND state = 'active' "
                               "AND query LIKE 'INSERT INTO snapshot_steps%%'", (pg_database.name,)).fetchone()[0] > 0

    with watcher:
        _kill_when(_start_copy(large, pg_database.url), copying)
    assert _rows_on_server(pg_database) == 0
    assert main(["archive", "copy", str(large), pg_database.url]) == 0
    assert _export(pg_database.url, tmp_path / "server.json") == _export(large, tmp_path / "source.json")


@pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL is POSIX")
def test_a_copy_to_a_file_killed_half_way_leaves_nothing_and_runs_again(large: Path, tmp_path: Path) -> None:
    site = tmp_path / "site"
    site.mkdir()
    dest = site / "offline.sqlite3"

    def copying() -> bool:
        # The copy's rows go to the write-ahead log of the file under its temporary name.
        return any(p.name.endswith(".partial-wal") and p.stat().st_size > 1_000_000 for p in site.iterdir())

    _kill_when(_start_copy(large, dest), copying)
    assert not dest.exists()
    assert all(p.name.startswith(".offline.sqlite3.") for p in site.iterdir())  # hidden leftovers only
    assert main(["archive", "copy", str(large), str(dest)]) == 0
    assert _export(dest, tmp_path / "copy.json") == _export(large, tmp_path / "source.json")


def test_copying_in_needs_the_physicist_role_and_copying_out_the_reader_role(
        every_kind: Path, pg_database: Any, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["archive", "init", pg_database.url, "--roles"]) == 0
    urls = {}
    with pg_database.connect() as conn:
        for kind in ("reader", "recorder"):
            login = f"{pg_database.name}_{kind}_ann"
            conn.execute(f'CREATE ROLE "{login}" LOGIN IN ROLE "{pg_database.name}_{kind}"')
            urls[kind] = pg_database.server.url(pg_database.name, user=login)
    capsys.readouterr()
    assert main(["archive", "copy", str(every_kind), urls["recorder"]]) == 1
    err = capsys.readouterr().err
    assert err.startswith(f"stripscan: error: {urls['recorder']}: cannot copy {every_kind} into it: your login on "
                          "the server may not add film types; the archive's physicist role may") and err.count("\n") == 1
    assert _rows_on_server(pg_database) == 0
    assert main(["archive", "copy", str(every_kind), pg_database.url]) == 0
    assert main(["archive", "copy", urls["reader"], str(tmp_path / "out.sqlite3")]) == 0
    assert _export(tmp_path / "out.sqlite3", tmp_path / "out.json") == _export(every_kind, tmp_path / "in.json")
