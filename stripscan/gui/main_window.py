"""The main window: scan, curve, figures and steps, all over one :class:`Session`."""

from __future__ import annotations

import dataclasses
import json
import logging
import os
from pathlib import Path

from PySide6.QtCore import Qt, QTimer
from PySide6.QtGui import QAction, QCloseEvent, QDragEnterEvent, QDropEvent, QKeySequence
from PySide6.QtWidgets import (
    QDockWidget,
    QFileDialog,
    QFrame,
    QHBoxLayout,
    QLabel,
    QMainWindow,
    QMessageBox,
    QPushButton,
    QSizePolicy,
    QSplitter,
    QTabWidget,
    QVBoxLayout,
    QWidget,
)

from stripscan import CAUTION, __version__
from stripscan._shared.atomic import write_text
from stripscan.core.calibration_files import load_calibration
from stripscan.render import qtguard
from stripscan.gui.dialogs.batch_dialog import BatchDialog, start_batch
from stripscan.gui.dialogs.calibration_dialog import CalibrationDialog
from stripscan.gui.views.curve_view import CurveView
from stripscan.gui.errors import log_file, report_error, show_message
from stripscan.gui.panels.figures_panel import FiguresPanel, StepTable
from stripscan.gui.dialogs.options_dialog import OptionsDialog
from stripscan.gui.progress import TaskProgress
from stripscan.gui.views.scan_view import ScanView
from stripscan.gui.models.session import LoadedScan, Session, find_strips, load_and_find
from stripscan.gui.settings import AppSettings
from stripscan.gui.panels.strips_panel import StripsPanel
from stripscan.gui.tasks import TaskRunner
from stripscan.gui.workspace import Workspace

__all__ = ["MainWindow", "SCAN_SUFFIXES"]

log = logging.getLogger(__name__)

SCAN_SUFFIXES = (".tif", ".tiff", ".png", ".jpg", ".jpeg")
_SCAN_FILTER = "Scans (*.tif *.tiff *.png *.jpg *.jpeg);;All files (*)"


class _Banner(QFrame):
    """A strip above the scan for what the user must not miss (calibration state)."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setObjectName("banner")
        self.label = QLabel()
        self.label.setWordWrap(True)
        self.label.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.button = QPushButton("Calibrate…")
        layout = QHBoxLayout(self)
        layout.setContentsMargins(8, 4, 8, 4)
        layout.addWidget(self.label, 1)
        layout.addWidget(self.button)

    def show_lines(self, lines: list[str], *, severe: bool) -> None:
        self.label.setText("\n".join(lines))
        colour, border = ("#f8d7da", "#d9534f") if severe else ("#fff3cd", "#e0a800")
        self.setStyleSheet(f"QFrame#banner {{ background: {colour}; border: 1px solid {border}; }}"
                           f" QLabel {{ color: #3b2a00; }}")
        self.setVisible(bool(lines))


class MainWindow(QMainWindow):
    """The workbench window.

    Closing it while work is under way (a scan being read, the demo build,
    a comparison, a file being written) asks that work to stop; the window
    stays, greyed, and closes itself once the work has stopped, so nothing
    the work reports to is torn down under it.

    Parameters
    ----------
    session : Session, optional
        The model to show (a new one by default).
    settings : AppSettings, optional
        Where settings persist (default: the user's settings file).
    """

    #: A lost connection to a shared archive is said by the line over the pages, not in a box per page.
    shows_lost_connection = True

    def __init__(self, session: Session | None = None, settings: AppSettings | None = None) -> None:
        super().__init__()
        self.settings = settings or AppSettings()
        self.session = session or Session(max_calibration_age_days=self.settings.max_age_days())
        # Garbage is freed on this (the GUI) thread only; see qtguard.
        qtguard.start_gui_collector()
        self.runner = TaskRunner(self)
        self._closing = False  # a close waits for the work under way (closeEvent)
        self.setWindowTitle("stripscan")
        self.setAcceptDrops(True)
        self.resize(1400, 900)

        self.scan_view = ScanView(self.session)
        self.curve_view = CurveView(self.session)
        self.figures = FiguresPanel(self.session)
        self.step_table = StepTable(self.session)
        self.strips_panel = StripsPanel(self.session)
        self.banner = _Banner()
        self.banner.button.clicked.connect(self.open_calibration_assistant)
        self.calibration_dialog: CalibrationDialog | None = None

        tabs = QTabWidget()
        tabs.addTab(self.figures, "Figures")
        tabs.addTab(self.step_table, "Steps")
        self.tabs = tabs
        right = QSplitter(Qt.Orientation.Vertical)
        self.right_splitter = right
        right.addWidget(self.curve_view)
        right.addWidget(tabs)
        right.setStretchFactor(0, 1)
        right.setStretchFactor(1, 1)
        main = QSplitter(Qt.Orientation.Horizontal)
        main.addWidget(self.scan_view)
        main.addWidget(right)
        main.setStretchFactor(0, 5)
        main.setStretchFactor(1, 6)
        self.splitter = main
        central = QWidget()
        layout = QVBoxLayout(central)
        layout.setContentsMargins(4, 4, 4, 0)
        layout.addWidget(self.banner)
        #: What to click next while a strip is drawn by hand (and what came of it), over the scan.
        self.scan_hint = QLabel()
        self.scan_hint.setWordWrap(True)
        self.scan_hint.setStyleSheet("background: #e8f0fe; border: 1px solid #7aa7e8; padding: 4px; color: #0d2a57")
        self.scan_hint.hide()
        layout.addWidget(self.scan_hint)
        layout.addWidget(main, 1)
        # The scan is the first of the pages; the lot archive, comparison and QC panels follow it.
        self.workspace = Workspace(self, self.session, self.settings, central)
        self.setCentralWidget(self.workspace.widget)
        dock = QDockWidget("Strips", self)
        dock.setObjectName("strips_dock")
        dock.setWidget(self.strips_panel)
        dock.setFeatures(QDockWidget.DockWidgetFeature.DockWidgetMovable)
        self.addDockWidget(Qt.DockWidgetArea.LeftDockWidgetArea, dock)
        self.resizeDocks([dock], [235], Qt.Orientation.Horizontal)
        self.strips_dock = dock
        # The strips belong to the scan; the other pages get the whole width.
        self.workspace.pages.currentChanged.connect(lambda _: dock.setVisible(self.workspace.current_page() == "scan"))
        for runner in (self.runner, *self.workspace.runners):
            runner.busy_changed.connect(self._work_changed)

        self.progress = TaskProgress(self.runner, 260)
        # The caution once, under every page, whole (wrapped on a narrow window, never clipped);
        # the panels' own copies are for when they are used on their own.
        caution = QLabel(CAUTION)
        caution.setWordWrap(True)
        caution.setStyleSheet("color: #6d4c00; font-style: italic")
        caution.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        caution.setContentsMargins(6, 0, 6, 0)
        self.workspace.widget.layout().addWidget(caution)
        for panel_caution in (self.figures.caution, self.workspace.archive_panel.caution,
                              self.workspace.compare_panel.caution):
            panel_caution.hide()
        self.caution_label = caution
        #: Which calibration is active, always in view (also after a restart).
        self.calibration_status = QLabel()
        self.calibration_status.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.statusBar().addPermanentWidget(self.progress)
        self.statusBar().addPermanentWidget(self.workspace.progress)
        self.statusBar().addPermanentWidget(self.calibration_status)
        self.scan_view.hint.connect(self._show_scan_hint)
        self.strips_panel.draw_requested.connect(self.start_drawing)
        self.strips_panel.find_requested.connect(self.find_strips_again)
        self.curve_view.show_gradient.toggled.connect(self.settings.set_show_gradient)

        self._make_actions()
        ev = self.session.events
        ev.calibration_changed.connect(self._refresh_banner)
        ev.calibration_changed.connect(self._show_calibration)
        ev.scan_loaded.connect(self._refresh_banner)
        ev.levels_changed.connect(lambda low, high: self.settings.set_levels(low, high))
        self._restore()

    # -- actions ---------------------------------------------------------------------
    def _action(self, menu, text: str, slot, shortcut=None, tip: str = "") -> QAction:
        action = QAction(text, self)
        if shortcut is not None:
            action.setShortcut(QKeySequence(shortcut))
        if tip:
            action.setStatusTip(tip)
        action.triggered.connect(lambda checked=False: slot())
        menu.addAction(action)
        return action

    def _make_actions(self) -> None:
        bar = self.menuBar()
        file = bar.addMenu("&File")
        self.open_action = self._action(file, "&Open a scan…", self.ask_open, QKeySequence.StandardKey.Open,
                                        "Open a scan of processed strips (or drop the file on the window)")
        self.recent_menu = file.addMenu("Open &recent")
        self._action(file, "Analyse se&veral scans…", self.ask_analyse_several, "Ctrl+Shift+O",
                     "Read several scans in the background with this calibration and these settings, "
                     "each result saved as NAME.results.json in a folder you choose")
        file.addSeparator()
        self._action(file, "&Save results (JSON)…", self.ask_save_results, QKeySequence.StandardKey.Save)
        self._action(file, "Save the step table (CSV)…", self.step_table._ask_save)
        self.workspace.fill_file_menu(file)
        file.addSeparator()
        self._action(file, "&Quit", self.close, QKeySequence.StandardKey.Quit)

        cal = bar.addMenu("&Calibration")
        self._action(cal, "Calibration &assistant…", self.open_calibration_assistant, "Ctrl+K",
                     "Calibrate the scanner from a reference step tablet and its certificate")
        self._action(cal, "&Use a saved calibration…", self.ask_use_calibration)
        self._action(cal, "Work &without calibration (direct mode)", lambda: self.use_calibration(None))

        strip = bar.addMenu("&Strip")
        self.next_action = self._action(strip, "&Next strip", lambda: self.session.select_next(1), "Ctrl+]")
        self.previous_action = self._action(strip, "&Previous strip", lambda: self.session.select_next(-1), "Ctrl+[")
        strip.addSeparator()
        self._action(strip, "&Draw a strip by hand", self.start_drawing, "Ctrl+D",
                     "Outline a strip with three clicks where the search did not find it")
        self._action(strip, "&Find strips again", self.find_strips_again)
        self.workspace.add_menus(bar)

        view = bar.addMenu("&View")
        self.workspace.fill_view_menu(view)
        self._action(view, "Zoom &in", lambda: self.scan_view.zoom(1.25), QKeySequence.StandardKey.ZoomIn)
        self._action(view, "Zoom &out", lambda: self.scan_view.zoom(0.8), QKeySequence.StandardKey.ZoomOut)
        self._action(view, "Show the &whole scan", self.scan_view.fit, "Ctrl+0")
        gradient = QAction("Show the &gradient curve", self, checkable=True)
        gradient.setShortcut(QKeySequence("Ctrl+G"))
        gradient.toggled.connect(self.curve_view.set_gradient_visible)
        self.curve_view.show_gradient.toggled.connect(gradient.setChecked)
        view.addAction(gradient)

        settings = bar.addMenu("Se&ttings")
        self._action(settings, "&Analysis settings…", self.open_options)
        help_menu = bar.addMenu("&Help")
        self._action(help_menu, "&Getting started", self.show_getting_started, QKeySequence.StandardKey.HelpContents)
        self._action(help_menu, "&Keyboard shortcuts", self.show_shortcuts)
        help_menu.addSeparator()
        self._action(help_menu, "&About stripscan", self.show_about)
        self._fill_recent()

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        recent = self.settings.recent_files()
        for path in recent:
            action = self.recent_menu.addAction(Path(path).name)
            action.setToolTip(path)
            action.setStatusTip(path)
            action.triggered.connect(lambda checked=False, p=path: self.open_path(p))
        if recent:
            self.recent_menu.addSeparator()
            self.recent_menu.addAction("Clear the list").triggered.connect(self._clear_recent)
        self.recent_menu.setEnabled(bool(recent))

    def _clear_recent(self) -> None:
        self.settings.clear_recent()
        self._fill_recent()

    # -- settings -----------------------------------------------------------------------
    def _restore(self) -> None:
        geometry, state = self.settings.window_state()
        if geometry is not None:
            self.restoreGeometry(geometry)
        if state is not None:
            self.restoreState(state)
        else:
            # First start: share the width once the window has its real size.
            QTimer.singleShot(0, self._first_layout)
        low, high = self.settings.levels()
        self.session.set_levels(low, high)
        increment = self.settings.increment()
        if increment != self.session.options.increment:
            self.session.set_options(dataclasses.replace(self.session.options, increment=increment))
        self.curve_view.set_gradient_visible(self.settings.show_gradient())
        path = self.settings.calibration_path()
        if path:
            try:
                self.session.set_calibration(load_calibration(path), path)
            except (OSError, ValueError) as exc:
                self.settings.set_calibration_path(None)
                report_error(self, "The saved calibration could not be used", exc)
        self._refresh_banner()
        self._show_calibration()

    def _first_layout(self) -> None:
        width = self.splitter.width()
        self.splitter.setSizes([int(width * 0.45), width - int(width * 0.45)])
        height = self.right_splitter.height()
        self.right_splitter.setSizes([int(height * 0.52), height - int(height * 0.52)])

    def closeEvent(self, event: QCloseEvent) -> None:  # noqa: N802 (Qt's name)
        self.workspace.shut_down()  # the demo build stops at its next step
        for batch in self.findChildren(BatchDialog):
            batch.cancel()  # no further scan is started; those under way are finished and kept
        self.settings.set_window_state(self.saveGeometry(), self.saveState())
        self.settings.set_levels(*self.session.levels)
        self.settings.sync()
        if self.work_running:
            # Work still reports back to this window: the window stays (greyed, the event loop
            # running) and closes itself once the work has stopped.  Nothing is torn down under a
            # worker, and the UI thread never blocks waiting for one.
            self._closing = True
            self.setEnabled(False)
            self.statusBar().showMessage("Closing once the work under way has stopped…")
            event.ignore()
            return
        if self._closing:
            self._closing = False
            self.setEnabled(True)
        super().closeEvent(event)

    @property
    def work_running(self) -> bool:
        """Whether work of this window (a scan being read, the demo build, a comparison, a file) is under way."""
        return self.runner.busy or self.workspace.busy

    def _work_changed(self, busy: bool) -> None:
        if self._closing and not busy:
            # After the finished work's own callback (it runs right after this signal).
            QTimer.singleShot(0, self, self._close_if_idle)

    def _close_if_idle(self) -> None:
        if self._closing and not self.work_running:
            self.close()

    # -- opening files ---------------------------------------------------------------------
    def ask_analyse_several(self, scans: list[str] | None = None) -> BatchDialog | None:
        """Pick scans (unless given: dropped) and a folder for their results; analyse them in the background."""
        if not scans:
            scans, _ = QFileDialog.getOpenFileNames(self, "Scans to analyse", self.settings.last_folder(),
                                                    _SCAN_FILTER)
        if not scans:
            return None
        folder = QFileDialog.getExistingDirectory(self, "Folder for the results", str(Path(scans[0]).parent))
        if not folder:
            return None
        return start_batch(self.runner, scans, folder, self.session.calibration, self.session.options, parent=self)

    def ask_open(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Open a scan of strips", self.settings.last_folder(), _SCAN_FILTER)
        if path:
            self.open_path(path)

    def open_path(self, path: str | os.PathLike[str]) -> None:
        """Open a scan (read in a worker thread) or, for a .json file, use it as the calibration."""
        path = str(path)
        if path.lower().endswith(".json"):
            self.use_calibration_file(path)
            return
        self.statusBar().showMessage(f"Reading {path}…")
        self.strips_panel.set_reading(Path(path).name)
        self.runner.start(load_and_find, path, n_steps=self.session.options.n_steps,
                          on_done=lambda loaded: self._loaded(path, loaded),
                          on_error=lambda exc: self._open_failed(path, exc), key="scan")

    def _loaded(self, path: str, loaded: LoadedScan) -> None:
        self.strips_panel.set_reading(None)
        self.session.set_loaded(loaded)
        self.settings.add_recent(path)
        self.settings.set_last_folder(str(Path(path).parent))
        self._fill_recent()
        self.setWindowTitle(f"stripscan — {Path(path).name}")
        n = len(self.session.strips)
        self.statusBar().showMessage(f"{Path(path).name}: {n} strip{'s' if n != 1 else ''} found", 8000)
        if loaded.notes:
            show_message(self, "No strip found", "\n".join(loaded.notes), icon=QMessageBox.Icon.Information)
        elif self.session.mapping_error:
            show_message(self, "No densities for this scan", self.session.mapping_error)

    def _open_failed(self, path: str, error: BaseException) -> None:
        self.strips_panel.set_reading(None)
        self.statusBar().showMessage(f"Could not open {Path(path).name}", 8000)
        report_error(self, "The scan could not be opened", error)

    def dragEnterEvent(self, event: QDragEnterEvent) -> None:  # noqa: N802 (Qt's name)
        if event.mimeData().hasUrls() and any(u.isLocalFile() for u in event.mimeData().urls()):
            event.acceptProposedAction()
        else:
            event.ignore()

    def dropEvent(self, event: QDropEvent) -> None:  # noqa: N802 (Qt's name)
        files = [u.toLocalFile() for u in event.mimeData().urls() if u.isLocalFile()]
        if not files:
            event.ignore()
            return
        event.acceptProposedAction()
        # A calibration dropped together with a scan is used for it.
        files = sorted(files, key=lambda p: not p.lower().endswith(".json"))
        scans = [p for p in files if not p.lower().endswith(".json")]
        if len(scans) > 1:  # several scans: analysed together, each result into a folder
            for path in files[:len(files) - len(scans)]:
                self.open_path(path)
            self.ask_analyse_several(scans)
            return
        for path in files:
            self.open_path(path)

    def find_strips_again(self) -> None:
        scan = self.session.scan
        if scan is None:
            return
        self.runner.start(find_strips, scan, n_steps=self.session.options.n_steps, key="scan",
                          on_done=self._found_again,
                          on_error=lambda exc: report_error(self, "The search failed", exc))

    def _found_again(self, found: tuple) -> None:
        strips, notes = found
        self.session.replace_strips(strips)
        if notes:
            show_message(self, "No strip found", "\n".join(notes), icon=QMessageBox.Icon.Information)

    def _show_scan_hint(self, text: str) -> None:
        self.statusBar().showMessage(text)
        self.scan_hint.setText(text)
        self.scan_hint.setVisible(bool(text))
        if text and not text.startswith("Click"):
            # What came of it stays a while; what to click next stays until it is done.
            QTimer.singleShot(10_000, self, lambda t=text: self.scan_hint.text() == t and self.scan_hint.hide())

    def start_drawing(self) -> None:
        try:
            self.scan_view.start_drawing()
        except ValueError as exc:
            self.statusBar().showMessage(str(exc), 6000)
            return
        self.scan_view.setFocus()

    # -- calibration -----------------------------------------------------------------------------
    def open_calibration_assistant(self) -> CalibrationDialog:
        active = self.session.calibration_path or ""
        dialog = CalibrationDialog(self, start_folder=self.settings.last_folder(), active=active)
        if self.session.scan is not None:
            dialog.offer_scan(self.session.scan.info.path)
        dialog.calibration_saved.connect(self.use_calibration_file)
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        self.calibration_dialog = dialog
        dialog.destroyed.connect(lambda: setattr(self, "calibration_dialog", None))
        dialog.open()
        return dialog

    def ask_use_calibration(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Use a saved calibration", self.settings.last_folder(),
                                              "Calibrations (*.json);;All files (*)")
        if path:
            self.use_calibration_file(path)

    def use_calibration_file(self, path: str) -> bool:
        """Make the calibration in ``path`` active; a bad file gets a message naming it."""
        try:
            calibration = load_calibration(path)
        except (OSError, ValueError) as exc:
            report_error(self, "The calibration could not be used", exc)
            return False
        self.use_calibration(calibration, path)
        return True

    def use_calibration(self, calibration, path: str | None = None) -> None:
        self.session.set_calibration(calibration, path)
        self.settings.set_calibration_path(path)
        what = f"calibration {Path(path).name}" if path else "direct mode (no calibration)"
        self.statusBar().showMessage(f"Now using {what}", 8000)

    def _show_calibration(self) -> None:
        """Name the active calibration in the status bar (its file, date and range), or say there is none."""
        calibration, path = self.session.calibration, self.session.calibration_path
        if calibration is None:
            self.calibration_status.setText("<span style='color:#b71c1c'>No calibration: direct mode</span>")
            self.calibration_status.setToolTip("Densities are uncalibrated scanner readings. "
                                               "Calibration ▸ Calibration assistant… to make one.")
            return
        name = Path(path).name if path else "calibration (not saved)"
        made = str(calibration.created)[:10]
        low, high = calibration.valid_od
        self.calibration_status.setText(f"Calibration: {name}, made {made}, {low:.2f}–{high:.2f} OD")
        self.calibration_status.setToolTip(f"{path or ''}\nsha256 {calibration.sha256[:16]}…".strip())

    def _refresh_banner(self) -> None:
        lines = self.session.messages()
        self.banner.show_lines(lines, severe=bool(self.session.mapping_error or self.session.calibration is None))

    # -- saving ------------------------------------------------------------------------------------
    def ask_save_results(self) -> None:
        analysis = self.session.analysis()
        if analysis is None:
            show_message(self, "Nothing to save", "Open a scan with strips (and a usable calibration) first.",
                         icon=QMessageBox.Icon.Information)
            return
        default = str(Path(analysis.scan.path).with_suffix(".results.json"))
        path, _ = QFileDialog.getSaveFileName(self, "Save the results", default, "JSON (*.json)")
        if path:
            self.save_results(path)

    def save_results(self, path: str | os.PathLike[str]) -> Path | None:
        """Write every strip's results as the core's JSON record (with the caution)."""
        analysis = self.session.analysis()
        if analysis is None:
            return None
        path = Path(path)
        data = {**analysis.to_dict(), "caution": CAUTION}
        try:
            write_text(path, json.dumps(data, indent=1) + "\n")
        except OSError as exc:
            report_error(self, "The results were not saved", OSError(f"{path}: {exc.strerror or exc}"))
            return None
        self.statusBar().showMessage(f"Results saved to {path}", 8000)
        return path

    # -- the rest -----------------------------------------------------------------------------------
    def open_options(self) -> None:
        dialog = OptionsDialog(self.session.options, self.session.max_calibration_age_days, self)
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)

        def accepted() -> None:
            self.session.set_options(dialog.options())
            self.session.set_max_calibration_age(dialog.max_age_days())
            self.settings.set_increment(dialog.options().increment)
            self.settings.set_max_age_days(dialog.max_age_days())

        dialog.accepted.connect(accepted)
        dialog.open()

    def show_getting_started(self) -> QMessageBox:
        """The job in five steps, in the window's own words."""
        return show_message(
            self, "Getting started",
            "1. Calibrate: Calibration ▸ Calibration assistant… (Ctrl+K). Pick the scan of your reference step "
            "tablet and its certificate, locate and fit, then save and use the calibration. The status bar names "
            "the calibration in use.\n\n"
            "2. Read: File ▸ Open a scan… (Ctrl+O), or drop the file on the window. Strips are found by "
            "themselves; Strip ▸ Draw a strip by hand (Ctrl+D) outlines one they missed. Untick a step in the "
            "Steps tab (or double-click it on the scan) to leave it off the curve.\n\n"
            "3. Store: Archive ▸ Save strips to the archive… keeps each strip as a snapshot of its emulsion lot; "
            "Report of this scan's strips (PDF) then names the lot, the operator and the dates.\n\n"
            "4. Compare: Compare ▸ Compare two lots… sets a new lot against the current one, with replicate "
            "statistics and verdicts against tolerances.\n\n"
            "5. Processor QC: on the Processor QC page (Ctrl+5), New processor… starts a processor's log; add "
            "each day's strip as values read on a densitometer or off a strip of the open scan. The first five "
            "days set the operating levels; the status says WITHIN LIMITS, WARNING or ACT.\n\n"
            f"Caution: {CAUTION}",
            icon=QMessageBox.Icon.Information,
        )

    def shortcuts(self) -> list[tuple[str, str]]:
        """Every menu action with a shortcut: (keys, what it does), in menu order."""
        out: list[tuple[str, str]] = []

        def walk(menu) -> None:
            for action in menu.actions():
                if action.menu() is not None:
                    walk(action.menu())
                elif not action.shortcut().isEmpty():
                    keys = action.shortcut().toString(QKeySequence.SequenceFormat.NativeText)
                    out.append((keys, action.text().replace("&", "").rstrip("…").strip()))

        for top in self.menuBar().actions():
            if top.menu() is not None:
                walk(top.menu())
        return out

    def show_shortcuts(self) -> QMessageBox:
        """The keyboard shortcuts of the menus, and the keys that work on the curve and the scan."""
        lines = [f"{keys}\t{what}" for keys, what in self.shortcuts()]
        lines += ["", "On the curve: click a density level, then ↑/↓ nudge it by 0.01 (Shift: 0.05).",
                  "On the scan: double-click a step to leave it off the curve or take it back; "
                  "Esc or a right click cancels drawing a strip."]
        return show_message(self, "Keyboard shortcuts", "\n".join(lines), icon=QMessageBox.Icon.Information)

    def show_about(self) -> QMessageBox:
        where = log_file()
        return show_message(
            self, "About stripscan",
            f"stripscan {__version__}\nReads processed sensitometric film strips off a flatbed scanner: "
            f"calibrated optical densities per step, the characteristic curve and its figures.\n\n"
            f"Caution: {CAUTION}" + (f"\n\nLog file: {where}" if where else ""),
            icon=QMessageBox.Icon.Information,
        )

    @property
    def busy(self) -> bool:
        return self.runner.busy
