"""Bad input in the window: a clear message or note naming the file; the window lives on."""

from __future__ import annotations

import numpy as np
import pytest
import tifffile
from PySide6.QtWidgets import QMessageBox

from stripscan.sim.objects import FilmModel, ScannerModel, StripSpec
from stripscan.sim.simulate import simulate_scan, write_tiff


def _grey(path, image):
    tifffile.imwrite(path, image, resolution=(150, 150), resolutionunit="INCH")


BAD = {
    "empty": (lambda p: p.write_bytes(b""), "the file is empty"),
    "not an image": (lambda p: p.write_text("step,density\n"), "cannot be read as an image"),
    "1 x 1": (lambda p: _grey(p, np.zeros((1, 1), np.uint16)), "too small"),
    "truncated": (lambda p: (_grey(p, np.full((300, 300), 2000, np.uint16)), p.write_bytes(p.read_bytes()[:3000])),
                  "cannot be read"),
    "float out of range": (lambda p: _grey(p, np.full((40, 40), 7.0, np.float32)), "floating-point"),
    "blank platen": (lambda p: _grey(p, np.full((500, 300), 60000, np.uint16)), "no film found"),
    "all saturated": (lambda p: _grey(p, np.full((500, 300), 65535, np.uint16)), "no film found"),
}


def boxes(window) -> list[QMessageBox]:
    return [w for w in window.findChildren(QMessageBox) if w.isVisible()]


def shown_text(window) -> str:
    """What the window tells: its message boxes (closed once read) and the session's notes."""
    found = boxes(window)
    text = " ".join(b.text() + " " + b.informativeText() for b in found)
    for b in found:
        b.close()
    messages = window.session.messages
    return text + " " + " ".join(messages() if callable(messages) else messages)


@pytest.mark.parametrize("case", list(BAD))
def test_bad_scans_are_explained_and_the_window_lives_on(qtbot, open_scan, window, files, tmp_path, case):
    make, message = BAD[case]
    path = tmp_path / "input.tif"
    make(path)
    open_scan(window, path)
    notes = window.session.messages
    qtbot.waitUntil(lambda: bool(boxes(window)) or message in " ".join(notes() if callable(notes) else notes),
                    timeout=5000)
    text = shown_text(window)
    assert message in text and str(path) in text
    assert window.isVisible()
    open_scan(window, files.scan)  # the window still works
    assert len(window.session.strips) == 2


def test_strip_cut_at_its_dense_end_is_shown_but_not_numbered(qtbot, open_scan, window, tmp_path):
    spec = StripSpec(film=FilmModel(), center_mm=(40.0, 150.0), angle_deg=-90.0)
    path = tmp_path / "cut.tif"
    write_tiff(path, simulate_scan([spec], platen_mm=(80.0, 200.0), dpi=100.0, scanner=ScannerModel(seed=3)))
    open_scan(window, path)
    (state,) = window.session.strips
    assert any("dense end is cut off" in n for n in state.notes)
    assert all(np.isnan(r.signal) for r in state.readings)


def test_the_options_dialog_and_stored_settings_never_give_impossible_options(qtbot, settings):
    # bad-input issue item 9: a step count of 1 or an infinite increment would stop the window
    # (AnalysisOptions refuses them); the dialog's lowest value means "count them"
    from stripscan.core.reading import AnalysisOptions
    from stripscan.gui.dialogs.options_dialog import OptionsDialog

    dialog = OptionsDialog(AnalysisOptions(), 30.0)
    qtbot.addWidget(dialog)
    assert dialog.n_steps.minimum() == 1 and dialog.n_steps.text() == "count them"
    assert dialog.options().n_steps is None
    dialog.n_steps.setValue(2)
    assert dialog.options().n_steps == 2
    for stored in ("inf", "nan", "5"):
        settings.qsettings.setValue("analysis/increment", stored)
        assert settings.increment() == 0.15
