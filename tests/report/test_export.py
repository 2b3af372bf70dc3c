"""CSV, JSON, PNG and SVG exports, read back with general-purpose libraries."""

from __future__ import annotations

import csv
import json
import math
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from report_support import LOT_A, logistic_strip

from stripscan.archive import Archive
from stripscan.archive.records import FIGURE_UNITS
from stripscan.render import (ReportError, curve_plot, export_figures_csv, export_snapshot_json, export_steps_csv,
                              save_plot_png, save_plot_svg)
from stripscan.core.figures import NOT_REACHED


def read_csv(path: Path) -> list[dict[str, str]]:
    # Read back with Python's csv module, as a spreadsheet import would.
    with open(path, encoding="utf-8", newline="") as handle:
        return list(csv.DictReader(handle))


def test_steps_csv_round_trips_through_the_csv_module(lot_a, tmp_path):
    path = export_steps_csv(lot_a.strips, tmp_path / "steps.csv")
    rows = read_csv(path)
    assert list(rows[0]) == ["strip", "step", "log_exposure [log10 rel. exposure]", "od [OD]", "od_sd [OD]",
                             "pixels", "in_range", "excluded", "flag"]
    steps = [(strip, s) for strip in lot_a.strips for s in strip.steps]
    assert len(rows) == len(steps) == 63
    for row, (strip, s) in zip(rows, steps):
        assert int(row["strip"]) == strip.index and int(row["step"]) == s.step
        assert float(row["log_exposure [log10 rel. exposure]"]) == pytest.approx(s.log_exposure, abs=5e-7)
        assert float(row["od [OD]"]) == pytest.approx(s.od, abs=5e-5)
        assert float(row["od_sd [OD]"]) == pytest.approx(s.od_sd, abs=5e-5)
        assert int(row["pixels"]) == s.pixels
        assert row["in_range"] == ("yes" if s.in_range else "no")
        assert row["flag"].startswith("not used") == (not s.in_range)


def test_one_strip_or_a_snapshot_exports_alone(archive: Archive, tmp_path):
    strip = archive.get_snapshot(2).strip
    rows = read_csv(export_steps_csv(strip, tmp_path / "one.csv"))
    assert {r["strip"] for r in rows} == {str(strip.index)}
    rows = read_csv(export_steps_csv(archive.get_snapshot(2), tmp_path / "snap.csv"))
    assert {(r["snapshot"], r["lot"], r["date"]) for r in rows} == {("2", LOT_A, "2026-11-20")}


def test_figures_csv_has_units_in_the_header_and_empty_cells_for_unread_figures(lot_a, tmp_path):
    flat = logistic_strip(top=1.0, index=4)
    path = export_figures_csv([*lot_a.strips, flat], tmp_path / "figures.csv")
    rows = read_csv(path)
    assert len(rows) == 4
    header = list(rows[0])
    # The archive's CSV names the same units for the same figures.
    for figure, unit in FIGURE_UNITS.items():
        assert f"{figure} [{unit}]" in header
    for row, strip in zip(rows, [*lot_a.strips, flat]):
        f = strip.figures
        for figure, unit in FIGURE_UNITS.items():
            value = getattr(f, figure)
            cell = row[f"{figure} [{unit}]"]
            assert (cell == "") if value is None else (float(cell) == pytest.approx(value, rel=1e-12))
        assert row["notes"] == "; ".join(f.notes)
        assert float(row["gradient_low_net [OD]"]) == f.settings["gradient_low"]
    assert rows[3]["speed_log_exposure [log10 rel. exposure]"] == "" and "net density 1.00" in rows[3]["notes"]
    assert NOT_REACHED not in path.read_text(encoding="utf-8")  # a CSV cell is empty, not prose


def test_snapshot_json_is_an_archive_export_another_archive_imports(archive: Archive, tmp_path):
    archive.add_note(3, "read twice: same figures", "M. Arden")
    path = export_snapshot_json(archive, 3, tmp_path / "snap3.json")
    data = json.loads(path.read_text(encoding="utf-8"))  # plain JSON, read with the json module
    assert [s["id"] for s in data["snapshots"]] == [3]
    assert [c["hash"] for c in data["calibrations"]] == [archive.get_snapshot(3).calibration_hash]
    with Archive.open(tmp_path / "other.sqlite3") as other:
        report = other.import_json(path)
        assert report.added["snapshots"] == 1 and report.added["snapshot_notes"] == 1
        assert other.get_snapshot(3) == archive.get_snapshot(3)
        assert other.get_lot(LOT_A) == archive.get_lot(LOT_A)


def test_a_revision_travels_with_the_reading_it_corrects(archive: Archive, tmp_path):
    from stripscan.archive import NewSnapshot
    import dataclasses

    old = archive.get_snapshot(1)
    fields = {f.name: getattr(old, f.name) for f in dataclasses.fields(NewSnapshot) if hasattr(old, f.name)}
    fields["calibration"] = archive.get_calibration(old.calibration_hash)
    newer = archive.revise(1, NewSnapshot(**fields), "step count confirmed")
    data = json.loads(export_snapshot_json(archive, newer.id, tmp_path / "rev.json").read_text(encoding="utf-8"))
    assert [s["id"] for s in data["snapshots"]] == [1, newer.id]
    with Archive.open(tmp_path / "other.sqlite3") as other:
        other.import_json(tmp_path / "rev.json")
        assert other.get_snapshot(newer.id).revises == 1


def ink(pixels: np.ndarray) -> np.ndarray:
    return (pixels[:, :, :3] < 245).any(axis=2)


def test_png_of_a_curve_reads_back_with_imageio(lot_a, tmp_path):
    import imageio.v3 as iio

    path = save_plot_png(curve_plot(lot_a.strips[0]), tmp_path / "curve.png", width_mm=120, height_mm=80, dpi=120)
    pixels = iio.imread(path)  # imageio, a general-purpose image library
    assert pixels.shape[:2] == (round(80 / 25.4 * 120), round(120 / 25.4 * 120))
    assert 0.02 < ink(pixels).mean() < 0.5
    blue = (np.abs(pixels[:, :, :3].astype(int) - (0x00, 0x72, 0xB2)).sum(axis=2) < 60).sum()
    assert blue > 100


def test_svg_of_a_curve_is_xml_with_real_text(lot_a, tmp_path):
    path = save_plot_svg(curve_plot(lot_a.strips[0], title="Strip 1 of lot A"), tmp_path / "curve.svg",
                         width_mm=150, height_mm=90)
    root = ET.parse(path).getroot()  # the standard library's XML parser
    ns = "{http://www.w3.org/2000/svg}"
    assert root.tag == f"{ns}svg"
    assert float(root.get("width").removesuffix("mm")) == pytest.approx(150, abs=0.5)
    text = "".join(t.text or "" for t in root.iter(f"{ns}text"))
    for expected in ("log relative exposure (log E)", "optical density (OD)", "Strip 1 of lot A",
                     f"average gradient {lot_a.strips[0].figures.average_gradient:.2f}"):
        assert "".join(expected.split()) in "".join(text.split())
    assert any(p.get("points") or p.get("d") for p in root.iter() if p.tag in (f"{ns}polyline", f"{ns}path"))


def test_bad_sizes_and_places_are_refused_and_leave_nothing(lot_a, tmp_path):
    plot = curve_plot(lot_a.strips[0])
    with pytest.raises(ReportError, match="width must be between 30 and 1000 mm"):
        save_plot_png(plot, tmp_path / "x.png", width_mm=5)
    with pytest.raises(ReportError, match="resolution must be between"):
        save_plot_png(plot, tmp_path / "x.png", dpi=math.inf)
    with pytest.raises(ReportError, match="does not exist"):
        export_steps_csv(lot_a.strips, tmp_path / "missing" / "x.csv")
    with pytest.raises(ReportError, match="is a folder"):
        export_figures_csv(lot_a.strips, tmp_path)
    with pytest.raises(ReportError, match="nothing to export"):
        export_steps_csv([], tmp_path / "x.csv")
    assert list(tmp_path.iterdir()) == []
