"""The session model, without widgets: its numbers are the core's, its edits re-read the scan."""

from __future__ import annotations

import dataclasses
import datetime as dt

import numpy as np
import pytest

from stripscan.core.calibration_files import load_calibration
from stripscan.core.curve import compute_figures
from stripscan.core.figure_settings import FigureSettings
from stripscan.core.locate import geometry_from_outline
from stripscan.core.pipeline import analyze_loaded
from stripscan.core.reading import AnalysisOptions, read_density, strip_result
from stripscan.core.records import StripGeometry
from stripscan.core.sample import read_strip
from stripscan.core.scan import load_scan
from stripscan.gui.models.events import Event
from stripscan.gui.views.outline import frame_of, geometry_from_corners, hand_drawn_corners, step_at
from stripscan.gui.models.session import MIN_LEVEL_GAP, Session, calibration_messages, load_and_find
from stripscan.gui.views.tables import step_table_text


@pytest.fixture(scope="module")
def loaded(files):
    return load_and_find(files.scan)


@pytest.fixture
def session(loaded, files):
    s = Session()
    s.set_loaded(loaded)
    s.set_calibration(load_calibration(files.calibration), str(files.calibration))
    return s


def core_figures(session: Session, index: int, settings: FigureSettings):
    """The figures compute_figures gives for a strip's steps, base+fog read as the pipeline does."""
    state = session.strips[index]
    result = state.result
    base_fog = read_density(session.mapping, state.base_fog_reading, session.scan.pixel_mm)[0]
    return compute_figures(
        [s.log_exposure for s in result.steps],
        [s.od for s in result.steps],
        [s.in_range and not s.excluded for s in result.steps],
        base_fog=base_fog,
        settings=settings,
    )


def test_session_results_are_the_core_analysis(session, files):
    scan = load_scan(files.scan)
    analysis = analyze_loaded(scan, calibration=load_calibration(files.calibration))
    assert len(session.strips) == len(analysis.strips) == 2
    for state, core in zip(session.strips, analysis.strips):
        assert state.result == core  # the very record the command line prints
    assert session.analysis().strips == analysis.strips


def test_levels_move_figures_to_the_core_values(session, files):
    seen = []
    session.events.levels_changed.connect(lambda low, high: seen.append((low, high)))
    session.set_levels(0.50, 1.80)
    assert seen == [(0.50, 1.80)]
    for k in range(len(session.strips)):
        core = core_figures(session, k, FigureSettings(gradient_low=0.50, gradient_high=1.80))
        figures = session.result(k).figures
        assert figures.average_gradient == pytest.approx(core.average_gradient, rel=1e-9)
        assert figures.latitude_log_exposure == pytest.approx(core.latitude_log_exposure, rel=1e-9)
        # ISO 9236-1: average gradient = (D2 - D1) / (log E2 - log E1) between the two net densities
        span = figures.gradient_high_log_exposure - figures.gradient_low_log_exposure
        assert figures.average_gradient == pytest.approx((1.80 - 0.50) / span, rel=1e-5)


def test_default_levels_read_the_film_within_a_few_percent(session, files):
    # ISO 9236-1: average gradient between net densities 0.25 and 2.00 (the simulator's exact model value)
    for state, truth in zip(session.strips, files.truth):
        assert state.result.figures.average_gradient == pytest.approx(truth["figures"]["average_gradient"], rel=0.05)
        assert state.result.figures.speed_log_exposure == pytest.approx(truth["figures"]["speed_log_exposure"], abs=0.03)


def test_a_level_pushed_past_the_other_stops_short_of_it(session):
    session.set_levels(0.25, 2.00)
    session.set_levels(low=2.5)
    assert session.levels == pytest.approx((2.00 - MIN_LEVEL_GAP, 2.00))
    session.set_levels(high=0.1)
    low, high = session.levels
    assert high == pytest.approx(low + MIN_LEVEL_GAP)
    with pytest.raises(ValueError):
        session.set_levels(low=float("nan"))


def test_excluding_a_step_changes_the_curve_as_the_core_does(session, files):
    index = 0
    state = session.strips[index]
    used = [s.step for s in state.result.steps if s.in_range]
    step = used[len(used) // 2 + 2]  # a step on the straight part, where the figures are read
    before = state.result.figures
    changed = []
    session.events.strip_changed.connect(changed.append)
    session.set_excluded(index, step)
    after = session.result(index)
    assert changed == [index]
    assert after.steps[step - 1].excluded
    expected = strip_result(1, state.geometry, state.readings, state.base_fog_reading, session.mapping,
                            session.options, pixel_mm=session.scan.info.pixel_mm, excluded=[step], notes=state.notes)
    assert after == expected
    assert after.figures.gamma != before.gamma
    session.toggle_excluded(index, step)
    assert session.result(index).figures == before


def test_step_count_and_outline_edits_read_the_scan_again(session):
    state = session.strips[1]
    session.set_step_count(1, 11)
    edited = session.strips[1]
    assert edited.geometry.n_steps == 11 and len(edited.result.steps) == 11
    moved = edited.geometry.replace(origin_rc=(edited.geometry.origin_rc[0] + 4, edited.geometry.origin_rc[1]))
    session.set_geometry(1, moved)
    readings, _, _ = read_strip(session.scan, None, moved)
    assert session.strips[1].readings == tuple(readings)
    assert state.geometry.n_steps == 21  # the old state is untouched (frozen records)


def test_selection_overlay_remove_and_add(session, files):
    events = []
    session.events.selection_changed.connect(lambda i: events.append(("sel", i)))
    session.events.overlay_changed.connect(lambda: events.append(("overlay",)))
    session.select_next()
    session.select_next()
    assert session.selected == 0 and events[:2] == [("sel", 1), ("sel", 0)]
    session.set_overlay(1, True)
    assert session.overlay == {1}
    geometry = session.strips[1].geometry
    session.remove_strip(0)
    assert len(session.strips) == 1 and session.overlay == {0}  # the overlaid strip moved up
    assert session.result(0).index == 1  # renumbered
    index = session.add_strip(geometry)
    assert index == 1 and session.selected == 1
    with pytest.raises(IndexError):
        session.select(5)


@pytest.mark.parametrize("strip", [0, 1])
def test_outline_rectangle_round_trip(session, strip):
    g = session.strips[strip].geometry
    frame = frame_of(g)
    a = np.radians(frame.angle_deg)
    (x0, y0), (w, h) = frame.pos_xy, frame.size
    ux, uy = np.cos(a), np.sin(a)
    vx, vy = -np.sin(a), np.cos(a)
    corners = [(x0 + px * ux + py * vx, y0 + px * uy + py * vy) for px, py in ((0, 0), (w, 0), (w, h), (0, h))]
    back = geometry_from_corners(g, corners, flipped=frame.flipped)
    for name in ("origin_rc", "axis_rc", "normal_rc"):
        assert getattr(back, name) == pytest.approx(getattr(g, name), abs=1e-9)
    assert back.step_pitch_px == pytest.approx(g.step_pitch_px)
    assert back.base_fog_v_px == pytest.approx(g.base_fog_v_px)
    assert back.manual


def test_base_fog_area_keeps_its_gap_when_the_band_widens():
    g = StripGeometry((10.0, 10.0), (0.0, 1.0), (1.0, 0.0), 10.0, 5, 20.0, base_fog_v_px=(24.0, 34.0))
    wider = [(10, 10), (60, 10), (60, 40), (10, 40)]  # (x, y): 30 px wide instead of 20
    back = geometry_from_corners(g, wider, flipped=False)
    assert back.band_width_px == pytest.approx(30.0)
    assert back.base_fog_v_px == pytest.approx((34.0, 44.0))


def test_hand_drawn_strip_reads_like_the_found_one(session, files):
    truth = files.truth[0]
    outline = truth["outline_rc"]  # step band from step 1's outer corner (simulator's exact geometry)
    corners = hand_drawn_corners([outline[0], outline[1], outline[2]])
    assert corners == pytest.approx(np.asarray(outline), abs=1e-6)
    g = geometry_from_outline(corners, 21, base_fog_side=0.5 * truth["band_width_px"])
    assert step_at(g, g.step_center_rc(7)) == 7
    assert step_at(g, g.point_rc(-3.0, 5.0)) is None
    index = session.add_strip(g)
    drawn, found = session.result(index).figures, session.result(0).figures
    assert drawn.average_gradient == pytest.approx(found.average_gradient, rel=0.03)
    with pytest.raises(ValueError):
        hand_drawn_corners([(0, 0), (0, 100), (0.5, 50)])


def test_calibration_messages(session, files):
    cal = load_calibration(files.calibration)
    assert "direct mode" in calibration_messages(None, session.scan)[0]
    now = dt.datetime.fromisoformat(cal.created) + dt.timedelta(days=2)
    assert calibration_messages(cal, session.scan, now=now) == []
    old = calibration_messages(cal, session.scan, max_age_days=1, now=now)
    assert len(old) == 1 and "2 days old" in old[0]
    other = dataclasses.replace(cal, bits=8, dpi=300.0)
    lines = calibration_messages(other, session.scan, now=now)
    assert any("16-bit" in line and "8-bit" in line for line in lines)
    assert any("150 dpi" in line and "300 dpi" in line for line in lines)


def test_an_incompatible_calibration_is_reported_not_raised(session, files):
    cal = load_calibration(files.calibration)
    session.set_calibration(dataclasses.replace(cal, bits=8))
    assert session.mapping is None and "8-bit" in session.mapping_error
    assert all(s.result is None for s in session.strips)
    assert session.messages()[0] == session.mapping_error


def test_options_change_recomputes_every_strip(session):
    before = session.result(0).steps[5].log_exposure
    session.set_options(dataclasses.replace(session.options, increment=0.10))
    # common practice: log E of step k is (k - 1) x increment
    assert session.result(0).steps[5].log_exposure == pytest.approx(0.5)
    assert before == pytest.approx(0.75)
    assert AnalysisOptions().increment == 0.15


def test_step_table_text_carries_the_core_numbers(session):
    result = session.result(0)
    lines = step_table_text(result).splitlines()
    assert lines[0].split("\t") == ["Step", "Log E", "OD", "Uncertainty (OD)", "Flag"]
    assert len(lines) == 1 + len(result.steps)
    for line, step in zip(lines[1:], result.steps):
        cells = line.split("\t")
        assert int(cells[0]) == step.step
        assert float(cells[2]) == pytest.approx(step.od, abs=5e-4)
        assert float(cells[3]) == pytest.approx(step.od_sd, abs=5e-4)
        # A step the reading kept off the curve (out of range, saturated, too noisy) says so.
        assert cells[4].startswith("not used") == (not step.in_range)
    # common practice: the mid-density (MD) and density difference (DD) steps are marked in the step list
    f = result.figures
    assert lines[f.mid_density_step].split("\t")[4] == "MD"
    assert lines[f.dd_high_step].split("\t")[4] == "DD high"
    assert lines[f.dd_low_step].split("\t")[4] == "DD low"


def test_event_listeners_all_run_and_errors_still_surface():
    event = Event("test")
    calls = []

    def broken(value):
        raise RuntimeError("listener broke")

    event.connect(calls.append)
    event.connect(broken)
    event.connect(lambda value: calls.append(value * 2))
    with pytest.raises(RuntimeError, match="listener broke"):
        event.emit(3)
    assert calls == [3, 6]
    event.disconnect(broken)
    event.emit(1)
    assert calls == [3, 6, 1, 2] and len(event) == 2
