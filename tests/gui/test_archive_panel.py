"""The archive panel, the save form and the trend view show and store exactly what the archive holds."""

from __future__ import annotations

import datetime as dt
import shutil
from pathlib import Path

import pytest
from PySide6.QtCore import QPoint, QPointF, Qt
from PySide6.QtWidgets import QDialogButtonBox, QMessageBox

from stripscan import CAUTION
from stripscan.archive import FIGURES, Archive, calibration_hash
from stripscan.services.demo_archive import REVISED, build_demo_archive
from stripscan.core.calibration_files import load_calibration
from stripscan.core.pipeline import analyze_scan
from stripscan.core.reading import AnalysisOptions
from stripscan.sim.demo_data import demo_files
from stripscan.gui.panels.archive_panel import ArchivePanel
from stripscan.gui.panels.figures_panel import VALUE_ROLE
from stripscan.gui.dialogs.save_snapshot_dialog import SaveForm, SaveSnapshotDialog, check_form
from stripscan.gui.views.tables import figure_rows
from stripscan.gui.views.trend_view import TrendView

from gui_helpers import settle


@pytest.fixture(scope="module")
def demo_archive(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_demo_archive(tmp_path_factory.mktemp("demo_archive"))


@pytest.fixture
def archive_path(demo_archive: Path, tmp_path: Path) -> Path:
    """A fresh copy of the demo archive for each test (the file is closed and complete)."""
    copy = tmp_path / "archive.sqlite3"
    shutil.copyfile(demo_archive, copy)
    return copy


@pytest.fixture(scope="module")
def analysis():
    """Lot B's three acceptance strips read by the real pipeline with the demo calibration."""
    files = demo_files()
    calibration = load_calibration(files.calibration)
    return analyze_scan(files.lot_b_scan, calibration=calibration, options=AnalysisOptions(n_steps=21)), calibration


@pytest.fixture
def panel(qtbot, archive_path: Path) -> ArchivePanel:
    widget = ArchivePanel(archive_path)
    qtbot.addWidget(widget)
    widget.resize(1300, 800)
    widget.show()
    settle(qtbot, widget)
    return widget


def messages(widget) -> list[QMessageBox]:
    return [box for box in widget.findChildren(QMessageBox) if box.isVisible()]


def click_row(qtbot, table, row: int, *, double: bool = False) -> None:
    table.scrollToItem(table.item(row, 0))
    rect = table.visualItemRect(table.item(row, 0))
    qtbot.mouseClick(table.viewport(), Qt.MouseButton.LeftButton, pos=rect.center())
    if double:
        # QTest's double click alone sends no first press; a person's double click has one.
        qtbot.mouseDClick(table.viewport(), Qt.MouseButton.LeftButton, pos=rect.center())


def shown_ids(table) -> list[int]:
    return [int(table.item(k, 0).text()) for k in range(table.rowCount())]


def stored_count(path: Path) -> int:
    with Archive.open(path, read_only=True) as archive:
        return len(archive.list_snapshots(include_retired=True, include_superseded=True))


def test_the_lots_panel_lists_the_archives_lots_and_counts(panel: ArchivePanel, archive_path: Path) -> None:
    with Archive.open(archive_path, read_only=True) as archive:
        lots = archive.list_lots()
    table = panel.lots
    assert table.rowCount() == len(lots) == 2
    for k, summary in enumerate(lots):
        assert table.item(k, 0).text() == summary.lot.lot_id
        assert table.item(k, 1).text() == summary.lot.film_type
        assert int(table.item(k, 2).text()) == summary.snapshot_count
        assert (table.item(k, 3).text(), table.item(k, 4).text()) == (summary.first_date, summary.last_date)
    # Patient care: the caution stays in view under the snapshot and trend tabs.
    assert panel.caution.text() == CAUTION and panel.caution.isVisible()
    assert not messages(panel)


def test_selecting_a_lot_lists_its_snapshots(qtbot, panel: ArchivePanel, archive_path: Path) -> None:
    click_row(qtbot, panel.lots, 1)
    settle(qtbot, panel)
    assert panel.selected_lot() == "M-2702-B"
    with Archive.open(archive_path, read_only=True) as archive:
        current = archive.list_snapshots("M-2702-B")
        everything = archive.list_snapshots("M-2702-B", include_retired=True, include_superseded=True)
    assert shown_ids(panel.snapshot_table) == [s.id for s in current]
    assert "(17)" in panel.snapshot_title.text()
    speed = [float(panel.snapshot_table.item(k, 5).text()) for k in range(len(current))]
    assert speed == pytest.approx([s.speed_log_exposure for s in current], abs=5e-4)
    panel.show_all.setChecked(True)
    settle(qtbot, panel)
    assert shown_ids(panel.snapshot_table) == [s.id for s in everything]
    retired = [k for k, s in enumerate(everything) if s.retired_at is not None]
    assert len(retired) == 1
    status = panel.snapshot_table.columnCount() - 1
    assert panel.snapshot_table.item(retired[0], status).text().startswith("retired")


def test_opening_a_snapshot_shows_its_stored_figures_and_provenance(qtbot, panel: ArchivePanel,
                                                                    archive_path: Path) -> None:
    panel.select_lot("M-2610-A")
    settle(qtbot, panel)
    with qtbot.waitSignal(panel.snapshot_opened, timeout=5000) as opened:
        click_row(qtbot, panel.snapshot_table, 4, double=True)
    snapshot_id = int(panel.snapshot_table.item(4, 0).text())
    assert opened.args == [snapshot_id]
    with Archive.open(archive_path, read_only=True) as archive:
        stored = archive.get_snapshot(snapshot_id)
        calibration = archive.get_calibration(stored.calibration_hash)
    view = panel.view
    assert panel.tabs.currentWidget() is view
    for row in figure_rows(stored.figures, (0.25, 2.0)):
        assert view.value_of(row.key) == getattr(stored.figures, row.key)
    for name in FIGURES:
        assert view.value_of(name) == getattr(stored.figures, name)
    assert view.provenance_value("Scan file") == stored.scan.path
    assert view.provenance_value("Scan sha256") == stored.scan.sha256
    assert view.provenance_value("Calibration sha256") == stored.calibration_hash == calibration_hash(calibration)
    assert view.provenance_value("Operator") == stored.operator
    assert view.provenance_value("Processed on") == stored.processed_on
    assert view.provenance_value("Program version") == f"stripscan {stored.program_version}"
    # The curve is drawn through the steps the core put on it, from the stored densities.
    used = [s for s in stored.strip.steps if s.in_range and not s.excluded]
    x, y = view.curve.points.getData()
    assert list(x) == [s.log_exposure for s in used] and list(y) == [s.od for s in used]
    assert view.steps.rowCount() == len(stored.strip.steps)
    assert f"Snapshot {snapshot_id}" in view.title.text()


def test_the_revision_chain_is_shown_and_each_version_opens(qtbot, panel: ArchivePanel, archive_path: Path) -> None:
    with Archive.open(archive_path, read_only=True) as archive:
        revision = next(s for s in archive.list_snapshots(REVISED.lot) if s.revises is not None)
        chain = archive.history(revision.id)
    assert panel.open_snapshot(revision.id)
    settle(qtbot, panel)
    history = panel.view.history
    assert shown_ids(history) == [s.id for s in chain]
    assert REVISED.reason in history.item(1, 2).text()
    assert panel.view.provenance_value("Corrects snapshot") == f"{revision.revises}: {REVISED.reason}"
    with qtbot.waitSignal(panel.snapshot_opened, timeout=5000) as opened:
        click_row(qtbot, history, 0, double=True)
    assert opened.args == [chain[0].id]
    assert panel.view.provenance_value("Status") == f"revised by snapshot {revision.id}"
    assert panel.view.value_of("speed_log_exposure") == chain[0].figures.speed_log_exposure


def fill(dialog: SaveSnapshotDialog, lot: str, *, operator: str = "J. Solberg") -> None:
    dialog.lot.setCurrentText(lot)
    dialog.processor.setCurrentText("Processor 1")
    dialog.sensitometer.setCurrentText("SEN-01")
    dialog.operator.setCurrentText(operator)
    dialog.set_dates(dt.date(2026, 11, 24))
    dialog.notes.setText("acceptance strips")


def test_the_save_form_stores_one_snapshot_per_strip_and_the_panel_follows(qtbot, panel: ArchivePanel,
                                                                          archive_path: Path, analysis) -> None:
    result, calibration = analysis
    before = {s.lot.lot_id: s.snapshot_count for s in panel.lot_summaries}
    panel.select_lot("M-2610-A")
    dialog = panel.save_dialog(result, calibration)
    settle(qtbot, dialog)
    fill(dialog, "M-2702-B")
    with qtbot.waitSignal(dialog.saved, timeout=5000) as saved:
        qtbot.mouseClick(dialog.buttons.button(QDialogButtonBox.StandardButton.Save), Qt.MouseButton.LeftButton)
    settle(qtbot, panel)
    lot, ids = saved.args
    assert lot == "M-2702-B" and len(ids) == len(result.strips) == 3
    with Archive.open(archive_path, read_only=True) as archive:
        stored = [archive.get_snapshot(i) for i in ids]
        lots = {s.lot.lot_id: s.snapshot_count for s in archive.list_lots()}
    assert [s.strip.to_dict() for s in stored] == [strip.to_dict() for strip in result.strips]
    assert {s.calibration_hash for s in stored} == {calibration_hash(calibration.to_dict())}
    assert {(s.lot_id, s.processor, s.sensitometer, s.operator, s.processed_on, s.notes) for s in stored} == {
        ("M-2702-B", "Processor 1", "SEN-01", "J. Solberg", "2026-11-24", "acceptance strips")}
    assert {s.scan.sha256 for s in stored} == {result.scan.sha256}
    assert lots["M-2702-B"] == before["M-2702-B"] + 3
    # The panel has read the archive again and shows the lot saved to.
    assert panel.selected_lot() == "M-2702-B"
    assert int(panel.lots.item(1, 2).text()) == lots["M-2702-B"]
    assert set(ids) <= set(shown_ids(panel.snapshot_table))


@pytest.mark.parametrize("lot, says", [("", "Choose the emulsion lot"), ("M-9999-Z", "'M-9999-Z' is not in the archive")])
def test_the_save_form_refuses_a_missing_lot_and_stores_nothing(qtbot, panel: ArchivePanel, archive_path: Path,
                                                                analysis, lot: str, says: str) -> None:
    result, calibration = analysis
    before = stored_count(archive_path)
    dialog = panel.save_dialog(result, calibration)
    settle(qtbot, dialog)
    fill(dialog, lot)
    qtbot.mouseClick(dialog.buttons.button(QDialogButtonBox.StandardButton.Save), Qt.MouseButton.LeftButton)
    shown = messages(dialog)
    assert len(shown) == 1 and says in shown[0].text()
    assert dialog.isVisible() and dialog.stored == []
    assert stored_count(archive_path) == before


def test_a_new_lot_is_stored_only_when_asked_for(qtbot, panel: ArchivePanel, archive_path: Path, analysis) -> None:
    result, calibration = analysis
    dialog = panel.save_dialog(result, calibration)
    settle(qtbot, dialog)
    fill(dialog, "M-2801-C")
    dialog.new_lot.setChecked(True)
    assert dialog.save()
    settle(qtbot, dialog, panel)
    with Archive.open(archive_path, read_only=True) as archive:
        summary = next(s for s in archive.list_lots() if s.lot.lot_id == "M-2801-C")
    assert summary.snapshot_count == 3
    assert [panel.lots.item(k, 0).text() for k in range(panel.lots.rowCount())][-1] == "M-2801-C"


def test_the_archive_refusing_a_save_leaves_nothing_stored(qtbot, panel: ArchivePanel, archive_path: Path,
                                                          analysis) -> None:
    result, calibration = analysis
    before = stored_count(archive_path)
    # The calibration handed over is not the one the analysis used: the archive says so.
    other = dict(calibration.to_dict(), note="another calibration")
    dialog = SaveSnapshotDialog(result, other, archive_path, panel)
    qtbot.addWidget(dialog)
    dialog.show()
    settle(qtbot, dialog)
    fill(dialog, "M-2702-B")
    dialog.save()  # refused by the archive, in the worker thread
    settle(qtbot, dialog)
    shown = messages(dialog)
    assert len(shown) == 1 and "is not the one the analysis used" in shown[0].text()
    assert stored_count(archive_path) == before


@pytest.mark.parametrize("lot, says", [("M-\x1b[2J", "control character (U+001B)"),
                                       ("M-2801\u202eC", "hidden directional mark (U+202E)"),
                                       ("M" * 81, "at most 80 are kept")])
def test_a_lot_name_the_archive_refuses_is_explained_and_nothing_stored(qtbot, panel: ArchivePanel,
                                                                        archive_path: Path, analysis, lot: str,
                                                                        says: str) -> None:
    # bad-input issue items 5 and 12: such names were stored and echoed raw
    result, calibration = analysis
    before = stored_count(archive_path)
    dialog = panel.save_dialog(result, calibration)
    settle(qtbot, dialog)
    fill(dialog, lot)
    dialog.new_lot.setChecked(True)
    dialog.save()  # refused by the archive (worker thread), or by the form's own checks
    settle(qtbot, dialog)
    shown = messages(dialog)
    assert len(shown) == 1 and says in shown[0].text() and "\x1b" not in shown[0].text()
    assert dialog.isVisible() and stored_count(archive_path) == before


def test_dates_out_of_order_or_ahead_are_refused() -> None:
    day = dt.date(2026, 11, 24)
    form = SaveForm("M-2702-B", False, None, None, "J. Solberg", day, day, day)
    assert check_form(form, strips=3, known_lots=("M-2702-B",), today=day) == []
    early = SaveForm("M-2702-B", False, None, None, "J. Solberg", day, day - dt.timedelta(days=1), day)
    assert any("before the exposure date" in p for p in check_form(early, strips=3, known_lots=("M-2702-B",),
                                                                   today=day))
    ahead = check_form(form, strips=3, known_lots=("M-2702-B",), today=day - dt.timedelta(days=1))
    assert ahead == ["The exposure, processing, scan dates lie after today."]
    nobody = SaveForm("M-2702-B", False, None, None, " ", day, day, day)
    assert any("operator" in p for p in check_form(nobody, strips=0, known_lots=("M-2702-B",), today=day))


@pytest.mark.parametrize("figure", ["speed_log_exposure", "base_fog", "average_gradient", "dmax", "mid_density",
                                    "density_difference"])
def test_the_trend_view_plots_every_point_the_archive_trend_returns(qtbot, archive_path: Path, figure: str) -> None:
    view = TrendView(archive_path)
    qtbot.addWidget(view)
    view.set_figure(figure)
    qtbot.waitUntil(lambda: not view.runner.busy, timeout=10_000)
    with Archive.open(archive_path, read_only=True) as archive:
        both = archive.trend(figure, ["M-2610-A", "M-2702-B"])
        only_b = archive.trend(figure, ["M-2702-B"])
    assert view.chosen_lots() == ["M-2610-A", "M-2702-B"]
    assert view.point_count() == len(both)
    for lot, scatter in view.series.items():
        assert [int(d) for d in scatter.data["data"]] == [p.snapshot_id for p in both if p.lot == lot]
        assert list(scatter.data["y"]) == [p.value for p in both if p.lot == lot]
    legend = [label.text for _, label in view.legend.items]
    assert legend == [f"lot {lot} ({sum(p.lot == lot for p in both)})" for lot in view.series]
    view.set_lots(["M-2702-B"])
    qtbot.waitUntil(lambda: not view.runner.busy, timeout=10_000)
    assert view.point_count() == len(only_b)
    # Dmax lies above the demo calibration's range on every strip: nothing to draw, and it says so.
    assert view.empty.isVisibleTo(view) == (not both)
    # The QC densities say at which steps each lot is read (common practice: kept steps).
    assert view.steps_note.isVisibleTo(view) == (figure in ("mid_density", "density_difference"))
    if figure == "mid_density":
        with Archive.open(archive_path, read_only=True) as archive:
            md_step = archive.lot_qc_steps("M-2702-B")[0]
        assert f"M-2702-B step {md_step}" in view.steps_note.text()


def test_clicking_a_trend_point_opens_its_snapshot(qtbot, panel: ArchivePanel) -> None:
    panel.tabs.setCurrentWidget(panel.trend)
    qtbot.wait(50)
    trend = panel.trend
    point = trend.points[len(trend.points) // 2]
    scatter = trend.series[point.lot]
    spot = next(s for s in scatter.points() if int(s.data()) == point.snapshot_id)
    scene = scatter.mapToScene(QPointF(spot.pos()))
    where = trend.plot_widget.mapFromScene(scene)
    with qtbot.waitSignal(panel.snapshot_opened, timeout=5000) as opened:
        qtbot.mouseClick(trend.plot_widget.viewport(), Qt.MouseButton.LeftButton, pos=QPoint(where.x(), where.y()))
    assert opened.args == [point.snapshot_id]
    assert panel.tabs.currentWidget() is panel.view
    assert panel.view.value_of(trend.figure_name) == point.value


def test_no_archive_yet_is_an_empty_panel_without_errors(qtbot, tmp_path: Path, analysis) -> None:
    path = tmp_path / "new" / "archive.sqlite3"
    widget = ArchivePanel(path)
    qtbot.addWidget(widget)
    widget.show()
    settle(qtbot, widget)
    assert "No archive yet" in widget.where.text() and widget.lots.rowCount() == 0
    assert not messages(widget) and not path.exists()
    result, calibration = analysis
    dialog = widget.save_dialog(result, calibration)
    settle(qtbot, dialog)
    fill(dialog, "M-2702-B")
    dialog.new_lot.setChecked(True)
    assert dialog.save()
    settle(qtbot, dialog, widget)
    assert widget.lots.rowCount() == 1 and int(widget.lots.item(0, 2).text()) == 3


def test_a_damaged_archive_gives_a_message_not_a_crash(qtbot, tmp_path: Path) -> None:
    path = tmp_path / "broken.sqlite3"
    path.write_bytes(b"not an archive at all\n" * 50)
    widget = ArchivePanel(path)
    qtbot.addWidget(widget)
    widget.show()
    settle(qtbot, widget)
    shown = messages(widget)
    assert shown and all(str(path) in box.text() for box in shown)
    assert widget.lots.rowCount() == 0
    widget.open_snapshot(1)
    settle(qtbot, widget)
    assert widget.view.record is None


def test_the_demo_archive_is_built_off_the_ui_thread_and_shown(qtbot, tmp_path: Path) -> None:
    widget = ArchivePanel(None)
    qtbot.addWidget(widget)
    with qtbot.waitSignal(widget.demo_ready, timeout=120_000) as ready:
        widget.build_demo(tmp_path)
        assert widget.runner.busy  # the window stays responsive meanwhile
    path = Path(ready.args[0])
    settle(qtbot, widget)
    assert widget.archive_path == path and path.parent == tmp_path
    with Archive.open(path, read_only=True) as archive:
        counts = [s.snapshot_count for s in archive.list_lots()]
    assert [int(widget.lots.item(k, 2).text()) for k in range(widget.lots.rowCount())] == counts
    # A second build into the same place is refused with a message, and the shown archive stays.
    widget.build_demo(tmp_path)
    qtbot.waitUntil(lambda: not widget.runner.busy, timeout=10_000)
    qtbot.waitUntil(lambda: bool(messages(widget)), timeout=5000)
    assert "already exists" in messages(widget)[0].text()
    assert widget.archive_path == path


def test_the_lot_table_shows_steps_and_reads_a_lot_at_its_kept_steps(qtbot, panel: ArchivePanel,
                                                                      archive_path: Path, tmp_path: Path) -> None:
    """Issue 13, wrong output 3: the lot archive table shows the steps beside mid-density and density
    difference, and by default reads every strip of the lot at the lot's kept steps, as the trends do; a strip
    that chose a neighbouring step on its own (1.51 at step 12 beside 0.93 at step 11) no longer looks apart."""
    with Archive.open(archive_path, read_only=True) as archive:
        odd = [s for s in archive.list_snapshots() if archive.lot_qc_steps(s.lot_id) is not None
               and archive.get_snapshot(s.id).figures.mid_density_step != archive.lot_qc_steps(s.lot_id)[0]]
        assert odd, "the demo archive holds a strip that picks another mid-density step on its own"
        snapshot = archive.get_snapshot(odd[0].id)
        kept = archive.lot_qc_steps(snapshot.lot_id)
    panel.select_lot(snapshot.lot_id)
    settle(qtbot, panel)
    table = panel.snapshot_table
    titles = [table.horizontalHeaderItem(k).text() for k in range(table.columnCount())]
    md, md_step, dd, dd_steps = (titles.index(t) for t in ("Mid-dens.", "MD step", "Dens. diff.", "DD steps"))
    row = shown_ids(table).index(snapshot.id)
    assert {table.item(k, md_step).text() for k in range(table.rowCount())} == {str(kept[0])}
    assert {table.item(k, dd_steps).text() for k in range(table.rowCount())} == {f"{kept[1]}−{kept[2]}"}
    od = {s.step: s.od for s in snapshot.strip.steps}
    assert table.item(row, md).data(VALUE_ROLE) == pytest.approx(od[kept[0]], abs=1e-4)
    assert table.item(row, dd).data(VALUE_ROLE) == pytest.approx(od[kept[1]] - od[kept[2]], abs=1e-4)
    panel.grab().save(str(tmp_path / "lot-table.png"))
    panel.own_steps.setChecked(True)
    settle(qtbot, panel)
    row = shown_ids(table).index(snapshot.id)
    assert table.item(row, md_step).text() == str(snapshot.figures.mid_density_step)
    assert table.item(row, md).data(VALUE_ROLE) == pytest.approx(snapshot.figures.mid_density, abs=1e-4)


def test_a_snapshot_read_without_calibration_says_its_uncertainty_is_noise_only(qtbot, panel: ArchivePanel,
                                                                                 archive_path: Path) -> None:
    """Issue 13, missing 4: a stored direct-mode reading's step table says its uncertainty is the reading noise
    only, without the error of having no calibration."""
    direct = analyze_scan(demo_files().lot_b_scan, options=AnalysisOptions(n_steps=21))
    with Archive.open(archive_path) as archive:
        (stored, *_) = archive.add_analysis(direct, "M-2702-B")
        calibrated_id = archive.list_snapshots("M-2702-B")[0].id
    panel.refresh()
    assert panel.open_snapshot(stored.id)
    settle(qtbot, panel)
    column = [panel.view.steps.horizontalHeaderItem(k).text() for k in range(panel.view.steps.columnCount())]
    assert "Uncertainty (OD), noise only" in column
    assert panel.open_snapshot(calibrated_id)
    settle(qtbot, panel)
    assert panel.view.steps.horizontalHeaderItem(3).text() == "Uncertainty (OD)"


def test_a_scan_held_already_is_stored_again_only_when_ticked(qtbot, panel: ArchivePanel, archive_path: Path,
                                                             analysis) -> None:
    # bad-input issue item 14: the same scan saved twice counted its strips twice, with no word
    result, calibration = analysis
    first = panel.save_dialog(result, calibration)
    settle(qtbot, first)
    fill(first, "M-2702-B")
    assert first.save()
    settle(qtbot, first, panel)
    before = stored_count(archive_path)
    dialog = panel.save_dialog(result, calibration)
    settle(qtbot, dialog)
    fill(dialog, "M-2702-B")
    assert dialog.save()  # the archive answers from the worker thread: held already
    settle(qtbot, dialog)
    shown = messages(dialog)
    assert len(shown) == 1 and f"strip 1 as snapshot {first.stored[0].id}" in shown[0].text()
    assert dialog.again.isVisible() and stored_count(archive_path) == before
    shown[0].close()
    dialog.again.setChecked(True)
    assert dialog.save()
    settle(qtbot, dialog)
    assert stored_count(archive_path) == before + 3
