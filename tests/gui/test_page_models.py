"""The window's page models without Qt: state and decisions, with the archive work run at once (``run_now``)."""

from __future__ import annotations

import datetime as dt
import json
import subprocess
import sys
from pathlib import Path

import pytest

from stripscan.archive import Archive
from stripscan.core.calibration_files import load_calibration
from stripscan.core.pipeline import analyze_scan
from stripscan.core.reading import AnalysisOptions
from stripscan.core.qc.records import QCValues
from stripscan.gui.models.archive_page import SNAPSHOT_COLUMNS, ArchivePage
from stripscan.gui.models.compare_page import ComparePage, read_compared_lots
from stripscan.gui.models.qc_page import QcPage, form_date, typed_values
from stripscan.services.qc_recording import add_day


@pytest.fixture(scope="module")
def stocked(tmp_path_factory, files) -> Path:
    """One lot of the fixture's two-strip scan, a second lot without strips, a processor with five days."""
    path = tmp_path_factory.mktemp("models") / "models.sqlite3"
    analysis = analyze_scan(files.scan, calibration=load_calibration(files.calibration),
                            options=AnalysisOptions(n_steps=21))
    with Archive.open(path) as archive:
        archive.add_analysis(analysis, "M-2610-A", create_missing=True, operator="M. Arden",
                             exposed_on="2026-11-02", processed_on="2026-11-02", scanned_on="2026-11-02")
        for k in range(5):
            add_day(archive, "Processor 1", dt.date(2026, 11, 2 + k), values=QCValues(0.19, 1.20, 1.85),
                    new_processor=k == 0)
    return path


def test_the_models_import_no_qt() -> None:
    code = ("import sys, json; import stripscan.gui.models.archive_page, stripscan.gui.models.qc_page, "
            "stripscan.gui.models.compare_page, stripscan.gui.models.session; "
            "print(json.dumps(sorted(m for m in sys.modules if m.split('.')[0] in ('PySide6', 'pyqtgraph'))))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert json.loads(out) == []


def test_the_archive_page_lists_opens_and_keeps_its_choices(stocked: Path) -> None:
    page = ArchivePage(stocked)
    seen: list[str] = []
    page.events.snapshots_changed.connect(lambda: seen.append("snapshots"))
    page.events.record_changed.connect(lambda quiet: seen.append(f"record quiet={quiet}"))
    page.refresh()
    assert [s.lot.lot_id for s in page.lots] == ["M-2610-A"] and page.lot == "M-2610-A"
    rows = page.snapshot_rows()
    with Archive.open(stocked, read_only=True) as archive:
        stored = archive.list_snapshots("M-2610-A")
    assert [r.snapshot_id for r in rows] == [s.id for s in stored]
    assert all(len(r.cells) == len(SNAPSHOT_COLUMNS) and r.cells[-1][0] == "current" for r in rows)
    assert page.listing_title() == "Snapshots of lot M-2610-A (2)"
    assert page.open_snapshot(stored[1].id) and page.record.snapshot.id == stored[1].id
    seen.clear()
    page.refresh()  # the chosen lot and the open snapshot stay, the snapshot read again quietly
    assert page.lot == "M-2610-A" and page.record.snapshot.id == stored[1].id
    assert seen == ["snapshots", "record quiet=True"]


def test_the_archive_page_says_what_it_could_not_read(tmp_path: Path) -> None:
    missing = ArchivePage(tmp_path / "none.sqlite3")
    missing.refresh()
    assert missing.lots == [] and "No archive yet" in missing.where_text()
    broken = tmp_path / "broken.sqlite3"
    broken.write_bytes(b"not an archive\n" * 40)
    page = ArchivePage(broken)
    failures: list[tuple[str, BaseException]] = []
    page.events.failed.connect(lambda title, error: failures.append((title, error)))
    page.refresh()
    assert page.lots == [] and failures and failures[0][0] == "The archive could not be read"
    assert str(broken) in str(failures[0][1])


def test_the_qc_page_reads_stores_and_refuses_through_its_runner(stocked: Path, tmp_path: Path) -> None:
    copy = tmp_path / "qc.sqlite3"
    with Archive.open(stocked, read_only=True) as archive:
        archive.backup(copy)
    page = QcPage(copy)
    said: list[tuple[str, str, bool]] = []
    stored: list[tuple[str, str]] = []
    page.events.message.connect(lambda where, text, ok: said.append((where, text, ok)))
    page.events.stored.connect(lambda where, processor, added: stored.append((where, processor)))
    page.read()
    assert page.processors == ("Processor 1",) and page.processor == "Processor 1"
    assert form_date(page.plog, repeat=False, today=dt.date(2026, 12, 24)) == dt.date(2026, 11, 7)
    assert form_date(page.plog, repeat=True, today=dt.date(2026, 12, 24)) == dt.date(2026, 11, 6)
    page.store_day("day", "Processor 1", dt.date(2026, 11, 7), values=QCValues(0.19, 1.21, 1.86))
    assert stored == [("day", "Processor 1")] and page.plog.latest_day == dt.date(2026, 11, 7)
    page.store_day("day", "Processor 1", dt.date(2026, 11, 7), values=QCValues(0.19, 1.21, 1.86))
    assert said[-1][0] == "day" and not said[-1][2] and "Repeat strip of the day" in said[-1][1]
    with pytest.raises(ValueError, match="base\\+fog and density difference are missing"):
        typed_values({"base_fog": None, "mid_density": 1.2, "density_difference": None})
    assert page.create_processor("Processor 2")
    assert page.processor == "Processor 2" and stored[-1] == ("processor", "Processor 2")
    with Archive.open(copy, read_only=True) as archive:
        assert len(archive.list_qc_entries("Processor 1")) == 6


def test_the_compare_page_says_when_the_lots_allow_no_comparison(stocked: Path) -> None:
    lots = read_compared_lots(stocked)
    assert lots == ["M-2610-A"]
    assert ComparePage.refusal(lots, with_scan=False)[0] == "Two lots are needed"
    assert ComparePage.refusal(lots, with_scan=True) is None
    assert ComparePage.refusal([], with_scan=True)[0] == "No lot to compare with"
    page = ComparePage()
    assert page.title().startswith("No comparison to show") and page.notes() == "" and not page.choose_pair(0)
