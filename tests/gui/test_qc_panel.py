"""The processor QC panel on the demo month: status with rule and advice, three plots, the typed-day form."""

from __future__ import annotations

import datetime
from pathlib import Path

import pytest
from PySide6.QtCore import QDate, Qt

from stripscan import CAUTION
from stripscan.archive import Archive
from stripscan.demo_data import demo_files
from stripscan.gui.qc_panel import QcPanel
from stripscan.qc_demo import build_demo_qc


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
    return widget


def test_the_panel_shows_the_demo_processor_status(panel):
    assert panel.processor_box.currentText() == "Processor 1"
    text = panel.status_label.text()
    assert "Processor 1: WITHIN LIMITS" in text and "latest strip 2026-11-30" in text
    assert "the processor may be used" in text and CAUTION in text
    assert set(panel.plots) == {"base_fog", "mid_density", "density_difference"}
    spots = {q: panel.scatter[q].points() for q in panel.plots}
    assert all(len(s) == 29 for s in spots.values())
    # 10 November: density difference past the control limit (21 CFR 900.12(e)(1)), a diamond in its own colour.
    first = panel.data.first
    out = [s for s in spots["density_difference"] if s.data()[1] == "action"]
    assert [first + datetime.timedelta(days=round(s.pos().x())) for s in out] == [datetime.date(2026, 11, 10)]
    assert out[0].symbol() == "d" and out[0].brush().color().name().upper() == "#D55E00"
    ordinary = [s for s in spots["density_difference"] if s.data()[1] == "ok"][0]
    assert ordinary.symbol() == "o" and ordinary.brush().color().name().upper() == "#0072B2"


def test_status_on_the_day_of_the_action_names_the_rule_and_the_advice(qtbot, tmp_path):
    path = tmp_path / "short.sqlite3"
    from stripscan.core.qc import QCValues
    from stripscan.qc_log import add_day

    with Archive.open(path) as archive:
        for k in range(5):
            add_day(archive, "Processor 2", datetime.date(2026, 11, 2 + k), values=QCValues(0.19, 1.2, 1.8),
                    new_processor=True)
        add_day(archive, "Processor 2", datetime.date(2026, 11, 7), values=QCValues(0.19, 1.08, 1.8))
        add_day(archive, "Processor 2", datetime.date(2026, 11, 8), values=QCValues(0.19, 1.04, 1.8))
    widget = QcPanel(path)
    qtbot.addWidget(widget)
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
    panel.date_edit.setDate(QDate(2026, 12, 1))
    assert not panel.add_typed_day()
    assert "Not stored" in panel.form_message.text() and "duplicate day" in panel.form_message.text()
    panel.date_edit.setDate(QDate(2026, 11, 15))
    assert not panel.add_typed_day()
    assert "dates out of order" in panel.form_message.text()
    with Archive.open(archive_copy, read_only=True) as archive:
        assert len(archive.list_qc_entries("Processor 1")) == 30
