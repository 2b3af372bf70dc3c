"""Builders for the lot archive tests: an invented clinic and hand-built records.

The scenario is made up: Linden Vale Clinic runs two processors and reads
strips of two emulsion lots of an invented green-sensitive film type.
Records are built here by hand (no scans are analysed), from a simple
S-shaped characteristic curve whose figures are worked out in closed form.

The fixtures in ``conftest.py`` hand these builders to tests; child
processes of the concurrency tests and the benchmark import this module
directly, so it must not depend on pytest.
"""

from __future__ import annotations

import hashlib
import math
import re
import sqlite3
import struct
import zlib
from collections.abc import Iterator
from contextlib import closing, contextmanager
from pathlib import Path
from typing import Any


from stripscan.archive import Archive, EmulsionLot, FilmType, NewSnapshot, Processor, Sensitometer
from stripscan.core.records import CurveFigures, ScanInfo, StepDensity, StepReading, StripGeometry, StripResult

FILM = FilmType("Alder G", "invented green-sensitive screen film, Linden Vale Clinic test stock")
LOTS = (
    EmulsionLot("ALD-2407-11", FILM.name, expiry_date="2026-01-31", received_date="2024-08-02",
                notes="first box of the summer order"),
    EmulsionLot("ALD-2409-03", FILM.name, expiry_date="2026-04-30", received_date="2024-10-14"),
)
PROCESSORS = (
    Processor("North room", "Linden Vale Clinic, imaging room 2", "house developer A", 34.5, 90.0,
              "replenishment checked weekly"),
    Processor("South room", "Linden Vale Clinic, imaging room 5", "house developer A", 35.0, 90.0),
)
SENSITOMETER = Sensitometer("LV-SENS-1", "21-step light sensitometer, green", tuple(0.15 * i for i in range(21)))
OPERATORS = ("Mira Testwood", "Jonas Feldkamp-Ito")


def s_curve(log_e: float, *, base_fog: float, top: float, slope: float, centre: float) -> float:
    """Gross density of a logistic characteristic curve."""
    return base_fog + (top - base_fog) / (1.0 + math.exp(-slope * (log_e - centre)))


def log_e_at_net(net: float, *, base_fog: float, top: float, slope: float, centre: float) -> float:
    """Log exposure where the logistic curve reaches net density ``net`` (inverse of s_curve)."""
    return centre - math.log((top - base_fog) / net - 1.0) / slope


def make_strip(index: int = 1, *, n_steps: int = 21, base_fog: float = 0.19, top: float = 3.6,
               slope: float = 3.2, centre: float = 1.55, nan_step: int | None = None) -> StripResult:
    """A strip read off the logistic curve, with its figures worked out exactly."""
    curve = {"base_fog": base_fog, "top": top, "slope": slope, "centre": centre}
    steps = []
    for i in range(1, n_steps + 1):
        log_e = 0.15 * (i - 1)
        od = float("nan") if i == nan_step else s_curve(log_e, **curve)
        steps.append(StepDensity(i, log_e, od, 0.004 + 0.002 * od if i != nan_step else float("nan"),
                                 pixels=1800 + i, in_range=od < 3.5 if i != nan_step else False,
                                 center_rc=(120.0 + 40.0 * i, 310.5), excluded=i == nan_step))
    low, high = (log_e_at_net(n, **curve) for n in (0.25, 2.0))
    usable = [s for s in steps if s.in_range and not s.excluded]
    mid = min(usable, key=lambda s: abs(s.od - (base_fog + 1.2)))
    dd_high = min(usable, key=lambda s: abs(s.od - (base_fog + 2.0)))
    dd_low = min(usable, key=lambda s: abs(s.od - (base_fog + 0.25)))
    figures = CurveFigures(
        base_fog=base_fog, dmax=max(s.od for s in usable),
        speed_log_exposure=log_e_at_net(1.0, **curve),
        average_gradient=1.75 / (high - low), gradient_low_log_exposure=low,
        gradient_high_log_exposure=high, gamma=slope * (top - base_fog) / 4.0, gamma_log_exposure=centre,
        latitude_log_exposure=high - low, mid_density_step=mid.step, mid_density=mid.od,
        density_difference=dd_high.od - dd_low.od, dd_high_step=dd_high.step, dd_low_step=dd_low.step,
        settings={"speed_net_density": 1.0, "gradient_low": 0.25, "gradient_high": 2.0},
        notes=("Dmax limited by the calibrated range",) if top > 3.5 else ())
    geometry = StripGeometry((100.0, 300.0), (1.0, 0.0), (0.0, 1.0), 40.0, n_steps, 21.0, (24.0, 30.0))
    reading = StepReading(0, (500.0, 327.0), 0.81, 0.004, 2400, 3, 0.0)
    return StripResult(index, geometry, tuple(steps), reading, figures, warnings=("step 21 near saturation",))


def make_scan(name: str = "2024-10-21 north.tif") -> ScanInfo:
    return ScanInfo(f"/srv/linden-vale/scans/{name}", hashlib.sha256(name.encode()).hexdigest(),
                    2480, 3508, 300.0, 16, 1, "grey", "linear")


def tiny_png(width: int = 8, height: int = 4, shade: int = 90) -> bytes:
    """A grey PNG built by hand (PNG specification: signature, IHDR, IDAT, IEND chunks)."""
    def chunk(kind: bytes, data: bytes) -> bytes:
        return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))

    rows = b"".join(b"\x00" + bytes((shade + x) % 256 for x in range(width)) for _ in range(height))
    header = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0)
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", header) + chunk(b"IDAT", zlib.compress(rows))
            + chunk(b"IEND", b""))


def make_draft(number: int = 0, *, lot: str = LOTS[0].lot_id, processor: str | None = PROCESSORS[0].name,
               **overrides: Any) -> NewSnapshot:
    """A snapshot of the invented clinic's daily strip ``number`` (days from 1 October 2024)."""
    day = f"2024-{10 + number // 28 % 3:02d}-{1 + number % 28:02d}"
    fields: dict[str, Any] = {
        "lot_id": lot, "scan": make_scan(f"{day} strip {number}.tif"),
        "strip": make_strip(1 + number % 2, base_fog=0.18 + 0.001 * (number % 7),
                            centre=1.5 + 0.01 * (number % 11)),
        "processor": processor, "sensitometer": SENSITOMETER.sensitometer_id,
        "calibration": {"kind": "step tablet", "scanner": "flatbed 3", "od": [0.05, 1.02, 2.11, 3.05],
                        "signal": [0.89, 0.095, 0.0078, 0.0009], "made_on": "2024-09-30"},
        "operator": OPERATORS[number % 2], "exposed_on": day, "processed_on": day, "scanned_on": day,
        "settings": {"n_steps": 21, "increment": 0.15}, "warnings": ("scan was not flat-field corrected",),
        "program_version": "0.1.0", "notes": f"daily strip {number}",
    }
    fields.update(overrides)
    return NewSnapshot(**fields)


def populate(archive: Archive) -> None:
    """Store the invented clinic's film type, lots, processors and sensitometer."""
    archive.add_film_type(FILM)
    for lot in LOTS:
        archive.add_lot(lot)
    for processor in PROCESSORS:
        archive.add_processor(processor)
    archive.add_sensitometer(SENSITOMETER)


@contextmanager
def raw_connection(path: Path, **kwargs: Any) -> Iterator[sqlite3.Connection]:
    """A plain sqlite3 connection, closed afterwards, for looking behind the archive's back."""
    with closing(sqlite3.connect(path, isolation_level=None, **kwargs)) as conn:
        yield conn


def escaped(path: Path) -> str:
    """``path`` as a regular expression matching itself, for ``pytest.raises(match=...)``."""
    return re.escape(str(path))
