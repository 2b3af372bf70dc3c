"""Fixtures of the GUI tests: offscreen Qt, settings and log in tmp_path, small simulated scans."""

from __future__ import annotations

import os

# Before Qt is imported anywhere: no display needed.
os.environ["QT_QPA_PLATFORM"] = "offscreen"

import sys  # noqa: E402
from pathlib import Path  # noqa: E402
from types import SimpleNamespace  # noqa: E402

import pytest  # noqa: E402

# pytest runs with --import-mode=importlib, which puts no test folder on sys.path; the test modules
# import their small helpers (gui_helpers) by name.
if str(Path(__file__).parent) not in sys.path:
    sys.path.insert(0, str(Path(__file__).parent))

from stripscan.core.calibration_files import save_calibration
from stripscan.core.certificate import read_certificate
from stripscan.core.tablet import calibrate_tablet
from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec, TabletSpec
from stripscan.sim.simulate import simulate_scan, write_certificate, write_tiff

DPI = 150.0
FILMS = (
    FilmModel(base_fog=0.19, dmax=3.6, log_e_mid=1.6, slope=5.0, asymmetry=0.7),
    FilmModel(base_fog=0.21, dmax=3.4, log_e_mid=1.4, slope=4.2, asymmetry=0.9),
)
# Nominal densities of a 21-step tablet, 0.05 + 0.15 k (common practice for a √2 tablet).
TABLET_OD = tuple(round(0.05 + 0.15 * k, 3) for k in range(21))


def scanner(seed: int, **changes) -> ScannerModel:
    """A 16-bit linear grey scanner, corrections off, quiet."""
    return ScannerModel(bits=16, encoding="linear", channels=1, noise_sd=0.0008, seed=seed, **changes)


def write_strip_scan(path: Path, films=FILMS, *, seed: int = 5, dpi: float = DPI) -> SimpleNamespace:
    strips = [StripSpec(film=film, center_mm=(25.0 + 40.0 * k, 100.0), angle_deg=90.0) for k, film in enumerate(films)]
    scan = simulate_scan(strips, platen_mm=(45.0 + 40.0 * (len(films) - 1), 200.0), dpi=dpi, scanner=scanner(seed))
    write_tiff(path, scan)
    return SimpleNamespace(path=path, truth=scan.truth)


def write_tablet(folder: Path, *, seed: int = 1) -> tuple[Path, Path]:
    tablet = TabletSpec(densities=TABLET_OD, step_length_mm=7.5, width_mm=20.0, center_mm=(30.0, 95.0), angle_deg=90.0)
    scan = simulate_scan([tablet], platen_mm=(60.0, 190.0), dpi=DPI, scanner=scanner(seed))
    tablet_path, cert_path = folder / "tablet.tif", folder / "tablet_certificate.csv"
    write_tiff(tablet_path, scan)
    write_certificate(cert_path, TABLET_OD)
    return tablet_path, cert_path


@pytest.fixture(scope="session")
def files(tmp_path_factory) -> SimpleNamespace:
    """A two-strip scan, a tablet scan with its certificate and the calibration made from them."""
    folder = tmp_path_factory.mktemp("scans")
    strips = write_strip_scan(folder / "two_strips.tif")
    tablet, certificate = write_tablet(folder)
    calibration, _, _ = calibrate_tablet(tablet, read_certificate(certificate))
    cal_path = folder / "calibration.json"
    save_calibration(calibration, cal_path)
    bad = folder / "not_a_scan.tif"
    bad.write_bytes(b"this is not a TIFF file at all, just some text\n" * 20)
    return SimpleNamespace(folder=folder, scan=strips.path, truth=strips.truth, tablet=tablet,
                           certificate=certificate, calibration=cal_path, calibration_record=calibration, bad=bad)


@pytest.fixture
def settings(tmp_path, monkeypatch):
    """Settings, the log file and the default lot archive in tmp_path, never in the user's home."""
    from stripscan.gui.errors import setup_logging
    from stripscan.gui.settings import AppSettings

    monkeypatch.setenv("STRIPSCAN_SETTINGS", str(tmp_path / "settings.ini"))
    monkeypatch.setenv("STRIPSCAN_LOG_DIR", str(tmp_path / "logs"))
    # The window shows the default lot archive when none is chosen: never the real user's in a test.
    monkeypatch.setenv("STRIPSCAN_ARCHIVE", str(tmp_path / "user-archive" / "archive.sqlite3"))
    setup_logging(tmp_path / "logs")
    return AppSettings(tmp_path / "settings.ini")


def close_window(qtbot, win, *, timeout: int = 60_000) -> None:
    """Close ``win`` as a person would, wait until its work has stopped and it has closed, then delete it.

    The window is deleted only after every worker that reports back to it
    has finished, never under one; a window that does not close is a
    failure of the test, not a hang of a later one.
    """
    from PySide6.QtCore import QEvent
    from PySide6.QtWidgets import QApplication

    win.close()
    qtbot.waitUntil(lambda: not win.isVisible() and not win.work_running, timeout=timeout)
    win.deleteLater()
    QApplication.sendPostedEvents(None, QEvent.Type.DeferredDelete)


@pytest.fixture
def window(qtbot, settings):
    from stripscan.gui.main_window import MainWindow

    win = MainWindow(settings=settings)
    win.resize(1300, 850)
    win.show()
    yield win
    close_window(qtbot, win)


@pytest.fixture
def open_scan(qtbot):
    """open_scan(window, path): open through the window, wait until the worker has handed it over."""

    def run(window, path, *, timeout: int = 20_000) -> None:
        window.open_path(path)
        qtbot.waitUntil(lambda: not window.busy, timeout=timeout)

    return run


@pytest.fixture
def make_strip_scan():
    """make_strip_scan(path, dpi=..., seed=...): write a two-strip scan, return its path and truth."""
    return write_strip_scan

