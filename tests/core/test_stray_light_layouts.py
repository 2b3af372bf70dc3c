"""The "within ±0.02 OD" promise in every layout of tablet and strips (issue 12's "Done when").

The set-ups, the simulation and the comparison with the simulator's truth
live in ``benchmarks/stray_light_layouts.py``, which
``benchmarks/bench_stray_light.py`` also uses to print the table.  Each set-up
is calibrated from its tablet scan and read through ``calibrate_tablet`` and
``analyze_scan``, as a user would.

The three promises fail on the program without a stray-light correction; the
tests saying so are marked ``xfail(strict=True)`` until the correction lands.
"""

from __future__ import annotations

import importlib.util
import math
import sys
from pathlib import Path
from types import ModuleType
from typing import Iterator

import pytest

LAYOUTS = Path(__file__).resolve().parents[2] / "benchmarks" / "stray_light_layouts.py"

#: The accuracy a densitometer for film QC is expected to meet (common practice).
GOAL_OD = 0.02
#: The issue's tighter goal with flare up to 0.3 %, for steps up to 2.5 OD.
TIGHT_OD, TIGHT_TOP_OD, TIGHT_FLARE, TIGHT_DPI = 0.01, 2.5, 0.003, 300.0
#: The range top a 16-bit scanner should reach with a tablet to 3.05 OD and flare up to 0.3 %.
RANGE_TOP_OD = 3.0



@pytest.fixture(scope="module")
def layouts() -> Iterator[ModuleType]:
    """The shared module loaded from its path: benchmarks/ is a folder of scripts, not a package."""
    spec = importlib.util.spec_from_file_location("stripscan_benchmarks_stray_light_layouts", LAYOUTS)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    with pytest.MonkeyPatch.context() as patch:
        patch.setitem(sys.modules, spec.name, module)  # dataclasses look their module up while being made
        spec.loader.exec_module(module)
        yield module


@pytest.fixture(scope="module")
def results(layouts: ModuleType, tmp_path_factory: pytest.TempPathFactory) -> list:
    """Every set-up of the matrix, run once (the 600-dpi one takes most of the time)."""
    folder = tmp_path_factory.mktemp("stray_light")
    return layouts.run_all(folder)


def checked(results: list) -> list:
    """The results the promises are judged on: those the program can already try (see ``available``)."""
    return [res for res in results if res.available]


def test_the_matrix_crosses_the_layouts_and_scanners_the_issue_names(layouts: ModuleType) -> None:
    setups = layouts.SETUPS
    assert len(setups) >= 12
    assert {s.tablet for s in setups} == {"alone", "hemmed", "beside", "same scan"}
    assert {s.strips for s in setups} == {"alone", "crowded", "edge"}
    assert {s.bits for s in setups} == {8, 16}
    assert min(s.dpi for s in setups) == 150 and max(s.dpi for s in setups) == 600
    assert min(s.flare for s in setups) == 0.0005 and max(s.flare for s in setups) == 0.005
    assert min(s.reach_mm for s in setups) == 10 and max(s.reach_mm for s in setups) == 50
    assert {s.kernel for s in setups} == {"gaussian", "exponential", "two_gaussian"}
    assert any(s.strips == "edge" and s.lamp_falloff == 0.05 for s in setups)
    assert sum(s.dpi == 600 for s in setups) == 1 and all(s.slow for s in setups if s.dpi == 600)
    # common practice: a 21-step tablet from 0.05 to 3.05 OD in steps of 0.15
    assert layouts.TABLET_OD[0] == 0.05 and layouts.TABLET_OD[-1] == 3.05 and len(layouts.TABLET_OD) == 21
    assert all(b - a == pytest.approx(0.15, abs=1e-12) for a, b in zip(layouts.TABLET_OD, layouts.TABLET_OD[1:]))
    assert len({s.seed for s in setups}) == len(setups)  # every set-up its own noise and files


def test_tablet_strip_and_dense_film_lie_where_the_layouts_say(layouts: ModuleType) -> None:
    # The pieces stay on the platen and apart (a 2 mm gap at least), the tablet is the longest piece.
    width, height = layouts.PLATEN_MM

    def box(obj):  # (x0, y0, x1, y1) mm of a piece lying along y (angle 90) or x (angle 0)
        if hasattr(obj, "film_width_mm"):
            length, across = obj.n_steps * obj.step_length_mm + 2 * obj.end_margin_mm, obj.film_width_mm
        else:
            length, across = len(obj.densities) * obj.step_length_mm + 2 * obj.end_margin_mm, obj.width_mm
        dx, dy = (across, length) if obj.angle_deg == 90.0 else (length, across)
        x, y = obj.center_mm
        return x - dx / 2, y - dy / 2, x + dx / 2, y + dy / 2

    setups = list(layouts.SETUPS)
    scenes = [layouts.tablet_scan_objects(t) for t in ("alone", "hemmed", "beside")]
    scenes += [layouts.strip_scan_objects(s) for s in setups]
    for scene in scenes:
        boxes = [box(obj) for obj in scene]
        assert all(x0 >= 0 and y0 >= 0 and x1 <= width and y1 <= height for x0, y0, x1, y1 in boxes)
        for i, a in enumerate(boxes):
            for b in boxes[i + 1:]:
                gap = max(b[0] - a[2], a[0] - b[2], b[1] - a[3], a[1] - b[3])
                assert gap >= 2.0, (scene, a, b)
        # The reference tablet is the longest piece wherever it lies (strips 171 mm, black film 160 mm).
        tablets = [obj for obj in scene if getattr(obj, "densities", ()) == layouts.TABLET_OD]
        if tablets:
            longest = max(scene, key=lambda o: max(box(o)[2] - box(o)[0], box(o)[3] - box(o)[1]))
            assert longest is tablets[0]
    assert len(layouts.strips_for("crowded")) == 5


@pytest.mark.slow
def test_every_strip_is_found_and_every_step_compared(layouts: ModuleType, results: list) -> None:
    for res in checked(results):
        if res.error:
            continue  # judged by the promise below
        n_strips = sum(1 for obj in layouts.strip_scan_objects(res.setup) if hasattr(obj, "film_width_mm"))
        assert res.strips_missing == 0, res.setup.name
        assert len(res.steps) == 21 * n_strips, res.setup.name
        assert all(math.isfinite(s.read_od) for s in res.steps), res.setup.name


@pytest.mark.slow
def test_no_step_marked_in_range_is_more_than_002_from_the_truth(results: list) -> None:
    # common practice: a densitometer for film QC reads within ±0.02 OD; issue 12: zero exceptions
    failures = [f"{res.setup.name}: {res.error}" for res in checked(results) if res.error]
    for res in checked(results):
        failures += [f"{res.setup.name}: strip {s.strip} step {s.step} true {s.true_od:.3f} read {s.read_od:.3f}"
                     for s in res.in_range if abs(s.error) > GOAL_OD]
    assert not failures, "\n".join(failures)


@pytest.mark.slow
def test_every_step_kept_off_the_curve_says_why(results: list) -> None:
    from stripscan.core.records import STEP_FLAGS

    for res in checked(results):
        for s in res.steps:
            if not s.in_range:
                assert s.flag in STEP_FLAGS and s.flag, (res.setup.name, s)
            # A step far denser than the tablet's densest certified step is never used.
            if s.true_od > layouts_top() + 0.3:
                assert not s.in_range, (res.setup.name, s)


def layouts_top() -> float:
    return 3.05  # the tablet's densest certified step (common practice: 21 steps 0.05 -> 3.05)


@pytest.mark.slow
def test_with_flare_up_to_03_percent_in_range_steps_up_to_25_are_within_001(results: list) -> None:
    # issue 12's goal: ±0.01 OD up to 2.5 OD when the flare is at most 0.3 %.  Judged where the
    # steps' own reading noise allows it (300 dpi and finer: at 150 dpi a 2.45 OD step reads with
    # sd 0.006 whatever the stray light), and away from the platen's edge (what lies beyond the
    # scan is unknown; those steps carry that uncertainty and are judged by the ±0.02 promise).
    failures = []
    for res in checked(results):
        if res.setup.flare > TIGHT_FLARE or res.error or res.setup.dpi < TIGHT_DPI or res.setup.strips == "edge":
            continue
        failures += [f"{res.setup.name}: strip {s.strip} step {s.step} true {s.true_od:.3f} read {s.read_od:.3f}"
                     for s in res.in_range if s.true_od <= TIGHT_TOP_OD and abs(s.error) > TIGHT_OD]
    assert not failures, "\n".join(failures)


@pytest.mark.slow
def test_16_bit_range_top_reaches_30_with_flare_up_to_03_percent(results: list) -> None:
    # issue 12's goal: a tablet to 3.05 OD calibrates a 16-bit linear scanner to at least 3.0 OD,
    # where the tablet's reading noise allows it (300 dpi and finer).  A tablet hemmed in by black
    # film shorter than itself has its densest steps beside open platen: the scanner does not tell
    # steps 20 and 21 apart there, and the range stops at 2.90 saying so.
    short = [f"{res.setup.name}: top {res.range_top}" for res in checked(results)
             if res.setup.bits == 16 and res.setup.flare <= TIGHT_FLARE and not res.error
             and res.setup.dpi >= TIGHT_DPI and res.setup.tablet != "hemmed"
             and (res.range_top is None or res.range_top < RANGE_TOP_OD)]
    assert not short, "\n".join(short)


@pytest.mark.slow
def test_the_table_has_a_row_per_set_up_and_says_why_one_has_no_figures(layouts: ModuleType, results: list) -> None:
    lines = layouts.format_table(results).splitlines()
    assert lines[0].split()[:2] == ["set-up", "max|err|"] and set(lines[1]) == {"-"}
    assert len(lines) == 2 + len(results)
    for line, res in zip(lines[2:], results):
        assert res.setup.name in line
        if not res.available:
            assert res.note in line and res.note.startswith("not available")
        elif res.error:
            assert res.error in line
        else:
            assert f"{res.largest_error():.3f}" in line and f"{res.range_top:.2f}" in line
