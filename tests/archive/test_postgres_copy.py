"""Copying a whole archive between a file and a server, and back.

Outside references: PostgreSQL 15 documentation, "Transactions" (a
transaction whose client is killed before COMMIT leaves nothing behind);
SQLite documentation, "Atomic Commit In SQLite".
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

from stripscan.archive import Archive, ArchiveError
from stripscan.archive import copying
from stripscan.archive.copying import copy_archive

pytestmark = pytest.mark.postgres

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]


def _exchange_fill() -> Any:
    import importlib.util

    spec = importlib.util.spec_from_file_location("exchange_tests", HERE / "test_archive_exchange.py")
    module = importlib.util.module_from_spec(spec)  # type: ignore[arg-type]
    spec.loader.exec_module(module)  # type: ignore[union-attr]
    return module._fill


@pytest.fixture
def year(tmp_path: Path) -> Path:
    """A file archive with every kind of record (the exchange tests' year in miniature)."""
    path = tmp_path / "year.sqlite3"
    with Archive.open(path) as archive:
        populate(archive)
        _exchange_fill()(archive)
    return path


def _export(location: Any, target: Path) -> bytes:
    with Archive.open(location, read_only=isinstance(location, Path)) as archive:
        return archive.export_json(target).read_bytes()


def test_file_to_server_to_file_keeps_every_record_and_the_export_byte_for_byte(year: Path, pg_database: Any,
                                                                                tmp_path: Path) -> None:
    with Archive.open(year) as source, Archive.open(pg_database.url) as server:
        counts = copy_archive(source, server)
        assert server.verify().head_sha256 == source.verify().head_sha256
    with Archive.open(pg_database.url) as server, Archive.open(tmp_path / "back.sqlite3") as back:
        assert copy_archive(server, back) == counts
    assert counts["snapshots"] == 9 and counts["qc_entries"] == 5 and counts["record_chain"] > 0
    exports = {name: _export(place, tmp_path / f"{name}.json")
               for name, place in (("file", year), ("server", pg_database.url), ("back", tmp_path / "back.sqlite3"))}
    assert exports["file"] == exports["server"] == exports["back"]


def test_a_server_archive_backs_up_to_a_checked_file(year: Path, pg_database: Any, tmp_path: Path) -> None:
    with Archive.open(year) as source, Archive.open(pg_database.url) as server:
        copy_archive(source, server)
        copy = server.backup(tmp_path / "offline.sqlite3")
        with pytest.raises(ArchiveError, match="already exists"):
            server.backup(copy)
    assert _export(copy, tmp_path / "a.json") == _export(year, tmp_path / "b.json")
    assert sorted(p.name for p in tmp_path.iterdir() if "partial" in p.name) == []


def test_a_copy_goes_only_into_an_empty_archive_and_fails_whole(year: Path, pg_database: Any,
                                                                monkeypatch: pytest.MonkeyPatch) -> None:
    with Archive.open(pg_database.url) as server:
        populate(server)
        with Archive.open(year) as source, pytest.raises(ArchiveError, match="already holds records; copy into "
                                                                               "a new, empty archive"):
            copy_archive(source, server)
    fresh = pg_database.server.create_database(pg_database.name + "_fresh", template="stripscan_template")
    try:
        url = pg_database.server.url(fresh)
        # A failure after half the tables: none of them stays.
        monkeypatch.setattr(copying, "TABLES", copying.TABLES[:7] + ("no_such_table",))
        with Archive.open(year) as source, Archive.open(url) as server, pytest.raises(ArchiveError):
            copy_archive(source, server)
        monkeypatch.undo()
        with Archive.open(url) as server:
            assert copying._stored(server) == 0
    finally:
        pg_database.server.drop_database(fresh)


# Copies a file archive into a server archive, stopping for good inside the transaction once the
# steps are being written, after saying so.
KILLED_COPY = r"""
import pathlib, sys, time
from stripscan.archive import Archive, copying

source, url, signal_file = sys.argv[1], sys.argv[2], pathlib.Path(sys.argv[3])
real = copying.copy_tables

def slow_copy(reading, writing):
    class Target:
        def executemany(self, sql, rows):
            writing.executemany(sql, rows)
            if "snapshot_steps" in sql:
                signal_file.write_text("inside the copy")
                time.sleep(600)
        def execute(self, *args):
            return writing.execute(*args)
    return real(reading, Target())

copying.copy_tables = slow_copy
with Archive.open(source) as src, Archive.open(url) as dst:
    copying.copy_archive(src, dst)
"""


@pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL is POSIX")
def test_a_copy_killed_half_way_leaves_nothing_and_runs_again(year: Path, pg_database: Any, tmp_path: Path) -> None:
    with Archive.open(year) as archive:
        archive.add_snapshots(make_draft(n) for n in range(10, 200))
    signal_file = tmp_path / "inside"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(REPO), str(HERE)]))
    child = subprocess.Popen([sys.executable, "-c", KILLED_COPY, str(year), pg_database.url, str(signal_file)],
                             env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 120
    while not signal_file.exists():
        assert child.poll() is None, child.communicate()
        assert time.monotonic() < deadline, "the copy never reached the steps"
        time.sleep(0.02)
    os.kill(child.pid, signal.SIGKILL)
    child.communicate()
    with Archive.open(pg_database.url) as server:
        assert copying._stored(server) == 0
        with Archive.open(year) as source:
            copy_archive(source, server)
        assert len(server.all_snapshots()) == 199 and server.verify().ok


def test_a_value_the_destination_cannot_hold_as_it_is_stops_the_copy(year: Path, pg_database: Any,
                                                                      tmp_path: Path) -> None:
    with Archive.open(year) as source, Archive.open(pg_database.url) as server:
        copy_archive(source, server)
    # The server keeps a NaN density (written here behind stripscan's back); SQLite stores NaN as NULL
    # (SQLite docs, c3ref/bind_blob.html), so the file copy would silently read otherwise.
    with pg_database.connect() as conn:
        conn.execute("INSERT INTO snapshot_steps VALUES (1, 99, 3.0, 'NaN', NULL, 10, 0, 1)")
    with Archive.open(pg_database.url) as server, Archive.open(tmp_path / "offline.sqlite3") as offline:
        with pytest.raises(ArchiveError, match="the copied snapshot_steps do not read back as they were read; "
                                               "nothing was stored"):
            copy_archive(server, offline)
        assert copying._stored(offline) == 0
