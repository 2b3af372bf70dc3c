"""``stripscan report`` and ``stripscan export`` end to end, through the program's own entry point."""

from __future__ import annotations

import csv
import json

import pytest
from report_support import LOT_B, PROCESSOR, SCENARIO, pdf_pages

from stripscan import CAUTION
from stripscan.archive import Archive
from stripscan.cli.main import main


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_a_scan_gives_one_page_per_strip(capsys, demo, tmp_path):
    out = tmp_path / "lot-b.pdf"
    code, printed, _ = run(capsys, "report", demo.lot_b_scan, "--calibration", demo.calibration, "-o", out,
                           "--lot", LOT_B, "--processor", PROCESSOR, "--operator", SCENARIO["technologist"],
                           "--processed", "2026-11-20", "--site", SCENARIO["site"])
    assert code == 0 and "3 pages" in printed
    pages = pdf_pages(out)  # read back with pypdf
    assert len(pages) == 3
    for number, text in enumerate(pages, start=1):
        assert f"Strip {number} of 3" in text and LOT_B in text and "2026-11-20" in text
        assert "".join(CAUTION.split()) in "".join(text.split())


def test_archived_snapshots_and_their_exports(capsys, archive: Archive, tmp_path):
    db = archive.path
    code, _, _ = run(capsys, "report", "snapshot:1,3", "--archive", db, "-o", tmp_path / "s.pdf")
    assert code == 0
    pages = pdf_pages(tmp_path / "s.pdf")
    assert [p.count("Snapshot 1,") + 10 * p.count("Snapshot 3,") for p in pages] == [1, 10]

    assert run(capsys, "export", "steps", "snapshot:2", "--archive", db, "-o", tmp_path / "s.csv")[0] == 0
    with open(tmp_path / "s.csv", encoding="utf-8", newline="") as handle:
        rows = list(csv.DictReader(handle))  # Python's csv module
    assert len(rows) == 21 and {r["snapshot"] for r in rows} == {"2"}

    assert run(capsys, "export", "figures", "snapshot:1,2,3", "--archive", db, "-o", tmp_path / "f.csv")[0] == 0
    with open(tmp_path / "f.csv", encoding="utf-8", newline="") as handle:
        assert [r["snapshot"] for r in csv.DictReader(handle)] == ["1", "2", "3"]

    assert run(capsys, "export", "json", "snapshot:2", "--archive", db, "-o", tmp_path / "s.json")[0] == 0
    assert [s["id"] for s in json.loads((tmp_path / "s.json").read_text(encoding="utf-8"))["snapshots"]] == [2]

    assert run(capsys, "export", "plot", "snapshot:2", "--archive", db, "-o", tmp_path / "s.svg")[0] == 0
    assert (tmp_path / "s.svg").read_text(encoding="utf-8").startswith("<?xml")


def test_a_comparison_report_takes_the_compare_commands_sets(capsys, demo, tmp_path):
    out = tmp_path / "cmp.pdf"
    code, printed, err = run(capsys, "report", "--compare", f"scan:{demo.lot_a_scan}", f"scan:{demo.lot_b_scan}",
                             "--calibration", demo.calibration, "--tolerance", "average_gradient=10%", "-o", out)
    assert code == 0, err
    text = pdf_pages(out)[0]
    assert "Emulsion lot comparison" in text
    assert "average gradient \u00b110 % (set by the user)" in text  # the user's tolerance replaced the default
    png = tmp_path / "overlay.png"
    assert run(capsys, "export", "plot", "--compare", demo.lot_a_scan, demo.lot_b_scan, "--calibration",
               demo.calibration, "--chart", "delta-log-exposure", "-o", png)[0] == 0
    assert png.read_bytes().startswith(b"\x89PNG\r\n\x1a\n")  # PNG signature (PNG specification)


@pytest.mark.parametrize("argv, message", [
    (["report", "no-such-scan.tif", "-o", "{tmp}/x.pdf"], "no such scan file"),
    (["report", "snapshot:two", "--archive", "{db}", "-o", "{tmp}/x.pdf"], "with snapshot numbers"),
    (["report", "snapshot:99", "--archive", "{db}", "-o", "{tmp}/x.pdf"], "snapshot 99"),
    (["report", "snapshot:1", "--archive", "{db}", "--lot", "X", "-o", "{tmp}/x.pdf"], "label a scan's pages only"),
    (["report", "snapshot:1", "--archive", "{tmp}/absent.sqlite3", "-o", "{tmp}/x.pdf"], "does not exist"),
    (["report", "snapshot:1", "--archive", "{db}", "-o", "{tmp}/missing/x.pdf"], "does not exist"),
    (["export", "json", "{scan}", "-o", "{tmp}/x.json"], "stripscan analyze SCAN -o OUT.json"),
    (["export", "plot", "snapshot:1", "--archive", "{db}", "-o", "{tmp}/x.jpg"], "name the file .png or .svg"),
    (["export", "steps", "--compare", "snapshot:1", "snapshot:2", "--archive", "{db}", "-o", "{tmp}/x.csv"],
     "goes with 'export plot'"),
    (["report", "--compare", "snapshot:1", "--archive", "{db}", "-o", "{tmp}/x.pdf"], "at least two sets"),
])
def test_bad_input_gives_one_line_and_no_file(capsys, archive: Archive, demo, tmp_path, argv, message):
    fill = {"tmp": tmp_path, "db": archive.path, "scan": demo.lot_a_scan}
    code, printed, err = run(capsys, *(a.format(**fill) for a in argv))
    assert code == 1 and printed == ""
    assert err.startswith("stripscan: error: ") and err.count("\n") == 1 and message in err
    assert not any(p.suffix in (".pdf", ".csv", ".json", ".jpg", ".partial") for p in tmp_path.iterdir())


def test_a_long_unbroken_site_name_wraps_in_linear_time(capsys, demo, tmp_path):
    # bad-input issue item 5: 3 000 characters without a space took 94 s (a cubic wrapping loop)
    from stripscan.render.canvas import _wrap_paragraph

    measured = []

    def advance(text: str) -> float:  # a monospaced font: one unit per character
        measured.append(len(text))
        return float(len(text))

    word = "x" * 100_000
    lines = _wrap_paragraph(f"Site {word} end", advance, 60.0)
    assert "".join(lines[1:-1]) + lines[-1].split()[0] == word and all(len(line) <= 60 for line in lines)
    assert sum(measured) < 5 * len(word)  # every character measured a few times at most
    out = tmp_path / "site.pdf"
    code, printed, err = run(capsys, "report", demo.lot_b_scan, "--calibration", demo.calibration, "-o", out,
                             "--site", "S" * 3000)
    assert code == 0 and "3 pages" in printed, err
