"""The hash chain over the stored history: an edit made behind the archive's back shows (issue 15 item 20).

The edits are made as someone with the file could: drop the trigger that
guards a table, change a stored value, put the trigger back.  SQLite's own
integrity check sees nothing wrong; ``stripscan archive verify`` must.
"""

from __future__ import annotations

import hashlib
import sqlite3
from pathlib import Path

import pytest
from archive_factory import LOTS, make_draft, raw_connection

from stripscan.archive import Archive, ArchiveIntegrityError, QcEntry
from stripscan.cli.main import main


@pytest.fixture
def filled(archive: Archive, archive_path: Path) -> Path:
    archive.add_snapshots(make_draft(n, lot=LOTS[n % 2].lot_id) for n in range(3))
    archive.retire(2, "strip fogged")
    archive.add_note(1, "agrees with the densitometer", "Mira Testwood")
    archive.add_qc_entry(QcEntry("North room", "2024-10-01", 0.19, 1.22, 1.85))
    archive.close()
    return archive_path


def _behind_the_back(path: Path, trigger: str, sql: str) -> None:
    """Drop ``trigger``, run ``sql``, re-create the trigger: the edit the triggers alone cannot show."""
    with raw_connection(path) as conn:
        text = conn.execute("SELECT sql FROM sqlite_master WHERE name = ?", (trigger,)).fetchone()[0]
        conn.execute(f"DROP TRIGGER {trigger}")
        conn.execute(sql)
        conn.execute(text)
        assert conn.execute("PRAGMA integrity_check").fetchall() == [("ok",)]  # SQLite sees nothing


def _verify(capsys: pytest.CaptureFixture[str], path: Path) -> tuple[int, str, str]:
    code = main(["archive", "verify", "--archive", str(path)])
    out, err = capsys.readouterr()
    return code, out, err


def test_a_clean_archive_verifies_and_prints_its_head(filled: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code, out, err = _verify(capsys, filled)
    assert code == 0 and err == ""
    with raw_connection(filled) as conn:
        count, head = conn.execute("SELECT count(*), (SELECT chain_sha256 FROM record_chain ORDER BY seq DESC "
                                   "LIMIT 1) FROM record_chain").fetchone()
    assert f"all {count} records match" in out and f"record {count}, sha256 {head}" in out
    assert "cannot prevent" in out


def test_an_edit_behind_a_dropped_trigger_is_found_and_named(filled: Path,
                                                             capsys: pytest.CaptureFixture[str]) -> None:
    _behind_the_back(filled, "snapshots_frozen", "UPDATE snapshots SET mid_density = 1.234 WHERE id = 1")
    # An edit of an older record leaves the cheap check on opening quiet: listing still works...
    assert main(["archive", "list", "--archive", str(filled)]) == 0
    capsys.readouterr()
    # ...and the walk of the whole chain names the snapshot.
    code, out, err = _verify(capsys, filled)
    assert code == 1 and out == ""
    assert err.strip().endswith("(snapshot 1): the stored content no longer matches the hash taken when it was "
                                "stored (changed outside stripscan)")


def test_an_edited_step_density_is_found(filled: Path, capsys: pytest.CaptureFixture[str]) -> None:
    _behind_the_back(filled, "snapshot_steps_no_update",
                     "UPDATE snapshot_steps SET od = od + 0.1 WHERE snapshot_id = 3 AND step = 11")
    code, _, err = _verify(capsys, filled)
    assert code == 1 and "(snapshot 3)" in err


def test_an_edit_of_the_latest_record_is_refused_on_opening(filled: Path) -> None:
    _behind_the_back(filled, "qc_entries_no_update", "UPDATE qc_entries SET mid_density = 1.02 WHERE id = 1")
    with pytest.raises(ArchiveIntegrityError, match="does not match its hash chain .*QC entry 1.* archive verify"):
        Archive.open(filled)


def test_rows_added_or_deleted_behind_the_back_are_found(filled: Path, capsys: pytest.CaptureFixture[str]) -> None:
    with raw_connection(filled) as conn:
        conn.execute("INSERT INTO qc_events (id, processor, date, kind) VALUES (7, 'North room', '2024-10-02', "
                     "'service')")
    with pytest.raises(ArchiveIntegrityError, match="records are stored but .* are in the chain"):
        Archive.open(filled)
    code, _, err = _verify(capsys, filled)
    assert code == 1 and "QC event 7 is stored but not in the chain (added outside stripscan)" in err
    _behind_the_back(filled, "qc_events_no_delete", "DELETE FROM qc_events")
    _behind_the_back(filled, "snapshot_notes_no_delete", "DELETE FROM snapshot_notes")
    code, _, err = _verify(capsys, filled)
    assert code == 1 and "(note 1): the record is no longer stored" in err


def test_a_retirement_undone_behind_the_back_is_found(filled: Path, capsys: pytest.CaptureFixture[str]) -> None:
    _behind_the_back(filled, "snapshots_retire_once",
                     "UPDATE snapshots SET retired_at = NULL, retired_reason = NULL WHERE id = 2")
    code, _, err = _verify(capsys, filled)
    assert code == 1 and "(retirement of snapshot 2): the record is no longer stored" in err


def test_an_edited_chain_is_found_where_it_breaks(filled: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # Someone "repairs" the hash of the snapshot they edited, but not the links after it.
    _behind_the_back(filled, "snapshots_frozen", "UPDATE snapshots SET mid_density = 1.234 WHERE id = 1")
    with raw_connection(filled) as conn:
        seq, = conn.execute("SELECT seq FROM record_chain WHERE kind = 'snapshot' AND key = '1'").fetchone()
    _behind_the_back(filled, "record_chain_no_update",
                     f"UPDATE record_chain SET content_sha256 = '{hashlib.sha256(b'x').hexdigest()}' WHERE seq = {seq}")
    code, _, err = _verify(capsys, filled)
    assert code == 1 and f"record {seq} of the chain (snapshot 1): its chain hash does not follow" in err


def test_the_chain_table_is_guarded_like_the_history(filled: Path) -> None:
    with raw_connection(filled) as conn:
        for sql in ("UPDATE record_chain SET kind = kind", "DELETE FROM record_chain WHERE seq = 1",
                    "INSERT INTO record_chain VALUES (1, 'note', '1', '" + "0" * 64 + "', '" + "0" * 64 + "')"):
            with pytest.raises(sqlite3.IntegrityError, match="record chain"):
                conn.execute(sql)


def test_lot_details_filled_in_later_keep_the_chain_clean(archive: Archive) -> None:
    archive.add_snapshot(make_draft(0))
    lot = archive.update_lot(LOTS[0].lot_id, received_date="2024-09-30", film_type="Green screen film",
                             create_missing=True)
    assert (lot.received_date, lot.film_type) == ("2024-09-30", "Green screen film")
    assert archive.verify().ok
