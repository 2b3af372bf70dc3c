"""Several programs at once, and a program killed while writing.

Outside references: SQLite documentation, "Write-Ahead Logging" (wal.html:
one writer at a time, readers never blocked, a transaction without its
commit record is ignored on recovery) and "Atomic Commit In SQLite"
(atomiccommit.html: a crash leaves the database as before the transaction).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from archive_factory import escaped, make_draft, raw_connection

from stripscan.archive import Archive, ArchiveBusyError, FilmType

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]

KILLED_WRITER = r"""
import pathlib, sys
from archive_factory import make_draft
from stripscan.archive import Archive

path, signal_file = sys.argv[1], pathlib.Path(sys.argv[2])

def drafts():
    for n in range(100_000):
        if n == 600:
            signal_file.write_text("inside the transaction")
        yield make_draft(n, notes="killed batch")

with Archive.open(path) as archive:
    archive.add_snapshots(drafts())
"""

RACING_WRITER = r"""
import json, os, sys, time
from archive_factory import make_draft
from stripscan.archive import Archive, ArchiveBusyError

path, go, name, count, timeout = sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4]), int(sys.argv[5])
stored = busy = 0
with Archive.open(path, busy_timeout_ms=timeout) as archive:
    while not os.path.exists(go):
        time.sleep(0.001)
    for n in range(count):
        try:
            archive.add_snapshot(make_draft(n, notes=f"{name} {n}"))
            stored += 1
        except ArchiveBusyError as exc:
            assert "is busy" in str(exc), exc
            busy += 1
print(json.dumps({"stored": stored, "busy": busy}))
"""


def _child(script: str, *args: object) -> subprocess.Popen[str]:
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(REPO), str(HERE)]))
    return subprocess.Popen([sys.executable, "-c", script, *map(str, args)], env=env, text=True,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)


def _wait_for(path: Path, child: subprocess.Popen[str], seconds: float = 30.0) -> None:
    deadline = time.monotonic() + seconds
    while not path.exists():
        if child.poll() is not None:
            raise AssertionError(f"child ended early: {child.communicate()}")
        if time.monotonic() > deadline:
            child.kill()
            child.communicate()
            raise AssertionError("child never reached the point to kill it")
        time.sleep(0.005)


@pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL is POSIX")
def test_writer_killed_mid_transaction_leaves_earlier_data_intact(archive: Archive, archive_path: Path,
                                                                  tmp_path: Path) -> None:
    archive.add_snapshots(make_draft(n) for n in range(5))
    archive.add_note(3, "written before the crash")
    archive.close()
    with raw_connection(archive_path) as conn:
        before = {t: conn.execute(f"SELECT * FROM {t} ORDER BY 1, 2").fetchall()
                  for t in ("snapshots", "snapshot_data", "snapshot_steps", "snapshot_notes", "calibrations")}
    signal_file = tmp_path / "inside"
    child = _child(KILLED_WRITER, archive_path, signal_file)
    _wait_for(signal_file, child)
    time.sleep(0.05)  # let it write on; the batch is far from done
    wal = Path(f"{archive_path}-wal")
    # Uncommitted pages already spilled into the log: the kill hits a write in progress.
    assert wal.exists() and wal.stat().st_size > 0
    os.kill(child.pid, signal.SIGKILL)
    child.communicate()
    assert child.returncode == -signal.SIGKILL
    with Archive.open(archive_path) as reopened:  # runs PRAGMA integrity_check
        assert len(reopened.list_snapshots()) == 5
        assert reopened.list_notes(3)[0].text == "written before the crash"
    with raw_connection(archive_path) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
        assert conn.execute("SELECT count(*) FROM snapshots WHERE notes = 'killed batch'").fetchone() == (0,)
        after = {t: conn.execute(f"SELECT * FROM {t} ORDER BY 1, 2").fetchall() for t in before}
    assert after == before


def test_two_writers_at_once_each_store_or_are_told_busy(archive: Archive, archive_path: Path,
                                                         tmp_path: Path) -> None:
    archive.close()
    go = tmp_path / "go"
    count = 40
    children = {name: _child(RACING_WRITER, archive_path, go, name, count, 50) for name in ("north", "south")}
    time.sleep(0.3)  # both open and waiting
    go.write_text("go")
    results = {}
    for name, child in children.items():
        out, err = child.communicate(timeout=60)
        assert child.returncode == 0, err
        results[name] = json.loads(out)
    with raw_connection(archive_path) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
        for name, result in results.items():
            assert result["stored"] + result["busy"] == count
            rows = conn.execute("SELECT count(*) FROM snapshots WHERE notes LIKE ?", (f"{name} %",)).fetchone()[0]
            assert rows == result["stored"]
        assert conn.execute("SELECT count(*) FROM snapshot_steps").fetchone()[0] == 21 * sum(
            r["stored"] for r in results.values())
    assert sum(r["stored"] for r in results.values()) > 0


def test_busy_archive_waits_for_the_timeout_then_says_so(archive: Archive, archive_path: Path) -> None:
    archive.add_snapshot(make_draft(0))
    with Archive.open(archive_path, busy_timeout_ms=150) as second, raw_connection(archive_path) as other:
        other.execute("BEGIN IMMEDIATE")  # another program holds the write lock
        started = time.monotonic()
        with pytest.raises(ArchiveBusyError, match=rf"^{escaped(archive_path)} is busy: another program is writing "
                                                   r"to it and did not finish within 150 ms; cannot add a note"):
            second.add_note(1, "while locked")
        assert time.monotonic() - started >= 0.14  # SQLite docs (pragma.html#pragma_busy_timeout)
        other.execute("ROLLBACK")
        second.add_note(1, "after the lock")
    assert [n.text for n in archive.list_notes(1)] == ["after the lock"]


def test_readers_are_not_blocked_by_a_writer(archive: Archive, archive_path: Path) -> None:
    with raw_connection(archive_path) as other:
        other.execute("BEGIN IMMEDIATE")
        other.execute("INSERT INTO film_types (name) VALUES ('uncommitted')")
        started = time.monotonic()
        names = [f.name for f in archive.list_film_types()]
        assert time.monotonic() - started < 1.0
        other.execute("COMMIT")
    assert "uncommitted" not in names
    assert FilmType("uncommitted") in archive.list_film_types()
