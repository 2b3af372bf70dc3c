"""One figure table: the strip report, the comparison report, the command line and the files agree on each figure.

Issue 16: the strip report printed gamma, average gradient, latitude,
mid-density and density difference to 0.01 and the comparison report to
0.001.  These tests read what a user reads (PDF text extracted with pypdf,
the command line's output, the CSV files) and compare the printed values,
not the table with itself.
"""

from __future__ import annotations

import csv
import dataclasses
import re
from pathlib import Path

from report_support import pdf_pages

from stripscan.cli.main import main
from stripscan.core.compare.comparison import compare_sets
from stripscan.core.compare.sets import StripSet
from stripscan.core.compare.table import DEFAULT_TOLERANCES
from stripscan.core.compare.table import FIGURES as COMPARED
from stripscan.core.figures import FIGURE_KEYS, figure_name, figure_unit
from stripscan.core.qc.names import LABELS, QUANTITIES
from stripscan.core.records import CurveFigures
from stripscan.render import scan_report_pdf
from stripscan.render.comparison import comparison_report_pdf
from stripscan.render.export import export_figures_csv

# How each report names a figure: (strip report's figure column, comparison table's figure column).
# Written out here, not read from the table, so that a renamed figure shows up as a failure.
NAMES = {
    "base_fog": ("Base+fog", "base+fog (OD)"),
    "speed_log_exposure": ("Speed point", "speed point (net 1.00) (log E)"),
    "average_gradient": ("Average gradient", "average gradient (OD/log E)"),
    "gamma": ("Gamma", "gamma (maximum slope) (OD/log E)"),
    "latitude_log_exposure": ("Latitude", "latitude (log E)"),
    "mid_density": ("Mid-density", "mid-density (OD)"),
    "density_difference": ("Density difference", "density difference (OD)"),
}
# Read at steps chosen on set A, so only A's strip is read at its own steps.
AT_A_STEPS = ("mid_density", "density_difference")
NUMBER = r"([+-]?\d+\.\d+)"


def squash(text: str) -> str:
    return "".join(text.split())


def strip_report_values(text: str) -> dict[str, str]:
    """The printed value of each figure on a strip report's page: the number after its name."""
    values = {}
    for key, (label, _) in NAMES.items():
        found = re.search(re.escape(label) + " " + NUMBER, text)
        assert found, f"{label} has no value on the strip report"
        values[key] = found.group(1)
    return values


def test_the_strip_report_and_the_comparison_report_print_the_same_values(lot_a, lot_b, calibration, tmp_path):
    a, b = lot_a.strips[0], lot_b.strips[0]
    page_a = pdf_pages(scan_report_pdf(dataclasses.replace(lot_a, strips=(a,)), tmp_path / "a.pdf",
                                       calibration=calibration))[0]
    page_b = pdf_pages(scan_report_pdf(dataclasses.replace(lot_b, strips=(b,)), tmp_path / "b.pdf",
                                       calibration=calibration))[0]
    # One strip a set: its "mean" is the strip's own figure, printed with "(1)" beside it.
    comparison = compare_sets([StripSet("lot A strip 1", (a,)), StripSet("lot B strip 1", (b,))])[0]
    page = squash(pdf_pages(comparison_report_pdf([comparison], tmp_path / "ab.pdf"))[0])
    printed_a, printed_b = strip_report_values(page_a), strip_report_values(page_b)
    for key, (_, name) in NAMES.items():
        row = f"{name} {printed_a[key]} (1)" + ("" if key in AT_A_STEPS else f" {printed_b[key]} (1)")
        assert squash(row) in page, f"{key}: the comparison report does not print {row!r}"


def run(capsys, *argv) -> str:
    assert main([str(arg) for arg in argv]) == 0
    return capsys.readouterr().out


def test_analyze_and_compare_print_the_same_values_on_the_command_line(demo, capsys):
    scan, cal = demo.lot_a_scan, demo.calibration
    analysed = run(capsys, "analyze", scan, "--calibration", cal)
    strip_1 = analysed.split("Strip 2:")[0]
    # 'stripscan analyze' writes a figure's name, then its value (the speed point after "log E").
    said = {key: re.search(pattern + NUMBER, strip_1).group(1) for key, pattern in {
        "base_fog": r"\n  base\+fog +", "speed_log_exposure": r"\n  speed point \(net 1\.00\) +log E ",
        "average_gradient": r"\n  average gradient \(0\.25-2\.00\) +", "gamma": r"\n  gamma \(max slope\) +",
        "latitude_log_exposure": r"\n  latitude +", "mid_density": r"\n  mid-density +",
        "density_difference": r"\n  density difference +"}.items()}
    compared = run(capsys, "compare", f"scan:{scan}#1", f"scan:{scan}#1,2", "--calibration", cal)
    for key, (_, name) in NAMES.items():
        # Set A is strip 1 alone: its column is strip 1's figure.
        assert re.search(re.escape(name) + r" +" + re.escape(said[key]) + r" \(1\)", compared), (key, said[key])


def test_every_figure_named_anywhere_is_in_the_one_table(archive, tmp_path, lot_a):
    from stripscan.archive.records import FIGURE_UNITS, FIGURES as ARCHIVED

    table = set(FIGURE_KEYS)
    # The archive's columns, the comparison's rows and its tolerances.
    assert set(ARCHIVED) <= table and set(COMPARED) <= table and set(DEFAULT_TOLERANCES) <= set(COMPARED)
    # Every number a strip's figures hold is a figure of the table: all but the density net figures are
    # read against (base+fog, or its stand-in when none was read); the step numbers are the QC figures' detail.
    numbers = {f.name for f in dataclasses.fields(CurveFigures) if f.type in ("float | None", "float")}
    assert numbers - {"net_reference"} == table
    # The CSV files as written: the strip export's and the archive export's headers, "name [unit]".
    files = (export_figures_csv(lot_a.strips, tmp_path / "figures.csv"), archive.export_csv(tmp_path / "archive.csv"))
    for path in files:
        with Path(path).open(encoding="utf-8-sig", newline="") as handle:
            header = next(csv.reader(handle))
        named = dict(re.fullmatch(r"(\w+) \[(.+)\]", cell).groups() for cell in header if "[" in cell)
        figures = {name: unit for name, unit in named.items() if name in table}
        assert set(figures) >= set(ARCHIVED), path
        for name, unit in figures.items():
            assert unit == figure_unit(name, "long"), (path, name)
    assert FIGURE_UNITS == {name: figure_unit(name, "long") for name in ARCHIVED}
    # The comparison's JSON names and units, as its table prints them.
    comparison = compare_sets([StripSet("A", lot_a.strips[:2]), StripSet("B", lot_a.strips[1:])])[0]
    for key, row in comparison.to_dict()["differences"].items():
        assert (row["label"], row["unit"]) == (figure_name(key, qualified=True), figure_unit(key, "short"))
    # Processor QC's three quantities are called as the figure table calls them.
    assert {q: LABELS[q] for q in QUANTITIES} == {q: figure_name(q) for q in QUANTITIES}
