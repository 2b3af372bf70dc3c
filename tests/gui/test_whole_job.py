"""The whole job in the window alone, from an empty archive, with no command line (issue 14, "done when").

Calibrate from a tablet, open a scan, exclude a step, store the strips,
write their report (it names the lot and the operator), make a processor,
add five typed days and one day read off a strip of the open scan, see
WITHIN LIMITS, then compare two lots.
"""

from __future__ import annotations

import datetime

import pytest
from PySide6.QtCore import QDate
from PySide6.QtWidgets import QDialogButtonBox

from stripscan import CAUTION
from stripscan.archive import Archive
from stripscan.core.compare.comparison import compare_sets
from stripscan.core.qc.names import QUANTITIES
from stripscan.sim.objects import FilmModel
from stripscan.services.comparison_sets import SetLoader, parse_set
from stripscan.gui.dialogs.lot_choice import LotChoiceDialog
from stripscan.services.qc_recording import read_strip

from gui_helpers import settle

# A second emulsion lot: a little faster and flatter than the fixture's films (invented, demo-style data).
LOT_B_FILMS = (
    FilmModel(base_fog=0.20, dmax=3.5, log_e_mid=1.35, slope=4.6, asymmetry=0.7),
    FilmModel(base_fog=0.20, dmax=3.5, log_e_mid=1.33, slope=4.5, asymmetry=0.8),
)


def pdf_text(path) -> list[str]:
    from pypdf import PdfReader

    return [" ".join(page.extract_text().split()) for page in PdfReader(path).pages]


def store(qtbot, window, lot: str, operator: str, processed: datetime.date) -> list[int]:
    ws = window.workspace
    ws.save_action.trigger()
    dialog = ws.dialog
    assert dialog.isVisible()
    settle(qtbot, dialog)  # the archive's lots are read in a worker thread
    dialog.lot.setCurrentText(lot)
    if lot not in dialog.choices.lots:
        dialog.new_lot.setChecked(True)
    dialog.operator.setCurrentText(operator)
    dialog.set_dates(processed)
    dialog.buttons.button(QDialogButtonBox.StandardButton.Save).click()
    settle(qtbot, dialog, ws)
    assert dialog.stored, "nothing was stored"
    return [s.id for s in dialog.stored]


def test_the_whole_job_in_the_window(qtbot, open_scan, window, files, make_strip_scan, tmp_path):
    ws = window.workspace
    archive = ws.archive_path
    assert archive is not None and not archive.exists()  # an empty start: no archive file yet

    # 1. Calibrate from the reference tablet and its certificate.
    dialog = window.open_calibration_assistant()
    dialog.set_files(files.tablet, files.certificate)
    dialog.fit_button.click()
    qtbot.waitUntil(lambda: dialog.fit is not None, timeout=30_000)
    dialog.save_edit.setText(str(tmp_path / "tablet_cal.json"))
    dialog.save_button.click()
    assert window.session.calibration is not None

    # 2. Open the scan of lot A's strips and exclude a step in the step table.
    open_scan(window, files.scan)
    assert len(window.session.strips) == 2
    result = window.session.result()
    step = [s.step for s in result.steps if s.in_range][-2]
    window.tabs.setCurrentWidget(window.step_table)
    window.step_table.set_step_used(step, False)
    assert window.session.result().steps[step - 1].excluded

    # 3. Store the strips as lot A; the report of the scan then names the lot and the operator.
    ids_a = store(qtbot, window, "M-2610-A", "M. Arden", datetime.date(2026, 11, 2))
    assert archive.is_file() and len(ids_a) == 2
    with qtbot.waitSignal(ws.exports.file_written, timeout=30_000) as signal:
        assert ws.exports.export("pdf", tmp_path / "lot_a.pdf")
    pages = pdf_text(signal.args[0])
    assert len(pages) == 2
    assert all("M-2610-A" in p and "M. Arden" in p and " ".join(CAUTION.split()) in p for p in pages)

    # 4. Processor QC: a new processor, five typed days, then a day read off strip 1 of the open scan.
    ws.show_page("qc")
    panel = ws.qc_panel
    panel.new_processor_button.click()
    panel.dialog.name_edit.setText("Processor East")
    panel.dialog.buttons.button(QDialogButtonBox.StandardButton.Ok).click()
    settle(qtbot, panel)
    assert panel.processor_box.currentText() == "Processor East"
    # Days in the past, whenever the test runs: a QC day in the future is refused (issue 15, item 13).
    first = datetime.date.today() - datetime.timedelta(days=10)
    # Values near the scanned strip's own, so that the scanned day lies within the limits.
    strip = window.session.result(0)
    reading = read_strip(window.session.analysis(), None, strip=1).values
    for k in range(5):
        day = first + datetime.timedelta(days=k)
        panel.date_edit.setDate(QDate(day.year, day.month, day.day))
        wobble = (-0.01, 0.0, 0.01, 0.0, 0.005)[k]
        for q in QUANTITIES:
            panel.value_edits[q].setValue(round(getattr(reading, q) + (0 if q == "base_fog" else wobble), 3))
        panel.add_button.click()
        settle(qtbot, panel)
        assert panel.form_message.text().startswith("Stored"), panel.form_message.text()
    assert "BASELINE" not in panel.status_label.text()
    scanned = first + datetime.timedelta(days=5)
    panel.date_edit.setDate(QDate(scanned.year, scanned.month, scanned.day))
    panel.scan_strip_box.setCurrentIndex(panel.scan_strip_box.findData(strip.index))
    panel.add_scan_button.click()
    settle(qtbot, panel)
    assert panel.scan_message.text().startswith(f"Stored {scanned.isoformat()}"), panel.scan_message.text()
    # 21 CFR 900.12(e)(1): within ±0.15 of the operating levels and base+fog within +0.03.
    assert "Processor East: WITHIN LIMITS" in panel.status_label.text()
    assert f"latest strip {scanned.isoformat()}" in panel.status_label.text()
    with Archive.open(archive, read_only=True) as stored:
        entries = stored.list_qc_entries("Processor East")
    assert [e.source for e in entries] == ["manual"] * 5 + ["scan"]

    # 5. A second lot from another scan, then the two lots compared.
    scan_b = make_strip_scan(tmp_path / "lot_b.tif", LOT_B_FILMS, seed=11).path
    ws.show_page("scan")
    open_scan(window, scan_b)
    store(qtbot, window, "M-2702-B", "M. Arden", datetime.date(2026, 11, 3))
    ws.compare_lots_action.trigger()
    qtbot.waitUntil(lambda: isinstance(ws.dialog, LotChoiceDialog), timeout=10_000)  # the lots are read first
    choice = ws.dialog
    assert isinstance(choice, LotChoiceDialog)
    choice.lot_a.setCurrentText("M-2610-A")
    choice.lot_b.setCurrentText("M-2702-B")
    with qtbot.waitSignal(ws.comparison_shown, timeout=30_000):
        choice.buttons.button(QDialogButtonBox.StandardButton.Ok).click()
    assert ws.current_page() == "comparison"
    with SetLoader(archive) as loader:
        expected = compare_sets([loader.load(parse_set("lot:M-2610-A")), loader.load(parse_set("lot:M-2702-B"))])
    shown = ws.compare_panel.comparisons[0].row("speed_log_exposure")
    assert shown.difference == pytest.approx(expected[0].row("speed_log_exposure").difference, abs=1e-12)
    # Lot B's films are faster (mid-exposures 1.35/1.33 against 1.6/1.4 log E, as simulated): B − A speed point < 0.
    assert shown.difference < 0
