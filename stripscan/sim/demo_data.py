"""The bundled demo: an invented clinic's scans, made with the simulator.

Everything here is invented — the hospital, the people, the film, its lots,
the processor and the sensitometer — and is for demonstration only.  The
files are made deterministically (fixed seeds), so the copies committed
under ``sample_scans/`` can always be made again with
``python tools/make_sample_scans.py``.

Scenario
--------
Fernhill District Hospital's breast imaging unit processes its QC film in
"Processor 1" (basement darkroom).  The medical physicist, M. Arden, keeps a
21-step reference tablet with a calibration certificate.  The unit is
changing from emulsion lot M-2610-A to lot M-2702-B (received 20 October
2026) of its invented "Type M" single-emulsion film; three strips of each
lot were exposed on sensitometer SEN-01 and processed together.  A week of daily QC strips (2-8 November
2026), read by technologist J. Solberg, shows the processor drifting a
little as its developer ages.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec, TabletSpec
from stripscan.sim.simulate import simulate_scan, write_certificate, write_tiff

__all__ = ["DemoFiles", "SCENARIO", "LOT_FILMS", "daily_film", "demo_files", "generate", "scanner_for"]

SCENARIO = {
    "site": "Fernhill District Hospital, Breast Imaging Unit (invented)",
    "physicist": "M. Arden",
    "technologist": "J. Solberg",
    "film_type": "Type M single-emulsion QC film (invented)",
    "lots": {
        "M-2610-A": {"received": "2026-10-12", "expiry": "2027-10-31", "note": "current lot"},
        "M-2702-B": {"received": "2026-10-20", "expiry": "2028-02-28", "note": "new lot under acceptance"},
    },
    "processor": {
        "name": "Processor 1",
        "place": "basement darkroom",
        "chemistry": "standard developer (invented)",
        "developer_temperature_c": 35.0,
        "cycle_time_s": 90,
    },
    "sensitometer": {"id": "SEN-01", "steps": 21, "increment": 0.15},
    "tablet": {"id": "REF-21-0042", "certificate_date": "2026-06-15"},
}

DPI = 150.0
# Lot B is a little faster (its curve sits ~0.05 log E to the left) and a
# little steeper than lot A: the sort of difference an acceptance test finds.
LOT_FILMS = {
    "M-2610-A": FilmModel(base_fog=0.19, dmax=3.75, log_e_mid=1.62, slope=5.2, asymmetry=0.7),
    "M-2702-B": FilmModel(base_fog=0.20, dmax=3.80, log_e_mid=1.57, slope=5.5, asymmetry=0.7),
}
DAILY_START = dt.date(2026, 11, 2)
DAILY_DAYS = 7
_DEMO_VERSION = 1


def scanner_for(seed: int) -> ScannerModel:
    """The demo's scanner: 16-bit linear grey, automatic corrections off."""
    return ScannerModel(bits=16, encoding="linear", channels=1, dark_offset=0.003, noise_sd=0.0008, seed=seed)


def daily_film(day: int) -> FilmModel:
    """Lot A as processed on day ``day`` (0-based) of the QC week: the developer slowly tires."""
    base = LOT_FILMS["M-2610-A"]
    # Slower and flatter by a little each day, fog creeping up.
    return dataclasses.replace(
        base,
        log_e_mid=base.log_e_mid + 0.006 * day,
        slope=base.slope * (1.0 - 0.006 * day),
        base_fog=base.base_fog + 0.002 * day,
    )


@dataclass(frozen=True)
class DemoFiles:
    """Paths of the demo's files."""

    folder: Path
    tablet_scan: Path
    certificate: Path
    calibration: Path
    lot_a_scan: Path
    lot_b_scan: Path
    daily_scans: tuple[tuple[dt.date, Path], ...]

    def all_paths(self) -> list[Path]:
        return [self.tablet_scan, self.certificate, self.calibration, self.lot_a_scan, self.lot_b_scan] + [
            p for _, p in self.daily_scans
        ]


def _layout(folder: Path) -> DemoFiles:
    daily = tuple(
        (DAILY_START + dt.timedelta(days=k), folder / f"daily_processor-1_{DAILY_START + dt.timedelta(days=k)}.tif")
        for k in range(DAILY_DAYS)
    )
    return DemoFiles(
        folder=folder,
        tablet_scan=folder / "tablet_REF-21-0042.tif",
        certificate=folder / "tablet_REF-21-0042_certificate.csv",
        calibration=folder / "calibration_REF-21-0042.json",
        lot_a_scan=folder / "lot_M-2610-A_three_strips.tif",
        lot_b_scan=folder / "lot_M-2702-B_three_strips.tif",
        daily_scans=daily,
    )


def _lot_strips(lot: str, seed: int) -> list[StripSpec]:
    rng = np.random.default_rng(seed)
    base = LOT_FILMS[lot]
    strips = []
    for k in range(3):
        # Strip-to-strip scatter of a real exposure/processing run.
        film = dataclasses.replace(
            base,
            log_e_mid=base.log_e_mid + float(rng.normal(0, 0.008)),
            base_fog=base.base_fog + float(rng.normal(0, 0.002)),
        )
        strips.append(
            StripSpec(film=film, center_mm=(25.0 + 40.0 * k, 100.0), angle_deg=90.0 + float(rng.normal(0, 1.0)))
        )
    return strips


def generate(folder: str | os.PathLike[str]) -> DemoFiles:
    """Write every demo file into ``folder`` (deterministic)."""
    from stripscan.core.calibration_files import save_calibration
    from stripscan.core.certificate import read_certificate
    from stripscan.core.tablet import calibrate_tablet

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    files = _layout(folder)

    # Certified densities differ a little from the nominal 0.05 + 0.15 k, as real ones do.
    nominal = np.round(0.05 + 0.15 * np.arange(21), 3)
    certified = tuple(float(v) for v in np.round(nominal + np.random.default_rng(42).normal(0, 0.006, 21), 3))
    tablet = TabletSpec(densities=certified, step_length_mm=7.5, width_mm=20.0, center_mm=(30.0, 95.0), angle_deg=90.0)
    scan = simulate_scan([tablet], platen_mm=(60.0, 190.0), dpi=DPI, scanner=scanner_for(1))
    write_tiff(files.tablet_scan, scan)
    write_certificate(files.certificate, certified)

    certificate = read_certificate(files.certificate)
    calibration, _, _ = calibrate_tablet(
        files.tablet_scan, certificate, note=f"Demo: tablet {SCENARIO['tablet']['id']}, read by {SCENARIO['physicist']}"
    )
    save_calibration(calibration, files.calibration)

    for lot, path, seed in (("M-2610-A", files.lot_a_scan, 11), ("M-2702-B", files.lot_b_scan, 12)):
        scan = simulate_scan(_lot_strips(lot, seed), platen_mm=(130.0, 200.0), dpi=DPI, scanner=scanner_for(seed))
        write_tiff(path, scan)

    for k, (_, path) in enumerate(files.daily_scans):
        strip = StripSpec(film=daily_film(k), center_mm=(25.0, 97.5), angle_deg=90.0 + 0.5 * ((k % 3) - 1))
        scan = simulate_scan([strip], platen_mm=(50.0, 195.0), dpi=DPI, scanner=scanner_for(100 + k))
        write_tiff(path, scan)

    (folder / "scenario.json").write_text(
        json.dumps({"demo_version": _DEMO_VERSION, **SCENARIO}, indent=1) + "\n", encoding="utf-8"
    )
    return files


def _complete(files: DemoFiles) -> bool:
    marker = files.folder / "scenario.json"
    if not marker.exists() or not all(p.exists() for p in files.all_paths()):
        return False
    try:
        return json.loads(marker.read_text(encoding="utf-8")).get("demo_version") == _DEMO_VERSION
    except (OSError, ValueError):
        return False


def demo_files(folder: str | os.PathLike[str] | None = None) -> DemoFiles:
    """The demo's files: the checkout's ``sample_scans/`` when present, else made once in a cache folder.

    Parameters
    ----------
    folder : path-like, optional
        Use (and if need be fill) this folder instead.
    """
    if folder is None:
        checkout = Path(__file__).resolve().parents[2] / "sample_scans"
        files = _layout(checkout)
        if _complete(files):
            return files
        cache = Path(os.environ.get("XDG_CACHE_HOME", Path.home() / ".cache")) / "stripscan" / "demo"
        folder = cache
    files = _layout(Path(folder))
    if not _complete(files):
        files = generate(folder)
    return files
