"""A full disk during a write: a clear message, nothing of the write stored, earlier data intact.

The disk is "filled" with SQLite's own page limit (PRAGMA max_page_count, SQLite
documentation): past it every write fails with SQLITE_FULL, exactly as on a
full disk.
"""

from __future__ import annotations

import pytest
from archive_factory import make_draft

from stripscan.archive import Archive, ArchiveError


def test_full_disk_during_a_batch_stores_none_of_it(archive_path):
    with Archive.open(archive_path) as archive:
        from archive_factory import populate

        populate(archive)
        first = archive.add_snapshot(make_draft(0))
        pages = archive._c.execute("PRAGMA page_count").fetchone()[0]
        # Room for a page or two more: the 40-snapshot batch cannot fit.
        archive._c.execute(f"PRAGMA max_page_count = {pages + 2}")
        with pytest.raises(ArchiveError, match="the disk is full") as info:
            archive.add_snapshots([make_draft(k) for k in range(1, 41)])
        assert str(archive_path) in str(info.value)
        archive._c.execute("PRAGMA max_page_count = 1073741823")
        assert [s.id for s in archive.list_snapshots()] == [first.id]
    with Archive.open(archive_path) as again:  # reopens with integrity_check
        assert [s.id for s in again.list_snapshots()] == [first.id]
        assert again.get_snapshot(first.id).strip == first.strip
