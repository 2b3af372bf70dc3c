"""What issue 14 found broken or puzzling on the window's pages, each item checked as a user meets it."""

from __future__ import annotations

import datetime as dt
import re

import pytest

from stripscan.archive import Archive
from stripscan.core.calibration import load_calibration
from stripscan.core.pipeline import AnalysisOptions, analyze_scan
from stripscan.gui.trend_view import TrendView


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
    assert view.point_count() == 2
    axis = view.plot.getAxis("bottom")
    low, high = view.plot.viewRange()[0]
    ticks = [t for level in axis.tickValues(low, high, 800) for t in level[1]]
    labels = axis.tickStrings(ticks, 1.0, axis.tickValues(low, high, 800)[0][0])
    assert "2 Nov" in labels
    assert all(re.fullmatch(r"\d{1,2} [A-Z][a-z]{2}", label) for label in labels), labels
    assert high - low >= 2 * 86_400  # a day either side of the day of the points


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
    from stripscan.demo_data import demo_files

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
