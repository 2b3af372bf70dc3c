"""The plot drawer: tick values, where data land in the picture, clipping, legends."""

from __future__ import annotations

import math

import numpy as np
import pytest
from report_support import image_array

from stripscan.render.pictures import plot_image
from stripscan.render.plot import Line, Plot, Points, RefLine, nice_ticks

RED, BLUE = "#ff0000", "#0000ff"


@pytest.mark.parametrize("low, high", [(0.0, 3.1), (-0.15, 0.15), (0.19, 3.6), (1.23, 1.27), (-40.0, 1500.0)])
def test_ticks_are_evenly_spaced_round_numbers_that_cover_the_range(low, high):
    ticks, decimals = nice_ticks(low, high)
    step = ticks[1] - ticks[0]
    # Round steps: 1, 2, 2.5 or 5 times a power of ten (common practice in chart axes).
    mantissa = step / 10.0 ** math.floor(math.log10(step))
    assert min(abs(mantissa - m) for m in (1.0, 2.0, 2.5, 5.0, 10.0)) < 1e-9
    assert np.allclose(np.diff(ticks), step)
    assert ticks[0] >= low - 1e-9 and ticks[0] - step < low
    assert ticks[-1] <= high + 1e-9 and ticks[-1] + step > high
    assert 3 <= len(ticks) <= 9
    # Printed at the decimals given, neighbouring ticks read differently.
    labels = [f"{t:.{decimals}f}" for t in ticks]
    assert len(set(labels)) == len(labels)


def centroid(pixels: np.ndarray, colour: tuple[int, int, int]) -> tuple[float, float]:
    rows, cols = np.nonzero((np.abs(pixels.astype(int) - colour).sum(axis=2) < 40))
    assert rows.size > 0
    return float(cols.mean()), float(rows.mean())


def test_data_land_where_a_linear_axis_puts_them():
    # Two markers at opposite corners of the axis ranges fix the mapping; a third must
    # land at the linear interpolation between them.
    corners = Points((0.0, 10.0), (0.0, 4.0), colour=RED, marker="square", size_pt=6)
    middle = Points((2.5,), (3.0,), colour=BLUE, marker="square", size_pt=6)
    plot = Plot(items=(corners, middle), x_range=(0.0, 10.0), y_range=(0.0, 4.0), legend=False)
    pixels = image_array(plot_image(plot, width_mm=120, height_mm=80, dpi=150))
    red = np.nonzero((np.abs(pixels.astype(int) - (255, 0, 0)).sum(axis=2) < 40))
    left = red[1] < pixels.shape[1] / 2
    x0, y0 = red[1][left].mean(), red[0][left].mean()
    x1, y1 = red[1][~left].mean(), red[0][~left].mean()
    bx, by = centroid(pixels, (0, 0, 255))
    # The corner markers are half clipped at the plot's frame, so allow a few pixels.
    assert bx == pytest.approx(x0 + 0.25 * (x1 - x0), abs=4)
    assert by == pytest.approx(y0 + 0.75 * (y1 - y0), abs=4)
    assert y0 > y1  # y grows upwards on the page


def test_data_outside_the_axis_ranges_are_clipped_to_the_plot_area():
    inside = Points((5.0,), (5.0,), colour=BLUE, marker="square", size_pt=6)
    line = Line((-100.0, 100.0), (-100.0, 100.0), colour=RED, width_pt=2)
    plot = Plot(items=(line, inside), x_range=(0.0, 10.0), y_range=(0.0, 10.0), legend=False)
    pixels = image_array(plot_image(plot, width_mm=100, height_mm=100, dpi=100))
    rows, cols = np.nonzero((np.abs(pixels.astype(int) - (255, 0, 0)).sum(axis=2) < 80))
    # The line runs from corner to corner of the plot area and no further: not into the margins.
    assert cols.min() > 0.05 * pixels.shape[1] and rows.max() < 0.97 * pixels.shape[0]
    bx, by = centroid(pixels, (0, 0, 255))
    assert cols.min() < bx < cols.max() and rows.min() < by < rows.max()


def test_labels_appear_in_the_legend_and_an_empty_plot_says_so():
    labelled = Plot(items=(Line((0, 1), (0, 1), label="first set", colour=RED),
                           RefLine(0.5, label="level", colour=BLUE)), legend=True)
    unlabelled = Plot(items=labelled.items, legend=False)
    a = image_array(plot_image(labelled, width_mm=100, height_mm=70, dpi=100))
    b = image_array(plot_image(unlabelled, width_mm=100, height_mm=70, dpi=100))
    # The legend is a row under the axis: its red swatch sits in the picture's bottom strip,
    # below the x tick labels, where nothing red is drawn without a legend.
    strip = slice(round(0.9 * a.shape[0]), None)
    # Reddish, allowing for antialiased edges of a thin line.
    red = [((img[strip, :, 0] > 200) & (img[strip, :, 1] < 170) & (img[strip, :, 2] < 170)).sum() for img in (a, b)]
    assert red[0] > 10 and red[1] == 0
    empty = image_array(plot_image(Plot(items=(), empty_text="nothing here"), width_mm=60, height_mm=40, dpi=100))
    assert ((empty < 200).any(axis=2)).sum() > 50  # frame and message drawn


def test_unknown_markers_and_dashes_are_refused():
    with pytest.raises(ValueError, match="unknown marker 'star'"):
        plot_image(Plot(items=(Points((0, 1), (0, 1), marker="star"),)), width_mm=60, height_mm=40)
    with pytest.raises(ValueError, match="unknown dash 'wavy'"):
        plot_image(Plot(items=(Line((0, 1), (0, 1), dash="wavy"),)), width_mm=60, height_mm=40)
