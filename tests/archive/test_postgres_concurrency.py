"""Many clients of one server archive at once, and a client killed while writing.

Outside references: PostgreSQL 15 documentation, "Advisory Locks", and
"Reliability and the Write-Ahead Log" / "Transactions" (a transaction whose
client goes away before COMMIT is rolled back: none of it is ever visible).
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

from stripscan.archive import Archive, Processor, QcEntry

pytestmark = pytest.mark.postgres

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]

# One client: its own processor, then 50 snapshots and 50 days of QC entries, one write each.
CLIENT = r"""
import datetime as dt, sys
from archive_factory import make_draft
from stripscan.archive import Archive, Processor, QcEntry

url, name, count = sys.argv[1], sys.argv[2], int(sys.argv[3])
with Archive.open(url) as archive:
    archive.add_processor(Processor(name))
    for n in range(count):
        archive.add_snapshot(make_draft(n, processor=name, notes=f"{name} {n}"))
        day = (dt.date(2024, 10, 1) + dt.timedelta(days=n)).isoformat()
        archive.add_qc_entry(QcEntry(name, day, 0.19, 1.2 + n / 1000, 1.8))
"""

KILLED = r"""
import pathlib, sys
from archive_factory import make_draft
from stripscan.archive import Archive

url, signal_file = sys.argv[1], pathlib.Path(sys.argv[2])

def drafts():
    for n in range(100_000):
        if n == 200:
            signal_file.write_text("inside the transaction")
        yield make_draft(n, notes="killed batch")

with Archive.open(url) as archive:
    archive.add_snapshots(drafts())
"""


def _child(script: str, *args: object) -> subprocess.Popen[str]:
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(REPO), str(HERE)]))
    return subprocess.Popen([sys.executable, "-c", script, *map(str, args)], env=env, text=True,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)


@pytest.fixture
def server_archive(pg_database: Any) -> str:
    with Archive.open(pg_database.url) as archive:
        populate(archive)
    return pg_database.url


def test_eight_clients_at_once_store_every_snapshot_and_qc_entry_once(server_archive: str) -> None:
    names = [f"Room {i}" for i in range(8)]
    children = [_child(CLIENT, server_archive, name, 50) for name in names]
    for child in children:
        out, err = child.communicate(timeout=600)
        assert child.returncode == 0, err
    with Archive.open(server_archive) as archive:
        snapshots = archive.all_snapshots()
        entries = archive.list_qc_entries()
        report = archive.verify()
    assert sorted(s.notes for s in snapshots) == sorted(f"{name} {n}" for name in names for n in range(50))
    assert sorted(s.id for s in snapshots) == list(range(1, 401))
    assert sorted(e.id for e in entries) == list(range(1, 401))
    assert {name: sum(e.processor == name for e in entries) for name in names} == dict.fromkeys(names, 50)
    # Chained: film type, 2 lots, 2 processors, sensitometer, the one calibration, 8 rooms, 800 records.
    assert report.ok and report.records == 1 + 2 + 2 + 1 + 1 + 8 + 400 + 400


@pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL is POSIX")
def test_a_client_killed_mid_write_leaves_nothing_and_the_archive_goes_on(server_archive: str,
                                                                         tmp_path: Path) -> None:
    with Archive.open(server_archive) as archive:
        archive.add_snapshots(make_draft(n) for n in range(5))
        before = archive.export_json(tmp_path / "before.json").read_bytes()
    signal_file = tmp_path / "inside"
    child = _child(KILLED, server_archive, signal_file)
    deadline = time.monotonic() + 120
    while not signal_file.exists():
        assert child.poll() is None, child.communicate()
        assert time.monotonic() < deadline, "the client never got inside its write"
        time.sleep(0.01)
    time.sleep(0.1)  # it writes on; the batch is far from done
    os.kill(child.pid, signal.SIGKILL)
    child.communicate()
    assert child.returncode == -signal.SIGKILL
    with Archive.open(server_archive) as archive:
        assert archive.export_json(tmp_path / "after.json").read_bytes() == before
        assert archive.verify().ok
        # The server let go of the killed client's lock: the next write goes through at once.
        archive.add_processor(Processor("After the crash"))
        archive.add_qc_entry(QcEntry("After the crash", "2024-11-01", 0.2, 1.2, 1.8))
