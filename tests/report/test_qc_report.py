"""The monthly processor QC report, checked against the control-limit arithmetic of 21 CFR 900.12(e)(1)."""

from __future__ import annotations

import datetime

import numpy as np
import pytest
from report_support import PROCESSOR, QC_DAYS, SCENARIO, image_array, pdf_pages

from stripscan import CAUTION
from stripscan.archive import Archive, ArchiveLookupError
from stripscan.cli.main import main
from stripscan.core.qc.names import VERDICT_WORDS
from stripscan.services.qc_log import load_processor_log
from stripscan.render import ReportError, render_page
from stripscan.render.plot import Points
from stripscan.render.qcmonth import qc_month, qc_month_plots, qc_month_report_pdf


def squash(text: str) -> str:
    return "".join(text.split())


def expected_rows(archive: Archive) -> dict[str, str]:
    """Each November day's row worked out here: levels = mean of the five baseline strips
    (common practice), limits ±0.15 for mid-density and density difference and +0.03 for
    base+fog (21 CFR 900.12(e)(1)), warning tier ±0.10 (common practice)."""
    entries = {e.date: e for e in archive.list_qc_entries(PROCESSOR)}
    plog = load_processor_log(archive, PROCESSOR)
    values = {day: (e.base_fog, e.mid_density, e.density_difference) for day, e in entries.items()}
    first_baseline = sorted(values)[:5]                     # before any event
    second_baseline = [d for d in sorted(values) if d >= "2026-11-17"][:5]  # after the new chemistry
    rows = {}
    for day in sorted(d for d in values if d.startswith("2026-11")):
        baseline = second_baseline if day >= "2026-11-17" else first_baseline
        level = np.mean([values[d] for d in baseline], axis=0)
        dev = np.round(np.asarray(values[day]) - level, 6)
        if dev[0] > 0.03 + 1e-9 or max(abs(dev[1]), abs(dev[2])) > 0.15 + 1e-9:
            verdict = "action"
        elif max(abs(dev[1]), abs(dev[2])) > 0.10 + 1e-9:
            verdict = "warning"
        else:
            verdict = "ok"
        if verdict == "ok" and plog.status(datetime.date.fromisoformat(day)).rules_fired:
            # Issue 13, item 5: one verdict — a trend rule that fired on the day makes it a warning there too.
            verdict = "warning"
        bf, md, dd = values[day]
        rows[day] = (f"{day} {entries[day].source} {bf:.3f} {dev[0] + 0.0:+.3f} {md:.3f} {dev[1] + 0.0:+.3f} "
                     f"{dd:.3f} {dev[2] + 0.0:+.3f} {VERDICT_WORDS[verdict]}")
    return rows


def test_two_pages_with_every_day_its_deviations_and_verdict(qc_archive, calibration, tmp_path):
    path = qc_month_report_pdf(qc_archive, PROCESSOR, "2026-11", tmp_path / "qc.pdf", site=SCENARIO["site"])
    pages = pdf_pages(path)  # text extracted with pypdf
    assert len(pages) == 2
    charts, table = pages
    rows = expected_rows(qc_archive)
    assert len(rows) == 1 + sum(day.startswith("2026-11") for day in QC_DAYS)
    for day, row in rows.items():
        assert squash(row) in squash(table), day
    assert "ACT" in rows["2026-11-12"] and "WARNING" in rows["2026-11-10"]  # the story's broken limit
    for page in pages:
        assert squash(CAUTION) in squash(page)
    assert "Processor QC - November 2026" in charts and SCENARIO["processor"]["place"] in charts
    assert "\u00b10.15 OD" in charts and "+0.03 OD above its level" in charts
    # Actions taken, the event, and where the numbers came from.
    for action in ("replenishment rate checked and raised", "developer temperature 34.6 degC, set back to 35.0 degC",
                   "new chemistry on 2026-11-17"):
        assert squash(action) in squash(table)
    scanned = [e for e in qc_archive.list_qc_entries(PROCESSOR) if e.source == "scan"]
    assert len(scanned) == 1
    digest = qc_archive.get_snapshot(scanned[0].snapshot_id).calibration_hash
    assert f"snapshot {scanned[0].snapshot_id}" in table and digest[:12] in table
    assert "Typed in, 20 days" in table


def test_a_scanned_day_whose_strip_was_not_kept_says_its_calibration_is_not_recorded(
        daily_scan, calibration, tmp_path):
    from report_support import fill_qc_month

    from stripscan.archive import Processor

    with Archive.open(tmp_path / "unkept.sqlite3") as archive:
        archive.add_processor(Processor(PROCESSOR, SCENARIO["processor"]["place"]))
        fill_qc_month(archive, scan_day=daily_scan, calibration=calibration, keep_strip=False)
        table = pdf_pages(qc_month_report_pdf(archive, PROCESSOR, "2026-11", tmp_path / "qc.pdf"))[1]
    assert "Read off scans, 1 day" in table and "calibration is not recorded here" in table
    assert calibration.sha256[:12] not in table


def test_points_past_a_limit_are_marked_on_the_charts(qc_archive):
    month = qc_month(qc_archive, PROCESSOR, "2026-11")
    plots = qc_month_plots(month)
    assert list(plots) == ["base-fog", "mid-density", "density-difference"]
    baseline = np.mean([QC_DAYS[d][:3] for d in sorted(QC_DAYS)[:5]], axis=0)  # the five October strips
    worst = np.asarray(QC_DAYS["2026-11-12"][:3]) - baseline
    for name, deviation in zip(plots, worst):
        marked = [item for item in plots[name].items if isinstance(item, Points) and item.x
                  and item.marker == "diamond" and item.filled]
        assert len(marked) == 1 and 12.0 in marked[0].x, name
        k = list(marked[0].x).index(12.0)
        assert marked[0].y[k] == pytest.approx(deviation, abs=1e-6)
    pixels = image_array(render_page(month.pages()[0], dpi=90))
    # Control-limit points are drawn as vermillion diamonds (#D55E00).
    assert (np.abs(pixels.astype(int) - (0xD5, 0x5E, 0x00)).sum(axis=2) < 40).sum() > 30


def test_a_month_without_strips_and_bad_months_are_refused(qc_archive, tmp_path):
    with pytest.raises(ValueError, match="no QC entries in 2026-12"):
        qc_month_report_pdf(qc_archive, PROCESSOR, "2026-12", tmp_path / "dec.pdf")
    with pytest.raises(ReportError, match="not written YYYY-MM"):
        qc_month(qc_archive, PROCESSOR, "2026-1")
    with pytest.raises(ArchiveLookupError, match="Processor 9"):
        qc_month(qc_archive, "Processor 9", "2026-11")
    assert not list(tmp_path.glob("*.pdf"))


def test_the_command_line_writes_the_month_and_its_charts(capsys, qc_archive, tmp_path):
    out = tmp_path / "november.pdf"
    assert main(["report", "--qc", PROCESSOR, "--month", "2026-11", "--archive", str(qc_archive.path),
                 "-o", str(out)]) == 0
    assert len(pdf_pages(out)) == 2
    svg = tmp_path / "md.svg"
    assert main(["export", "plot", "--qc", PROCESSOR, "--month", "2026-11", "--archive", str(qc_archive.path),
                 "--chart", "mid-density", "-o", str(svg)]) == 0
    assert "mid-density" in svg.read_text(encoding="utf-8")
    assert main(["report", "--qc", PROCESSOR, "--archive", str(qc_archive.path), "-o", str(out)]) == 1
    assert "needs --month YYYY-MM" in capsys.readouterr().err
    assert main(["report", "snapshot:1", "--qc", PROCESSOR, "--month", "2026-11", "-o", str(out)]) == 1
    assert "give no SOURCE" in capsys.readouterr().err


def test_repeated_and_corrected_entries_are_shown_apart_and_not_used(qc_archive, tmp_path):
    import datetime as dt

    from stripscan.core.qc.records import QCValues
    from stripscan.render.qc_chart import SET_ASIDE
    from stripscan.services.qc_recording import add_day, correct_entry

    typo = next(e for e in qc_archive.list_qc_entries(PROCESSOR) if e.date == "2026-11-24")
    fixed = correct_entry(qc_archive, typo.id, mid_density=1.03, reason="1.00 typed, 1.03 read").entry
    first = qc_archive.list_qc_entries(PROCESSOR)[-1]  # the 30th's strip, listed by date
    repeat = add_day(qc_archive, PROCESSOR, dt.date(2026, 11, 30), values=QCValues(0.191, 1.02, 1.90),
                     repeat=True, note="second strip of the day").entry
    table = pdf_pages(qc_month_report_pdf(qc_archive, PROCESSOR, "2026-11", tmp_path / "qc.pdf"))[1]
    # Levels after the new chemistry: the mean of its first five days (common practice); the
    # 24th is after them, so the correction moves no level.
    level = np.mean([QC_DAYS[d][:3] for d in ("2026-11-17", "2026-11-18", "2026-11-19", "2026-11-20",
                                                "2026-11-23")], axis=0)

    def row(entry, verdict: str) -> str:
        values = np.array([entry.base_fog, entry.mid_density, entry.density_difference])
        dev = np.round(values - level, 6)
        cells = " ".join(f"{v:.3f} {d + 0.0:+.3f}" for v, d in zip(values, dev))
        return squash(f"{entry.id} {entry.date} {entry.source} {cells} {verdict}")

    flat = squash(table)
    assert row(typo, "corrected, not used") in flat and f"correctedbyentry{fixed.id},notused" in flat
    assert row(fixed, "WITHIN LIMITS") in flat
    assert squash(f"correction of entry {typo.id} (1.00 typed, 1.03 read)") in flat
    assert row(first, "WITHIN LIMITS; repeated, not used") in flat
    assert row(repeat, "WITHIN LIMITS") in flat and squash(f"repeat of entry {first.id}") in flat
    assert "Typed in, 20 days" in table and "30 repeat" in table and "24 correction" in table
    plots = qc_month_plots(qc_month(qc_archive, PROCESSOR, "2026-11"))
    drawn = [item for item in plots["mid-density"].items if isinstance(item, Points) and item.x]
    hollow = [item for item in drawn if not item.filled and item.marker != "cross"]
    crosses = [item for item in drawn if item.marker == "cross"]
    # Each set-aside entry sits a quarter day left of its day, apart from the day's point in use.
    assert [item.x for item in hollow] == [(29.75,)] and [item.x for item in crosses] == [(23.75,)]
    assert crosses[0].y[0] == pytest.approx(1.00 - level[1], abs=1e-6)
    # The legend (on the last chart) explains both, in the words of the program's QC chart.
    legend = {item.label for item in plots["density-difference"].items if getattr(item, "label", "")}
    assert {SET_ASIDE["repeated"], SET_ASIDE["corrected"]} <= legend
