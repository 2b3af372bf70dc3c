"""The lot comparison panel shows the core's comparison: table rows, verdict words and colours, plots."""

from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pyqtgraph as pg  # noqa: E402
import pytest  # noqa: E402

from stripscan import CAUTION  # noqa: E402
from stripscan.core.calibration_files import load_calibration
from stripscan.core.compare.comparison import compare_sets  # noqa: E402
from stripscan.core.compare.sets import StripSet  # noqa: E402
from stripscan.core.compare.table import FIGURES  # noqa: E402
from stripscan.core.pipeline import analyze_scan  # noqa: E402
from stripscan.sim.demo_data import demo_files  # noqa: E402


@pytest.fixture(scope="module")
def demo_sets():
    files = demo_files()
    calibration = load_calibration(files.calibration)
    return [StripSet(f"lot {lot}", analyze_scan(path, calibration=calibration).strips)
            for lot, path in (("M-2610-A", files.lot_a_scan), ("M-2702-B", files.lot_b_scan))]


@pytest.fixture
def panel(qtbot, demo_sets):
    from stripscan.gui.panels.compare_panel import ComparePanel

    widget = ComparePanel(compare_sets(demo_sets))
    qtbot.addWidget(widget)
    widget.resize(1200, 800)
    widget.show()
    return widget


def _lines(plot: pg.PlotWidget) -> list[pg.PlotDataItem]:
    return [i for i in plot.getPlotItem().items if isinstance(i, pg.PlotDataItem) and i.name()]


def test_table_shows_every_figure_with_interval_and_verdict(panel):
    from stripscan.gui.panels.compare_panel import VERDICT_COLOURS

    (comparison,) = panel.comparisons
    table = panel.table
    assert table.rowCount() == len(FIGURES) == 9
    assert [table.horizontalHeaderItem(c).text() for c in range(table.columnCount())][-1] == "Verdict"
    for r, row in enumerate(comparison.rows):
        cells = row.cells()
        shown = [table.item(r, c).text() for c in range(table.columnCount())]
        assert shown == [cells[k] for k in ("figure", "a", "b", "difference", "interval", "tolerance", "verdict")]
        verdict = table.item(r, 6)
        # The word is always there; the colour only repeats it.
        assert verdict.text() == row.verdict_text
        colour = VERDICT_COLOURS[row.verdict]
        if colour:
            assert verdict.background().color().name() == colour
    words = {table.item(r, 6).text() for r in range(table.rowCount())}
    # The demo's lot B is steeper than lot A by ~6 %, beyond the ±5 % default (common practice, from memory).
    assert comparison.row("average_gradient").verdict == "differs" and "differs" in words
    assert table.item(1, 0).text().startswith("speed point")
    assert not panel.pair_choice.isVisible()


def test_plots_show_both_sets_bands_and_differences(panel):
    (comparison,) = panel.comparisons
    curves = _lines(panel.curve_plot)
    assert [c.name() for c in curves] == ["lot M-2610-A (3 strips)", "lot M-2702-B (3 strips)"]
    bands = [i for i in panel.curve_plot.getPlotItem().items if isinstance(i, pg.FillBetweenItem)]
    assert len(bands) == 2
    x, y = curves[0].getData()
    _, mean, _ = comparison.a.density_curve.arrays()
    assert np.allclose(y, mean[np.isfinite(mean)])
    (dd,) = _lines(panel.delta_density_plot)
    dd_x, dd_y = dd.getData()
    expected = np.asarray(comparison.delta_density)
    assert dd_y.size > 50 and np.allclose(dd_y, expected[np.isfinite(expected)])
    (shift,) = _lines(panel.shift_plot)
    net, values = shift.getData()
    # At net density 1.00 the shift is the speed-point difference of the table.
    k = int(np.argmin(np.abs(net - 1.0)))
    assert values[k] == pytest.approx(comparison.row("speed_log_exposure").difference, abs=1e-6)
    regions = [i for i in panel.shift_plot.getPlotItem().items if isinstance(i, pg.LinearRegionItem)]
    assert len(regions) == 1 and regions[0].getRegion() == pytest.approx((-0.05, 0.05))


def test_caution_and_notes_are_shown(panel):
    assert panel.caution.text() == CAUTION and panel.caution.isVisible()
    assert "Mid-density at step" in panel.notes.text()


def test_three_sets_choose_the_pair_for_the_table(qtbot, demo_sets):
    from stripscan.gui.panels.compare_panel import ComparePanel

    a, b = demo_sets
    widget = ComparePanel(compare_sets([a, b, StripSet("two strips of B", b.strips[:2])]))
    qtbot.addWidget(widget)
    widget.show()
    assert widget.pair_choice.isVisible() and widget.pair_choice.count() == 2
    assert len(_lines(widget.curve_plot)) == 3 and len(_lines(widget.delta_density_plot)) == 2
    widget.pair_choice.setCurrentIndex(1)
    assert "two strips of B (B, 2 strips)" in widget.title.text()
    assert widget.table.item(1, 2).text().endswith("(2)")
    widget.set_comparisons(())
    assert widget.table.rowCount() == 0 and "No comparison" in widget.title.text()
