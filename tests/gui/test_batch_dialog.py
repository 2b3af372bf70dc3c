"""Several scans analysed from the window: in the background, with a progress bar, cancellable, a bad file listed."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from stripscan import CAUTION
from stripscan.core.pipeline import analyze_scan
from stripscan.core.reading import AnalysisOptions
from stripscan.gui.dialogs import batch_dialog
from stripscan.gui.dialogs.batch_dialog import BatchDialog, start_batch
from stripscan.gui.tasks import TaskRunner


@pytest.fixture
def scans(files, tmp_path) -> list[Path]:
    """Two copies of the two-strip scan with a damaged file between them."""
    folder = tmp_path / "in"
    folder.mkdir()
    first, second = folder / "monday.tif", folder / "tuesday.tif"
    shutil.copyfile(files.scan, first)
    shutil.copyfile(files.scan, second)
    bad = folder / "damaged.tif"
    shutil.copyfile(files.bad, bad)
    return [first, bad, second]


def test_batch_writes_each_result_and_lists_the_bad_file(qtbot, files, scans, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    dialog = start_batch(TaskRunner(), scans, out, files.calibration_record, AnalysisOptions(), workers=2)
    assert dialog is not None
    qtbot.addWidget(dialog)
    assert dialog.running and dialog.bar.maximum() == 3
    with qtbot.waitSignal(dialog.finished_batch, timeout=120_000):
        pass
    summary = dialog.summary
    assert [i.path for i in summary.done] == [scans[0], scans[2]]
    assert [i.path for i in summary.failed] == [scans[1]]
    # Each result is the same record the pipeline gives for that file, with its caution.
    for scan in (scans[0], scans[2]):
        data = json.loads((out / f"{scan.stem}.results.json").read_text(encoding="utf-8"))
        assert data["caution"] == CAUTION
        direct = analyze_scan(scan, calibration=files.calibration_record).to_dict()
        assert [s["metrics"] for s in data["strips"]] == json.loads(json.dumps([s["metrics"] for s in direct["strips"]]))
    assert not (out / "damaged.results.json").exists() and not list(out.glob("*.partial"))
    # The outcome of each file is listed; the bad one with its reason, naming it.
    assert dialog.table.rowCount() == 3
    assert "2 strip(s)" in dialog.table.item(0, 1).text()
    assert dialog.table.item(1, 1).text().startswith(str(scans[1]))
    assert "2 of 3 scans analysed, 1 failed" in dialog.status.text()
    assert dialog.bar.value() == 3
    dialog.grab().save(str(tmp_path / "batch-done.png"))


def test_cancel_keeps_what_was_done_and_reads_no_further(qtbot, files, tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    scans = []
    for k in range(6):
        scans.append(folder / f"day_{k}.tif")
        shutil.copyfile(files.scan, scans[-1])
    out = tmp_path / "out"
    out.mkdir()
    dialog = start_batch(TaskRunner(), scans, out, None, AnalysisOptions(), workers=1)
    qtbot.addWidget(dialog)
    qtbot.waitUntil(lambda: dialog.bar.value() >= 1, timeout=60_000)
    dialog.reject()  # the Cancel button
    assert dialog.isVisible()  # what was done stays in view
    with qtbot.waitSignal(dialog.finished_batch, timeout=60_000):
        pass
    summary = dialog.summary
    assert summary.cancelled and summary.done
    written = sorted(p.name for p in out.glob("*.json"))
    assert written == sorted(f"{i.path.stem}.results.json" for i in summary.done)
    assert dialog.table.item(5, 1).text() == "not read (cancelled)"
    dialog.reject()
    assert not dialog.isVisible()


def test_two_scans_of_one_name_are_refused_before_reading(qtbot, files, tmp_path, monkeypatch):
    shown = []
    monkeypatch.setattr("stripscan.gui.errors.show_message", lambda parent, title, text, **kw: shown.append(text))
    for name in ("a", "b"):
        (tmp_path / name).mkdir()
        shutil.copyfile(files.scan, tmp_path / name / "strips.tif")
    assert start_batch(TaskRunner(), [tmp_path / "a" / "strips.tif", tmp_path / "b" / "strips.tif"], tmp_path, None,
                       AnalysisOptions()) is None
    assert "would both be written to" in shown[0] and str(tmp_path / "strips.results.json") in shown[0]


def test_a_failure_of_the_whole_batch_is_reported_not_fatal(qtbot, files, tmp_path, monkeypatch):
    reported = []

    def broken(*args, **kwargs):
        raise OSError("cannot start worker processes: too many open files")

    monkeypatch.setattr(batch_dialog, "analyse_scans", broken)
    monkeypatch.setattr(batch_dialog, "report_error", lambda parent, title, error: reported.append(str(error)))
    dialog = start_batch(TaskRunner(), [files.scan], tmp_path, None, AnalysisOptions())
    qtbot.addWidget(dialog)
    qtbot.waitUntil(lambda: not dialog.running, timeout=30_000)
    assert reported == ["cannot start worker processes: too many open files"]
    assert "stopped" in dialog.status.text()
    assert dialog.buttons.buttons()[0].text() == "Close"


def test_progress_state_drawn(qtbot, files, tmp_path):
    dialog = BatchDialog(TaskRunner(), [Path(f"/scans/daily_2026-11-{d:02d}.tif") for d in range(2, 14)], tmp_path,
                         files.calibration_record, AnalysisOptions())
    qtbot.addWidget(dialog)
    dialog.show()
    dialog._progress(5 / 12, "[5/12] 0:09 left  daily_2026-11-06.tif")
    assert dialog.bar.value() == 5 and dialog.bar.text() == "5 of 12"
    dialog.grab().save(str(tmp_path / "batch-progress.png"))


def test_the_window_analyses_several_scans_with_its_calibration(qtbot, window, files, scans, tmp_path, monkeypatch):
    from PySide6.QtWidgets import QFileDialog

    from stripscan.core.calibration_files import load_calibration

    window.session.set_calibration(load_calibration(files.calibration), str(files.calibration))
    out = tmp_path / "results"
    out.mkdir()
    monkeypatch.setattr(QFileDialog, "getOpenFileNames", lambda *a, **k: ([str(p) for p in scans], ""))
    monkeypatch.setattr(QFileDialog, "getExistingDirectory", lambda *a, **k: str(out))
    action = next(a for a in window.findChildren(type(window.open_action)) if a.text() == "Analyse se&veral scans…")
    action.trigger()
    (dialog,) = window.findChildren(BatchDialog)
    assert window.work_running  # the window knows: it would wait for the work before closing
    with qtbot.waitSignal(dialog.finished_batch, timeout=120_000):
        pass
    assert not window.work_running
    assert sorted(p.name for p in out.iterdir()) == ["monday.results.json", "tuesday.results.json"]
    data = json.loads((out / "monday.results.json").read_text(encoding="utf-8"))
    assert data["calibration"]["sha256"] == files.calibration_record.sha256  # read with the window's calibration
    assert "damaged.tif" in dialog.table.item(1, 1).text()


def test_closing_the_window_stops_a_batch_and_waits_for_it(qtbot, window, files, tmp_path, monkeypatch):
    from PySide6.QtWidgets import QFileDialog

    folder = tmp_path / "in"
    folder.mkdir()
    for k in range(8):
        shutil.copyfile(files.scan, folder / f"day_{k}.tif")
    out = tmp_path / "out"
    out.mkdir()
    monkeypatch.setattr(QFileDialog, "getOpenFileNames", lambda *a, **k: (sorted(map(str, folder.iterdir())), ""))
    monkeypatch.setattr(QFileDialog, "getExistingDirectory", lambda *a, **k: str(out))
    dialog = window.ask_analyse_several()
    qtbot.waitUntil(lambda: dialog.bar.value() >= 1, timeout=60_000)
    window.close()
    qtbot.waitUntil(lambda: not window.isVisible(), timeout=60_000)
    assert dialog.summary is not None and dialog.summary.cancelled  # stopped early, not run to the end
    assert len(list(out.glob("*.json"))) == len(dialog.summary.done) and not list(out.glob("*.partial"))


def test_dropping_several_scans_analyses_them_together(qtbot, window, files, scans, tmp_path, monkeypatch):
    from PySide6.QtCore import QMimeData, QPointF, Qt, QUrl
    from PySide6.QtGui import QDropEvent
    from PySide6.QtWidgets import QFileDialog

    out = tmp_path / "results"
    out.mkdir()
    monkeypatch.setattr(QFileDialog, "getExistingDirectory", lambda *a, **k: str(out))
    mime = QMimeData()
    mime.setUrls([QUrl.fromLocalFile(str(p)) for p in (scans[0], files.calibration, scans[2])])
    window.dropEvent(QDropEvent(QPointF(20, 20), Qt.DropAction.CopyAction, mime, Qt.MouseButton.LeftButton,
                                Qt.KeyboardModifier.NoModifier))
    (dialog,) = window.findChildren(BatchDialog)
    with qtbot.waitSignal(dialog.finished_batch, timeout=120_000):
        pass
    assert [i.path for i in dialog.summary.done] == [scans[0], scans[2]]
    data = json.loads((out / "tuesday.results.json").read_text(encoding="utf-8"))
    # The calibration dropped with them was used for them.
    assert data["calibration"]["sha256"] == files.calibration_record.sha256
