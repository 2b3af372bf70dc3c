"""A demo lot archive for the invented scenario of :mod:`stripscan.sim.demo_data`.

:func:`build_demo_archive` writes a complete archive beside a folder the
caller chooses (a temporary one, typically): the invented film type, lots
M-2610-A and M-2702-B, Processor 1, sensitometer SEN-01, the demo's tablet
calibration and several weeks of weekly strips of each lot.  Every snapshot
is the real pipeline's reading of a simulated scan, so the archive holds
exactly what a person would have stored by scanning the same film.

The story: lot M-2610-A is the unit's current lot and is checked every week
from 13 October 2026; lot M-2702-B arrives on 20 October and is checked every
week from 27 October, the two running side by side for six weeks up to
1 December 2026 (nothing is dated after that).  The processor's
developer tires slowly (speed point creeping up, contrast falling, fog
rising) until it is changed on 17 November.  One reading was corrected by
a revision (a dusty step left off the curve); one strip of the new lot was
creased and its reading retired.  All of it is invented.

The builder refuses to write where the user's own archive lives, and it
refuses an archive file that already exists: a demo must never be mixed
into real records.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import os
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from stripscan.core.calibration import Calibration
from stripscan.core.calibration_files import load_calibration
from stripscan.core.pipeline import analyze_loaded, analyze_scan
from stripscan.core.reading import AnalysisOptions
from stripscan.core.scan import load_scan
from stripscan.sim.objects import StripSpec
from stripscan.sim.simulate import simulate_scan, write_tiff
from stripscan.sim.demo_data import LOT_FILMS, SCENARIO, DemoFiles, demo_files, scanner_for

from stripscan.archive.errors import ArchiveError
from stripscan.archive.records import EmulsionLot, FilmType, Processor, Sensitometer, snapshots_from_analysis
from stripscan.archive.service import Archive, default_archive_path

__all__ = [
    "DemoScan",
    "DEMO_ARCHIVE_NAME",
    "DEMO_DPI",
    "FILM_TYPE",
    "PROCESSOR",
    "SENSITOMETER",
    "STRIPS_PER_SCAN",
    "CHEMISTRY_CHANGE",
    "REVISED",
    "RETIRED",
    "demo_schedule",
    "build_demo_archive",
]

#: File name used when the caller gives a folder rather than a file.
DEMO_ARCHIVE_NAME = "stripscan-demo-archive.sqlite3"
#: Resolution of the simulated weekly scans: the demo calibration's own,
#: so no scan is read at a resolution the calibration was not made at.
DEMO_DPI = 150.0
STRIPS_PER_SCAN = 3
FILM_TYPE = "Type M"
PROCESSOR = str(SCENARIO["processor"]["name"])
SENSITOMETER = str(SCENARIO["sensitometer"]["id"])
#: The day the processor's developer is renewed; the drift starts again.
CHEMISTRY_CHANGE = dt.date(2026, 11, 17)

_WEEKS = {"M-2610-A": (dt.date(2026, 10, 13), 8), "M-2702-B": (dt.date(2026, 10, 27), 6)}
_PHYSICIST, _TECHNOLOGIST = str(SCENARIO["physicist"]), str(SCENARIO["technologist"])
# The sensitometer's step count is known, so the pipeline is told rather than left to count.
_OPTIONS = AnalysisOptions(n_steps=int(SCENARIO["sensitometer"]["steps"]))

Progress = Callable[[float, str], None]


@dataclass(frozen=True)
class DemoScan:
    """One weekly scan of the demo: three strips of one lot, processed together.

    Attributes
    ----------
    lot : str
    day : datetime.date
        Exposure, processing and scanning day.
    week : int
        1-based week of this lot's series.
    operator : str
        Who read it.
    seed : int
        Seed of the simulated scan (and of the strips' scatter).
    """

    lot: str
    day: dt.date
    week: int
    operator: str
    seed: int

    @property
    def file_name(self) -> str:
        return f"weekly_{self.lot}_{self.day.isoformat()}.tif"


@dataclass(frozen=True)
class _Correction:
    """A snapshot of the demo that is later revised or retired."""

    lot: str
    day: dt.date
    strip: int
    reason: str
    step: int = 0


#: Stored first, then corrected by a revision that leaves a dusty step off the curve.
REVISED = _Correction("M-2610-A", dt.date(2026, 10, 27), 2,
                      "dust speck on step 6 found on review; re-read with step 6 excluded", step=6)
#: Withdrawn from trends: the strip was creased in the processor.
RETIRED = _Correction("M-2702-B", dt.date(2026, 12, 1), 3,
                      "strip creased in the processor transport; reading not representative")


def demo_schedule() -> list[DemoScan]:
    """Every weekly scan of the demo, by day and lot (deterministic)."""
    scans = []
    for k, (lot, (start, weeks)) in enumerate(sorted(_WEEKS.items())):
        for week in range(1, weeks + 1):
            # The physicist reads the new lot's first weeks herself (acceptance).
            operator = _PHYSICIST if lot == "M-2702-B" and week <= 2 else _TECHNOLOGIST
            scans.append(DemoScan(lot, start + dt.timedelta(weeks=week - 1), week, operator, 500 + 20 * k + week))
    return sorted(scans, key=lambda s: (s.day, s.lot))


def _processor_drift(day: dt.date) -> tuple[float, float, float]:
    """(speed shift log E, contrast factor, fog rise OD) of the processor on ``day``.

    The developer slowly tires between changes: about 0.005 log E slower,
    0.5 % flatter and 0.0015 OD more fog per week, small enough to stay in
    the usual control limits and large enough to show on a trend.
    """
    start = CHEMISTRY_CHANGE if day >= CHEMISTRY_CHANGE else dt.date(2026, 10, 6)
    weeks = (day - start).days / 7.0
    return 0.005 * weeks, 1.0 - 0.005 * weeks, 0.0015 * weeks


def _strips(scan: DemoScan) -> list[StripSpec]:
    shift, contrast, fog = _processor_drift(scan.day)
    base = LOT_FILMS[scan.lot]
    rng = np.random.default_rng(scan.seed)
    strips = []
    for k in range(STRIPS_PER_SCAN):
        # Strip-to-strip scatter of one exposure and processing run.
        film = dataclasses.replace(
            base,
            log_e_mid=base.log_e_mid + shift + float(rng.normal(0, 0.006)),
            slope=base.slope * contrast,
            base_fog=base.base_fog + fog + float(rng.normal(0, 0.0015)),
        )
        strips.append(StripSpec(film=film, center_mm=(25.0 + 40.0 * k, 100.0),
                                angle_deg=90.0 + float(rng.normal(0, 0.8))))
    return strips


def _bundled_files() -> DemoFiles | None:
    """The checkout's own demo files when complete; None rather than making a cache elsewhere."""
    from stripscan.sim import demo_data

    checkout = Path(demo_data.__file__).resolve().parents[2] / "sample_scans"
    files = demo_data._layout(checkout)
    return files if demo_data._complete(files) else None


def _target(path: str | os.PathLike[str]) -> Path:
    target = Path(path).expanduser().absolute()
    real = default_archive_path().expanduser().absolute()
    if target.resolve() == real.parent.resolve() or target.is_dir():
        target = target / DEMO_ARCHIVE_NAME
    # Nothing of the demo (archive, scans) goes beside the user's own archive.
    if target.resolve() == real.resolve() or target.parent.resolve() == real.parent.resolve():
        raise ArchiveError(f"{target}: the demo archive is not written where your own archive lives "
                           f"({real}); choose another (e.g. a temporary) folder")
    if target.exists():
        raise ArchiveError(f"{target} already exists; the demo archive is only written as a new file")
    return target


def _no_progress(fraction: float, text: str) -> None:
    """Progress sink for callers that show none."""


def build_demo_archive(path: str | os.PathLike[str], files: DemoFiles | None = None, *,
                       progress: Progress | None = None) -> Path:
    """Write the demo archive and its simulated weekly scans; return the archive file.

    Parameters
    ----------
    path : path-like
        The archive file to create, or a folder to create
        :data:`DEMO_ARCHIVE_NAME` in.  The weekly scans go into a
        ``demo_scans`` folder beside it (the snapshots name them).
    files : DemoFiles, optional
        The demo's files, for the calibration.  By default the checkout's
        ``sample_scans``; without them the demo files are made in a
        ``demo_files`` folder beside the archive, never in a cache elsewhere.
    progress : callable, optional
        ``progress(fraction, text)``, e.g. from a GUI worker thread.

    Returns
    -------
    Path
        The archive file.

    Raises
    ------
    ArchiveError
        When ``path`` is the user's own archive or lies in its folder, when
        the file already exists, or when a simulated scan does not give the
        expected strips.  Nothing is left at ``path`` on failure.
    """
    report = progress or _no_progress
    target = _target(path)
    folder = target.parent
    folder.mkdir(parents=True, exist_ok=True)
    if files is None:
        files = _bundled_files() or demo_files(folder / "demo_files")
    calibration = load_calibration(files.calibration)
    scans_folder = folder / "demo_scans"
    scans_folder.mkdir(exist_ok=True)
    # Built under another name and renamed when complete: an interrupted
    # build leaves no archive that looks finished.
    partial = folder / f".{target.name}.partial"
    for leftover in (partial, Path(f"{partial}-wal"), Path(f"{partial}-shm")):
        leftover.unlink(missing_ok=True)
    try:
        with Archive.open(partial) as archive:
            _reference_data(archive, calibration)
            schedule = demo_schedule()
            for k, scan in enumerate(schedule):
                report(k / len(schedule), f"Reading {scan.lot}, {scan.day.isoformat()}")
                _store_scan(archive, scan, scans_folder / scan.file_name, calibration)
            _add_remarks(archive)
        os.replace(partial, target)
    except BaseException:
        partial.unlink(missing_ok=True)
        raise
    report(1.0, "Demo archive ready")
    return target


def _reference_data(archive: Archive, calibration: Calibration) -> None:
    archive.add_film_type(FilmType(FILM_TYPE, str(SCENARIO["film_type"])))
    for lot, info in SCENARIO["lots"].items():
        archive.add_lot(EmulsionLot(lot, FILM_TYPE, expiry_date=info["expiry"], received_date=info["received"],
                                    notes=info["note"]))
    archive.add_processor(Processor(**SCENARIO["processor"]))
    sensitometer = SCENARIO["sensitometer"]
    table = tuple(round(sensitometer["increment"] * k, 6) for k in range(sensitometer["steps"]))
    archive.add_sensitometer(Sensitometer(SENSITOMETER, "21-step light sensitometer, green (invented)", table))
    archive.add_calibration(calibration.to_dict())


def _store_scan(archive: Archive, scan: DemoScan, scan_path: Path, calibration: Calibration) -> None:
    simulated = simulate_scan(_strips(scan), platen_mm=(130.0, 200.0), dpi=DEMO_DPI,
                              scanner=scanner_for(scan.seed))
    write_tiff(scan_path, simulated)
    analysis = analyze_scan(scan_path, calibration=calibration, options=_OPTIONS)
    if len(analysis.strips) != STRIPS_PER_SCAN:
        raise ArchiveError(f"{scan_path}: the pipeline found {len(analysis.strips)} strips where the demo "
                           f"placed {STRIPS_PER_SCAN}; the demo archive was not built")
    day = scan.day.isoformat()
    details = dict(processor=PROCESSOR, sensitometer=SENSITOMETER, exposed_on=day, processed_on=day,
                   scanned_on=day, notes=f"weekly strips, week {scan.week} of lot {scan.lot}")
    stored = archive.add_analysis(analysis, scan.lot, calibration=calibration.to_dict(),
                                  operator=scan.operator, **details)
    if REVISED.lot == scan.lot and REVISED.day == scan.day:
        # Re-read the same outlines with the step left off, as the workbench would.
        again = analyze_loaded(load_scan(scan_path), calibration=calibration, options=_OPTIONS,
                               geometries=[s.geometry for s in analysis.strips],
                               excluded={REVISED.strip: (REVISED.step,)})
        draft = snapshots_from_analysis(again, scan.lot, calibration=calibration.to_dict(),
                                        operator=scan.operator, **details)[REVISED.strip - 1]
        archive.revise(stored[REVISED.strip - 1].id, draft, REVISED.reason)
    if RETIRED.lot == scan.lot and RETIRED.day == scan.day:
        archive.retire(stored[RETIRED.strip - 1].id, RETIRED.reason)


def _add_remarks(archive: Archive) -> None:
    first_b = next(s for s in archive.list_snapshots("M-2702-B"))
    archive.add_note(first_b.id, "First weekly strips of the new lot; acceptance against M-2610-A begins.",
                     _PHYSICIST)
    archive.add_qc_event(PROCESSOR, CHEMISTRY_CHANGE.isoformat(), "chemistry change",
                         "developer and fixer renewed")
