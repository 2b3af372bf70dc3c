"""The one-page strip report, read back with pypdf and poppler and looked at as pixels."""

from __future__ import annotations

import dataclasses
import subprocess
from pathlib import Path

import numpy as np
import pytest
from report_support import (LOT_A, PROCESSOR, SCENARIO, SITE, analysis_of, image_array, logistic_strip, needs_poppler,
                      pdf_pages, pdf_words)

from stripscan import CAUTION
from stripscan.render import ReportError, render_page, scan_report_pdf, snapshot_report_pdf, write_pdf
from stripscan.render.snapshot import StripContext, reports_from_analysis

A4_PT = (595.0, 842.0)  # ISO 216 A4, 210 x 297 mm, in PDF points (1/72 inch)


def squash(text: str) -> str:
    return "".join(text.split())


def printed(strip) -> dict[str, str]:
    """The figures as the page must print them: the stated decimals of each figure."""
    f = strip.figures
    return {
        "Base+fog": f"{f.base_fog:.3f}", "Speed point": f"{f.speed_log_exposure:.3f}",
        "Average gradient": f"{f.average_gradient:.2f}", "Gamma": f"{f.gamma:.2f}",
        "Latitude": f"{f.latitude_log_exposure:.2f}", "Mid-density": f"{f.mid_density:.2f}",
        "Density difference": f"{f.density_difference:.2f}",
    }


def test_scan_report_has_a_page_per_strip_with_figures_steps_provenance_and_caution(lot_a, calibration, tmp_path):
    out = scan_report_pdf(lot_a, tmp_path / "lot-a.pdf", calibration=calibration,
                          context=StripContext(site=SITE, lot=LOT_A, processor=PROCESSOR))
    pages = pdf_pages(out)  # text extracted with pypdf
    assert len(pages) == len(lot_a.strips) == 3
    for strip, text in zip(lot_a.strips, pages):
        for label, value in printed(strip).items():
            # Each figure sits on its own row: label, value, unit.
            assert f"{label} {value}" in text, label
        # ISO 9236-1 definitions of the two density points, printed with the settings used.
        assert "net densities 0.25 and 2.00" in text and "base+fog + 1.00" in text
        for step in strip.steps:
            assert f"{step.step} {step.log_exposure:.2f} {step.od:.3f} {step.od_sd:.3f}" in text
        assert squash(CAUTION) in squash(text)
        assert lot_a.scan.sha256[:16] in text and SITE.split(",")[0] in text
        # Provenance: tablet scan, certificate, date, covered/valid range, residual RMS.
        assert Path(calibration.scan_path).name in text and Path(calibration.certificate.source).name in text
        assert calibration.created[:10] in text and f"{calibration.rms_residual:.4f} OD" in text
        assert f"tablet covers {calibration.covered_od[0]:.2f} to {calibration.covered_od[1]:.2f} OD" in text
        assert f"from {calibration.valid_od[0]:.2f} to {calibration.valid_od[1]:.2f} OD" in text
        assert f"page {strip.index} of 3" in text


def test_snapshot_report_from_the_archive(archive, calibration, tmp_path):
    snapshot = archive.get_snapshot(2)
    archive.add_note(2, "strip kinked at step 19", "M. Arden")
    out = snapshot_report_pdf(2, tmp_path / "snap.pdf", archive=archive, site=SITE)
    pages = pdf_pages(out)
    assert len(pages) == 1
    text = pages[0]
    for expected in ("Snapshot 2", LOT_A, PROCESSOR, SCENARIO["technologist"], SCENARIO["film_type"],
                     "2026-11-20", "2026-11-21", SCENARIO["sensitometer"]["id"], "strip kinked at step 19"):
        assert expected in text, expected
    for label, value in printed(snapshot.strip).items():
        assert f"{label} {value}" in text
    assert squash(CAUTION) in squash(text)
    assert snapshot.scan.sha256[:16] in text
    assert snapshot.calibration_hash[:12] in text and Path(calibration.certificate.source).name in text


def test_a_revised_snapshot_says_so(archive, tmp_path):
    from stripscan.archive import NewSnapshot

    old = archive.get_snapshot(1)
    fields = {f.name: getattr(old, f.name) for f in dataclasses.fields(NewSnapshot) if hasattr(old, f.name)}
    fields["calibration"] = archive.get_calibration(old.calibration_hash)
    newer = archive.revise(1, NewSnapshot(**fields), "operator name corrected")
    old_text = pdf_pages(snapshot_report_pdf(1, tmp_path / "old.pdf", archive=archive))[0]
    new_text = pdf_pages(snapshot_report_pdf(newer.id, tmp_path / "new.pdf", archive=archive))[0]
    assert f"revised by snapshot {newer.id}" in old_text
    assert "corrects snapshot 1: operator name corrected" in new_text


def ink(pixels: np.ndarray) -> np.ndarray:
    """Where a picture is not white (any channel darker than 245 of 255)."""
    return (pixels < 245).any(axis=2)


def test_a_rendered_page_is_not_blank(lot_a, calibration):
    page = reports_from_analysis(lot_a, calibration=calibration)[0]
    pixels = image_array(render_page(page, dpi=80))
    covered = ink(pixels).mean()
    assert 0.03 < covered < 0.4  # a page of text, tables and a plot: some ink, mostly paper
    # The curve is drawn: pixels of its colour (Okabe & Ito blue #0072B2) are there.
    blue = (np.abs(pixels.astype(int) - (0x00, 0x72, 0xB2)).sum(axis=2) < 60).sum()
    assert blue > 200


@needs_poppler
def test_the_pdf_page_rendered_by_poppler_shows_the_plot(lot_a, calibration, tmp_path):
    import imageio.v3 as iio

    out = scan_report_pdf(lot_a, tmp_path / "lot-a.pdf", calibration=calibration)
    subprocess.run(["pdftoppm", "-r", "60", "-png", "-f", "1", "-l", "1", str(out), str(tmp_path / "page")],
                   check=True)
    pixels = iio.imread(next(tmp_path.glob("page*.png")))[:, :, :3]
    assert pixels.shape[:2] == (round(297 / 25.4 * 60), round(210 / 25.4 * 60))  # A4 at 60 dpi
    assert 0.03 < ink(pixels).mean() < 0.4
    blue = (np.abs(pixels.astype(int) - (0x00, 0x72, 0xB2)).sum(axis=2) < 60).sum()
    assert blue > 100


LONG_LOT = "M-2702-B-" + "RECUT" * 40 + "-END"
LONG_NAME = "J. Solberg on behalf of the breast imaging unit's quality team " * 3


def long_report(calibration, *, warnings: tuple[str, ...] = ()):
    strip = logistic_strip(warnings=warnings)
    context = StripContext(site=SITE * 3, lot=LONG_LOT, processor=PROCESSOR + " " + "x" * 150, operator=LONG_NAME)
    return reports_from_analysis(analysis_of(strip, calibration=calibration), calibration=calibration,
                                 context=context)[0]


def assert_ink_inside(page, margin_mm: float = 14.0) -> None:
    """Draw the page with a white border around it: no ink may fall in the border or the side margins."""
    dpi, border = 100.0, 10.0
    pixels = ink(image_array(render_page(page, dpi=dpi, border_mm=border)))
    px = dpi / 25.4
    left, right = round((border + margin_mm - 0.5) * px), round((border + 210 - margin_mm + 0.5) * px)
    top, bottom = round((border + margin_mm - 0.5) * px), round((border + 297 - margin_mm + 0.5) * px)
    assert pixels[:, right:].sum() == 0 and pixels[:, :left].sum() == 0
    assert pixels[:top].sum() == 0 and pixels[bottom:].sum() == 0
    assert pixels[top:bottom, left:right].sum() > 0


def test_a_very_long_lot_name_gives_a_clean_page(calibration, tmp_path):
    page = long_report(calibration)
    assert_ink_inside(page)
    out = write_pdf([page], tmp_path / "long.pdf", title="long")
    pages = pdf_pages(out)
    assert len(pages) == 1
    # The whole name is printed (wrapped, not cut).
    assert LONG_LOT in squash(pages[0])


@needs_poppler
def test_every_word_of_a_long_page_lies_on_the_page(calibration, tmp_path):
    out = write_pdf([long_report(calibration)], tmp_path / "long.pdf", title="long")
    words = pdf_words(out)  # boxes by poppler's pdftotext -bbox
    assert words
    for _, width, height, x0, y0, x1, y1, word in words:
        assert (width, height) == pytest.approx(A4_PT, abs=1.0)
        assert 0 <= x0 < x1 <= width and 0 <= y0 < y1 <= height, word


def test_a_strip_without_a_speed_point_prints_not_reached(calibration, tmp_path):
    # A flat film: it never reaches net density 1.00, nor the gradient's upper point 2.00.
    strip = logistic_strip(top=1.0)
    assert strip.figures.speed_log_exposure is None
    page = reports_from_analysis(analysis_of(strip, calibration=calibration), calibration=calibration)[0]
    assert_ink_inside(page)
    text = pdf_pages(write_pdf([page], tmp_path / "flat.pdf", title="flat"))[0]
    for label in ("Speed point", "Average gradient", "Latitude"):
        assert f"{label} not reached" in text
    assert "never reach net density 1.00" in text
    assert f"Base+fog {strip.figures.base_fog:.3f}" in text


def test_an_uncalibrated_reading_says_so(tmp_path):
    strip = logistic_strip()
    analysis = analysis_of(strip, warnings=("UNCALIBRATED: densities are log10(I0/I) straight from the scanner",))
    text = pdf_pages(scan_report_pdf(analysis, tmp_path / "direct.pdf"))[0]
    assert "uncalibrated direct mode" in text and "UNCALIBRATED" in text
    assert squash(CAUTION) in squash(text)


def test_too_many_warnings_are_cut_with_a_count(calibration, tmp_path):
    warnings = tuple(f"step {k}: dust speck at the sampling box edge, reading kept but checked by hand"
                     for k in range(1, 61))
    page = long_report(calibration, warnings=warnings)
    assert_ink_inside(page)
    text = pdf_pages(write_pdf([page], tmp_path / "warned.pdf", title="warned"))[0]
    shown = sum(1 for w in warnings if w in text)
    assert 0 < shown < 60
    assert f"and {60 - shown} more" in text


def test_a_calibration_other_than_the_one_used_is_refused(lot_a, calibration):
    other = dataclasses.replace(calibration, note="refitted")
    with pytest.raises(ReportError, match="is not the one the analysis"):
        reports_from_analysis(lot_a, calibration=other)


def test_no_half_written_file_is_left(lot_a, calibration, tmp_path):
    class Broken:
        def draw(self, canvas):
            canvas.text(canvas.left, canvas.top, 50, "first line")
            raise ReportError("layout failed on purpose")

    with pytest.raises(ReportError, match="on purpose"):
        write_pdf([reports_from_analysis(lot_a, calibration=calibration)[0], Broken()], tmp_path / "r.pdf",
                  title="broken")
    assert list(tmp_path.iterdir()) == []
    with pytest.raises(ReportError, match="does not exist"):
        scan_report_pdf(lot_a, tmp_path / "no-such-folder" / "r.pdf", calibration=calibration)
    with pytest.raises(ReportError, match="needs the archive"):
        snapshot_report_pdf(3, tmp_path / "r.pdf")
