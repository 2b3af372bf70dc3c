"""A shared archive when things go wrong, as a user meets it on the command line.

* The server stops in the middle of a write: the write fails with one plain
  line, nothing of it is there once the server is back, and the next write
  goes through.
* A login lacks a right (a reader adding, a recorder retiring, revising or
  setting QC limits): one line says which right and which of the archive's
  roles has it, and nothing is stored.

The rights are those of schema/roles.sql (PostgreSQL 15 documentation,
"Privileges" and "Row Security Policies": a member has its role's rights).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from archive_factory import LOTS, PROCESSORS, make_draft, populate

from stripscan.archive import Archive, ArchiveError, ArchiveReadOnlyError, QcEntry
from stripscan.archive.postgres import schema
from stripscan.cli.main import main

NORTH = PROCESSORS[0].name


def _fail_line(capsys: pytest.CaptureFixture[str], *argv: str) -> str:
    assert main(list(argv)) == 1
    err = capsys.readouterr().err
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("stripscan: error: "), err
    return lines[0]


def _export(url: str, out: Path) -> bytes:
    with Archive.open(url, create=False) as archive:
        return archive.export_json(out).read_bytes()


@pytest.fixture
def stocked(pg_database: Any) -> str:
    with Archive.open(pg_database.url) as archive:
        populate(archive)
        archive.add_snapshots(make_draft(n, lot=LOTS[n % 2].lot_id) for n in range(3))
        archive.add_qc_entry(QcEntry(NORTH, "2024-10-01", 0.19, 1.20, 1.84))
    return pg_database.url


def test_the_server_stopping_during_a_write(stocked: str, pg_database: Any, tmp_path: Path,
                                            capsys: pytest.CaptureFixture[str]) -> None:
    server = pg_database.server
    before = _export(stocked, tmp_path / "before.json")

    def drafts() -> Any:
        for n in range(40):
            if n == 20:
                server.kill()  # as a crash or a power cut would, half way through the batch
            yield make_draft(100 + n, notes="cut short")

    try:
        with Archive.open(stocked) as archive:
            with pytest.raises(ArchiveError) as caught:
                archive.add_snapshots(drafts())
        message = str(caught.value)
        assert "\n" not in message
        assert message.startswith(f"{archive.path}: cannot ") and "the connection to the server failed" in message
        # While it is down every command says so in one line, and leaves no file behind.
        line = _fail_line(capsys, "archive", "list", "--archive", stocked)
        assert f"{archive.path}: cannot open it: the connection to the server failed (tried 3 times) (" in line
    finally:
        if not server.running:
            server.restart()
    assert _export(stocked, tmp_path / "after.json") == before
    assert main(["qc", "add", "--archive", stocked, "--processor", NORTH, "--date", "2024-10-02",
                 "--base-fog", "0.19", "--mid-density", "1.21", "--density-difference", "1.85"]) == 0
    with Archive.open(stocked) as archive:
        assert [e.date for e in archive.list_qc_entries()] == ["2024-10-01", "2024-10-02"]
        assert len(archive.all_snapshots()) == 3 and archive.verify().ok
    assert sorted(p.name for p in tmp_path.iterdir()) == ["after.json", "before.json"]


@pytest.fixture
def logins(stocked: str, pg_database: Any) -> dict[str, str]:
    """A login in each of the archive's roles (made as 'archive init --roles' and the GRANT lines say)."""
    assert main(["archive", "init", stocked, "--roles"]) == 0
    urls = {}
    with pg_database.connect() as conn:
        for kind, role in schema.role_names(pg_database.name).items():
            login = f"{pg_database.name}_{kind}_login"
            conn.execute(f'CREATE ROLE "{login}" LOGIN')
            conn.execute(f'GRANT "{role}" TO "{login}"')
            urls[kind] = pg_database.server.url(pg_database.name, user=login)
    return urls


_QC_DAY = ("--processor", NORTH, "--date", "2024-10-02", "--base-fog", "0.19", "--mid-density", "1.21",
           "--density-difference", "1.85")


@pytest.mark.parametrize("kind, argv, words", [
    ("reader", ("qc", "add", *_QC_DAY), "may not add QC entries; the archive's recorder role may"),
    ("reader", ("archive", "lot", "ALD-2411-01"), "may not add to the archive; the archive's recorder role may"),
    ("recorder", ("archive", "retire", "1", "--reason", "fogged"),
     "may not retire snapshots; the archive's physicist role may"),
    ("recorder", ("archive", "revise", "1", "--operator", "Mira Testwood", "--reason", "wrong name"),
     "may not revise snapshots or store retired ones; the archive's physicist role may"),
    ("recorder", ("qc", "limits", "--processor", NORTH, "--md-dd", "0.15", "--reason", "tighter"),
     "may not set QC limits and settings; the archive's physicist role may"),
])
def test_a_missing_right_is_one_line_and_stores_nothing(logins: dict[str, str], stocked: str, pg_database: Any,
                                                        tmp_path: Path,
                                                        capsys: pytest.CaptureFixture[str], kind: str,
                                                        argv: tuple[str, ...], words: str) -> None:
    before = _export(stocked, tmp_path / "before.json")
    line = _fail_line(capsys, *argv, "--archive", logins[kind])
    assert line.startswith(f"stripscan: error: postgresql://{pg_database.name}_{kind}_login@/{pg_database.name}?")
    assert f"your login on the server {words} (ask whoever looks after the archive's server)" in line
    assert _export(stocked, tmp_path / "after.json") == before


def test_what_each_role_may_do_goes_through(logins: dict[str, str], stocked: str,
                                            capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["qc", "add", *_QC_DAY, "--archive", logins["recorder"]]) == 0
    assert main(["archive", "retire", "1", "--reason", "fogged", "--archive", logins["physicist"]]) == 0
    assert main(["archive", "list", "--all", "--archive", logins["reader"]]) == 0
    assert "retired" in capsys.readouterr().out
    with Archive.open(logins["reader"], create=False) as archive:
        with pytest.raises(ArchiveReadOnlyError, match="may not add snapshots; the archive.s recorder role may"):
            archive.add_snapshot(make_draft(50))
