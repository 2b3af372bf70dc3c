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
