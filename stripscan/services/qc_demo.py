"""The demo month of processor QC: November 2026 on the invented clinic's "Processor 1".

Everything is invented (see :mod:`stripscan.sim.demo_data`).  The month is
stored through the same calls a person's commands use
(:func:`stripscan.services.qc_recording.add_day`, :func:`~stripscan.services.qc_recording.add_event`), so
the demo shows the program's own arithmetic, not a picture of it.

Where the numbers come from
---------------------------
* 2-8 November: the seven bundled daily scans, read through the real
  pipeline with the bundled calibration.  The QC steps are chosen on the
  first of them and kept; the developer tires slowly, so mid-density and
  density difference fall a little each day.
* 9-11 November: scans simulated here (same film model, scanner and
  layout as the bundled ones) and read through the pipeline too.  The fall
  goes on: on the 9th the density difference is past the warning tier, on
  the 10th past the control limit.  The technologist stops clinical
  processing and corrects the replenishment (corrective action recorded
  with that strip); a repeat strip processed the same day after the
  correction, before clinical films, is back within limits.  It is stored
  as a repeat: both strips are kept, the repeat is the day's value.
* 12-16 November: typed in, as read on a densitometer at the same steps
  (the exact densities of the film model plus day-to-day scatter, rounded
  to 0.01 OD): the developer goes on tiring, more slowly.
* 17 November: developer and fixer renewed (a ``new_chemistry`` event, on
  the day the demo lot archive of :mod:`stripscan.services.demo_archive` records its
  chemistry change); that day's strip is a simulated scan again and the
  QC steps are chosen anew on it.
* 18-30 November: typed in.  The new baseline is complete on the 21st and
  the month ends within limits.

Trend rules fire in the first week (a drift, a run, repeated warnings),
as they should on a tiring developer.
"""

from __future__ import annotations

import dataclasses
import datetime
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from stripscan.archive import Archive, Processor
from stripscan.core.qc.records import QCSteps, QCValues
from stripscan.sim.objects import FilmModel, StripSpec
from stripscan.sim.simulate import simulate_scan, write_tiff
from stripscan.sim.demo_data import DPI, SCENARIO, DemoFiles, daily_film, scanner_for
from stripscan.services.qc_log import ProcessorLog, load_processor_log
from stripscan.services.qc_recording import add_day, add_event

__all__ = ["DEMO_PROCESSOR", "DemoDay", "DemoQcSummary", "demo_plan", "build_demo_qc"]

DEMO_PROCESSOR = SCENARIO["processor"]["name"]
_START = datetime.date(2026, 11, 2)
# The developer and fixer are renewed on the day the demo lot archive
# (stripscan.services.demo_archive) records its chemistry change, so both tell one story.
_RENEWED = datetime.date(2026, 11, 17)
# Standard deviations of base+fog, mid-density and density difference from day to day, OD.
_SCATTER = (0.003, 0.008, 0.010)
_RENEWAL_NOTE = "developer and fixer renewed"


@dataclass(frozen=True)
class DemoDay:
    """One day of the demo month.

    Attributes
    ----------
    date : datetime.date
    how : str
        ``"bundled scan"``, ``"simulated scan"`` or ``"typed"``.
    film : FilmModel
        The film as processed that day (exact truth of the simulation).
    note, action : str
        The day's remark and corrective action.
    repeat : bool
        A repeat strip of a day that has a strip already.
    """

    date: datetime.date
    how: str
    film: FilmModel
    note: str = ""
    action: str = ""
    repeat: bool = False


def _shifted(film: FilmModel, *, log_e: float = 0.0, slope: float = 1.0, fog: float = 0.0) -> FilmModel:
    return dataclasses.replace(film, log_e_mid=film.log_e_mid + log_e, slope=film.slope * slope,
                               base_fog=film.base_fog + fog)


def demo_plan() -> tuple[DemoDay, ...]:
    """The month's script, 2 to 30 November 2026: one strip a day, and a repeat strip on the 10th."""
    days = [DemoDay(_START + datetime.timedelta(days=k), "bundled scan", daily_film(k)) for k in range(7)]
    days[0] = dataclasses.replace(days[0], note="First strip of the baseline (fresh box of QC film).")
    days[6] = dataclasses.replace(days[6], note="Density difference past the warning tier; watch tomorrow's strip.")
    restored = daily_film(2)
    days += [
        DemoDay(datetime.date(2026, 11, 9), "simulated scan", daily_film(7),
                "Density difference past the warning tier again; replenishment to be checked."),
        DemoDay(datetime.date(2026, 11, 10), "simulated scan", daily_film(9),
                "Density difference outside the control limit; clinical processing stopped.",
                "Replenisher pump found delivering too little: pump reset, developer tank topped up with fresh "
                "replenisher, developer temperature checked at 35.0 degC. Strip repeated after the correction."),
        DemoDay(datetime.date(2026, 11, 10), "simulated scan", restored,
                "Repeat strip after the correction, before clinical films: within limits; clinical processing "
                "resumed.", repeat=True),
        DemoDay(datetime.date(2026, 11, 11), "simulated scan", restored),
    ]
    for k in range(12, 17):
        # The developer goes on tiring from where the correction left it, at half the pace.
        note = "Developer and fixer renewal booked for tomorrow." if k == 16 else ""
        days.append(DemoDay(datetime.date(2026, 11, k), "typed", daily_film(2 + 0.5 * (k - 11)), note))
    fresh = _shifted(daily_film(0), log_e=-0.01)
    days.append(DemoDay(_RENEWED, "simulated scan", fresh, "First strip of the new baseline after the renewal."))
    days += [DemoDay(datetime.date(2026, 11, k), "typed", fresh) for k in range(18, 31)]
    return tuple(days)


@dataclass(frozen=True)
class DemoQcSummary:
    """What :func:`build_demo_qc` stored."""

    processor: str
    plan: tuple[DemoDay, ...]
    plog: ProcessorLog

    def count(self, how: str) -> int:
        return sum(d.how == how for d in self.plan)

    def describe(self) -> str:
        first, last = self.plan[0].date.isoformat(), self.plan[-1].date.isoformat()
        repeats = sum(d.repeat for d in self.plan)
        return (f"{self.processor!r}, {len({d.date for d in self.plan})} days {first} to {last}: "
                f"{self.count('bundled scan')} bundled scans and {self.count('simulated scan')} simulated scans "
                f"read through the pipeline ({repeats} of them a repeat strip), {self.count('typed')} typed values; "
                f"{len(self.plog.log.events)} event(s)")


def _write_scan(path: Path, film: FilmModel, seed: int) -> Path:
    # The bundled daily scans' layout and scanner, so the simulated days read alike.
    strip = StripSpec(film=film, center_mm=(25.0, 97.5), angle_deg=90.0 + 0.5 * ((seed % 3) - 1))
    write_tiff(path, simulate_scan([strip], platen_mm=(50.0, 195.0), dpi=DPI, scanner=scanner_for(seed)))
    return path


def _typed(film: FilmModel, steps: QCSteps, rng: np.random.Generator) -> QCValues:
    # Day-to-day processing scatter plus the densitometer's own, read to 0.01 OD at the same steps.
    log_e = 0.15 * np.arange(max(steps.dd_high_step, steps.mid_step))
    d = film.density(log_e)
    scatter = rng.normal(0.0, _SCATTER)
    return QCValues(
        base_fog=round(float(film.base_fog + scatter[0]), 2),
        mid_density=round(float(d[steps.mid_step - 1] + scatter[1]), 2),
        density_difference=round(float(d[steps.dd_high_step - 1] - d[steps.dd_low_step - 1] + scatter[2]), 2),
    )


def build_demo_qc(archive: Archive, files: DemoFiles, *, processor: str = DEMO_PROCESSOR,
                  scan_folder: str | Path | None = None) -> DemoQcSummary:
    """Fill ``processor``'s QC log with the demo month (see the module notes).

    Parameters
    ----------
    archive : Archive
        Open for writing.  The processor is added with the scenario's
        details when it is not there yet; it must not have a QC log already.
    files : DemoFiles
        From :func:`stripscan.sim.demo_data.demo_files`: the bundled daily scans
        and the calibration.
    processor : str
        Name to file the month under.
    scan_folder : path-like, optional
        Keep the simulated scans here; by default they are made in a
        temporary folder and removed once read.

    Returns
    -------
    DemoQcSummary

    Raises
    ------
    ValueError
        When the processor already has QC entries or events.
    """
    from stripscan.core.calibration_files import load_calibration
    from stripscan.core.pipeline import analyze_scan

    known = {p.name for p in archive.list_processors()}
    if processor in known:
        if archive.list_qc_entries(processor):
            raise ValueError(f"processor {processor!r} already has a QC log in {archive.path}; "
                             "build the demo in a new archive")
    else:
        details: dict[str, Any] = {k: v for k, v in SCENARIO["processor"].items() if k != "name"}
        archive.add_processor(Processor(processor, **details))
    # The demo lot archive may have recorded the renewal already; it is not recorded twice.
    events = {e.date for e in archive.list_qc_events(processor)} if processor in known else set()
    calibration = load_calibration(files.calibration)
    bundled = dict(files.daily_scans)
    plan = demo_plan()
    rng = np.random.default_rng(20261112)
    with tempfile.TemporaryDirectory(prefix="stripscan-qc-demo-") as tmp:
        folder = Path(scan_folder) if scan_folder is not None else Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        for day in plan:
            if day.date == _RENEWED and _RENEWED.isoformat() not in events:
                add_event(archive, processor, day.date, "new_chemistry", _RENEWAL_NOTE)
            if day.how == "typed":
                # The month starts with a scan, so steps have been chosen by now.
                plog = load_processor_log(archive, processor)
                steps = plog.steps_on(day.date) or plog.setup.step_choices[-1].steps
                add_day(archive, processor, day.date, values=_typed(day.film, steps, rng), note=day.note,
                        action=day.action)
                continue
            if day.how == "bundled scan":
                path = bundled[day.date]
            else:
                # One scanner seed per day of the month, another for a repeat strip.
                seed = 100 + (day.date - _START).days + (50 if day.repeat else 0)
                name = f"qc_processor-1_{day.date.isoformat()}{'_repeat' if day.repeat else ''}.tif"
                path = _write_scan(folder / name, day.film, seed)
            analysis = analyze_scan(path, calibration=calibration)
            add_day(archive, processor, day.date, analysis=analysis, note=day.note, action=day.action,
                    repeat=day.repeat)
    return DemoQcSummary(processor, plan, load_processor_log(archive, processor))
