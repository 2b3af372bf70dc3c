"""The processor QC log through the archive: limits, baselines, events, trend rules, scans, persistence.

Invented scenario: the imaging unit of Harrow Bank Infirmary runs one QC
strip a day through its "Darkroom B" processor from Monday 5 October 2026.
"""

from __future__ import annotations

import dataclasses
import datetime
import statistics
from pathlib import Path

import numpy as np
import pytest

from stripscan import CAUTION
from stripscan.archive import Archive, ArchiveConflictError, ArchiveLookupError, NewSnapshot
from stripscan.archive import QcEntry as StoredEntry
from stripscan.core.calibration_files import load_calibration
from stripscan.core.pipeline import analyze_scan
from stripscan.core.qc.levels import choose_qc_steps
from stripscan.core.qc.records import OperatingLevels, QCSteps, QCValues
from stripscan.sim.objects import ScannerModel, StripSpec
from stripscan.sim.simulate import simulate_scan, write_tiff
from stripscan.sim.demo_data import daily_film, demo_files, scanner_for
from stripscan.services.qc_chart import chart_data
from stripscan.services.qc_log import DuplicateDayError, load_processor_log
from stripscan.services.qc_recording import add_day, add_event, correct_entry, read_strip, set_limits
from stripscan.services.qc_status import status_json, status_text

P = "Darkroom B"
START = datetime.date(2026, 10, 5)
LEVEL = (0.18, 1.20, 1.80)


def day(n: int) -> datetime.date:
    return START + datetime.timedelta(days=n)


@pytest.fixture
def archive(tmp_path: Path):
    with Archive.open(tmp_path / "harrow-bank.sqlite3") as opened:
        yield opened


def typed(archive: Archive, n: int, bf: float = LEVEL[0], md: float = LEVEL[1], dd: float = LEVEL[2], **kw):
    return add_day(archive, P, day(n), values=QCValues(bf, md, dd), new_processor=True, **kw)


def baseline(archive: Archive, days: int = 5) -> None:
    for n in range(days):
        typed(archive, n)


def verdict_after(archive: Archive, bf=LEVEL[0], md=LEVEL[1], dd=LEVEL[2]) -> str:
    added = typed(archive, 5, bf, md, dd)
    return added.status.verdict


# --------------------------------------------------------------------------
# Control limits at and just past the boundaries, typed in, stored, judged


@pytest.mark.parametrize("md, expected", [(1.35, "ok"), (1.36, "action"), (1.05, "ok"), (1.04, "action")])
def test_mid_density_control_limit_through_the_log(archive, md, expected):
    set_limits(archive, P, md_dd_warning=None, new_processor=True)
    baseline(archive)
    # 21 CFR 900.12(e)(1): mid-density within ±0.15 of its operating level; exactly 0.15 is within.
    assert verdict_after(archive, md=md) == expected


@pytest.mark.parametrize("dd, expected", [(1.95, "ok"), (1.96, "action"), (1.65, "ok"), (1.64, "action")])
def test_density_difference_control_limit_through_the_log(archive, dd, expected):
    set_limits(archive, P, md_dd_warning=None, new_processor=True)
    baseline(archive)
    # 21 CFR 900.12(e)(1): density difference within ±0.15 of its operating level.
    assert verdict_after(archive, dd=dd) == expected


@pytest.mark.parametrize("bf, expected", [(0.21, "ok"), (0.22, "action"), (0.211, "action"), (0.10, "ok")])
def test_base_fog_control_limit_through_the_log(archive, bf, expected):
    baseline(archive)
    # 21 CFR 900.12(e)(1): base+fog no more than +0.03 above its operating level; a fall is no fault.
    assert verdict_after(archive, bf=bf) == expected


@pytest.mark.parametrize("md, expected", [(1.30, "ok"), (1.31, "warning"), (1.35, "warning"), (1.36, "action")])
def test_warning_tier_by_default(archive, md, expected):
    baseline(archive)
    # ±0.10 warning tier: common practice in mammography QC programmes, from memory;
    # the ±0.15 control limit: 21 CFR 900.12(e)(1).
    assert verdict_after(archive, md=md) == expected


def test_site_limits_are_kept_and_rejudge_stored_days(archive):
    baseline(archive)
    typed(archive, 5, md=1.32)
    assert load_processor_log(archive, P).status().verdict == "warning"  # ±0.10 tier, common practice (memory)
    set_limits(archive, P, md_dd_action=0.11, md_dd_warning=0.06)
    plog = load_processor_log(archive, P)
    assert plog.setup.limits.md_dd_action == 0.11
    assert plog.status().verdict == "action"  # the site's own, tighter limit now applies to the stored day
    with pytest.raises(ValueError, match="md_dd_warning"):
        set_limits(archive, P, md_dd_warning=0.2)


# --------------------------------------------------------------------------
# Baselines


def test_operating_levels_are_the_mean_of_the_first_five_days(archive):
    values = [(0.17, 1.18, 1.77), (0.18, 1.21, 1.82), (0.19, 1.23, 1.79), (0.18, 1.19, 1.84), (0.18, 1.22, 1.80),
              (0.20, 1.40, 2.00)]
    for n, v in enumerate(values[:4]):
        status = typed(archive, n, *v).status
        assert status.baseline_in_progress and status.verdict == "warning"
        assert f"({n + 1} of 5 days)" in status.advice and status.advice.endswith(CAUTION)
    typed(archive, 4, *values[4])
    typed(archive, 5, *values[5])  # not part of the baseline
    levels = load_processor_log(archive, P).status().levels
    # Common practice / FDA guidance for MQSA: operating levels are the mean of 5 consecutive days.
    for k, name in enumerate(("base_fog", "mid_density", "density_difference")):
        assert getattr(levels, name) == pytest.approx(statistics.mean(v[k] for v in values[:5]), abs=1e-9)
    assert levels.established == day(4)


def test_baseline_length_is_a_site_setting(archive):
    set_limits(archive, P, baseline_days=3, new_processor=True)
    for n, md in enumerate((1.19, 1.20, 1.24)):
        typed(archive, n, md=md)
    status = load_processor_log(archive, P).status()
    assert not status.baseline_in_progress
    assert status.levels.mid_density == pytest.approx(statistics.mean((1.19, 1.20, 1.24)), abs=1e-9)


def test_an_event_restarts_the_baseline_and_leaves_earlier_days_alone(archive):
    baseline(archive)
    typed(archive, 5, md=1.24)
    add_event(archive, P, day(6), "new_chemistry", "fresh developer and fixer")
    new = [1.30, 1.31, 1.29, 1.32, 1.28]
    for k, md in enumerate(new[:4]):
        status = typed(archive, 6 + k, md=md).status
        assert status.baseline_in_progress and "new chemistry" in status.advice
    typed(archive, 10, md=new[4])
    plog = load_processor_log(archive, P)
    first, second = plog.log.periods
    assert first.levels.mid_density == pytest.approx(LEVEL[1])
    assert [d.verdict.verdict for d in first.days] == ["ok"] * 6
    # Mean of the 5 days after the event (common practice: re-establish on new chemistry).
    assert second.levels.mid_density == pytest.approx(statistics.mean(new), abs=1e-9)
    assert second.levels.reason.startswith("baseline after new chemistry")
    assert plog.status().verdict == "ok"


def test_a_crossover_record_sets_the_levels_at_once_and_keeps_the_steps(archive):
    baseline(archive)
    steps = QCSteps(11, 13, 10)
    setup = load_processor_log(archive, P).setup
    archive.set_qc_settings(P, {**setup.to_settings(), "step_choices": [
        {"since": day(0).isoformat(), "steps": steps.to_dict(), "chosen_on": "first strip"}]})
    new_levels = OperatingLevels(0.19, 1.26, 1.85, established=day(5), n_days=5, reason="crossover", steps=steps)
    archive.add_crossover(P, day(5).isoformat(), {"result": {"new_levels": new_levels.to_dict()}})
    add_event(archive, P, day(5), "crossover", "new box of QC film")
    status = typed(archive, 5, 0.19, 1.26 + 0.16, 1.85).status
    assert status.levels.mid_density == 1.26 and not status.baseline_in_progress
    assert status.verdict == "action"  # 21 CFR 900.12(e)(1): 0.16 past the crossover's level
    assert load_processor_log(archive, P).steps_on(day(5)) == steps


# --------------------------------------------------------------------------
# Trend rules (run of 7, drift of 5, 2 of 3 past the warning tier: common practice, from memory)


def test_run_rule_fires_through_the_log(archive):
    baseline(archive)
    for n in range(5, 11):
        typed(archive, n, md=1.22)
    assert "run:mid_density" not in load_processor_log(archive, P).status().rules_fired  # 6 of the 7 needed
    status = typed(archive, 11, md=1.22).status
    assert "run:mid_density" in status.rules_fired
    assert status.verdict == "warning"  # within the ±0.15 limits (21 CFR 900.12(e)(1)) but flagged


def test_drift_rule_fires_through_the_log(archive):
    baseline(archive)
    for k, dd in enumerate((1.76, 1.78, 1.79, 1.81)):
        typed(archive, 5 + k, dd=dd)
    assert load_processor_log(archive, P).status().rules_fired == ()
    status = typed(archive, 9, dd=1.83).status  # the fifth strip in a row higher than the one before
    assert "drift:density_difference" in status.rules_fired and status.verdict == "warning"
    assert "rose on each of 5 strips" in status.advice


def test_two_warnings_rule_fires_through_the_log(archive):
    baseline(archive)
    typed(archive, 5, md=1.08)  # -0.12: past the ±0.10 warning tier
    typed(archive, 6, md=1.19)
    status = typed(archive, 7, md=1.09).status
    assert "two_warnings:mid_density" in status.rules_fired
    assert status.verdict == "warning"


def test_base_fog_falling_is_never_a_trend_fault(archive):
    baseline(archive)
    for k in range(7):
        typed(archive, 5 + k, bf=0.17 - 0.002 * k)
    assert load_processor_log(archive, P).status().rules_fired == ()


# --------------------------------------------------------------------------
# Repeat strips and corrections: only each day's entry in use is judged


def test_a_repeat_strip_clears_a_day_past_the_limit_and_both_are_kept(archive):
    baseline(archive)
    first = typed(archive, 5, md=1.36, action="replenisher pump reset")
    assert first.status.verdict == "action" and "repeat the strip" in first.status.advice  # 21 CFR 900.12(e)(1)
    repeat = typed(archive, 5, md=1.23, repeat=True, note="after the reset")
    # Common practice: the repeat strip confirms or clears the first result; here it clears it.
    assert repeat.status.verdict == "ok" and repeat.status.values.mid_density == 1.23
    assert repeat.entry.repeat_of == first.entry.id and "is the day's value from now on" in repeat.notes[-1]
    plog = load_processor_log(archive, P)
    assert [e.values.mid_density for e in plog.log.entries] == [LEVEL[1]] * 5 + [1.23]
    kept, used = plog.logged(day(5), day(5))
    assert (kept.state.in_use, kept.set_aside, kept.verdict.verdict) == (False, "repeated", "action")
    assert kept.verdict.deviations.mid_density == pytest.approx(0.16)
    assert kept.entry.action == "replenisher pump reset"
    assert used.state.in_use and used.standing() == f"repeat of entry {first.entry.id}"
    assert len(archive.list_qc_entries(P)) == 7


def test_levels_and_trend_rules_use_the_repeat_not_the_first_strip(archive):
    for n in range(4):
        typed(archive, n)
    typed(archive, 4, md=1.45)  # a bad strip on the last baseline day ...
    typed(archive, 4, md=1.25, repeat=True)  # ... repeated the same day
    levels = load_processor_log(archive, P).status().levels
    # Operating levels: the mean of the first five days (common practice / FDA guidance for MQSA),
    # each day counted by its strip in use.
    assert levels.mid_density == pytest.approx(statistics.mean([1.20] * 4 + [1.25]), abs=1e-9)
    for n in range(5, 10):
        typed(archive, n, md=1.26 + 0.005 * n)
    # Drift of 5 (common practice, from memory): the rising strips 5-9 with the repeat before them...
    assert "drift:mid_density" in load_processor_log(archive, P).status().rules_fired
    typed(archive, 9, md=1.20, repeat=True)
    # ... ends when the day's repeat falls back.
    assert load_processor_log(archive, P).status().rules_fired == ()


def test_repeats_are_refused_where_they_would_rewrite_or_invent_a_day(archive):
    with pytest.raises(ArchiveConflictError, match="has no QC entry for 2026-10-05 to repeat"):
        typed(archive, 0, repeat=True)
    baseline(archive, 3)
    with pytest.raises(DuplicateDayError, match="already has a QC entry for 2026-10-07 .*duplicate day.* as a "
                                                "repeat strip"):
        typed(archive, 2, md=1.25)
    with pytest.raises(ArchiveConflictError, match="no QC entry for 2026-10-08 to repeat"):
        typed(archive, 3, repeat=True)
    with pytest.raises(ValueError, match="dates out of order: a repeat strip of 2026-10-06 would re-judge"):
        typed(archive, 1, repeat=True)
    assert len(archive.list_qc_entries(P)) == 3


def test_a_correction_replaces_a_mistyped_value_and_rejudges_every_day(archive):
    for n, md in enumerate((1.20, 1.21, 2.19, 1.19, 1.20)):  # 1.19 typed as 2.19 on the third day
        typed(archive, n, md=md)
    typed(archive, 5, md=1.32)
    wrong = archive.list_qc_entries(P)[2]
    before = load_processor_log(archive, P)
    assert before.status().verdict == "ok"  # judged against a level pulled up by the slip
    fixed = correct_entry(archive, wrong.id, mid_density=1.19, reason="2.19 typed, 1.19 read")
    assert (fixed.entry.corrects, fixed.entry.date, fixed.entry.reason) == (wrong.id, wrong.date,
                                                                             "2.19 typed, 1.19 read")
    # Levels: mean of the five baseline days with the corrected value (FDA guidance for MQSA);
    # 1.32 is then 0.122 above: past the ±0.10 warning tier (common practice, from memory).
    status = fixed.status
    assert status.levels.mid_density == pytest.approx(statistics.mean((1.20, 1.21, 1.19, 1.19, 1.20)), abs=1e-9)
    assert status.verdict == "warning"
    assert archive.get_qc_entry(wrong.id) == wrong  # kept as it was
    item = next(i for i in fixed.plog.logged() if i.entry.id == wrong.id)
    assert item.set_aside == "corrected" and item.standing() == f"corrected by entry {fixed.entry.id}, not used"
    assert "entry 3 of 2026-10-07 is kept and shown as corrected" in fixed.notes[0]


def test_unfit_corrections_are_refused_and_store_nothing(archive):
    baseline(archive, 2)
    with pytest.raises(ValueError, match="QC entry 1 is corrected only with a reason"):
        correct_entry(archive, 1, mid_density=1.21, reason="  ")
    with pytest.raises(ValueError, match="give the right value"):
        correct_entry(archive, 1, reason="typo")
    with pytest.raises(ValueError, match="mid_density must be a finite number"):
        correct_entry(archive, 1, mid_density=float("inf"), reason="typo")
    with pytest.raises(ArchiveLookupError, match="QC entry 7 is not in the archive"):
        correct_entry(archive, 7, mid_density=1.21, reason="typo")
    assert len(archive.list_qc_entries(P)) == 2


def test_a_corrected_first_strip_of_a_repeated_day_does_not_displace_the_repeat(archive):
    baseline(archive)
    typed(archive, 5, md=1.63)  # 1.36 read, digits swapped
    typed(archive, 5, md=1.22, repeat=True)
    added = correct_entry(archive, 6, mid_density=1.36, reason="1.36 read, 1.63 typed")
    assert "the repeat still counts for 2026-10-10" in added.notes[1]
    assert added.status.values.mid_density == 1.22 and added.status.verdict == "ok"
    text = status_text(added.plog)
    assert "entry 6: corrected by entry 8, not used" in text
    assert "entry 7 (WITHIN LIMITS): repeat of entry 6; counts for the day" in text
    assert "entry 8 (ACT): correction of entry 6 (1.36 read, 1.63 typed); repeated by entry 7, not used" in text
    data = status_json(added.plog)
    assert [(e["entry"], e["kind"], e["in_use"]) for e in data["latest"]["entries"]] == [
        (6, "first strip", False), (7, "repeat", True), (8, "correction", False)]


# --------------------------------------------------------------------------
# Days read off simulated scans: the baseline's steps are kept


@pytest.fixture(scope="module")
def demo():
    return demo_files()


def scan_of(folder: Path, film, seed: int, name: str, **scanner) -> Path:
    strip = StripSpec(film=film, center_mm=(25.0, 97.5), angle_deg=90.0)
    sc = scanner_for(seed) if not scanner else ScannerModel(bits=16, encoding="linear", channels=1, seed=seed, **scanner)
    path = folder / name
    write_tiff(path, simulate_scan([strip], platen_mm=(50.0, 195.0), dpi=150.0, scanner=sc))
    return path


def test_a_scanned_day_is_read_at_the_steps_kept_from_the_baseline(archive, demo, tmp_path):
    cal = load_calibration(demo.calibration)
    first = analyze_scan(scan_of(tmp_path, daily_film(0), 200, "day0.tif"), calibration=cal)
    added = add_day(archive, P, day(0), analysis=first, new_processor=True)
    steps = added.reading.steps
    assert added.reading.chosen_now
    densities = [s.od if s.in_range else float("nan") for s in first.strips[0].steps]
    assert steps == choose_qc_steps(densities)
    # A tired developer: the core's own per-strip choice now moves the mid-density step ...
    film = daily_film(6)
    later = analyze_scan(scan_of(tmp_path, film, 201, "day1.tif", noise_sd=0.0008), calibration=cal)
    assert later.strips[0].figures.mid_density_step != steps.mid_step
    # ... but the QC log keeps the baseline's steps.
    day1 = add_day(archive, P, day(1), analysis=later, note="second strip")
    assert day1.reading.steps == steps and not day1.reading.chosen_now
    od = {s.step: s.od for s in later.strips[0].steps}
    assert day1.entry.mid_density == pytest.approx(od[steps.mid_step], abs=1e-9)
    assert day1.entry.density_difference == pytest.approx(od[steps.dd_high_step] - od[steps.dd_low_step], abs=1e-6)
    # Against the simulator's exact film: a QC densitometer reads within about ±0.02 OD (common practice, memory).
    truth = film.density(0.15 * np.arange(21))
    assert day1.entry.mid_density == pytest.approx(truth[steps.mid_step - 1], abs=0.02)
    assert day1.entry.base_fog == pytest.approx(film.base_fog, abs=0.02)
    assert day1.entry.source == "scan" and "second strip [read from day1.tif, strip 1" in day1.entry.note
    assert load_processor_log(archive, P).setup.step_choices[0].steps == steps


def test_steps_are_chosen_again_after_an_event_and_a_lot_keeps_the_strip(archive, demo, tmp_path):
    cal = load_calibration(demo.calibration)
    add_day(archive, P, day(0), analysis=analyze_scan(scan_of(tmp_path, daily_film(0), 210, "a.tif"), calibration=cal),
            new_processor=True)
    add_event(archive, P, day(1), "new_film_type", "faster film")
    fast = dataclasses.replace(daily_film(0), log_e_mid=1.45)
    analysis = analyze_scan(scan_of(tmp_path, fast, 211, "b.tif"), calibration=cal)
    added = add_day(archive, P, day(1), analysis=analysis, lot="QC-LOT-7", calibration=cal.to_dict())
    assert added.reading.chosen_now and "after the 2026-10-06 event" in added.notes[0]
    assert any("lot 'QC-LOT-7' was not in the archive" in n for n in added.notes)
    choices = load_processor_log(archive, P).setup.step_choices
    assert [c.since for c in choices] == [day(0), day(1)] and choices[0].steps != choices[1].steps
    snapshot = archive.get_snapshot(added.entry.snapshot_id)
    assert snapshot.lot_id == "QC-LOT-7" and snapshot.processor == P and snapshot.processed_on == day(1).isoformat()


def test_a_repeat_strip_read_off_a_scan_keeps_the_day_s_steps(archive, demo, tmp_path):
    cal = load_calibration(demo.calibration)
    first = add_day(archive, P, day(0), new_processor=True,
                    analysis=analyze_scan(scan_of(tmp_path, daily_film(9), 250, "f.tif"), calibration=cal))
    again = add_day(archive, P, day(0), repeat=True,
                    analysis=analyze_scan(scan_of(tmp_path, daily_film(0), 251, "g.tif"), calibration=cal))
    assert first.reading.chosen_now and not again.reading.chosen_now
    assert again.reading.steps == first.reading.steps
    assert again.entry.repeat_of == first.entry.id and len(load_processor_log(archive, P).setup.step_choices) == 1


def test_a_kept_step_outside_the_calibrated_range_is_refused(archive, demo, tmp_path):
    cal = load_calibration(demo.calibration)
    analysis = analyze_scan(scan_of(tmp_path, daily_film(0), 220, "c.tif"), calibration=cal)
    steps = read_strip(analysis, None).steps
    with pytest.raises(ValueError, match="has 21 steps; the mid-density step kept from the baseline is step 30"):
        read_strip(analysis, QCSteps(30, 32, 31))
    beyond = next(s.step for s in analysis.strips[0].steps if not s.in_range)
    with pytest.raises(ValueError, match=f"density difference high step kept from the baseline \\(step {beyond}\\) "
                                         "is outside the calibrated range"):
        read_strip(analysis, QCSteps(steps.mid_step, beyond, steps.dd_low_step))


def test_a_scan_read_without_a_calibration_is_refused_and_nothing_is_stored(archive, tmp_path):
    baseline(archive)
    # A linear 16-bit scan read in direct mode: log10(I0/I) straight from the scanner, no tablet.
    analysis = analyze_scan(scan_of(tmp_path, daily_film(0), 260, "uncal.tif", noise_sd=0.0008))
    assert analysis.calibration["mode"] == "direct"
    # A flatbed scanner is not a densitometer: its flare caps dense steps, so only a tablet calibration
    # gives densities the operating levels can be compared with (common practice).
    for attempt in ({}, {"repeat": True}):
        with pytest.raises(ValueError, match="uncal.tif was read without a calibration .*nothing was stored.*"
                                             "reference step tablet.*--calibration.*type the densitometer's values"):
            add_day(archive, P, day(5 if not attempt else 4), analysis=analysis, **attempt)
    with pytest.raises(ValueError, match="without a calibration"):
        read_strip(dataclasses.replace(analysis, calibration=None), None)
    assert len(archive.list_qc_entries(P)) == 5 and load_processor_log(archive, P).setup.step_choices == ()


def test_a_scan_with_no_strip_or_several_strips_is_refused_and_nothing_is_stored(archive, demo, tmp_path):
    baseline(archive)
    analysis = analyze_scan(scan_of(tmp_path, daily_film(0), 240, "e.tif"), calibration=load_calibration(demo.calibration))
    with pytest.raises(ValueError, match="e.tif: no strip was found on the scan; nothing was stored"):
        add_day(archive, P, day(5), analysis=dataclasses.replace(analysis, strips=()))
    two = dataclasses.replace(analysis, strips=(analysis.strips[0], dataclasses.replace(analysis.strips[0], index=2)))
    with pytest.raises(ValueError, match="e.tif holds 2 strips; say which one is the QC strip with --strip N"):
        add_day(archive, P, day(5), analysis=two)
    with pytest.raises(ValueError, match="e.tif has no strip 3; its strips are numbered 1 to 2"):
        add_day(archive, P, day(5), analysis=two, strip=3)
    assert len(archive.list_qc_entries(P)) == 5
    assert add_day(archive, P, day(5), analysis=two, strip=2).reading.strip.index == 2


# --------------------------------------------------------------------------
# Bad input, persistence


def test_dates_out_of_order_duplicates_and_unknown_processors_are_refused(archive):
    with pytest.raises(ArchiveLookupError, match="processor 'Darkroom B' is not in the archive .* --new-processor"):
        add_day(archive, P, day(0), values=QCValues(*LEVEL))
    assert archive.list_processors() == []
    baseline(archive)
    with pytest.raises(ArchiveConflictError, match="already has a QC entry for 2026-10-09 .*duplicate day"):
        typed(archive, 4, md=1.25)
    with pytest.raises(ValueError, match="dates out of order: 2026-10-07 is before .* latest QC entry \\(2026-10-09\\)"):
        typed(archive, 2)
    with pytest.raises(ValueError, match="dates out of order: the event of 2026-10-06"):
        add_event(archive, P, day(1), "service")
    with pytest.raises(ValueError, match="unknown event kind 'repair'"):
        add_event(archive, P, day(6), "repair")
    with pytest.raises(ValueError, match="give either a scan or the three typed values"):
        add_day(archive, P, day(6))
    assert [e.mid_density for e in archive.list_qc_entries(P)] == [LEVEL[1]] * 5
    assert archive.list_qc_events(P) == []


def test_a_day_is_one_transaction_with_its_strip_and_settings(archive, demo, tmp_path):
    baseline(archive)
    analysis = analyze_scan(scan_of(tmp_path, daily_film(0), 230, "d.tif"), calibration=load_calibration(demo.calibration))
    draft = NewSnapshot(lot_id="QC-LOT-9", scan=analysis.scan, strip=analysis.strips[0], processor=P)
    duplicate = StoredEntry(P, day(4).isoformat(), 0.18, 1.2, 1.8, "scan")
    before = archive.get_qc_settings(P).settings
    with pytest.raises(ArchiveConflictError, match="duplicate day"):
        archive.add_qc_day(duplicate, snapshot=draft, settings={**before, "baseline_days": 3})
    assert archive.list_snapshots() == [] and archive.list_lots() == []
    assert archive.get_qc_settings(P).settings == before


def test_status_survives_closing_and_reopening_the_archive(tmp_path):
    path = tmp_path / "kept.sqlite3"
    with Archive.open(path) as archive:
        baseline(archive)
        typed(archive, 5, md=1.36, note="developer 1 degC low", action="thermostat reset")
        add_event(archive, P, day(6), "service", "thermostat replaced")
        typed(archive, 6, md=1.25)
        before = status_json(load_processor_log(archive, P))
        text = status_text(load_processor_log(archive, P))
    with Archive.open(path, read_only=True) as archive:
        plog = load_processor_log(archive, P)
        assert status_json(plog) == before
        assert status_text(plog) == text
        assert plog.log.days[5].verdict.verdict == "action"  # 21 CFR 900.12(e)(1): +0.16 past ±0.15
        assert plog.log.entries[5].action == "thermostat reset"
    assert before["latest"]["verdict"] == "warning" and before["baseline"] == {"in_progress": True, "days": 1,
                                                                               "needed": 5, "set_by": None}


def test_status_json_carries_the_promised_keys(archive):
    baseline(archive)
    typed(archive, 5, md=1.36)
    data = status_json(load_processor_log(archive, P))
    assert data["processor"] == P
    assert set(data["operating_levels"]) >= {"base_fog", "mid_density", "density_difference"}
    latest = data["latest"]
    assert set(latest) >= {"date", "values", "deviations", "verdict", "rules"}
    assert latest["verdict"] == "action" and latest["date"] == day(5).isoformat()
    assert latest["deviations"]["mid_density"] == pytest.approx(0.16)
    assert "repeat the strip" in latest["advice"] and data["caution"] == CAUTION
    assert any("beyond the control limit of ±0.15" in r for r in latest["reasons"])


def test_chart_data_marks_each_quantity_by_its_own_tier(archive):
    baseline(archive)
    typed(archive, 5, bf=0.22, md=1.31)
    data = chart_data(load_processor_log(archive, P), month="2026-10")
    by = {s.quantity: s for s in data.series}
    assert by["base_fog"].points[-1].verdict == "action"  # +0.04 past +0.03, 21 CFR 900.12(e)(1)
    assert by["mid_density"].points[-1].verdict == "warning"  # +0.11 past ±0.10, common practice (memory)
    assert by["density_difference"].points[-1].verdict == "ok"
    assert by["base_fog"].action == (0.03, None) and by["mid_density"].action == (0.15, -0.15)
    assert [p.baseline for p in by["mid_density"].points] == [True] * 5 + [False]
    with pytest.raises(ValueError, match="no QC entries in 2026-09"):
        chart_data(load_processor_log(archive, P), month="2026-09")
    with pytest.raises(ValueError, match="not written YYYY-MM"):
        chart_data(load_processor_log(archive, P), month="October")


def test_chart_data_shows_entries_kept_but_not_used(archive):
    baseline(archive)
    typed(archive, 5, md=1.37)
    typed(archive, 5, md=1.21, repeat=True)
    typed(archive, 6, md=2.21)
    correct_entry(archive, 8, mid_density=1.21, reason="2.21 typed")
    data = chart_data(load_processor_log(archive, P), month="2026-10")
    md = {s.quantity: s for s in data.series}["mid_density"]
    assert [p.entry_id for p in md.points] == [1, 2, 3, 4, 5, 7, 9]
    aside = {p.entry_id: p for p in md.set_aside}
    assert set(aside) == {6, 8}
    # The first strip of the 10th: +0.17, past the ±0.15 control limit (21 CFR 900.12(e)(1)), repeated.
    assert (aside[6].set_aside, aside[6].verdict, aside[6].date) == ("repeated", "action", day(5))
    assert aside[6].deviation == pytest.approx(0.17)
    assert aside[8].set_aside == "corrected"
    assert data.set_aside_kinds == ("repeated", "corrected")
    assert data.set_aside_notes == ("2026-10-10: entry 6 (ACT): repeated by entry 7, not used",
                                    "2026-10-11: entry 8: corrected by entry 9, not used")
