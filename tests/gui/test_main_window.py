"""The main window shows the core's numbers and follows the session both ways."""

from __future__ import annotations

import sys

import numpy as np
import pytest
from PySide6.QtCore import QMimeData, QPointF, Qt, QUrl
from PySide6.QtGui import QDropEvent, QGuiApplication
from PySide6.QtWidgets import QMessageBox

from stripscan import CAUTION
from stripscan.core.calibration_files import load_calibration
from stripscan.core.reading import read_density
from stripscan.core.curve import compute_figures
from stripscan.core.figure_settings import FigureSettings
from stripscan.core.locate import locate_strips
from stripscan.core.sample import read_strip
from stripscan.core.scan import load_scan
from stripscan.core.curve import strip_curve
from stripscan.gui.main_window import MainWindow
from stripscan.gui.views.tables import step_table_text


def messages(window) -> list[QMessageBox]:
    return [box for box in window.findChildren(QMessageBox) if box.isVisible()]


def calibrated(open_scan, window, files):
    assert window.use_calibration_file(str(files.calibration))
    open_scan(window, files.scan)


def test_open_scan_shows_every_strip_and_step_box(qtbot, open_scan, window, files):
    open_scan(window, files.scan)
    scan = load_scan(files.scan)
    found = locate_strips(scan.signal, dpi=scan.info.dpi)
    assert window.scan_view.overlay_count() == len(found) == len(window.session.strips) == 2
    for k, item in enumerate(found):
        assert window.scan_view.step_box_count(k) == item.geometry.n_steps == 21  # common practice: 21-step strips
    assert window.strips_panel.list.count() == 2
    assert window.scan_view.image.image.shape == scan.signal.shape
    assert "two_strips.tif" in window.windowTitle()
    # Uncalibrated (direct mode): the banner says so.
    assert window.banner.isVisible() and "direct mode" in window.banner.label.text()


def test_dragging_a_density_level_updates_gradient_and_latitude(qtbot, open_scan, window, files):
    calibrated(open_scan, window, files)
    assert not window.banner.isVisible()  # a fresh calibration of the same kind of scan
    session, curve = window.session, window.curve_view
    base_fog = session.result().figures.base_fog
    assert curve.low_line.value() == pytest.approx(base_fog + 0.25)  # ISO 9236-1 default levels
    assert curve.high_line.value() == pytest.approx(base_fog + 2.00)
    curve.low_line.setValue(base_fog + 0.60)  # what a drag does to the line
    curve.high_line.setValue(base_fog + 1.70)
    assert session.levels == pytest.approx((0.60, 1.70))
    state = session.strips[session.selected]
    steps = state.result.steps
    bf = read_density(session.mapping, state.base_fog_reading, session.scan.pixel_mm)[0]
    core = compute_figures([s.log_exposure for s in steps], [s.od for s in steps],
                           [s.in_range and not s.excluded for s in steps], base_fog=bf,
                           settings=FigureSettings(gradient_low=0.60, gradient_high=1.70))
    shown = window.figures
    assert shown.value_of("average_gradient") == pytest.approx(core.average_gradient, rel=1e-9)
    assert shown.value_of("latitude_log_exposure") == pytest.approx(core.latitude_log_exposure, rel=1e-9)
    assert shown.text_of("average_gradient") == f"{core.average_gradient:.2f}"  # Python's own rounding
    x, y = curve.gradient_item.getData()
    assert x == pytest.approx([core.gradient_low_log_exposure, core.gradient_high_log_exposure], abs=1e-6)
    assert y == pytest.approx([base_fog + 0.60, base_fog + 1.70])
    # ISO 9236-1: the average gradient is the slope of the line between the two points
    assert (y[1] - y[0]) / (x[1] - x[0]) == pytest.approx(core.average_gradient, rel=1e-5)
    assert curve.latitude_region.getRegion() == pytest.approx(x, abs=1e-6)
    assert "net 0.60" in curve.low_line.label.toPlainText()
    assert window.settings.levels() == pytest.approx((0.60, 1.70))


def test_speed_point_and_maximum_slope_are_marked(qtbot, open_scan, window, files):
    calibrated(open_scan, window, files)
    f = window.session.result().figures
    sx, sy = window.curve_view.speed_item.getData()
    assert sx[0] == pytest.approx(f.speed_log_exposure)
    assert sy[0] == pytest.approx(f.base_fog + 1.00)  # ISO 9236-1: speed point at net density 1.00
    mx, _ = window.curve_view.max_slope_item.getData()
    assert mx[0] == pytest.approx(f.gamma_log_exposure)
    window.curve_view.show_gradient.setChecked(True)
    grid, slope = window.curve_view.gradient_curve.getData()
    assert np.max(slope) == pytest.approx(f.gamma, rel=0.01)
    assert window.curve_view.plot.getAxis("right").isVisible()


def test_excluding_a_step_in_the_table_changes_the_curve(qtbot, open_scan, window, files):
    calibrated(open_scan, window, files)
    before_x, before_y = window.curve_view.main.line.getData()
    result = window.session.result()
    step = [s.step for s in result.steps if s.in_range][-3]
    window.tabs.setCurrentWidget(window.step_table)
    window.step_table.set_step_used(step, False)
    after = window.session.result()
    assert after.steps[step - 1].excluded
    x, y = window.curve_view.main.line.getData()
    expected = strip_curve(after)
    assert y == pytest.approx(expected(x))  # the drawn curve is the core's curve without the step
    assert not np.allclose(y, np.interp(x, before_x, before_y))
    assert window.scan_view.steps_drawn_as(0, "excluded") == [step]
    assert window.step_table.table.item(step - 1, 4).text() == "excluded"
    window.step_table.set_step_used(step, True)
    assert window.scan_view.steps_drawn_as(0, "excluded") == []


def test_double_click_on_a_step_excludes_it(qtbot, open_scan, window, files):
    calibrated(open_scan, window, files)
    g = window.session.strips[0].geometry
    r, c = g.step_center_rc(12)
    view = window.scan_view
    scene_pos = view.view.mapViewToScene(QPointF(c, r))
    widget_pos = view.plot_widget.mapFromScene(scene_pos)
    viewport, left = view.plot_widget.viewport(), Qt.MouseButton.LeftButton
    qtbot.mouseClick(viewport, left, pos=widget_pos)  # a double click: click, second press, release
    qtbot.mouseDClick(viewport, left, pos=widget_pos)
    qtbot.mouseRelease(viewport, left, pos=widget_pos)
    qtbot.waitUntil(lambda: 12 in window.session.strips[0].excluded, timeout=3000)


def test_model_and_widgets_follow_each_other(qtbot, open_scan, window, files):
    calibrated(open_scan, window, files)
    session, panel = window.session, window.strips_panel
    session.set_levels(0.40, 1.60)  # model -> widget
    bf = session.result().figures.base_fog
    assert window.curve_view.low_line.value() == pytest.approx(bf + 0.40)
    assert window.curve_view.high_line.value() == pytest.approx(bf + 1.60)
    session.select(1)
    assert panel.list.currentRow() == 1
    assert window.figures.title.text() == "Figures of strip 2"
    panel.list.setCurrentRow(0)  # widget -> model
    assert session.selected == 0
    panel.steps.setValue(11)
    assert session.strips[0].geometry.n_steps == 11 and window.scan_view.step_box_count(0) == 11
    session.set_step_count(0, 21)
    assert panel.steps.value() == 21
    panel.list.item(1).setCheckState(Qt.CheckState.Checked)
    assert session.overlay == {1} and 1 in window.curve_view.overlays
    ox, oy = window.curve_view.overlays[1].points.getData()
    used = [s for s in session.result(1).steps if s.in_range and not s.excluded]
    assert list(oy) == pytest.approx([s.od for s in used])
    window.next_action.trigger()
    assert session.selected == 1
    window.previous_action.trigger()
    assert session.selected == 0
    assert window.next_action.shortcut().toString() and window.open_action.shortcut().toString() == "Ctrl+O"


def test_moving_the_outline_reads_the_steps_again(qtbot, open_scan, window, files):
    calibrated(open_scan, window, files)
    view, session = window.scan_view, window.session
    old = session.strips[0].geometry
    x, y = view.roi.pos()
    view.roi.setPos((x + 6.0, y))  # as a drag of the rectangle does
    qtbot.waitUntil(lambda: session.strips[0].geometry.origin_rc[1] == pytest.approx(old.origin_rc[1] + 6.0), timeout=3000)
    state = session.strips[0]
    assert state.geometry.manual
    readings, _, _ = read_strip(session.scan, None, state.geometry)
    assert state.readings == tuple(readings)
    view.roi.setSize((view.roi.size()[0] * 0.9, view.roi.size()[1]))
    qtbot.waitUntil(lambda: session.strips[0].geometry.step_pitch_px == pytest.approx(old.step_pitch_px * 0.9), timeout=3000)


def test_a_strip_drawn_by_hand(qtbot, open_scan, window, files):
    calibrated(open_scan, window, files)
    outline = files.truth[1]["outline_rc"]
    view = window.scan_view
    view.start_drawing()
    assert view.drawing
    for r, c in outline[:3]:
        view._add_draw_point((r, c))  # what the three clicks hand over
    assert not view.drawing
    assert len(window.session.strips) == 3 and window.session.selected == 2
    assert window.scan_view.step_box_count(2) == 21
    assert window.session.result(2).figures.average_gradient == pytest.approx(
        window.session.result(1).figures.average_gradient, rel=0.03)


def test_unreadable_file_gives_a_message_and_the_window_lives_on(qtbot, open_scan, window, files, tmp_path):
    open_scan(window, files.bad)
    qtbot.waitUntil(lambda: bool(messages(window)), timeout=3000)
    box = messages(window)[0]
    assert str(files.bad) in box.text() and "cannot be read" in box.text()
    assert window.session.scan is None and window.isVisible()
    log = (tmp_path / "logs" / "stripscan.log").read_text(encoding="utf-8")
    assert "not_a_scan.tif" in log
    box.close()
    open_scan(window, files.scan)  # still works
    assert len(window.session.strips) == 2


def test_bad_calibration_file_is_named(qtbot, window, tmp_path):
    bad = tmp_path / "broken.json"
    bad.write_text("{not json", encoding="utf-8")
    assert not window.use_calibration_file(str(bad))
    qtbot.waitUntil(lambda: bool(messages(window)), timeout=3000)
    assert str(bad) in messages(window)[0].text()
    assert window.session.calibration is None


def test_settings_recent_files_and_restart(qtbot, open_scan, window, files, settings, tmp_path):
    open_scan(window, files.scan)
    window.use_calibration_file(str(files.calibration))
    window.session.set_levels(0.30, 1.90)
    window.close()
    assert settings.file.parent == tmp_path
    text = settings.file.read_text(encoding="utf-8")
    assert "two_strips.tif" in text and "calibration.json" in text
    again = MainWindow(settings=type(settings)(settings.file))
    qtbot.addWidget(again)
    names = [a.text() for a in again.recent_menu.actions()]
    assert "two_strips.tif" in names
    assert again.session.calibration is not None and again.session.levels == pytest.approx((0.30, 1.90))
    recent = next(a for a in again.recent_menu.actions() if a.text() == "two_strips.tif")
    recent.trigger()
    qtbot.waitUntil(lambda: not again.busy, timeout=20_000)
    assert len(again.session.strips) == 2


def test_dropping_files_opens_them(qtbot, window, files):
    mime = QMimeData()
    mime.setUrls([QUrl.fromLocalFile(str(files.scan)), QUrl.fromLocalFile(str(files.calibration))])
    event = QDropEvent(QPointF(20, 20), Qt.DropAction.CopyAction, mime, Qt.MouseButton.LeftButton,
                       Qt.KeyboardModifier.NoModifier)
    window.dropEvent(event)
    qtbot.waitUntil(lambda: not window.busy, timeout=20_000)
    assert window.session.calibration is not None and len(window.session.strips) == 2
    assert window.session.result(0).steps[0].in_range  # densities from the dropped calibration


def test_banner_warns_of_a_different_resolution(qtbot, make_strip_scan, open_scan, window, files, tmp_path):
    other = make_strip_scan(tmp_path / "at_100_dpi.tif", dpi=100.0, seed=9).path
    window.use_calibration_file(str(files.calibration))
    open_scan(window, other)
    assert window.banner.isVisible()
    assert "100 dpi" in window.banner.label.text() and "150 dpi" in window.banner.label.text()
    window.session.set_max_calibration_age(1e-6)
    assert "days old" in window.banner.label.text()


def test_copy_and_save_the_step_table(qtbot, open_scan, window, files, tmp_path):
    calibrated(open_scan, window, files)
    window.step_table.copy()
    result = window.session.result()
    assert QGuiApplication.clipboard().text() == step_table_text(result)
    path = window.step_table.save_csv(tmp_path / "steps.csv")
    rows = path.read_text(encoding="utf-8").splitlines()
    assert rows[0] == "Step,Log E,OD,Uncertainty (OD),Flag" and len(rows) == 22
    assert float(rows[5].split(",")[2]) == pytest.approx(result.steps[4].od, abs=5e-4)
    saved = window.save_results(tmp_path / "results.json")
    import json

    data = json.loads(saved.read_text(encoding="utf-8"))
    assert data["caution"] == CAUTION and len(data["strips"]) == 2
    assert data["strips"][0]["metrics"]["average_gradient"] == pytest.approx(result.figures.average_gradient, abs=1e-5)


def test_every_figure_has_a_unit_and_a_definition(qtbot, open_scan, window, files):
    calibrated(open_scan, window, files)
    table = window.figures.table
    assert table.rowCount() >= 10
    for k in range(table.rowCount()):
        assert table.item(k, 0).toolTip() and table.item(k, 2).text()
    assert window.figures.caution.text() == CAUTION
    assert window.caution_label.text() == CAUTION
    about = window.show_about()
    assert CAUTION in about.text()
    about.close()


def test_zoom_changes_the_view(qtbot, open_scan, window, files):
    open_scan(window, files.scan)
    (x0, x1), _ = window.scan_view.view.viewRange()
    window.scan_view.zoom(2.0)
    (z0, z1), _ = window.scan_view.view.viewRange()
    assert (z1 - z0) == pytest.approx((x1 - x0) / 2.0, rel=0.05)
    window.scan_view.fit()
    (f0, f1), _ = window.scan_view.view.viewRange()
    assert (f1 - f0) > (z1 - z0)


def test_work_runs_off_the_ui_thread_with_progress(qtbot, window, files):
    seen = []
    window.runner.progress.connect(lambda fraction, text: seen.append((fraction, text)))
    window.open_path(files.scan)
    assert window.busy and window.progress.isVisible()  # returned at once: the loop is free
    qtbot.waitUntil(lambda: not window.busy, timeout=20_000)
    assert not window.progress.isVisible()
    assert seen and seen[-1][0] == pytest.approx(1.0)
    assert any("Looking for strips" in text for _, text in seen)


def test_the_excepthook_guard_reports_instead_of_dying(qtbot, window, tmp_path):
    from stripscan.gui.errors import excepthook_guard

    hook = excepthook_guard(lambda: window)
    try:
        raise RuntimeError("a slot broke")
    except RuntimeError:
        hook(*sys.exc_info())
    qtbot.waitUntil(lambda: bool(messages(window)), timeout=3000)
    box = messages(window)[0]
    assert "a slot broke" in box.text() and "stripscan.log" in box.text()
    log = (tmp_path / "logs" / "stripscan.log").read_text(encoding="utf-8")
    assert "Traceback" in log and "a slot broke" in log


def test_reference_guard_keeps_true_alive():
    from PySide6.QtCore import QObject, Signal

    from stripscan.render import qtguard

    class Probe(QObject):
        ping = Signal()

    probe = Probe()
    probe.ping.connect(lambda: None)
    before = sys.getrefcount(True), sys.getrefcount(None)
    for _ in range(20_000):  # more than True's or None's whole count without the guard on an affected binding
        probe.ping.emit()
        probe.property("unset")
    if qtguard.GUARDED:
        assert sys.getrefcount(True) > 1 << 39 and sys.getrefcount(None) > 1 << 39
    else:
        assert before[0] - sys.getrefcount(True) < 100 and before[1] - sys.getrefcount(None) < 100


def test_demo_opens_with_a_scan_analysed_and_a_calibration_active(qtbot, window):
    from stripscan.gui.app import open_demo

    files = open_demo(window)
    qtbot.waitUntil(lambda: not window.busy, timeout=20_000)
    assert window.session.calibration == load_calibration(files.calibration)
    assert len(window.session.strips) == 3 and window.session.result(0) is not None


def test_a_strip_drawn_without_base_fog_keeps_its_density_levels(qtbot, open_scan, window, files):
    # No unexposed area: base+fog is not stated, net densities count from the lightest step
    # (the figures' note says so), and the two levels stay on the curve to be dragged.
    calibrated(open_scan, window, files)
    session, curve = window.session, window.curve_view
    drawn = session.strips[session.selected].geometry.replace(base_fog_v_px=None, manual=True)
    index = session.add_strip(drawn)
    figures = session.result(index).figures
    assert figures.base_fog is None and figures.net_reference is not None
    assert any("lightest step" in note for note in figures.notes)
    assert window.figures.text_of("base_fog") == "not read"
    assert curve.low_line.isVisible() and not curve.base_fog_line.isVisible()
    assert curve.low_line.value() == pytest.approx(figures.net_reference + 0.25)  # ISO 9236-1 default level
    curve.low_line.setValue(figures.net_reference + 0.50)  # what a drag does to the line
    assert session.levels[0] == pytest.approx(0.50)


def test_the_replaced_outline_is_deleted_by_qt_not_left_to_the_collector(qtbot, open_scan, window, files):
    # Outlines left to Python's collector were freed several at a time and crashed (a handle
    # deleting an object already gone); Qt must delete the old one when another strip is chosen.
    import shiboken6
    from PySide6.QtCore import QCoreApplication, QEvent

    open_scan(window, files.scan)
    old = window.scan_view.roi
    assert old is not None
    window.session.select_next()
    QCoreApplication.sendPostedEvents(None, QEvent.Type.DeferredDelete)
    assert window.scan_view.roi is not old and not shiboken6.isValid(old)


def test_direct_mode_uncertainty_column_says_noise_only(qtbot, open_scan, window, files, tmp_path):
    """Issue 13, missing 4: read without a calibration, the step table's uncertainty column says it holds the
    reading noise only, leaving out the error of having no calibration, not only the banner does."""
    open_scan(window, files.scan)
    header = window.step_table.table.horizontalHeaderItem(3)
    assert header.text() == "Uncertainty (OD), noise only"
    assert "error of having no calibration" in header.toolTip()
    rows = window.step_table.save_csv(tmp_path / "direct.csv").read_text(encoding="utf-8").splitlines()
    assert rows[0] == "Step,Log E,OD,\"Uncertainty (OD), noise only\",Flag"
    window.step_table.grab().save(str(tmp_path / "direct-steps.png"))
    # With a calibration the column is the plain uncertainty again.
    calibrated(open_scan, window, files)
    assert window.step_table.table.horizontalHeaderItem(3).text() == "Uncertainty (OD)"
