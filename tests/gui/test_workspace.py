"""The main window's pages show what the archive, the comparison and the QC log themselves give.

The demo archive is built once for the module, through the window, as
``stripscan demo`` builds it; each test compares the pages with the
archive API, :func:`compare_sets`, the QC log and the report functions.
"""

from __future__ import annotations

import csv
import gc
import math
import sys
import threading
import time
import weakref
from pathlib import Path
from types import SimpleNamespace

import pyqtgraph as pg
import pytest
from PySide6.QtCore import QEvent, QObject, QThreadPool, QTimer
from PySide6.QtGui import QImage
from PySide6.QtWidgets import QApplication, QDialogButtonBox, QLabel, QMenu, QMessageBox

from stripscan import CAUTION
from stripscan.archive import Archive
from stripscan.services.demo_archive import DEMO_ARCHIVE_NAME
from stripscan.services.comparison_sets import SetLoader, parse_set
from stripscan.core.compare.comparison import compare_sets
from stripscan.gui import jobs
from stripscan.render import qtguard
from stripscan.gui.app import open_demo, run_demo
from stripscan.gui.panels.compare_panel import COLUMNS
from stripscan.gui.errors import setup_logging
from stripscan.gui.main_window import MainWindow
from stripscan.gui.dialogs.save_snapshot_dialog import SaveSnapshotDialog
from stripscan.gui.settings import AppSettings
from stripscan.gui.dialogs.lot_choice import LotChoiceDialog
from stripscan.gui.workspace import PAGES, archive_setting
from stripscan.services.qc_demo import DEMO_PROCESSOR
from stripscan.core.qc.names import VERDICT_WORDS
from stripscan.services.qc_log import load_processor_log

from gui_helpers import settle

LOT_A, LOT_B = "M-2610-A", "M-2702-B"


def _wait(condition, timeout: float) -> None:
    end = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > end:
            raise TimeoutError("the window did not get there in time")
        QApplication.processEvents()
        time.sleep(0.01)


def squash(text: str) -> str:
    return " ".join(text.split())


def messages(window) -> list[QMessageBox]:
    return [box for box in window.findChildren(QMessageBox) if box.isVisible()]


def close_and_delete(window, timeout: float = 120) -> None:
    """Close ``window``, wait until it has closed itself once its work stopped, then delete it."""
    window.close()
    _wait(lambda: not window.isVisible() and not window.work_running, timeout)
    window.deleteLater()
    QApplication.sendPostedEvents(None, QEvent.Type.DeferredDelete)


def archive_contents(path: Path) -> tuple:
    """Lots with their snapshot counts, and the demo processor's QC entries: what a complete demo archive holds."""
    with Archive.open(path, read_only=True) as archive:
        lots = tuple((s.lot.lot_id, s.snapshot_count) for s in archive.list_lots())
        return lots, len(archive.list_qc_entries(DEMO_PROCESSOR))


def leftovers(folder: Path) -> list[str]:
    """Files of a build that did not finish (staging, partial, SQLite side files)."""
    return sorted(p.name for p in folder.glob(".*") if p.is_file()) if folder.is_dir() else []


@pytest.fixture(scope="module")
def demo(qapp, tmp_path_factory):
    """The window after ``open_demo`` built the demo archive into its own folder (once for the module)."""
    root = tmp_path_factory.mktemp("workspace")
    with pytest.MonkeyPatch.context() as patch:
        user_archive = root / "user" / "archive.sqlite3"
        patch.setenv("STRIPSCAN_ARCHIVE", str(user_archive))
        setup_logging(root / "logs")
        window = MainWindow(settings=AppSettings(root / "settings.ini"))
        window.resize(1440, 900)
        window.show()
        ready: list[str] = []
        window.workspace.demo_ready.connect(ready.append)
        files = open_demo(window, archive_folder=root / "demo")
        _wait(lambda: bool(ready) and not window.busy and not window.workspace.busy, 150)
        yield SimpleNamespace(window=window, workspace=window.workspace, folder=root / "demo", files=files,
                              user_archive=user_archive, archive=Path(ready[0]),
                              contents=archive_contents(Path(ready[0])))
        close_and_delete(window)


def written(qtbot, workspace, start) -> Path:
    """Run ``start()`` (an export) and wait for the file the worker wrote."""
    with qtbot.waitSignal(workspace.exports.file_written, timeout=30_000) as signal:
        assert start()
    return Path(signal.args[0])


def test_the_demo_builds_its_archive_in_its_own_folder(demo):
    ws = demo.workspace
    assert demo.archive == demo.folder / DEMO_ARCHIVE_NAME and demo.archive.is_file()
    assert ws.archive_path == demo.archive and ws.archive_panel.archive_path == demo.archive
    assert not demo.user_archive.exists()  # the user's own archive was never made, nor read
    with Archive.open(demo.archive, read_only=True) as archive:
        lots = archive.list_lots()
        processors = [p.name for p in archive.list_processors()]
    table = ws.archive_panel.lots
    shown = [(table.item(k, 0).text(), int(table.item(k, 2).text())) for k in range(table.rowCount())]
    assert shown == [(s.lot.lot_id, s.snapshot_count) for s in lots]
    assert [lot for lot, _ in shown] == [LOT_A, LOT_B]
    assert [ws.qc_panel.processor_box.itemText(k) for k in range(ws.qc_panel.processor_box.count())] == processors
    assert archive_setting(demo.window.settings) == demo.archive
    assert not messages(demo.window)


def test_compare_two_lots_shows_what_compare_sets_gives(demo, qtbot):
    ws = demo.workspace
    ws.show_page("scan")
    ws.compare_lots_action.trigger()
    qtbot.waitUntil(lambda: isinstance(ws.dialog, LotChoiceDialog), timeout=10_000)  # the lots are read first
    dialog = ws.dialog
    assert isinstance(dialog, LotChoiceDialog) and dialog.isVisible()
    dialog.lot_a.setCurrentText(LOT_A)
    dialog.lot_b.setCurrentText(LOT_B)
    with qtbot.waitSignal(ws.comparison_shown, timeout=30_000):
        dialog.buttons.button(QDialogButtonBox.StandardButton.Ok).click()
    with SetLoader(demo.archive) as loader:
        expected = compare_sets([loader.load(parse_set(f"lot:{LOT_A}")), loader.load(parse_set(f"lot:{LOT_B}"))])
    speed = expected[0].row("speed_log_exposure")
    panel = ws.compare_panel
    shown = panel.comparisons[0].row("speed_log_exposure")
    assert shown.difference == pytest.approx(speed.difference, abs=1e-12) and shown.verdict == speed.verdict
    rows = {panel.table.item(r, 0).text(): r for r in range(panel.table.rowCount())}
    row = rows[speed.cells()["figure"]]
    assert panel.table.item(row, COLUMNS.index("B − A")).text() == speed.cells()["difference"]
    assert (shown.a.n, shown.b.n) == (speed.a.n, speed.b.n)
    assert ws.current_page() == "comparison"


def test_the_same_lot_twice_is_refused(demo):
    dialog = LotChoiceDialog([LOT_A, LOT_B])
    dialog.lot_b.setCurrentText(LOT_A)
    chosen: list = []
    dialog.chosen.connect(chosen.append)
    dialog.accept()
    assert not chosen and "different" in dialog.problem.text()
    dialog.deleteLater()


def test_a_lot_compared_with_the_strips_on_this_scan(demo, qtbot):
    ws, session = demo.workspace, demo.window.session
    with qtbot.waitSignal(ws.comparison_shown, timeout=30_000):
        ws.compare_with_scan(LOT_B)
    comparison = ws.compare_panel.comparisons[0]
    analysis = session.analysis()
    assert comparison.b.n == len(analysis.strips) and comparison.a.name == f"lot:{LOT_B}"
    speeds = [s.figures.speed_log_exposure for s in analysis.strips]
    assert comparison.b.figures["speed_log_exposure"].mean == pytest.approx(sum(speeds) / len(speeds))


def test_the_qc_page_shows_the_processors_status(demo):
    ws = demo.workspace
    ws.page_actions["qc"].trigger()
    assert ws.current_page() == "qc"
    with Archive.open(demo.archive, read_only=True) as archive:
        status = load_processor_log(archive, "Processor 1").status()
    panel = ws.qc_panel
    assert panel.processor_box.currentText() == "Processor 1"
    text = panel.status_label.text()
    assert f"Processor 1: {VERDICT_WORDS[status.verdict]}" in text
    assert f"latest strip {status.latest_date.isoformat()}" in text


def test_saving_the_scan_through_the_action_stores_one_snapshot_per_strip(demo, qtbot):
    ws, session = demo.workspace, demo.window.session
    with Archive.open(demo.archive, read_only=True) as archive:
        before = {s.id for s in archive.list_snapshots(include_retired=True, include_superseded=True)}
    ws.save_action.trigger()
    dialog = ws.dialog
    assert isinstance(dialog, SaveSnapshotDialog) and dialog.isVisible()
    settle(qtbot, dialog)
    dialog.lot.setCurrentText(LOT_A)
    dialog.operator.setCurrentText("Test operator")
    with qtbot.waitSignal(dialog.saved, timeout=10_000):  # stored in a worker thread; the form then closes
        dialog.buttons.button(QDialogButtonBox.StandardButton.Save).click()
    settle(qtbot, ws)
    assert not messages(demo.window), [box.text() for box in messages(demo.window)]
    with Archive.open(demo.archive, read_only=True) as archive:
        new = [archive.get_snapshot(s.id) for s in archive.list_snapshots(include_retired=True,
                                                                          include_superseded=True)
               if s.id not in before]
        lots = {s.lot.lot_id: s.snapshot_count for s in archive.list_lots()}
    strips = session.analysis().strips
    assert len(new) == len(strips) and {s.lot_id for s in new} == {LOT_A}
    # As stored: the archive keeps figures to 1e-5.
    assert [s.figures.speed_log_exposure for s in new] == pytest.approx(
        [s.figures.speed_log_exposure for s in strips], abs=1e-5)
    table = ws.archive_panel.lots
    assert {table.item(k, 0).text(): int(table.item(k, 2).text()) for k in range(table.rowCount())} == lots


@pytest.mark.parametrize("kind", ["scan", "snapshot", "comparison", "qc"])
def test_every_pdf_report_opens_and_carries_the_caution(demo, qtbot, tmp_path, kind):
    from pypdf import PdfReader

    ws = demo.workspace
    if kind == "comparison" and ws.comparison is None:
        with qtbot.waitSignal(ws.comparison_shown, timeout=30_000):
            ws.compare_lots(LOT_A, LOT_B)
    start = {"scan": lambda: ws.exports.export("pdf", tmp_path / "scan.pdf"),
             "snapshot": lambda: ws.exports.export_snapshot_report(tmp_path / "snapshot.pdf"),
             "comparison": lambda: ws.exports.export_comparison_report(tmp_path / "comparison.pdf"),
             "qc": lambda: ws.exports.export_qc_report(tmp_path / "qc.pdf")}[kind]
    path = written(qtbot, ws, start)
    pages = [squash(page.extract_text()) for page in PdfReader(path).pages]
    assert all(squash(CAUTION) in page for page in pages)
    if kind == "scan":
        assert len(pages) == len(demo.window.session.analysis().strips)
    if kind == "snapshot":
        assert f"Snapshot {ws.archive_panel.view.record.snapshot.id}" in pages[0]


def test_the_step_and_figure_csv_round_trip(demo, qtbot, tmp_path):
    ws = demo.workspace
    strips = demo.window.session.analysis().strips
    path = written(qtbot, ws, lambda: ws.exports.export("steps", tmp_path / "steps.csv"))
    with path.open(newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    steps = [(strip.index, s) for strip in strips for s in strip.steps]
    assert len(rows) == len(steps)
    for row, (index, step) in zip(rows, steps):
        assert (int(row["strip"]), int(row["step"])) == (index, step.step)
        assert float(row["od [OD]"]) == pytest.approx(step.od, abs=5e-5)
        assert float(row["log_exposure [log10 rel. exposure]"]) == pytest.approx(step.log_exposure, abs=5e-7)
        assert row["excluded"] == ("yes" if step.excluded else "no")
    path = written(qtbot, ws, lambda: ws.exports.export("figures", tmp_path / "figures.csv"))
    with path.open(newline="", encoding="utf-8") as handle:
        figures = list(csv.DictReader(handle))
    column = next(name for name in figures[0] if name.startswith("average_gradient"))
    for row, strip in zip(figures, strips, strict=True):
        value = strip.figures.average_gradient
        assert (float(row[column]) if row[column] else math.nan) == pytest.approx(value)


def test_the_curve_plot_as_png_and_svg(demo, qtbot, tmp_path):
    ws = demo.workspace
    png = written(qtbot, ws, lambda: ws.exports.export("png", tmp_path / "curve.png"))
    image = QImage(str(png))
    assert not image.isNull() and image.width() > 500
    svg = written(qtbot, ws, lambda: ws.exports.export("svg", tmp_path / "curve.svg"))
    text = svg.read_text(encoding="utf-8")
    assert "<svg" in text and "optical density" in text


def test_every_page_has_a_shortcut_and_shows_the_caution(demo):
    ws, window = demo.workspace, demo.window
    shortcuts = [ws.page_actions[name].shortcut().toString() for name, _, _ in PAGES]
    assert all(shortcuts) and len(set(shortcuts)) == len(shortcuts)
    for name, _, _ in PAGES:
        ws.page_actions[name].trigger()
        QApplication.processEvents()
        page = ws.pages.currentWidget()
        assert window.caution_label.text() == CAUTION and window.caution_label.isVisible()
        # Once on every page, whole (issue 14 item 10: it was shown twice on each).
        shown = [label for label in window.findChildren(QLabel) if label.isVisible() and CAUTION in label.text()]
        assert shown == [window.caution_label], (name, [label.text()[:60] for label in shown])
        assert not page.isAncestorOf(window.caution_label)
        assert window.strips_dock.isVisible() == (name == "scan")
    ws.page_actions["archive"].trigger()
    assert ws.archive_panel.tabs.currentWidget() is ws.archive_panel.view
    ws.page_actions["trend"].trigger()
    assert ws.current_page() == "archive" and ws.archive_panel.tabs.currentWidget() is ws.archive_panel.trend
    ws.page_actions["scan"].trigger()


def test_a_chosen_archive_is_remembered(qtbot, window, settings, tmp_path):
    path = tmp_path / "mine" / "lots.sqlite3"
    assert window.workspace.new_archive(path)
    settle(qtbot, window.workspace)
    assert path.is_file() and archive_setting(settings) == path
    not_an_archive = tmp_path / "notes.sqlite3"
    not_an_archive.write_text("not a database\n" * 50, encoding="utf-8")
    window.workspace.open_archive(not_an_archive)  # checked in a worker thread: refused with a message
    qtbot.waitUntil(lambda: bool(messages(window)), timeout=3000)
    assert window.workspace.archive_path == path  # the refused file changed nothing
    again = MainWindow(settings=AppSettings(settings.file))
    qtbot.addWidget(again)
    assert again.workspace.archive_path == path and again.workspace.archive_panel.archive_path == path


def _reached(window, stage: str) -> bool:
    ws = window.workspace
    if stage == "at once":
        return True
    if stage == "between scans":
        return ws.progress.value() > 0
    if stage == "during the QC month":  # the lots are stored; the month is being added
        return ws.progress.value() >= round(100 * jobs._ARCHIVE_SHARE)
    return not ws.building  # "while comparing": built, the two lots' comparison under way


@pytest.mark.parametrize("stage", ["at once", "between scans", "during the QC month", "while comparing"])
def test_closing_during_the_demo_build_stops_it_and_keeps_no_half_archive(qtbot, window, tmp_path, demo,
                                                                          stage):
    folder = tmp_path / "demo"
    open_demo(window, archive_folder=folder)
    assert window.workspace.building and window.workspace.busy
    qtbot.waitUntil(lambda: _reached(window, stage), timeout=120_000)
    window.close()
    # The window stays until its work has stopped, then closes by itself; the UI thread never blocked.
    qtbot.waitUntil(lambda: not window.isVisible(), timeout=120_000)
    assert not window.work_running and QThreadPool.globalInstance().waitForDone(30_000)
    archive = folder / DEMO_ARCHIVE_NAME
    if stage in ("at once", "between scans"):
        assert not archive.exists()  # stopped at the next scan
    elif stage == "during the QC month":
        # Stopped before it was kept, or (seen too late) kept whole: never lots without their month.
        assert not archive.exists() or archive_contents(archive) == demo.contents
    else:
        assert archive_contents(archive) == demo.contents
    assert leftovers(folder) == []
    assert not messages(window)


def test_a_demo_build_cancelled_after_its_lots_leaves_no_archive(demo, tmp_path):
    # The lot archive is complete (renamed into place) when the cancel is seen; the QC month is not
    # in it yet.  Nothing that looks like a demo archive may be left.
    from stripscan.services.demo_archive import demo_schedule

    cancel = threading.Event()
    readings: list[str] = []

    def progress(fraction: float, text: str) -> None:
        readings.append(text)
        if sum(t.startswith("Reading ") for t in readings) == len(demo_schedule()):
            cancel.set()  # at the last scan: seen at the lot archive's own "ready"

    with pytest.raises(jobs.Cancelled):
        jobs.build_demo_workspace(tmp_path, demo.files, progress=progress, cancel=cancel)
    assert not (tmp_path / DEMO_ARCHIVE_NAME).exists() and leftovers(tmp_path) == []


def _collect(*, progress) -> int:
    """A garbage collection on a worker thread, as any allocation there may start one."""
    return gc.collect()


def test_a_worker_never_frees_the_windows_qt_objects(qtbot, window):
    # The hang: a collection on a worker freed Qt objects of the GUI thread (a QObject's destructor
    # in the worker waiting for Python's lock, a QMenu's on the GUI thread waiting for Qt's).
    gui = threading.get_ident()
    freed_on_gui: list[bool] = []

    def note(_ref) -> None:
        freed_on_gui.append(threading.get_ident() == gui)

    class Outline:
        """A reference cycle that owns Qt objects, as pyqtgraph's items and a replaced outline do."""

        def __init__(self) -> None:
            self.me = self
            self.roi = pg.ROI((0, 0), (10, 10))
            self.handles = [self.roi.addScaleHandle([1.0, 0.5], [0.0, 0.5]),
                            self.roi.addRotateHandle([1.0, 1.0], [0.5, 0.5])]
            self.menu = QMenu("Outline")
            self.menu.addAction("Poke", self.poke)
            self.receiver = QObject()

        def poke(self) -> None:
            """A slot."""

    gc.disable()  # no automatic pass on this thread: the worker's collection meets the cycle first
    try:
        outline = Outline()
        refs = [weakref.ref(o, note) for o in (outline.roi, *outline.handles, outline.menu, outline.receiver)]
        del outline
        done: list = []
        window.workspace.runner.start(_collect, on_done=done.append, on_error=done.append)
        qtbot.waitUntil(lambda: bool(done), timeout=30_000)
        assert not isinstance(done[0], BaseException)
        qtguard.collect_deferred()  # what the window's collector does every few seconds
    finally:
        gc.enable()
    assert all(ref() is None for ref in refs)
    assert len(freed_on_gui) == len(refs) and all(freed_on_gui)  # every one on the GUI thread
    assert qtguard.start_gui_collector().isActive()  # the window keeps the GUI thread collecting


def test_run_demo_keeps_settings_and_archive_in_its_folder(qapp, settings, tmp_path, monkeypatch):
    monkeypatch.setattr(sys, "excepthook", sys.excepthook)  # run_demo installs its guard; put ours back after
    seen: dict = {}

    def check() -> None:
        closing = seen.get("window")
        if closing is not None:
            if not closing.isVisible():  # it closed itself once its build had stopped
                QApplication.exit(0)  # the module's demo window is still open: exec would wait for it
            return
        for window in QApplication.topLevelWidgets():
            if isinstance(window, MainWindow) and window.isVisible() and window.workspace.building:
                seen["archive"] = window.workspace.archive_path
                seen["settings"] = window.settings.file
                seen["window"] = window
                window.close()

    timer = QTimer(qapp)
    timer.timeout.connect(check)
    timer.start(50)
    try:
        assert run_demo(str(tmp_path)) == 0
    finally:
        timer.stop()
    window = seen.pop("window")
    assert seen == {"archive": tmp_path / DEMO_ARCHIVE_NAME, "settings": tmp_path / "stripscan-demo.ini"}
    assert not window.work_running  # closed only once its build had stopped: nothing half made is left
    assert not (tmp_path / DEMO_ARCHIVE_NAME).exists() and leftovers(tmp_path) == []
    close_and_delete(window)
