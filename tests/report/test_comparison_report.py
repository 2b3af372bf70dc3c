"""The lot comparison report: pages, table with intervals and verdicts, plots, provenance."""

from __future__ import annotations

import numpy as np
import pytest
from report_support import LOT_A, LOT_B, image_array, pdf_pages
from scipy import stats

from stripscan import CAUTION
from stripscan.core.compare.comparison import compare_sets
from stripscan.core.compare.sets import StripSet
from stripscan.render import ReportError, render_page
from stripscan.render.comparison import CalibrationUse, ComparisonPage, comparison_plots, comparison_report_pdf


def squash(text: str) -> str:
    return "".join(text.split())


@pytest.fixture(scope="module")
def sets(lot_a, lot_b):
    return [StripSet(f"lot:{LOT_A}", lot_a.strips, source="demo scan of lot A"),
            StripSet(f"lot:{LOT_B}", lot_b.strips, source="demo scan of lot B")]


def test_one_page_per_pair_with_the_table_intervals_and_verdicts(sets, calibration, tmp_path):
    third = StripSet("lot A again", sets[0].strips[:2], source="two strips of lot A")
    comparisons = compare_sets([*sets, third])
    use = CalibrationUse(tuple(s.name for s in (*sets, third)), calibration.to_dict(), calibration.sha256)
    path = comparison_report_pdf(comparisons, tmp_path / "lots.pdf", calibrations=[use], site="Fernhill")
    pages = pdf_pages(path)  # text extracted with pypdf
    assert len(pages) == 2
    for comparison, text in zip(comparisons, pages):
        assert comparison.b.name in text and comparison.a.name in text
        for row in comparison.rows:
            cells = row.cells()
            # Each row as the compare command prints it: means, B - A, interval, verdict.
            assert squash(" ".join(cells[k] for k in ("a", "b", "difference", "interval"))) in squash(text)
            assert squash(cells["verdict"]) in squash(text)
        assert squash(CAUTION) in squash(text)
        assert calibration.sha256[:12] in text and calibration.created[:10] in text


def test_the_printed_interval_is_welchs(sets, tmp_path):
    comparison = compare_sets(sets)[0]
    text = pdf_pages(comparison_report_pdf([comparison], tmp_path / "ab.pdf"))[0]
    # Printed as the strip report prints the figure: gradients to 0.01, the speed point to 0.001 log E.
    for figure, digits in (("average_gradient", 2), ("speed_log_exposure", 3)):
        a = [getattr(s.figures, figure) for s in sets[0].strips]
        b = [getattr(s.figures, figure) for s in sets[1].strips]
        # Welch's t interval of mean(B) - mean(A) by scipy, from the strips' own figures.
        ci = stats.ttest_ind(b, a, equal_var=False).confidence_interval(0.95)
        assert f"{np.mean(b) - np.mean(a):+.{digits}f} {ci.low:+.{digits}f} to {ci.high:+.{digits}f}" in text
    # Without calibrations named, the page says their provenance is unknown.
    assert "NOT RECORDED" in text


def test_plots_show_both_sets_and_the_differences(sets):
    comparison = compare_sets(sets)[0]
    plots = comparison_plots(comparison)
    assert set(plots) == {"overlay", "delta-density", "delta-log-exposure"}
    pixels = image_array(render_page(ComparisonPage(comparison), dpi=80))
    # Set A in Okabe & Ito blue, set B and the differences in their vermillion.
    for colour in ((0x00, 0x72, 0xB2), (0xD5, 0x5E, 0x00)):
        assert (np.abs(pixels.astype(int) - colour).sum(axis=2) < 60).sum() > 200
    # The speed-point shift is marked where the core reads it (net density 1.00).
    shift = comparison.shift_at(1.0)
    labels = [getattr(item, "label", "") for item in plots["delta-log-exposure"].items]
    assert f"speed-point shift {shift:+.3f}" in labels


def test_no_comparison_no_report(tmp_path):
    with pytest.raises(ReportError, match="no comparison"):
        comparison_report_pdf([], tmp_path / "x.pdf")
    assert list(tmp_path.iterdir()) == []
