"""Fixtures of the report tests: the demo scenario's scans and calibration, and an archive of them."""

from __future__ import annotations

import os
import sys
from pathlib import Path
from typing import Any, Iterator

# Before Qt is imported anywhere: no display needed.
os.environ["QT_QPA_PLATFORM"] = "offscreen"

import pytest  # noqa: E402

# pytest runs with --import-mode=importlib, which puts no test folder on
# sys.path; the test modules import their builders by name.
if str(Path(__file__).parent) not in sys.path:
    sys.path.insert(0, str(Path(__file__).parent))

from report_support import LOT_A, PROCESSOR, SCENARIO  # noqa: E402

from stripscan.archive import Archive, EmulsionLot, FilmType, Processor, Sensitometer  # noqa: E402
from stripscan.core.calibration import Calibration
from stripscan.core.calibration_files import load_calibration
from stripscan.core.pipeline import analyze_scan  # noqa: E402
from stripscan.core.records import Analysis  # noqa: E402
from stripscan.sim.demo_data import demo_files  # noqa: E402


@pytest.fixture(scope="session")
def demo() -> Any:
    return demo_files()


@pytest.fixture(scope="session")
def calibration(demo: Any) -> Calibration:
    return load_calibration(demo.calibration)


@pytest.fixture(scope="session")
def lot_a(demo: Any, calibration: Calibration) -> Analysis:
    """The demo's three strips of lot A, analysed with the demo's tablet calibration."""
    return analyze_scan(demo.lot_a_scan, calibration=calibration)


@pytest.fixture(scope="session")
def lot_b(demo: Any, calibration: Calibration) -> Analysis:
    """The demo's three strips of lot B (the new lot), analysed like lot A."""
    return analyze_scan(demo.lot_b_scan, calibration=calibration)


@pytest.fixture
def archive(tmp_path: Path, lot_a: Analysis, calibration: Calibration) -> Iterator[Archive]:
    """An archive holding the demo's lot A strips (snapshots 1-3), with its lot, processor and calibration."""
    with Archive.open(tmp_path / "fernhill.sqlite3") as opened:
        opened.add_film_type(FilmType(SCENARIO["film_type"], "demo film"))
        opened.add_lot(EmulsionLot(LOT_A, SCENARIO["film_type"], expiry_date="2027-10-31",
                                   received_date="2026-10-12", notes="current lot"))
        processor = SCENARIO["processor"]
        opened.add_processor(Processor(processor["name"], processor["place"], processor["chemistry"],
                                       processor["developer_temperature_c"], float(processor["cycle_time_s"])))
        opened.add_sensitometer(Sensitometer(SCENARIO["sensitometer"]["id"], "21-step sensitometer",
                                             tuple(0.15 * k for k in range(21))))
        opened.add_analysis(lot_a, LOT_A, calibration=calibration.to_dict(), processor=PROCESSOR,
                            sensitometer=SCENARIO["sensitometer"]["id"], operator=SCENARIO["technologist"],
                            exposed_on="2026-11-20", processed_on="2026-11-20", scanned_on="2026-11-21")
        yield opened




@pytest.fixture(scope="session")
def daily_scan(demo: Any, calibration: Calibration) -> Analysis:
    """The demo's daily QC strip of 2 November 2026, analysed."""
    return analyze_scan(demo.daily_scans[0][1], calibration=calibration)


@pytest.fixture
def qc_archive(tmp_path: Path, daily_scan: Analysis, calibration: Calibration) -> Iterator[Archive]:
    """Processor 1 with a month of QC (one day read off a scan), in a fresh archive."""
    from report_support import fill_qc_month

    with Archive.open(tmp_path / "fernhill-qc.sqlite3") as opened:
        opened.add_film_type(FilmType(SCENARIO["film_type"], "demo film"))
        opened.add_lot(EmulsionLot(LOT_A, SCENARIO["film_type"]))
        processor = SCENARIO["processor"]
        opened.add_processor(Processor(processor["name"], processor["place"], processor["chemistry"],
                                       processor["developer_temperature_c"], float(processor["cycle_time_s"])))
        fill_qc_month(opened, scan_day=daily_scan, calibration=calibration)
        yield opened
