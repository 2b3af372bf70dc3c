"""Processor QC started and kept from the window alone, on an empty archive (issue 14, item 1)."""

from __future__ import annotations

import datetime
import html

from PySide6.QtCore import QDate
from PySide6.QtWidgets import QDialogButtonBox

from stripscan.archive import Archive
from stripscan.core.qc.names import QUANTITIES
from stripscan.gui.panels.qc_panel import FILM_TYPE_KEY
from stripscan.services.qc_log import load_processor_log

from gui_helpers import settle


def type_day(panel, day: datetime.date, values) -> None:
    panel.date_edit.setDate(QDate(day.year, day.month, day.day))
    for q, v in zip(QUANTITIES, values):
        panel.value_edits[q].setValue(v)


def make_processor(qtbot, panel, name: str, film: str = "", action: str | None = None) -> None:
    panel.new_processor_button.click()
    dialog = panel.dialog
    assert dialog is not None and dialog.isVisible()
    dialog.name_edit.setText(name)
    dialog.film_edit.setText(film)
    if action is not None:
        dialog.action_edit.setText(action)
    dialog.buttons.button(QDialogButtonBox.StandardButton.Ok).click()
    settle(qtbot, panel)


def test_qc_starts_in_the_window_on_an_empty_archive(qtbot, window, settings):
    """Item 1: no pointer to the command line; a processor is made in the window and takes typed days."""
    ws = window.workspace
    ws.show_page("qc")
    panel = ws.qc_panel
    settle(qtbot, ws)
    archive = ws.archive_path
    assert archive is not None and not archive.exists()
    assert "stripscan" not in panel.status_label.text() and "New processor" in panel.status_label.text()
    # Add day before any processor says what to do, in the window's own words.
    panel.value_edits["base_fog"].setValue(0.18)
    panel.add_button.click()
    assert "New processor" in panel.form_message.text() and "stripscan" not in panel.form_message.text()
    assert not archive.exists()  # looking and refusing make no file

    make_processor(qtbot, panel, "Room 3 processor", film="QC film F-1")
    assert panel.dialog is None or not panel.dialog.isVisible()
    assert archive.is_file()
    assert panel.processor_box.currentText() == "Room 3 processor"
    assert "QC film F-1" in html.unescape(panel.status_label.text())
    with Archive.open(archive, read_only=True) as stored:
        plog = load_processor_log(stored, "Room 3 processor")
    assert plog.setup.extra[FILM_TYPE_KEY] == "QC film F-1"
    # 21 CFR 900.12(e)(1): ±0.15 for mid-density and density difference, +0.03 for base+fog by default.
    assert plog.setup.limits.md_dd_action == 0.15 and plog.setup.limits.base_fog_action == 0.03

    # The save-to-archive form now offers it (it offered only "(not recorded)" before).
    from stripscan.gui.dialogs.save_snapshot_dialog import read_choices
    assert read_choices(archive).processors == ("Room 3 processor",)

    first = datetime.date(2026, 12, 1)
    for k in range(5):
        type_day(panel, first + datetime.timedelta(days=k), (0.18, 1.20 + 0.01 * (k % 2), 1.85))
        panel.add_button.click()
        settle(qtbot, panel)
        assert panel.form_message.text().startswith("Stored"), panel.form_message.text()
    # Five days set the operating levels (21 CFR 900.12(e)(1) practice; common practice: the first five days).
    assert "Room 3 processor: WITHIN LIMITS" in panel.status_label.text()


def test_a_second_processor_of_the_same_name_or_bad_limits_is_refused(qtbot, window):
    panel = window.workspace.qc_panel
    make_processor(qtbot, panel, "P")
    make_processor(qtbot, panel, "P")
    assert panel.dialog.isVisible() and "already" in panel.dialog.message.text()
    panel.dialog.reject()
    make_processor(qtbot, panel, "Q", action="0.05")  # below the 0.10 warning tier
    assert panel.dialog.isVisible() and "Not stored" in panel.dialog.message.text()
    panel.dialog.reject()
    with Archive.open(window.workspace.archive_path, read_only=True) as stored:
        assert [p.name for p in stored.list_processors()] == ["P"]


def test_a_day_read_off_the_open_scans_strip(qtbot, open_scan, window, files):
    """Item 1: the scanned-day path (as 'qc add SCAN' on the command line) from the window's open scan."""
    window.use_calibration_file(str(files.calibration))
    open_scan(window, files.scan)
    panel = window.workspace.qc_panel
    assert panel.scan_strip_box.count() == 2 and panel.add_scan_button.isEnabled()
    make_processor(qtbot, panel, "P")
    panel.date_edit.setDate(QDate(2026, 12, 1))
    panel.scan_strip_box.setCurrentIndex(1)
    assert panel.add_scan_button.isEnabled()
    panel.add_scan_button.click()
    settle(qtbot, panel)
    assert panel.scan_message.text().startswith("Stored 2026-12-01"), panel.scan_message.text()
    with Archive.open(window.workspace.archive_path, read_only=True) as stored:
        entries = stored.list_qc_entries("P")
    strip = window.session.result(1)
    assert len(entries) == 1 and entries[0].source == "scan"
    # The base+fog stored is the strip's own reading (the same numbers as the Figures tab).
    assert abs(entries[0].base_fog - strip.figures.base_fog) < 1e-9
    assert "strip 2" in entries[0].note


def test_a_scan_in_direct_mode_is_not_stored_and_says_why(qtbot, open_scan, window, files):
    window.use_calibration(None)
    open_scan(window, files.scan)
    panel = window.workspace.qc_panel
    make_processor(qtbot, panel, "P")
    panel.add_scan_button.click()
    settle(qtbot, panel)
    assert "Not stored" in panel.scan_message.text() and "without a calibration" in panel.scan_message.text()
    with Archive.open(window.workspace.archive_path, read_only=True) as stored:
        assert stored.list_qc_entries("P") == []


def store_scan(qtbot, window, lot: str, operator: str, processor: str | None = None) -> list[int]:
    ws = window.workspace
    ws.save_action.trigger()
    dialog = ws.dialog
    settle(qtbot, dialog)
    dialog.lot.setCurrentText(lot)
    dialog.new_lot.setChecked(True)
    dialog.operator.setCurrentText(operator)
    if processor is not None:
        dialog.processor.setCurrentText(processor)
    dialog.buttons.button(QDialogButtonBox.StandardButton.Save).click()
    settle(qtbot, dialog, ws)
    assert dialog.stored, "nothing was stored"
    return [s.id for s in dialog.stored]


def pdf_text(path) -> list[str]:
    from pypdf import PdfReader

    return [" ".join(page.extract_text().split()) for page in PdfReader(path).pages]


def test_the_scan_report_after_storing_carries_what_was_stored(qtbot, open_scan, window, files, tmp_path):
    """Item 2: after storing, the scan's report names the lot, operator and snapshot; item 10: a notice says so."""
    window.use_calibration_file(str(files.calibration))
    open_scan(window, files.scan)
    ws = window.workspace
    ids = store_scan(qtbot, window, "M-2610-A", "M. Arden")
    assert ws.notice.isVisible() and "Stored 2 snapshots of lot M-2610-A" in ws.notice.label.text()
    assert str(ws.archive_path) in ws.notice.label.text()
    with qtbot.waitSignal(ws.exports.file_written, timeout=30_000) as signal:
        assert ws.exports.export("pdf", tmp_path / "report.pdf")
    pages = pdf_text(signal.args[0])
    assert len(pages) == 2
    for page, snapshot in zip(pages, ids):
        assert "M-2610-A" in page and "M. Arden" in page and f"snapshot {snapshot}" in page
        assert "not archived" not in page
    # The notice names the file written and offers to open it.
    assert str(signal.args[0]) in ws.notice.label.text()
    assert [b.text() for b in ws.notice.buttons] == ["Open it", "Show folder"]

    # A step excluded after storing is a new reading: the report is of the scan as it stands, not archived.
    window.session.set_excluded(0, 12)
    with qtbot.waitSignal(ws.exports.file_written, timeout=30_000) as signal:
        assert ws.exports.export("pdf", tmp_path / "changed.pdf")
    assert all("not archived" in page for page in pdf_text(signal.args[0]))
