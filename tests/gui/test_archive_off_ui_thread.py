"""The window never waits for the archive on its UI thread (issue 16): a locked or slow archive leaves it painting.

Another program holds the archive's write lock (``BEGIN IMMEDIATE`` from a
helper thread, as a second stripscan or the command line would) for two
seconds or more while the window stores a snapshot or a QC day; a slow
archive (every open taking two seconds, as a far server might) while the
lot archive page reads.  Meanwhile a timer on the UI thread keeps ticking,
the window can be drawn, and the page says it waits; afterwards the write
lands.  A last test drives every page and finds no archive opened on the
UI thread at all.
"""

from __future__ import annotations

import datetime as dt
import sqlite3
import threading
import time
from pathlib import Path

import pytest
from PySide6.QtCore import QTimer
from PySide6.QtWidgets import QDialogButtonBox

from stripscan.archive import Archive
from stripscan.core.calibration_files import load_calibration
from stripscan.core.pipeline import analyze_scan
from stripscan.core.reading import AnalysisOptions
from stripscan.core.qc.names import QUANTITIES
from stripscan.core.qc.records import QCValues
from stripscan.gui.dialogs.lot_choice import LotChoiceDialog
from stripscan.services.qc_recording import add_day

from gui_helpers import settle

HOLD_S = 2.0


@pytest.fixture
def stocked(tmp_path, files) -> Path:
    """Two lots of the fixture's two-strip scan and a processor with five days (invented demo-style data)."""
    path = tmp_path / "shared.sqlite3"
    analysis = analyze_scan(files.scan, calibration=load_calibration(files.calibration),
                            options=AnalysisOptions(n_steps=21))
    with Archive.open(path) as archive:
        for lot, day in (("M-2610-A", "2026-11-02"), ("M-2702-B", "2026-11-03")):
            archive.add_analysis(analysis, lot, create_missing=True, operator="M. Arden", exposed_on=day,
                                 processed_on=day, scanned_on=day)
        for k in range(5):
            add_day(archive, "Processor 1", dt.date(2026, 11, 2 + k), values=QCValues(0.19, 1.20, 1.85),
                    new_processor=k == 0)
    return path


class LockHolder(threading.Thread):
    """Holds the archive's write lock from the moment it starts for at least HOLD_S, until released."""

    def __init__(self, path: Path) -> None:
        super().__init__(daemon=True)
        self.path = path
        self.taken, self.release, self.done = threading.Event(), threading.Event(), threading.Event()
        self.held_from = self.held_to = 0.0

    def run(self) -> None:
        con = sqlite3.connect(self.path, isolation_level=None)
        try:
            con.execute("BEGIN IMMEDIATE")
            self.held_from = time.monotonic()
            self.taken.set()
            time.sleep(HOLD_S)
            self.release.wait(30)
            self.held_to = time.monotonic()
            con.execute("ROLLBACK")
        finally:
            con.close()
            self.done.set()


class Ticker:
    """A timer on the UI thread that notes when it ticks: ticks stop when the UI thread is blocked."""

    def __init__(self) -> None:
        self.times: list[float] = []
        self.timer = QTimer()
        self.timer.setInterval(20)
        self.timer.timeout.connect(lambda: self.times.append(time.monotonic()))
        self.timer.start()

    def between(self, start: float, end: float) -> int:
        return sum(start <= t <= end for t in self.times)


def hold_while(qtbot, path: Path, action, window) -> tuple[LockHolder, Ticker]:
    """Run ``action()`` while another connection holds the write lock; check the UI thread kept working."""
    holder = LockHolder(path)
    holder.start()
    assert holder.taken.wait(10)
    ticker = Ticker()
    action()
    qtbot.wait(int(HOLD_S * 1000))  # the lock is still held: the write waits in its worker thread
    # The window draws meanwhile (a blocked UI thread could not).
    assert not window.grab().isNull()
    holder.release.set()
    assert holder.done.wait(10)
    ticks = ticker.between(holder.held_from, holder.held_to)
    ticker.timer.stop()
    # 20 ms ticks over two seconds; a UI thread waiting for the lock ticks not at all in that time.
    assert ticks >= 10, f"the UI thread ticked {ticks} times in {holder.held_to - holder.held_from:.1f} s"
    return holder, ticker


def test_saving_snapshots_while_another_program_writes(qtbot, window, open_scan, files, stocked):
    ws = window.workspace
    window.use_calibration_file(str(files.calibration))
    ws.open_archive(stocked)
    settle(qtbot, ws)
    open_scan(window, files.scan)
    ws.save_action.trigger()
    dialog = ws.dialog
    settle(qtbot, dialog)
    dialog.lot.setCurrentText("M-2610-A")
    dialog.operator.setCurrentText("M. Arden")
    dialog.again.setChecked(True)  # the fixture stored this scan already
    saved: list = []
    dialog.saved.connect(lambda lot, ids: saved.append(ids))

    def press_save() -> None:
        dialog.buttons.button(QDialogButtonBox.StandardButton.Save).click()
        assert dialog.busy and dialog.wait_label.isVisible()  # the form says it waits
        assert not dialog.buttons.button(QDialogButtonBox.StandardButton.Save).isEnabled()

    hold_while(qtbot, stocked, press_save, window)
    qtbot.waitUntil(lambda: bool(saved), timeout=10_000)  # the write lands once the lock is free
    with Archive.open(stocked, read_only=True) as archive:
        assert [s.snapshot_count for s in archive.list_lots() if s.lot.lot_id == "M-2610-A"] == [4]


def test_adding_a_qc_day_while_another_program_writes(qtbot, window, stocked):
    ws = window.workspace
    ws.open_archive(stocked)
    settle(qtbot, ws)
    ws.show_page("qc")
    panel = ws.qc_panel
    assert panel.processor_box.currentText() == "Processor 1"
    panel.date_edit.setDate(dt.date(2026, 11, 7))
    for q, value in zip(QUANTITIES, (0.19, 1.21, 1.86)):
        panel.value_edits[q].setValue(value)

    def add() -> None:
        panel.add_button.click()
        assert panel.busy and panel.busy_label.isVisibleTo(panel) and not panel.add_button.isEnabled()

    hold_while(qtbot, stocked, add, window)
    settle(qtbot, panel)
    assert panel.form_message.text() == "Stored 2026-11-07 as entry 6.", panel.form_message.text()
    assert "latest strip 2026-11-07" in panel.status_label.text()


def test_the_archive_page_reads_a_slow_archive_without_freezing(qtbot, window, stocked, monkeypatch):
    ws = window.workspace
    ws.open_archive(stocked)
    settle(qtbot, ws)
    ws.show_page("archive")
    panel = ws.archive_panel
    real = Archive.open.__func__

    def slow(cls, *args, **kwargs):  # a far server: every look takes two seconds
        time.sleep(HOLD_S)
        return real(cls, *args, **kwargs)

    monkeypatch.setattr(Archive, "open", classmethod(slow))
    ticker = Ticker()
    start = time.monotonic()
    panel.refresh_button.click()
    qtbot.wait(int(HOLD_S * 500))
    assert panel.busy and panel.busy_label.isVisibleTo(panel)
    assert not window.grab().isNull()
    settle(qtbot, panel)
    ticks = ticker.between(start, start + HOLD_S)
    ticker.timer.stop()
    assert ticks >= 10, ticks
    assert [panel.lots.item(k, 0).text() for k in range(panel.lots.rowCount())] == ["M-2610-A", "M-2702-B"]


def test_no_page_opens_the_archive_on_the_ui_thread(qtbot, window, open_scan, files, stocked, monkeypatch):
    """Every page used as a person would, with a spy on Archive.open: no call comes from the UI thread."""
    on_ui_thread: list[str] = []
    real = Archive.open.__func__

    def spy(cls, *args, **kwargs):
        if threading.current_thread() is threading.main_thread():
            import traceback

            on_ui_thread.append("".join(traceback.format_stack(limit=6)))
        return real(cls, *args, **kwargs)

    monkeypatch.setattr(Archive, "open", classmethod(spy))
    ws = window.workspace
    window.use_calibration_file(str(files.calibration))
    ws.open_archive(stocked)
    settle(qtbot, ws)
    open_scan(window, files.scan)
    # The lot archive: a lot, its snapshots (all of them), one opened, the trend of another figure.
    ws.show_page("archive")
    panel = ws.archive_panel
    panel.select_lot("M-2702-B")
    panel.show_all.setChecked(True)
    settle(qtbot, ws)
    assert panel.open_selected()
    settle(qtbot, ws)
    assert panel.view.record is not None and panel.view.record.snapshot.lot_id == "M-2702-B"
    ws.show_page("trend")
    panel.trend.set_figure("base_fog")
    settle(qtbot, ws)
    assert panel.trend.point_count() == 4
    # Storing the scan's strips.
    ws.save_action.trigger()
    dialog = ws.dialog
    settle(qtbot, dialog)
    dialog.lot.setCurrentText("M-2702-B")
    dialog.operator.setCurrentText("M. Arden")
    dialog.again.setChecked(True)
    with qtbot.waitSignal(dialog.saved, timeout=10_000):
        dialog.buttons.button(QDialogButtonBox.StandardButton.Save).click()
    settle(qtbot, ws)
    # Processor QC: a typed day, a correction, a new processor.
    ws.show_page("qc")
    qc = ws.qc_panel
    qc.date_edit.setDate(dt.date(2026, 11, 7))
    for q, value in zip(QUANTITIES, (0.19, 1.21, 1.86)):
        qc.value_edits[q].setValue(value)
    qc.add_button.click()
    settle(qtbot, ws)
    qc.fix_edits["mid_density"].setValue(1.25)
    qc.reason_edit.setText("mistyped")
    qc.correct_button.click()
    settle(qtbot, ws)
    assert qc.correct_message.text().startswith("Stored entry 7"), qc.correct_message.text()
    assert qc.create_processor("Processor 2")
    settle(qtbot, ws)
    assert qc.processor_box.currentText() == "Processor 2"
    # Comparing two lots, and a lot with the open scan.
    ws.ask_compare_lots()
    qtbot.waitUntil(lambda: isinstance(ws.dialog, LotChoiceDialog), timeout=10_000)
    with qtbot.waitSignal(ws.comparison_shown, timeout=30_000):
        ws.dialog.buttons.button(QDialogButtonBox.StandardButton.Ok).click()
    settle(qtbot, ws)
    assert not on_ui_thread, on_ui_thread[0]
