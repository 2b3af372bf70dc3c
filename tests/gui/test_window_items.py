"""What issue 14 found broken or puzzling on the window's pages, each item checked as a user meets it."""

from __future__ import annotations

import datetime as dt
import re

import pytest

from stripscan.archive import Archive
from stripscan.core.calibration_files import load_calibration
from stripscan.core.pipeline import analyze_scan
from stripscan.core.reading import AnalysisOptions
from stripscan.gui.views.trend_view import TrendView

from gui_helpers import settle


@pytest.fixture
def one_day_archive(tmp_path, files):
    """Two strips of one lot stored the same day (the trend's points share one date)."""
    path = tmp_path / "one_day.sqlite3"
    analysis = analyze_scan(files.scan, calibration=load_calibration(files.calibration),
                            options=AnalysisOptions(n_steps=21))
    with Archive.open(path) as archive:
        archive.add_analysis(analysis, "M-2610-A", create_missing=True, operator="M. Arden",
                             exposed_on="2026-11-02", processed_on="2026-11-02", scanned_on="2026-11-02")
    return path


def test_the_trend_of_snapshots_of_one_day_has_a_date_axis(qtbot, one_day_archive):
    """Item 3: ticks are dates (one a day at least), never clock times or seconds."""
    view = TrendView(one_day_archive)
    qtbot.addWidget(view)
    view.resize(900, 500)
    view.show()
    view.set_figure("speed_log_exposure")
    qtbot.waitUntil(lambda: not view.runner.busy, timeout=10_000)
    assert view.point_count() == 2
    axis = view.plot.getAxis("bottom")
    low, high = view.plot.viewRange()[0]
    ticks = [t for level in axis.tickValues(low, high, 800) for t in level[1]]
    labels = axis.tickStrings(ticks, 1.0, axis.tickValues(low, high, 800)[0][0])
    assert "2 Nov" in labels
    assert all(re.fullmatch(r"\d{1,2} [A-Z][a-z]{2}", label) for label in labels), labels
    assert high - low >= 2 * 86_400  # a day either side of the day of the points
    assert axis.autoSIPrefixScale == 1.0 and "x1e" not in axis.labelString()
    # Item 7: the legend on a background of its own, not read through the points.
    assert view.legend.opts["brush"].color().alpha() > 200


def test_a_long_trend_ticks_months(qtbot, one_day_archive):
    view = TrendView(one_day_archive)
    qtbot.addWidget(view)
    axis = view.plot.getAxis("bottom")
    start = dt.datetime(2025, 1, 1, 12).timestamp()
    levels = axis.tickValues(start, start + 400 * 86_400, 600)
    labels = axis.tickStrings(levels[0][1], 1.0, levels[0][0])
    assert labels and all(re.fullmatch(r"[A-Z][a-z]{2} \d{4}", label) for label in labels), labels


def test_excluding_the_step_below_the_last_usable_one_does_not_invent_a_steeper_gamma(qtbot, open_scan, window):
    """Item 4: lot A strip 2 with step 12 excluded read gamma 5.50 (5.05 before) and drew a tangent to 3.1 OD.

    Steps 14 and up lie beyond the calibrated range, so with step 12 excluded step 13 is the last usable step
    and the curve is steepest there: its slope is the interpolant's end condition, not a measurement.  The
    simulated film's true maximum slope is 5.10 at log E 1.69 (the demo scenario's model film, exact).
    """
    from stripscan.sim.demo_data import demo_files

    files = demo_files()
    window.use_calibration_file(str(files.calibration))
    open_scan(window, files.lot_a_scan)
    session = window.session
    before = session.result(1).figures
    assert before.gamma == pytest.approx(5.10, rel=0.03)  # within 3 % of the model film's own
    session.set_excluded(1, 12)
    session.select(1)
    after = session.result(1)
    usable = [s.step for s in after.steps if s.in_range and not s.excluded]
    assert usable[-1] == 13 and 12 not in usable
    assert after.figures.gamma is None
    assert any("gamma not stated" in note and "last usable step" in note for note in after.figures.notes)
    tx, _ = window.curve_view.tangent_item.getData()
    assert tx is None or len(tx) == 0
    # Every tangent drawn stays within the usable steps (with steps 12 and 13 both in use).
    session.set_excluded(1, 12, False)
    tx, ty = window.curve_view.tangent_item.getData()
    assert max(tx) <= 1.8 + 1e-9 and max(ty) < 3.05


def test_the_active_calibration_is_named_in_the_status_bar_also_after_a_restart(qtbot, window, files, settings):
    """Item 10: once the no-calibration banner is gone, the status bar still says which calibration is active."""
    from stripscan.gui.main_window import MainWindow

    assert "No calibration" in window.calibration_status.text()
    window.use_calibration_file(str(files.calibration))
    text = window.calibration_status.text()
    low, high = files.calibration_record.valid_od
    assert files.calibration.name in text and f"{low:.2f}–{high:.2f} OD" in text
    window.close()
    again = MainWindow(settings=type(settings)(settings.file))
    qtbot.addWidget(again)
    assert files.calibration.name in again.calibration_status.text()


def test_the_empty_curve_has_plain_units_and_a_hint(qtbot, window):
    """Item 6: before a scan the curve read ±400 '(OD) (x0.001)'; now 0-3 log E, 0-3.5 OD and a hint."""
    from PySide6.QtWidgets import QApplication

    view = window.curve_view
    QApplication.processEvents()
    (x0, x1), (y0, y1) = view.plot.viewRange()
    assert -0.1 < x0 <= 0.0 and 3.0 <= x1 < 3.1 and -0.1 < y0 <= 0.0 and 3.5 <= y1 < 3.6
    for name in ("left", "bottom"):
        axis = view.plot.getAxis(name)
        assert "x0.001" not in axis.labelString() and axis.autoSIPrefixScale == 1.0
    assert view.empty_hint.isVisible() and "Open a scan" in view.empty_hint.toPlainText()


def test_the_calibration_assistant_before_a_fit_shows_no_band_and_plain_axes(qtbot, window):
    """Item 6: before a fit the assistant's chart ran 0.1-0.9 'Tablet step' with a band over the empty chart."""
    dialog = window.open_calibration_assistant()
    assert not dialog.valid_band.isVisible()
    for plot in dialog.findChildren(type(window.curve_view.plot_widget)):
        for name in ("left", "bottom"):
            axis = plot.getPlotItem().getAxis(name)
            assert axis.autoSIPrefixScale == 1.0
    dialog.reject()


def test_the_curve_legend_lies_outside_the_data_and_marks_excluded_and_unused_apart(qtbot, open_scan, window,
                                                                                     files):
    """Items 7, 9 and issue 13 item 6: one set of marks, the legend under the plot."""
    from stripscan.core.curve_marks import CURVE_MARKS
    from stripscan.render import curve_plot

    window.use_calibration_file(str(files.calibration))
    open_scan(window, files.scan)
    view = window.curve_view
    assert not any(type(item).__name__ == "LegendItem" for item in view.plot.items + view.plot.vb.addedItems)
    assert view.legend_label.isVisible()
    assert view.plot_widget.geometry().bottom() <= view.legend_label.geometry().top()
    text = view.legend_label.text()
    for key in ("unused", "excluded", "density_points", "gradient", "speed", "max_slope"):
        assert CURVE_MARKS[key].words in text
    result = window.session.result()
    step = [s.step for s in result.steps if s.in_range][3]
    window.session.set_excluded(window.session.selected, step)
    excluded_x, _ = view.main.excluded.getData()
    unused_x, _ = view.main.unused.getData()
    result = window.session.result()
    assert list(excluded_x) == [result.steps[step - 1].log_exposure]
    assert list(unused_x) == [s.log_exposure for s in result.steps if not s.in_range and not s.excluded]
    assert view.main.excluded.opts["symbol"] == "x" and view.main.unused.opts["symbol"] == "o"
    # The report draws the same things with the same shapes, colours and words.
    plot = curve_plot(result)
    marks = {item.label.split(" (")[0]: item for item in plot.items if getattr(item, "label", "")}
    assert marks[CURVE_MARKS["excluded"].words].marker == "cross"
    assert marks[CURVE_MARKS["excluded"].words].colour == CURVE_MARKS["excluded"].colour
    assert marks[CURVE_MARKS["speed"].words].marker == "diamond" == CURVE_MARKS["speed"].shape
    assert view.speed_item.opts["symbol"] == "d"
    assert marks[CURVE_MARKS["density_points"].words].marker == "square" and view.density_points_item.opts["symbol"] == "s"
    assert result.figures.gamma is not None
    assert any(getattr(item, "label", "").startswith(CURVE_MARKS["max_slope"].words) and item.marker == "triangle"
               for item in plot.items) and view.max_slope_item.opts["symbol"] == "t1"


def test_the_step_table_explains_its_flags_and_ticks_only_steps_on_the_curve(qtbot, open_scan, window, files):
    """Item 9: a step outside the calibrated range showed ticked yet 'not used'; MD, DD low, DD high unexplained."""
    from PySide6.QtCore import Qt

    window.use_calibration_file(str(files.calibration))
    open_scan(window, files.scan)
    table = window.step_table
    result = window.session.result()
    out = [s for s in result.steps if not s.in_range]
    assert out, "the fixture's dense steps lie beyond the calibrated range"
    item = table.table.item(out[0].step - 1, 0)
    assert item.checkState() == Qt.CheckState.Unchecked and not item.flags() & Qt.ItemFlag.ItemIsEnabled
    assert table.table.item(out[0].step - 1, 4).text().startswith("not used")
    key = table.key.text()
    # Common practice targets for processor QC: mid-density near 1.20, density difference steps near 2.20 and 0.45.
    assert "MD: mid-density step (closest to 1.20 OD)" in key and "2.20 and 0.45 OD" in key and "not used" in key


@pytest.mark.parametrize("size", [(1366, 768), (1024, 700)])
def test_every_page_fits_a_laptop_screen(qtbot, window, size):
    """Item 8: at 1024 x 700 the tabs shrank to 'Scan and curv' with scroll arrows and the caution was cut."""
    from PySide6.QtWidgets import QApplication

    window.resize(*size)
    for name in ("scan", "archive", "comparison", "qc"):
        window.workspace.show_page(name)
        QApplication.processEvents()
        assert window.width() <= size[0] and window.height() <= size[1], name
        bar = window.workspace.pages.tabBar()
        assert bar.sizeHint().width() <= bar.width(), name  # every tab title whole, no scroll arrows
        buttons = window.workspace.corner_buttons[name]
        assert buttons and all(b.isVisible() and b.width() >= b.sizeHint().width() for b in buttons), name
        assert all(b.mapTo(window, b.rect().topRight()).x() <= window.width() for b in buttons), name
        caution = window.caution_label
        assert caution.isVisible() and caution.heightForWidth(caution.width()) <= caution.height(), name


def test_what_needs_a_scan_is_greyed_out_until_one_is_read(qtbot, window, files):
    """Item 13: 'Save strips to the archive' and the report were enabled with no scan loaded."""
    ws = window.workspace
    needs_scan = (ws.save_action, ws.scan_report_action, ws.steps_csv_action, ws.curve_png_action)
    assert not any(action.isEnabled() for action in needs_scan)
    window.open_path(str(files.scan))
    # While the scan is read, the strip list says so (it showed the previous scan's strips as if current).
    assert not window.strips_panel.list.isEnabled() and "Reading two_strips.tif" in window.strips_panel.details.text()
    qtbot.waitUntil(lambda: not window.busy, timeout=20_000)
    assert window.strips_panel.list.isEnabled()
    assert all(action.isEnabled() for action in needs_scan)
    assert window.progress.minimumWidth() >= 200  # the task's words fit on one line


def test_the_assistant_explains_the_missing_end_bars_and_offers_the_open_scan(qtbot, open_scan, window, files):
    """Item 11: no bar for steps 1 and 21 without a word; the open tablet scan was not offered.

    Since the range's top is tested (issue 12), the densest used step has its bar; only step 1 has none."""
    open_scan(window, files.tablet)
    dialog = window.open_calibration_assistant()
    assert dialog.scan_edit.text() == str(files.tablet)
    dialog.certificate_edit.setText(str(files.certificate))
    dialog.fit_button.click()
    qtbot.waitUntil(lambda: dialog.fit is not None, timeout=30_000)
    assert dialog.valid_band.isVisible()
    residuals = dialog.fit.calibration.residuals
    none = [k + 1 for k, r in enumerate(residuals) if r is None]
    assert none == [1]  # the lightest step starts the range; the densest is predicted one-sidedly
    note = dialog.residual_note.text()
    assert "No bar for step 1" in note and "extrapolate" in note
    assert f"Step {len(residuals)}, the densest used" in note
    low, high = dialog.residual_plot.viewRange()[1]
    assert high > 0.02 * 1.4  # the +0.02 OD goal line and its label lie inside the plot
    dialog.reject()


def test_the_comparison_page_speaks_plain_words(qtbot, open_scan, window, files, make_strip_scan, tmp_path):
    """Item 14: 'lot:M-2610-A' (command-line syntax), '0 strip(s)' and 'D_B − D_A' on the comparison page."""

    from tests.gui.test_whole_job import LOT_B_FILMS, store

    window.use_calibration_file(str(files.calibration))
    open_scan(window, files.scan)
    store(qtbot, window, "M-2610-A", "M. Arden", dt.date(2026, 11, 2))
    open_scan(window, make_strip_scan(tmp_path / "b.tif", LOT_B_FILMS, seed=3).path)
    store(qtbot, window, "M-2702-B", "M. Arden", dt.date(2026, 11, 3))
    ws = window.workspace
    with qtbot.waitSignal(ws.comparison_shown, timeout=30_000):
        ws.compare_lots("M-2610-A", "M-2702-B")
    panel = ws.compare_panel
    shown = " ".join([panel.title.text(), panel.notes.text(), window.statusBar().currentMessage(),
                      panel.delta_density_plot.getPlotItem().titleLabel.text])
    assert "lot:" not in shown and "strip(s)" not in shown and "D_B" not in shown and "_A" not in shown
    assert "lot M-2702-B (B, 2 strips) against lot M-2610-A (A, 2 strips)" in panel.title.text()
    assert "D(B) − D(A)" in panel.delta_density_plot.getPlotItem().titleLabel.text
    assert "not read on every set (read on 0 of the 2 strips" in panel.notes.text()


def test_the_save_form_suggests_the_lot_remembers_the_operator_and_keeps_a_film_type(qtbot, open_scan, window,
                                                                                       files, tmp_path):
    """Item 12: lot from 'lot_M-2610-A_…', operator remembered, required fields marked, a film-type field."""
    import shutil

    from PySide6.QtWidgets import QDialogButtonBox, QLabel

    from stripscan.gui.dialogs.save_snapshot_dialog import lot_from_file_name

    assert lot_from_file_name("sample_scans/lot_M-2610-A_three_strips.tif") == "M-2610-A"
    assert lot_from_file_name("two_strips.tif") == ""
    named = tmp_path / "lot_M-2610-A_three_strips.tif"
    shutil.copyfile(files.scan, named)
    window.use_calibration_file(str(files.calibration))
    open_scan(window, named)
    ws = window.workspace
    dialog = ws.save_to_archive()
    settle(qtbot, dialog)  # the archive's choices are read in a worker thread
    assert dialog.lot.currentText() == "M-2610-A" and dialog.new_lot.isChecked()
    assert "file name" in dialog.lot_hint.text()
    labels = [label.text() for label in dialog.findChildren(QLabel)]
    assert "Emulsion lot: *" in labels and "Operator: *" in labels and "* required" in labels
    dialog.film_type.setCurrentText("Blue-base green-sensitive")
    dialog.operator.setCurrentText("M. Arden")
    dialog.buttons.button(QDialogButtonBox.StandardButton.Save).click()
    settle(qtbot, dialog, ws)
    assert dialog.stored
    with Archive.open(ws.archive_path, read_only=True) as archive:
        assert archive.get_lot("M-2610-A").film_type == "Blue-base green-sensitive"
    again = ws.save_to_archive()
    settle(qtbot, again)
    assert again.operator.currentText() == "M. Arden"  # remembered
    assert again.film_type.currentText() == "Blue-base green-sensitive" and not again.film_type.isEnabled()
    assert not again.new_lot.isChecked()
    again.reject()


def test_report_save_dialogs_remember_the_last_folder(qtbot, window, tmp_path, monkeypatch):
    """Item 12: the report save dialogs always started in the same folder."""
    from PySide6.QtWidgets import QFileDialog

    asked: list[str] = []
    chosen = tmp_path / "reports" / "one.pdf"

    def fake(parent, title, start, kinds):
        asked.append(start)
        return str(chosen), kinds

    monkeypatch.setattr(QFileDialog, "getSaveFileName", staticmethod(fake))
    exports = window.workspace.exports
    assert exports._ask_path("Save", "first.pdf", "PDF files (*.pdf)") == str(chosen)
    exports._ask_path("Save", "second.pdf", "PDF files (*.pdf)")
    assert asked[1] == str(chosen.parent / "second.pdf")


def test_the_density_levels_can_be_typed_reset_and_nudged_with_the_keys(qtbot, open_scan, window, files):
    """Item 16: the levels could only be dragged."""
    from PySide6.QtCore import Qt

    window.use_calibration_file(str(files.calibration))
    open_scan(window, files.scan)
    view, session = window.curve_view, window.session
    view.level_edits["low"].setValue(0.30)
    view.level_edits["high"].setValue(1.80)
    assert session.levels == pytest.approx((0.30, 1.80))
    # ISO 9236-1: the average gradient between net densities 0.25 and 2.00.
    view.reset_levels.click()
    assert session.levels == pytest.approx((0.25, 2.00))
    assert view.level_edits["high"].value() == pytest.approx(2.00)
    view.choose_level(view.high_line)
    qtbot.keyClick(view.plot_widget, Qt.Key.Key_Down)
    assert session.levels == pytest.approx((0.25, 1.99))
    qtbot.keyClick(view.plot_widget, Qt.Key.Key_Up, Qt.KeyboardModifier.ShiftModifier)
    assert session.levels == pytest.approx((0.25, 2.04))
    assert view.level_edits["high"].value() == pytest.approx(2.04)
    assert session.result().figures.settings["gradient_high"] == pytest.approx(2.04)


def test_help_has_getting_started_and_the_shortcuts_and_drawing_says_what_to_click(qtbot, open_scan, window,
                                                                                  files):
    """Item 15: Help had only About; 'Draw a strip…' gave no instruction; View named a tab that does not exist."""
    from PySide6.QtWidgets import QApplication

    help_menu = next(a.menu() for a in window.menuBar().actions() if a.text() == "&Help")
    assert [a.text() for a in help_menu.actions() if a.text()] == ["&Getting started", "&Keyboard shortcuts",
                                                                   "&About stripscan"]
    started = window.show_getting_started()
    for word in ("Calibrate", "Open a scan", "Save strips to the archive", "Compare two lots", "New processor"):
        assert word in started.text()
    started.close()
    keys = dict((what, k) for k, what in window.shortcuts())
    assert keys["Open a scan"] and keys["Calibration assistant"] and keys["Processor QC"]
    shortcuts = window.show_shortcuts()
    assert "Ctrl+K" in shortcuts.text() and "↑/↓" in shortcuts.text()
    shortcuts.close()
    view_menu = next(a.menu() for a in window.menuBar().actions() if a.text() == "&View")
    tabs = [window.workspace.pages.tabText(k) for k in range(window.workspace.pages.count())]
    for action in view_menu.actions()[:5]:
        assert action.text() in tabs or action.text().split(" ▸ ")[0] in tabs, action.text()
    open_scan(window, files.scan)
    window.start_drawing()
    QApplication.processEvents()
    assert window.scan_hint.isVisible() and "Click the outer corner of step 1" in window.scan_hint.text()


def test_every_empty_curve_and_chart_has_plain_units_and_the_shared_marks(qtbot, window):
    """Item 6 and issue 13 item 6 on the other pages: the stored curve and the QC charts before any data."""
    from PySide6.QtWidgets import QApplication

    from stripscan.core.curve_marks import CURVE_MARKS

    ws = window.workspace
    from stripscan.gui.panels.archive_panel import _StoredCurve

    curve = ws.archive_panel.findChild(_StoredCurve)
    QApplication.processEvents()
    plot = curve.getPlotItem()
    assert plot.getAxis("left").autoSIPrefixScale == 1.0 and plot.getAxis("bottom").autoSIPrefixScale == 1.0
    (x0, x1), (y0, y1) = plot.viewRange()
    assert x0 > -0.2 and x1 < 3.2 and y0 > -0.2 and y1 < 3.7
    labels = [label.text for _, label in plot.legend.items]
    assert CURVE_MARKS["speed"].words in labels and CURVE_MARKS["excluded"].words in labels
    assert curve.speed.opts["symbol"] == "d"
    ws.show_page("qc")
    QApplication.processEvents()
    for q, chart in ws.qc_panel.plots.items():
        low, high = chart.viewRange()[1]
        # 21 CFR 900.12(e)(1) control limits of ±0.15 lie inside the empty chart's range.
        assert -0.25 < low < -0.15 and 0.15 < high < 0.25, q
