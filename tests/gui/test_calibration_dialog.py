"""The calibration assistant from tablet scan and certificate to the active calibration."""

from __future__ import annotations

import numpy as np
import pytest
from PySide6.QtWidgets import QMessageBox

from stripscan.core.calibration_files import load_calibration
from stripscan.core.certificate import read_certificate
from stripscan.core.tablet import calibrate_tablet


def visible_messages(widget) -> list[QMessageBox]:
    return [box for box in widget.findChildren(QMessageBox) if box.isVisible()]


def test_assistant_end_to_end(qtbot, open_scan, window, files, tmp_path):
    open_scan(window, files.scan)
    assert "direct mode" in window.banner.label.text()
    dialog = window.open_calibration_assistant()
    dialog.set_files(files.tablet, files.certificate)
    dialog.fit_button.click()
    qtbot.waitUntil(lambda: dialog.fit is not None, timeout=20_000)
    core, tablet, warnings = calibrate_tablet(files.tablet, read_certificate(files.certificate))

    # The tablet as found: its outline and one box per certificate step.
    assert len(dialog.tablet_labels) == tablet.geometry.n_steps == 21
    ox, oy = dialog.tablet_outline.getData()
    corners = np.asarray(tablet.geometry.outline_rc())
    assert ox[:4] == pytest.approx(corners[:, 1]) and oy[:4] == pytest.approx(corners[:, 0])
    # The fitted curve, per-step residuals and valid range are the core's.
    fitted = dialog.fit.calibration
    assert fitted.log_signal == core.log_signal and fitted.od == core.od
    px, py = dialog.fit_points.getData()
    assert len(px) == len(core.log_signal)
    # The points are the certified densities (the knots hold the light seen, stray light included).
    assert sorted(py) == pytest.approx(sorted(core.certificate.densities[: len(core.log_signal)]))
    assert dialog.valid_band.getRegion() == pytest.approx(core.valid_od)
    heights = dialog.residual_bars.opts["height"]
    assert list(heights) == pytest.approx([r for r in core.residuals if r is not None])
    cx, cy = dialog.fit_curve.getData()
    assert cy == pytest.approx(core.density(10.0 ** cx)[0])
    assert f"{core.valid_od[0]:.2f} – {core.valid_od[1]:.2f} OD" in dialog.summary.text()

    target = tmp_path / "tablet_cal.json"
    dialog.save_edit.setText(str(target))
    dialog.save_button.click()
    saved = load_calibration(target)
    assert saved.log_signal == core.log_signal and saved.valid_od == core.valid_od
    assert window.session.calibration == saved
    assert window.session.calibration_path == str(target)
    assert window.settings.calibration_path() == str(target)
    assert not window.banner.isVisible()  # calibrated now, same scanner settings
    assert window.session.result(0).steps[0].in_range


def test_a_bad_certificate_is_named_and_nothing_is_saved(qtbot, window, files, tmp_path):
    bad = tmp_path / "bad_certificate.csv"
    bad.write_text("step,density\n1,0.05\n2,abc\n3,0.35\n", encoding="utf-8")
    dialog = window.open_calibration_assistant()
    dialog.set_files(files.tablet, bad)
    dialog.start_fit()
    qtbot.waitUntil(lambda: bool(visible_messages(dialog)), timeout=20_000)
    text = visible_messages(dialog)[0].text()
    assert str(bad) in text and "line 3" in text and "'abc'" in text
    assert dialog.fit is None and not dialog.save_button.isEnabled()
    assert window.session.calibration is None


def test_the_tablet_scan_must_be_readable(qtbot, window, files):
    dialog = window.open_calibration_assistant()
    dialog.set_files(files.bad, files.certificate)
    dialog.start_fit()
    qtbot.waitUntil(lambda: bool(visible_messages(dialog)), timeout=20_000)
    assert str(files.bad) in visible_messages(dialog)[0].text()
    dialog.set_files("", "")
    dialog.start_fit()
    assert "Pick both files" in dialog.summary.text()
