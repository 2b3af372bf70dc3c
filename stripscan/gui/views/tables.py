"""What the window's figure and step tables show, as plain text (no Qt).

The widgets only lay these rows out, so the clipboard, the CSV file and
the screen cannot disagree.  Names, precision, definitions and step flags
come from :mod:`stripscan.core.figures`, as in the reports; what is the
window's own is the short units, the QC steps beside their values and the
step table's columns.
"""

from __future__ import annotations

import csv
import dataclasses
import io

from stripscan.core import figures as figure_table
from stripscan.core.records import CurveFigures, StripResult
from stripscan.core.figures import (
    FIGURE_KEYS,
    NO_VALUE,
    FigureRow,
    format_value,
    step_flag,
    uncertainty_title,
)

__all__ = ["FigureRow", "figure_rows", "STEP_COLUMNS", "step_columns", "step_rows", "step_table_text"]


def figure_rows(figures: CurveFigures | None, levels: tuple[float, float]) -> list[FigureRow]:
    """Every figure of a strip, in display order, as the window shows it.

    Parameters
    ----------
    figures : CurveFigures or None
        None: no strip (every value shows as a dash).
    levels : (float, float)
        The net density levels named when there is no strip; a strip's
        figures name the levels they were read at.

    Returns
    -------
    list of FigureRow
        With short units, and the steps of mid-density and density
        difference beside the value: the window has no definition column.
    """
    rows = figure_table.figure_rows(figures, units="short", keys=FIGURE_KEYS,
                                    settings={"gradient_low": levels[0], "gradient_high": levels[1]})
    return [dataclasses.replace(row, text=f"{row.text}  ({row.steps})") if row.steps else row for row in rows]


STEP_COLUMNS = ("Step", "Log E", "OD", "Uncertainty (OD)", "Flag")


def step_columns(result: StripResult | None) -> tuple[str, ...]:
    """:data:`STEP_COLUMNS`, the uncertainty's title saying "noise only" for a strip read in direct mode."""
    return tuple(uncertainty_title(c, result) if c.startswith("Uncertainty") else c for c in STEP_COLUMNS)


def _number(value: float) -> str:
    return format_value(value, 3, missing=NO_VALUE)


def step_rows(result: StripResult | None) -> list[list[str]]:
    """The step table's cells, step 1 first; the flag as the reports print it."""
    if result is None:
        return []
    return [[str(s.step), _number(s.log_exposure), _number(s.od), _number(s.od_sd), step_flag(s, result.figures)]
            for s in result.steps]


def step_table_text(result: StripResult | None, *, delimiter: str = "\t") -> str:
    """The step table with its header, tab-separated (clipboard) or as CSV (``delimiter=","``)."""
    out = io.StringIO()
    writer = csv.writer(out, delimiter=delimiter, lineterminator="\n")
    writer.writerow(step_columns(result))
    writer.writerows(step_rows(result))
    return out.getvalue()
