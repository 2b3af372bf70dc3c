"""``benchmarks/run_all.py`` still loads and measures: its cheapest piece, the archive queries, on a tiny archive.

This guards the script against rot as the code under it changes.  It checks
what the script hands back (records with the expected keys, positive finite
numbers, a table row each), never how fast anything ran: timings belong in
the benchmarks, which print ratios measured in one run (DEVELOPERS.md).
"""

from __future__ import annotations

import importlib.util
import json
import math
import sys
from collections.abc import Iterator
from pathlib import Path
from types import ModuleType

import pytest

RUN_ALL = Path(__file__).resolve().parents[1] / "benchmarks" / "run_all.py"

# The columns the performance brief asks of the table, plus what names them in JSON.
RECORD_KEYS = {"figure", "value", "unit", "reference", "reference_name", "limit", "note", "target", "ratio", "meets",
               "at_least"}


@pytest.fixture(scope="module")
def run_all() -> Iterator[ModuleType]:
    """The script loaded from its path: benchmarks/ is a folder of scripts, not a package."""
    spec = importlib.util.spec_from_file_location("stripscan_benchmarks_run_all", RUN_ALL)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(sys, "path", list(sys.path))  # the scripts add their folders; give the suite its own back
        patch.setitem(sys.modules, spec.name, module)  # dataclasses look their module up while being made
        spec.loader.exec_module(module)
        yield module


@pytest.fixture(scope="module")
def figures(run_all: ModuleType) -> list:
    return run_all.archive_figures(snapshots=30, repeat=1)


def test_archive_piece_lists_and_trends(figures: list) -> None:
    names = [f.figure for f in figures]
    # The brief's figure 5: listing and trending the archive's snapshots.
    assert any("list_snapshots()" in name for name in names)
    assert any("trend(" in name for name in names)


def test_records_have_the_table_columns_and_finite_positive_numbers(figures: list) -> None:
    for figure in figures:
        record = json.loads(json.dumps(figure.to_dict(), allow_nan=False))  # as --json writes it
        assert set(record) == RECORD_KEYS
        for key in ("value", "reference", "ratio"):
            assert isinstance(record[key], float) and math.isfinite(record[key]) and record[key] > 0, (key, record)
        assert record["ratio"] == pytest.approx(record["value"] / record["reference"])
        if record["limit"] is None:  # shown beside the judged figures (opening the archive)
            assert record["meets"] is None and record["figure"].split(": ")[1].startswith("open")
        else:
            assert record["meets"] is (record["ratio"] <= record["limit"])
        assert record["unit"] == "ms"


def test_table_has_a_row_per_figure_with_its_verdict(run_all: ModuleType, figures: list) -> None:
    header, rule, *rows = run_all.format_table(figures).splitlines()
    assert header.split() == ["figure", "measured", "target", "ratio", "verdict", "note"]
    assert set(rule) <= {"-", " "}
    assert len(rows) == len(figures)
    for row, figure in zip(rows, figures):
        assert row.startswith(figure.figure)
        assert {True: "meets", False: "misses", None: "—"}[figure.meets] in row.split()


def test_startup_piece_times_both_processes(run_all: ModuleType) -> None:
    # Figure 6: one row, the start-up of 'stripscan --help' against the start-up of numpy, both measured.
    (figure,) = run_all.startup_figures(runs=1)
    record = figure.to_dict()
    assert set(record) == RECORD_KEYS
    assert "stripscan --help" in record["figure"] and record["reference_name"] == "import numpy"
    assert record["unit"] == "ms" and record["limit"] == 2.0
    for key in ("value", "reference", "ratio"):
        assert math.isfinite(record[key]) and record[key] > 0, (key, record)
    assert record["meets"] is (record["ratio"] <= 2.0)


def test_batch_piece_times_the_folder_on_one_core_and_on_all(run_all: ModuleType) -> None:
    # Figure 7: one row, scans per second of 'stripscan analyze FOLDER' on every core against one core.
    (figure,) = run_all.batch_figures(scans=4, runs=1, dpi=150.0)
    record = figure.to_dict()
    assert set(record) == RECORD_KEYS
    assert "stripscan analyze FOLDER" in record["figure"] and record["unit"] == "scans/s"
    for key in ("value", "reference", "ratio"):
        assert math.isfinite(record[key]) and record[key] > 0, (key, record)
    if record["limit"] is not None:  # judged on a machine of two cores or more
        assert record["at_least"] and record["target"].startswith("≥ 1.7")
        assert record["meets"] is (record["ratio"] >= 1.7)


@pytest.mark.postgres
def test_server_piece_compares_the_server_with_sqlite_and_times_the_copy(run_all: ModuleType) -> None:
    # Figure 9 (issue 17): the shared archive's rows, on a tiny archive and a small generated one.
    reason = run_all.bench_server.unavailable_reason()
    if reason is not None:
        pytest.skip(f"no PostgreSQL server for this test: {reason}")
    figures = run_all.server_figures(snapshots=30, repeat=1, big=2000)
    names = [f.figure for f in figures]
    assert names[0].startswith("copy of 30 snapshots") and figures[0].unit == "s" and figures[0].limit == 1.0
    assert any("÷ SQLite: list_snapshots(lot)" in n for n in names)
    assert any("÷ SQLite: trend('speed_log_exposure', lot)" in n for n in names)
    assert any(n.startswith("server archive of 2000 snapshots (generated): list_snapshots(lot)") for n in names)
    for figure in figures:
        record = json.loads(json.dumps(figure.to_dict(), allow_nan=False))  # as --json writes it
        assert set(record) == RECORD_KEYS
        for key in ("value", "reference", "ratio"):
            assert math.isfinite(record[key]) and record[key] > 0, (key, record)
        if record["limit"] is not None:
            assert record["meets"] is (record["ratio"] <= record["limit"])
    # The generated lot holds 2000 / 1000 lots = 2 strips: the listing read them all.
    big = [f for f in figures if "(generated): list_snapshots(lot)" in f.figure]
    assert big and big[0].note.startswith("2 rows")
    assert "\n" in run_all.format_table(figures)
