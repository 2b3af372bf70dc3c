"""The processor QC panel on the demo month: status with rule and advice, three plots, the day and correction forms."""

from __future__ import annotations

import datetime
import html
from pathlib import Path

import pytest
from PySide6.QtCore import QDate, Qt

from stripscan import CAUTION
from stripscan.archive import Archive
from stripscan.sim.demo_data import demo_files
from stripscan.gui.panels.qc_panel import QcPanel
from stripscan.render.qc_chart import SET_ASIDE, legend_entries
from stripscan.services.qc_demo import build_demo_qc
from stripscan.render.plot import Band, Line, Points
from stripscan.render.qcmonth import qc_month, qc_month_plots

from gui_helpers import settle


@pytest.fixture(scope="module")
def demo_archive(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("qc-panel") / "demo.sqlite3"
    with Archive.open(path) as archive:
        build_demo_qc(archive, demo_files())
    return path


@pytest.fixture
def archive_copy(demo_archive, tmp_path) -> Path:
    copy = tmp_path / "copy.sqlite3"
    with Archive.open(demo_archive, read_only=True) as archive:
        archive.backup(copy)
    return copy


@pytest.fixture
def panel(qtbot, archive_copy) -> QcPanel:
    widget = QcPanel(archive_copy)
    qtbot.addWidget(widget)
    widget.resize(1000, 1000)
    widget.show()
    settle(qtbot, widget)
    return widget


def type_day(panel: QcPanel, bf: float, md: float, dd: float) -> None:
    for q, value in zip(("base_fog", "mid_density", "density_difference"), (bf, md, dd)):
        panel.value_edits[q].setValue(value)


def test_the_panel_shows_the_demo_processor_status(panel):
    assert panel.processor_box.currentText() == "Processor 1"
    text = panel.status_label.text()
    assert "Processor 1: WITHIN LIMITS" in text and "latest strip 2026-11-30" in text
    assert "the processor may be used" in text and CAUTION in text
    assert set(panel.plots) == {"base_fog", "mid_density", "density_difference"}
    spots = {q: panel.scatter[q].points() for q in panel.plots}
    assert all(len(s) == 29 for s in spots.values())  # one point in use a day
    # 10 November: the first strip's density difference past the control limit (21 CFR 900.12(e)(1)), a
    # diamond in its own colour, hollow and left of the day: it was repeated the same day and is not used.
    first = panel.data.first
    assert not [s for s in spots["density_difference"] if s.data()[1] == "action"]
    kept = panel.set_aside["density_difference"].points()
    assert len(kept) == 1 and kept[0].data()[1] == "action" and kept[0].data()[3] == "repeated"
    assert first + datetime.timedelta(days=round(kept[0].pos().x())) == datetime.date(2026, 11, 10)
    assert kept[0].pos().x() % 1 != 0
    assert kept[0].symbol() == "d" and kept[0].pen().color().name().upper() == "#D55E00"
    assert kept[0].brush().style() == Qt.BrushStyle.NoBrush
    # The repeat, within limits, is the day's point (common practice: the repeat confirms or clears the first).
    tenth = [s for s in spots["density_difference"] if s.data()[0] == "2026-11-10"]
    assert len(tenth) == 1 and tenth[0].data()[1] == "ok"
    ordinary = [s for s in spots["density_difference"] if s.data()[1] == "ok"][0]
    assert ordinary.symbol() == "o" and ordinary.brush().color().name().upper() == "#0072B2"
    assert html.escape(SET_ASIDE["repeated"]) in panel.key_label.text()


def test_the_window_and_the_monthly_report_explain_the_same_marks_in_the_same_words(panel, archive_copy):
    # One legend for the PNG chart, the PDF report and the window (a user review found three). The demo
    # month has a point past each tier (21 CFR 900.12(e)(1) limits, ±0.10 warning tier: common practice),
    # a repeated strip, an event, two baselines and trend findings: every entry of the legend but two.
    entries = legend_entries(panel.data)
    assert {e.key for e in entries} == {"ok", "warning", "action", "repeated", "level", "control_limit",
                                        "warning_tier", "event", "baseline_days", "trend"}
    key = panel.key_label.text()
    assert all(f"{html.escape(e.glyph)}</b>&nbsp;{html.escape(e.words)}" in key for e in entries)
    with Archive.open(archive_copy, read_only=True) as archive:
        plots = qc_month_plots(qc_month(archive, "Processor 1", "2026-11"))
    legend = [item for item in plots["density-difference"].items
              if isinstance(item, (Points, Line, Band)) and item.label]
    assert [item.label for item in legend] == [e.words for e in entries]
    # The report draws no mark of its own beside them: the hollow circle means a repeated strip only.
    marks = {(item.marker, item.filled, item.colour) for item in legend if isinstance(item, Points)}
    assert ("circle", False, "#0072B2") in marks and len(marks) == 4
    assert all(not item.label for plot in plots.values() for item in plot.items
               if isinstance(item, Points) and item.x)


def test_status_on_the_day_of_the_action_names_the_rule_and_the_advice(qtbot, tmp_path):
    path = tmp_path / "short.sqlite3"
    from stripscan.core.qc.records import QCValues
    from stripscan.services.qc_recording import add_day

    with Archive.open(path) as archive:
        for k in range(5):
            add_day(archive, "Processor 2", datetime.date(2026, 11, 2 + k), values=QCValues(0.19, 1.2, 1.8),
                    new_processor=True)
        add_day(archive, "Processor 2", datetime.date(2026, 11, 7), values=QCValues(0.19, 1.08, 1.8))
        add_day(archive, "Processor 2", datetime.date(2026, 11, 8), values=QCValues(0.19, 1.04, 1.8))
    widget = QcPanel(path)
    qtbot.addWidget(widget)
    settle(qtbot, widget)
    text = widget.status_label.text()
    # 21 CFR 900.12(e)(1): -0.16 is past ±0.15; 2 of 3 past the ±0.10 tier (common practice, from memory).
    assert "Processor 2: ACT" in text and "two_warnings:mid_density" in text
    assert "repeat the strip" in text and "before patient films are processed" in text and CAUTION in text


def test_the_form_adds_a_typed_day_and_refuses_a_duplicate(panel, qtbot, archive_copy):
    assert panel.date_edit.date() == QDate(2026, 12, 1)  # the day after the latest strip
    panel.value_edits["base_fog"].setValue(0.19)
    panel.value_edits["mid_density"].setValue(1.19)
    panel.value_edits["density_difference"].setValue(1.89)
    panel.note_edit.setText("typed from the panel")
    with qtbot.waitSignal(panel.sigDayAdded, timeout=2000) as signal:
        qtbot.mouseClick(panel.add_button, Qt.MouseButton.LeftButton)
    assert signal.args == ["Processor 1", "2026-12-01"]
    with Archive.open(archive_copy, read_only=True) as archive:
        last = archive.list_qc_entries("Processor 1")[-1]
    assert (last.date, last.mid_density, last.source, last.note) == ("2026-12-01", 1.19, "manual",
                                                                       "typed from the panel")
    assert "latest strip 2026-12-01" in panel.status_label.text()
    assert len(panel.scatter["mid_density"].points()) == 30
    type_day(panel, 0.19, 1.19, 1.89)
    panel.date_edit.setDate(QDate(2026, 12, 1))
    assert panel.add_typed_day()  # sent; the archive refuses it from the worker thread
    settle(qtbot, panel)
    message = panel.form_message.text()
    assert "Not stored" in message and "duplicate day" in message and "Repeat strip of the day" in message
    panel.date_edit.setDate(QDate(2026, 11, 15))
    panel.add_typed_day()
    settle(qtbot, panel)
    assert "dates out of order" in panel.form_message.text()
    with Archive.open(archive_copy, read_only=True) as archive:
        assert len(archive.list_qc_entries("Processor 1")) == 31  # 29 days' strips, the demo's repeat, this one


def test_the_day_form_starts_empty_and_refuses_missing_values(panel, qtbot, archive_copy):
    # The QC log is never changed (21 CFR 900.12(e)(1) records are kept as measured): no number is invented.
    assert [panel.value_edits[q].text() for q in panel.value_edits] == ["", "", ""]
    assert all(edit.placeholderText() == "required" and edit.value() is None for edit in panel.value_edits.values())
    qtbot.keyClicks(panel.value_edits["mid_density"], "1.19")
    assert panel.value_edits["mid_density"].value() == pytest.approx(1.19)
    assert not panel.add_typed_day()
    message = panel.form_message.text()
    assert message.startswith("Not stored: base+fog and density difference are missing")
    qtbot.keyClicks(panel.value_edits["base_fog"], "0.19")
    assert not panel.add_typed_day() and "density difference is missing" in panel.form_message.text()
    qtbot.keyClicks(panel.value_edits["density_difference"], "7.5")
    assert not panel.add_typed_day() and "density difference '7.5' is not a density from 0 to 5 OD" in \
        panel.form_message.text()
    with Archive.open(archive_copy, read_only=True) as archive:
        assert len(archive.list_qc_entries("Processor 1")) == 30
    panel.value_edits["density_difference"].setValue(1.89)
    assert panel.add_typed_day()
    settle(qtbot, panel)
    with Archive.open(archive_copy, read_only=True) as archive:
        last = archive.list_qc_entries("Processor 1")[-1]
    assert (last.base_fog, last.mid_density, last.density_difference) == (0.19, 1.19, 1.89)
    # Stored: the fields are emptied, so the next day cannot inherit these numbers.
    assert [panel.value_edits[q].text() for q in panel.value_edits] == ["", "", ""]


def test_the_correction_form_holds_only_the_chosen_entry_s_own_values(panel):
    entry = panel.plog.entries[-1]
    assert panel.entry_spin.value() == entry.id  # the latest entry, the one most often mistyped
    assert [panel.fix_edits[q].value() for q in ("base_fog", "mid_density", "density_difference")] == \
        pytest.approx([entry.base_fog, entry.mid_density, entry.density_difference], abs=5e-4)
    panel.entry_spin.setValue(999)
    assert all(edit.value() is None for edit in panel.fix_edits.values())
    assert panel.reason_edit.placeholderText() == "why it was wrong (needed)"
    # The placeholder fits its box, so nobody reads half an instruction.
    metrics = panel.reason_edit.fontMetrics()
    assert metrics.horizontalAdvance(panel.reason_edit.placeholderText()) < panel.reason_edit.width() - 8


def test_the_form_stores_a_repeat_strip_that_counts_for_the_day(panel, qtbot, archive_copy):
    panel.repeat_check.setChecked(True)
    assert panel.date_edit.date() == QDate(2026, 11, 30)  # a repeat is a strip of the latest day
    panel.value_edits["base_fog"].setValue(0.19)
    panel.value_edits["mid_density"].setValue(1.22)
    panel.value_edits["density_difference"].setValue(1.90)
    with qtbot.waitSignal(panel.sigDayAdded, timeout=2000):
        qtbot.mouseClick(panel.add_button, Qt.MouseButton.LeftButton)
    assert "Stored a repeat strip of 2026-11-30 as entry 31" in panel.form_message.text()
    assert not panel.repeat_check.isChecked() and panel.date_edit.date() == QDate(2026, 12, 1)
    with Archive.open(archive_copy, read_only=True) as archive:
        last = archive.list_qc_entries("Processor 1")[-2:]
    assert [(e.id, e.date, e.repeat_of) for e in last] == [(30, "2026-11-30", None), (31, "2026-11-30", 30)]
    # Common practice: the repeat is the day's value; the first strip stays on the plot, hollow.
    assert "latest: base+fog 0.190" in panel.status_label.text() and "mid-density 1.220" in panel.status_label.text()
    assert "entry 30 (WITHIN LIMITS): repeated by entry 31, not used" in panel.status_label.text()
    assert len(panel.scatter["mid_density"].points()) == 29 and len(panel.set_aside["mid_density"].points()) == 2
    panel.repeat_check.setChecked(True)
    type_day(panel, 0.19, 1.22, 1.90)
    panel.date_edit.setDate(QDate(2026, 11, 20))
    panel.add_typed_day()
    settle(qtbot, panel)
    assert "a repeat strip of 2026-11-20 would re-judge" in panel.form_message.text()


def test_the_correction_form_keeps_the_wrong_entry_and_needs_a_reason(panel, qtbot, archive_copy):
    # Clicking a point picks its entry: the strip of 12 November, typed in (entry 12).
    spot = next(s for s in panel.scatter["mid_density"].points() if s.data()[0] == "2026-11-12")
    panel.scatter["mid_density"].sigClicked.emit(panel.scatter["mid_density"], [spot], None)
    assert panel.entry_spin.value() == 12 and panel.entry_label.text().startswith("2026-11-12, manual")
    wrong = panel.fix_edits["mid_density"].value()
    panel.fix_edits["mid_density"].setValue(wrong + 0.05)
    panel.correct_chosen_entry()
    settle(qtbot, panel)
    assert "Not stored" in panel.correct_message.text() and "with a reason" in panel.correct_message.text()
    panel.reason_edit.setText("0.93 read, mistyped")
    with qtbot.waitSignal(panel.sigEntryCorrected, timeout=2000) as signal:
        qtbot.mouseClick(panel.correct_button, Qt.MouseButton.LeftButton)
    assert signal.args == ["Processor 1", 31]
    with Archive.open(archive_copy, read_only=True) as archive:
        fixed, kept = archive.get_qc_entry(31), archive.get_qc_entry(12)
    assert (fixed.corrects, fixed.reason, fixed.date) == (12, "0.93 read, mistyped", "2026-11-12")
    assert fixed.mid_density == pytest.approx(wrong + 0.05) and kept.mid_density == pytest.approx(wrong)
    crosses = panel.set_aside["mid_density"].points()
    assert [s.data()[2:] for s in crosses if s.data()[3] == "corrected"] == [(12, "corrected")]
    assert html.escape(SET_ASIDE["corrected"]) in panel.key_label.text()
    # Correcting it again, or nothing changed, or an entry that is not there: refused, never a crash.
    panel.entry_spin.setValue(12)
    panel.reason_edit.setText("again")
    panel.fix_edits["mid_density"].setValue(1.0)
    panel.correct_chosen_entry()
    settle(qtbot, panel)
    assert "already corrected by entry 31" in panel.correct_message.text()
    panel.entry_spin.setValue(31)
    panel.reason_edit.setText("no change")
    panel.correct_chosen_entry()
    settle(qtbot, panel)
    assert "give the right value" in panel.correct_message.text()
    panel.entry_spin.setValue(999)
    assert "No entry 999" in panel.entry_label.text()
    assert not panel.correct_chosen_entry() and "entry 999 is not in the QC log shown" in panel.correct_message.text()
    with Archive.open(archive_copy, read_only=True) as archive:
        assert len(archive.list_qc_entries("Processor 1")) == 31


def test_the_report_month_is_chosen_among_the_months_with_entries(qtbot, tmp_path):
    from pypdf import PdfReader

    from stripscan.core.qc.records import QCValues
    from stripscan.gui import jobs
    from stripscan.services.qc_recording import add_day

    path = tmp_path / "two-months.sqlite3"
    with Archive.open(path) as archive:
        for k, day in enumerate((datetime.date(2026, 10, 26) + datetime.timedelta(days=d) for d in range(10))):
            add_day(archive, "Processor 3", day, values=QCValues(0.19, 1.2, 1.8), new_processor=k == 0)
    widget = QcPanel(path)
    qtbot.addWidget(widget)
    settle(qtbot, widget)
    months = [widget.month_box.itemText(k) for k in range(widget.month_box.count())]
    assert months == ["2026-11", "2026-10"]  # newest first
    assert widget.report_month() == datetime.date(2026, 11, 1)
    widget.set_report_month("2026-10")
    assert widget.report_month() == datetime.date(2026, 10, 1)
    with pytest.raises(ValueError, match="no QC entries in 2026-09"):
        widget.set_report_month("2026-09")
    pdf = jobs.save_qc_month_report(path, "Processor 3", widget.report_month(), tmp_path / "october.pdf",
                                    progress=lambda fraction, text: None)
    text = " ".join(" ".join(page.extract_text() for page in PdfReader(pdf).pages).split())
    assert "October 2026" in text and "2026-10-31" in text and "2026-11-01" not in text
    widget.show_processor(None)
    assert widget.report_month() is None
