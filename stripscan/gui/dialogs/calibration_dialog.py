"""The calibration assistant: from a tablet scan and its certificate to an active calibration.

The user picks the scan of the reference step tablet and its certificate,
sees where the tablet was found, the fitted signal-to-density curve with
each step's held-out residual and the valid density range, then saves
the calibration and makes it the active one.
"""

from __future__ import annotations

import logging
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (
    QDialog,
    QFileDialog,
    QGridLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QProgressBar,
    QPushButton,
    QSplitter,
    QVBoxLayout,
    QWidget,
)

from stripscan.core.calibration import ACCURACY_GOAL, Calibration
from stripscan.core.calibration_files import save_calibration
from stripscan.core.certificate import Certificate, read_certificate
from stripscan.core.locate import FoundStrip
from stripscan.core.tablet import calibrate_tablet
from stripscan.core.scan import load_scan
from stripscan.gui.errors import report_error
from stripscan.gui.views.scan_view import _polygons_xy
from stripscan.gui.models.session import Progress, _no_progress, density_image
from stripscan.gui.style import FILM_LUT, LOOKS, SCAN_BACKGROUND, look_pen
from stripscan.gui.tasks import TaskRunner

__all__ = ["TabletFit", "fit_tablet", "CalibrationDialog", "default_save_path"]

log = logging.getLogger(__name__)


@dataclass(frozen=True, eq=False)
class TabletFit:
    """What the assistant shows after reading a tablet."""

    calibration: Calibration
    certificate: Certificate
    tablet: FoundStrip
    warnings: tuple[str, ...]
    display: np.ndarray
    display_levels: tuple[float, float]


def fit_tablet(
    scan_path: str | os.PathLike[str],
    certificate_path: str | os.PathLike[str],
    *,
    progress: Progress = _no_progress,
) -> TabletFit:
    """Read the certificate, locate and read the tablet, fit (slow: run off the UI thread).

    Raises
    ------
    CalibrationError, ScanError
        Naming the file at fault and what is wrong with it.
    """
    progress(0.05, "Reading the certificate")
    certificate = read_certificate(certificate_path)
    progress(0.15, "Locating the tablet and fitting the curve")
    calibration, tablet, warnings = calibrate_tablet(scan_path, certificate)
    progress(0.8, "Preparing the display")
    display, levels = density_image(load_scan(scan_path).signal)
    progress(1.0, "Done")
    return TabletFit(calibration, certificate, tablet, tuple(warnings), display, levels)


#: The fit plot's log10 signal axis before a fit: a 16-bit scanner's range.
_EMPTY_SIGNAL = (-4.0, 0.0)  # log10 of a signal 0..1 of full scale: 4 decades


def default_save_path(scan_path: str | os.PathLike[str]) -> str:
    """Where a new calibration is offered to be saved: beside the tablet scan."""
    path = Path(scan_path)
    return str(path.with_name(f"{path.stem}_calibration.json"))


def _file_row(label: str, tip: str) -> tuple[QLabel, QLineEdit, QPushButton]:
    edit = QLineEdit()
    edit.setPlaceholderText(tip)
    return QLabel(label), edit, QPushButton("Browse…")


class CalibrationDialog(QDialog):
    """Calibrate from a step tablet and make the result the active calibration.

    Signals
    -------
    calibration_saved(str)
        Path of the calibration just saved and accepted.
    """

    calibration_saved = Signal(str)

    def __init__(self, parent: QWidget | None = None, *, start_folder: str = "", active: str = "") -> None:
        super().__init__(parent)
        self.setWindowTitle("Calibration assistant")
        self.resize(1100, 720)
        self.runner = TaskRunner(self)
        self.fit: TabletFit | None = None
        self._folder = start_folder

        grid = QGridLayout()
        rows = (
            ("Tablet scan:", "scan of the reference step tablet (TIFF, PNG)", "scan_edit", self._browse_scan),
            ("Certificate:", "the tablet's certificate (CSV: step,density)", "certificate_edit", self._browse_cert),
        )
        for k, (label, tip, name, browse) in enumerate(rows):
            text, edit, button = _file_row(label, tip)
            setattr(self, name, edit)
            button.clicked.connect(browse)
            grid.addWidget(text, k, 0)
            grid.addWidget(edit, k, 1)
            grid.addWidget(button, k, 2)
        self.fit_button = QPushButton("Locate the tablet and fit")
        self.fit_button.setDefault(True)
        self.fit_button.clicked.connect(self.start_fit)
        grid.addWidget(self.fit_button, 0, 3, 2, 1)
        self.progress = QProgressBar()
        self.progress.setRange(0, 100)
        self.progress.hide()
        self.runner.progress.connect(lambda f, t: (self.progress.setValue(int(100 * f)), self.progress.setFormat(t)))
        self.runner.busy_changed.connect(self._busy)

        self.tablet_view = pg.PlotWidget(background=SCAN_BACKGROUND)
        tv = self.tablet_view.getPlotItem()
        tv.hideAxis("left")
        tv.hideAxis("bottom")
        tv.setMenuEnabled(False)
        tv.setTitle("Tablet as found", color="#eeeeee")
        tv.getViewBox().setAspectLocked(True)
        tv.getViewBox().invertY(True)
        self.tablet_image = pg.ImageItem(autoDownsample=True)
        self.tablet_image.setLookupTable(FILM_LUT)
        tv.addItem(self.tablet_image)
        self.tablet_boxes = pg.PlotCurveItem(pen=look_pen(LOOKS["used"]), connect="finite")
        self.tablet_unused = pg.PlotCurveItem(pen=look_pen(LOOKS["outside"]), connect="finite")
        self.tablet_outline = pg.PlotCurveItem(pen=pg.mkPen("#ffd54f", width=2))
        for item in (self.tablet_outline, self.tablet_boxes, self.tablet_unused):
            tv.addItem(item)
        self.tablet_labels: list[pg.TextItem] = []

        self.plots = pg.GraphicsLayoutWidget()
        self.fit_plot = self.plots.addPlot(row=0, col=0)
        self.fit_plot.setTitle("Fitted signal → density")
        self.fit_plot.setLabel("bottom", "log10 scanner signal")
        self.fit_plot.setLabel("left", "Certified density (OD)")
        self.fit_plot.showGrid(x=True, y=True, alpha=0.15)
        self.valid_band = pg.LinearRegionItem(orientation="horizontal", movable=False,
                                              brush=pg.mkBrush(0, 150, 136, 40), pen=pg.mkPen(None))
        self.fit_plot.addItem(self.valid_band)
        self.valid_band.hide()  # until a fit gives the range
        for plot_item in (self.fit_plot,):
            for name in ("left", "bottom"):
                plot_item.getAxis(name).enableAutoSIPrefix(False)
        # Before a fit: a 16-bit scanner's signal range and the densities of a tablet, not 0-1 around nothing.
        self.fit_plot.setXRange(*_EMPTY_SIGNAL, padding=0)
        self.fit_plot.setYRange(0.0, 3.5, padding=0)
        self.fit_curve = pg.PlotCurveItem(pen=pg.mkPen("#0072B2", width=2))
        self.fit_points = pg.ScatterPlotItem(size=8, pen=pg.mkPen("#0072B2"), brush=pg.mkBrush("#0072B2"))
        self.fit_unused = pg.ScatterPlotItem(size=9, symbol="x", pen=pg.mkPen("#D55E00", width=1.5))
        for item in (self.fit_curve, self.fit_points, self.fit_unused):
            self.fit_plot.addItem(item)
        self.residual_plot = self.plots.addPlot(row=1, col=0)
        self.residual_plot.setTitle("Held-out residual per step")
        self.residual_plot.getAxis("bottom").enableAutoSIPrefix(False)
        self.residual_plot.setLabel("bottom", "Tablet step")
        self.residual_plot.setLabel("left", "Predicted − certified (OD)")
        self.residual_plot.getAxis("left").enableAutoSIPrefix(False)
        self.residual_plot.showGrid(y=True, alpha=0.15)
        self.residual_bars = pg.BarGraphItem(x=[], height=[], width=0.6, brush="#56B4E9")
        self.residual_plot.addItem(self.residual_bars)
        for sign in (1, -1):
            self.residual_plot.addItem(pg.InfiniteLine(
                pos=sign * ACCURACY_GOAL, angle=0, pen=pg.mkPen("#D55E00", style=Qt.PenStyle.DashLine),
                label=f"{sign * ACCURACY_GOAL:+.2f} OD goal" if sign > 0 else None,
                # Under its line, inside the plot: above it the label was cut at the plot's top.
                labelOpts={"position": 0.02, "color": "#D55E00", "anchors": [(0, 0), (0, 0)]}))
        self.residual_plot.setXRange(0.5, 21.5, padding=0)
        self.residual_plot.setYRange(-2 * ACCURACY_GOAL, 2 * ACCURACY_GOAL, padding=0)
        #: Says why a step has no bar (the lightest starts the range) and how the densest is tested.
        self.residual_note = QLabel()
        self.residual_note.setWordWrap(True)
        self.residual_note.setStyleSheet("color: #555555")
        self.plots.ci.layout.setRowStretchFactor(0, 3)
        self.plots.ci.layout.setRowStretchFactor(1, 2)

        splitter = QSplitter(Qt.Orientation.Horizontal)
        splitter.addWidget(self.tablet_view)
        splitter.addWidget(self.plots)
        splitter.setSizes([350, 750])

        self.summary = QLabel("Pick the tablet scan and its certificate, then locate and fit.")
        self.summary.setWordWrap(True)
        self.summary.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.active_label = QLabel(f"Active calibration now: {active or 'none (direct mode)'}")
        self.active_label.setStyleSheet("color: #555555")

        save_row = QHBoxLayout()
        save_row.addWidget(QLabel("Save as:"))
        self.save_edit = QLineEdit()
        self.save_edit.setPlaceholderText("calibration file to write (JSON)")
        save_browse = QPushButton("Browse…")
        save_browse.clicked.connect(self._browse_save)
        self.save_button = QPushButton("Save and use this calibration")
        self.save_button.setEnabled(False)
        self.save_button.clicked.connect(self.save_and_use)
        close = QPushButton("Close")
        close.clicked.connect(self.reject)
        save_row.addWidget(self.save_edit, 1)
        save_row.addWidget(save_browse)
        save_row.addWidget(self.save_button)
        save_row.addWidget(close)

        layout = QVBoxLayout(self)
        layout.addWidget(self.active_label)
        layout.addLayout(grid)
        layout.addWidget(self.progress)
        layout.addWidget(splitter, 1)
        layout.addWidget(self.residual_note)
        layout.addWidget(self.summary)
        layout.addLayout(save_row)

    # -- files ---------------------------------------------------------------------
    def offer_scan(self, path: str | os.PathLike[str]) -> None:
        """Fill in the scan open in the window as the tablet scan, when none is chosen yet."""
        if not self.scan_edit.text().strip():
            self.scan_edit.setText(str(path))
            self.summary.setText(f"The scan open in the window ({Path(path).name}) is filled in as the tablet scan; "
                                 "pick another if it is not the tablet. Then pick the certificate, and locate and fit.")

    def set_files(self, scan: str | os.PathLike[str], certificate: str | os.PathLike[str]) -> None:
        self.scan_edit.setText(str(scan))
        self.certificate_edit.setText(str(certificate))

    def _browse_scan(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Scan of the reference step tablet", self._folder,
                                              "Scans (*.tif *.tiff *.png *.jpg *.jpeg);;All files (*)")
        if path:
            self.scan_edit.setText(path)
            self._folder = str(Path(path).parent)

    def _browse_cert(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Certificate of the step tablet", self._folder,
                                              "Certificates (*.csv *.txt);;All files (*)")
        if path:
            self.certificate_edit.setText(path)

    def _browse_save(self) -> None:
        path, _ = QFileDialog.getSaveFileName(self, "Save the calibration", self.save_edit.text() or self._folder,
                                              "Calibrations (*.json)")
        if path:
            self.save_edit.setText(path)

    # -- fitting ----------------------------------------------------------------------
    def start_fit(self) -> None:
        """Read the tablet and fit, in a worker thread."""
        scan, cert = self.scan_edit.text().strip(), self.certificate_edit.text().strip()
        if not scan or not cert:
            self.summary.setText("<b>Pick both files first:</b> the tablet scan and its certificate.")
            return
        self.save_button.setEnabled(False)
        self.summary.setText("Reading the tablet…")
        self.runner.start(fit_tablet, scan, cert, on_done=self._fitted, on_error=self._failed, key="fit")

    def _busy(self, busy: bool) -> None:
        self.progress.setVisible(busy)
        self.fit_button.setEnabled(not busy)

    def _failed(self, error: BaseException) -> None:
        self.fit = None
        self.summary.setText(f"<b>Not calibrated.</b> {error}")
        report_error(self, "The tablet could not be used", error)

    def _fitted(self, fit: TabletFit) -> None:
        self.fit = fit
        self._show_tablet(fit)
        self._show_fit(fit.calibration)
        cal = fit.calibration
        lo, hi = cal.valid_od
        rms = "—" if cal.rms_residual is None else f"{cal.rms_residual:.4f}"
        text = (f"<b>Valid density range {lo:.2f} – {hi:.2f} OD</b> · RMS held-out residual {rms} OD · "
                f"{len(cal.log_signal)} of {len(fit.certificate.densities)} tablet steps used · "
                f"{cal.bits}-bit {cal.decoding} scan at {cal.dpi or 0:g} dpi")
        if cal.stray_light is not None:
            text += (f" · stray light {100 * cal.stray_light.total:.3f} % "
                     f"(±{100 * cal.stray_light.fraction_sd:.3f} %), corrected on every scan")
        if fit.warnings:
            text += "<br>" + "<br>".join(f"• {w}" for w in fit.warnings)
        self.summary.setText(text)
        if not self.save_edit.text().strip():
            self.save_edit.setText(default_save_path(self.scan_edit.text().strip()))
        self.save_button.setEnabled(True)

    def _show_tablet(self, fit: TabletFit) -> None:
        self.tablet_image.setImage(fit.display, levels=fit.display_levels, autoLevels=False)
        self.tablet_image.setRect(-0.5, -0.5, fit.display.shape[1], fit.display.shape[0])
        g = fit.tablet.geometry
        used = set(range(1, len(fit.calibration.log_signal) + 1))
        self.tablet_outline.setData(*_polygons_xy([g.outline_rc()]))
        self.tablet_boxes.setData(*_polygons_xy([g.step_box_rc(s) for s in range(1, g.n_steps + 1) if s in used]))
        self.tablet_unused.setData(*_polygons_xy([g.step_box_rc(s) for s in range(1, g.n_steps + 1)
                                                  if s not in used]))
        plot = self.tablet_view.getPlotItem()
        for label in self.tablet_labels:
            plot.removeItem(label)
        self.tablet_labels = []
        for step in range(1, g.n_steps + 1):
            r, c = g.step_center_rc(step)
            # White on a dark patch: readable on the light steps as on the dark ones.
            label = pg.TextItem(str(step), color="#ffffff", anchor=(0.5, 0.5), fill=pg.mkBrush(0, 0, 0, 170))
            label.setPos(c, r)
            plot.addItem(label)
            self.tablet_labels.append(label)
        plot.getViewBox().autoRange(items=[self.tablet_image], padding=0.02)

    def _show_fit(self, cal: Calibration) -> None:
        signals = {int(r["step"]): r["signal"] for r in cal.readings}
        densities = cal.certificate.densities
        n_used = len(cal.log_signal)
        used = [(np.log10(signals[s]), densities[s - 1]) for s in range(1, n_used + 1)]
        unused = [(np.log10(signals[s]), densities[s - 1]) for s in cal.excluded_steps
                  if signals.get(s) and signals[s] > 0]
        self.fit_points.setData([p[0] for p in used], [p[1] for p in used])
        self.fit_unused.setData([p[0] for p in unused], [p[1] for p in unused])
        grid = np.linspace(min(cal.log_signal), max(cal.log_signal), 300)
        od, _ = cal.density(10.0 ** grid)
        self.fit_curve.setData(grid, od)
        self.valid_band.setRegion(cal.valid_od)
        self.valid_band.show()
        # The empty plot's fixed axes give way to the fitted tablet's own span.
        xs = [p[0] for p in used + unused] + [float(grid[0]), float(grid[-1])]
        self.fit_plot.setXRange(min(xs), max(xs), padding=0.05)
        self.fit_plot.setYRange(0.0, max(max(densities), cal.valid_od[1]) + 0.2, padding=0)
        steps = [k + 1 for k, r in enumerate(cal.residuals) if r is not None]
        heights = [r for r in cal.residuals if r is not None]
        self.residual_bars.setOpts(x=steps, height=heights, width=0.6)
        self.residual_plot.setXRange(0.5, len(densities) + 0.5)
        top = max([abs(h) for h in heights] + [1.5 * ACCURACY_GOAL]) * 1.3
        self.residual_plot.setYRange(-top, top)
        none = [k + 1 for k, r in enumerate(cal.residuals) if r is None]
        note = []
        if none:
            note.append(
                f"No bar for step{'s' if len(none) > 1 else ''} {', '.join(map(str, none))}: the lightest step "
                "starts the range, and predicting it from the others would extrapolate past them.")
        if len(cal.residuals) > 1 and cal.residuals[-1] is not None:
            note.append(f"Step {len(cal.residuals)}, the densest used, is predicted by extending the map from the "
                        "others, so the top of the range is a tested density.")
        if cal.excluded_steps:
            note.append(f"Not used: step{'s' if len(cal.excluded_steps) > 1 else ''} "
                        f"{', '.join(map(str, cal.excluded_steps))} (the scanner does not tell them apart).")
        self.residual_note.setText(" ".join(note))

    # -- accepting ---------------------------------------------------------------------
    def save_and_use(self) -> str | None:
        """Save the fitted calibration where the user chose and make it active."""
        if self.fit is None:
            return None
        path = self.save_edit.text().strip()
        if not path:
            self.summary.setText("<b>Choose where to save the calibration first.</b>")
            return None
        try:
            save_calibration(self.fit.calibration, path)
        except (OSError, ValueError) as exc:
            report_error(self, "The calibration was not saved", exc)
            return None
        log.info("calibration saved to %s", path)
        self.calibration_saved.emit(path)
        self.accept()
        return path

    def done(self, result: int) -> None:
        # A fit still running must not call back into a closed dialog.
        self.runner.wait(10_000)
        super().done(result)
