"""Simulated scans of known truth, calibrated like a physicist would: same scanner, same settings."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from stripscan.core.calibration import Calibration
from stripscan.core.certificate import Certificate
from stripscan.core.tablet import calibrate_tablet
from stripscan.sim.objects import ScannerModel, SimulatedScan, TabletSpec
from stripscan.sim.simulate import simulate_scan, write_tiff

#: Certified densities of the simulated tablet: 21 steps 0.05..3.05 (common practice).
TABLET_OD = tuple(round(0.05 + 0.15 * k, 3) for k in range(21))


class Bench:
    """Makes tablet calibrations (cached per scanner and resolution) and strip scans."""

    def __init__(self, folder: Path):
        self.folder = folder
        self._cache: dict = {}
        self._count = 0

    def calibration(self, scanner: ScannerModel, dpi: float) -> Calibration:
        key = (dataclasses.replace(scanner, seed=0, dust=0, scratches=0, hairs=0), dpi)
        if key not in self._cache:
            tablet = TabletSpec(densities=TABLET_OD, step_length_mm=7.5, center_mm=(40.0, 95.0), angle_deg=90.0)
            # The same scan area as the strips (same settings): the stray light is fitted on the whole
            # of it, and a scan of another width would have another lamp in the simulator.
            sim = simulate_scan([tablet], platen_mm=(120.0, 200.0), dpi=dpi,
                                scanner=dataclasses.replace(key[0], seed=scanner.seed + 1000))
            path = self.folder / f"tablet_{len(self._cache)}.tif"
            write_tiff(path, sim)
            cal, _, _ = calibrate_tablet(path, Certificate(tuple(range(1, 22)), TABLET_OD))
            self._cache[key] = cal
        return self._cache[key]

    def scan(self, objects, *, scanner: ScannerModel, dpi: float, platen_mm) -> tuple[Path, SimulatedScan]:
        sim = simulate_scan(objects, platen_mm=platen_mm, dpi=dpi, scanner=scanner)
        self._count += 1
        path = self.folder / f"strips_{self._count}.tif"
        write_tiff(path, sim)
        return path, sim


@pytest.fixture(scope="session")
def bench(tmp_path_factory) -> Bench:
    return Bench(tmp_path_factory.mktemp("bench"))


@pytest.fixture(scope="session")
def tablet_od() -> tuple[float, ...]:
    return TABLET_OD


@pytest.fixture(scope="session")
def match_strips():
    return _match_strips


def _match_strips(analysis, sim, dpi):
    """Pair found strips with the truth by their step-1 centres (within 2 mm)."""
    pixel_mm = 25.4 / dpi
    pairs = []
    for truth in sim.truth:
        first = np.asarray(truth["step_centers_rc"][0])
        best = min(analysis.strips, key=lambda s: np.hypot(*(np.asarray(s.steps[0].center_rc) - first)))
        assert np.hypot(*(np.asarray(best.steps[0].center_rc) - first)) * pixel_mm < 2.0, "step 1 not found where it is"
        pairs.append((best, truth))
    return pairs
