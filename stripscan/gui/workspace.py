"""The workspace: the scan page and the lot archive, comparison and processor QC panels in one window.

The main window's centre is a row of pages (tabs): the scan with its curve,
the lot archive (with its trends), the lot comparison and the processor QC.
Each panel is the standalone widget of its module, shown as it is, with its
own Qt-free model (:mod:`stripscan.gui.models`) and its own worker thread
for the archive; this module only points them at one archive file, runs
the long work that joins them in a worker thread too
(:class:`~stripscan.gui.tasks.TaskRunner`, progress in the status bar) and
offers the actions that join them: storing the open scan's strips,
comparing lots, and writing files of what a page shows.  Nothing here
touches the archive on the UI thread: a slow or locked archive (a shared
one on a server, say) never freezes the window.

Every number on the pages comes from the archive API, the core and
:mod:`stripscan.render`; nothing is recomputed here.

Length (about 670 lines, over the project's ~600): every action that joins two pages lands
here (store, compare, QC from the scan, the demo, opening a file or a server); the pages
themselves, their models and their views live in their own modules.  The next thing to move
out is the lot-comparison flow (``ask_compare_*``, ``_compare``), with its own tests.
"""

from __future__ import annotations

import logging
import os
import threading
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from PySide6.QtCore import QObject, Qt, Signal
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import (
    QDialog,
    QFileDialog,
    QFrame,
    QMainWindow,
    QMenu,
    QMenuBar,
    QMessageBox,
    QScrollArea,
    QSplitter,
    QTabWidget,
    QVBoxLayout,
    QWidget,
)

from stripscan.archive import FILE_SUFFIXES
from stripscan.gui import jobs
from stripscan.gui.models.archive_page import check_archive
from stripscan.gui.models.compare_page import ComparePage, read_compared_lots
from stripscan.gui.panels.archive_panel import ArchivePanel
from stripscan.gui.panels.compare_panel import ComparePanel
from stripscan.gui.errors import report_error, show_message
from stripscan.gui.exports import Exports
from stripscan.gui.dialogs.lot_choice import LotChoiceDialog
from stripscan.gui.dialogs.shared_archive import SharedArchiveDialog
from stripscan.gui.models.location import (
    ArchiveLocation,
    as_location,
    connection_lost,
    default_location,
    is_server,
    location_exists,
    location_words,
)
from stripscan.gui.notice import NoticeBar
from stripscan.gui.progress import TaskProgress
from stripscan.gui.panels.qc_panel import QcPanel
from stripscan.gui.dialogs.save_snapshot_dialog import SaveSnapshotDialog
from stripscan.gui.models.session import Session
from stripscan.gui.settings import AppSettings
from stripscan.gui.tasks import TaskRunner
from stripscan.gui.views.page_corner import PageCorner

__all__ = ["Workspace", "PAGES", "archive_setting", "set_archive_setting"]

log = logging.getLogger(__name__)

#: Page names, their tab titles and shortcuts (the trend is a view of the archive page).
PAGES: tuple[tuple[str, str, str], ...] = (
    ("scan", "Scan and curve", "Ctrl+1"),
    ("archive", "Lot archive", "Ctrl+2"),
    ("trend", "Lot archive ▸ Trend", "Ctrl+3"),
    ("comparison", "Lot comparison", "Ctrl+4"),
    ("qc", "Processor QC", "Ctrl+5"),
)
_ARCHIVE_KEY = "archive/path"
_OPERATOR_KEY = "archive/operator"
_ARCHIVE_FILTER = f"Lot archives ({' '.join('*' + s for s in FILE_SUFFIXES)});;All files (*)"
_NO_PROCESSOR = ("{where} Choose “New processor…” above to start a processor's QC log, then add each day's "
                 "strip: values read on a densitometer, or a strip of the scan open on the first page.")


_NO_COMPARISON = ("No comparison yet. Choose “Compare two lots…” above (or in the Compare menu) to set two "
                  "emulsion lots of the archive side by side, or compare a lot with the strips on the open scan.")


def archive_setting(settings: AppSettings) -> ArchiveLocation | None:
    """The archive chosen last, a file or a server (None: never chosen)."""
    return as_location(str(settings.qsettings.value(_ARCHIVE_KEY, "") or ""))


def set_archive_setting(settings: AppSettings, location: str | os.PathLike[str] | None) -> None:
    """Remember the archive for the next start (a server's without any password)."""
    settings.qsettings.setValue(_ARCHIVE_KEY, location_words(as_location(location)))


class Workspace(QObject):
    """The pages of the main window over one lot archive, and the actions joining them.

    Parameters
    ----------
    window : QMainWindow
        Owner of the dialogs and the status bar.
    session : Session
        The open scan.
    settings : AppSettings
        Where the chosen archive is remembered.
    scan_page : QWidget
        The scan, its curve, figures and steps: the first page.

    Signals
    -------
    archive_changed(str)
        The pages now show this archive, a file or a server without its password ("" for none).
    demo_ready(str)
        The demo archive is built and shown.
    comparison_shown()
        The comparison page shows a new comparison.

    Attributes
    ----------
    pages : QTabWidget
        The window's centre.
    archive_panel, compare_panel, qc_panel
        The panels, as their modules make them.
    runner : TaskRunner
        The workspace's long work (demo build, comparisons, files, checking an archive file).
    runners : tuple of TaskRunner
        It and the panels' own (their reading and storing).
    progress : TaskProgress
        Shows that work, for the status bar.
    exports : Exports
        Writes files of what the pages show.
    dialog : QDialog or None
        The form opened last (storing strips, picking lots), for a test or a script to fill in.
    """

    archive_changed = Signal(str)
    demo_ready = Signal(str)
    comparison_shown = Signal()

    def __init__(self, window: QMainWindow, session: Session, settings: AppSettings, scan_page: QWidget) -> None:
        super().__init__(window)
        self.window, self.session, self.settings = window, session, settings
        self.runner = TaskRunner(self)
        #: The archive the pages show: a file (Path) or a server's connection string (str).
        self.archive_path: ArchiveLocation | None = None
        self.building = False
        self.dialog: QDialog | None = None
        # The open scan's strips as last stored, the archive and the snapshot ids (see stored_snapshots).
        self._last_stored: tuple[Any, ArchiveLocation | None, list[int]] | None = None
        # Set on closing: the demo build stops between two scans rather than outlive the window.
        self._cancel = threading.Event()

        self.archive_panel = ArchivePanel(None)
        for split in self.archive_panel.findChildren(QSplitter, options=Qt.FindChildOption.FindDirectChildrenOnly):
            # Room for the snapshot list's last column (status) at 1440 px without scrolling sideways.
            split.setSizes([680, 760])
        self.compare_panel = ComparePanel(())
        self.qc_panel = QcPanel(None)
        # A day can be read off a strip of the open scan, with the calibration it was read with.
        self.qc_panel.scan_source = self._scan_for_qc
        session.events.connect_each(lambda *_: self.qc_panel.update_scan_strips(), "scan_loaded", "strips_changed",
                                    "results_changed", "calibration_changed")
        self.qc_panel.sigProcessorCreated.connect(self._processor_created)
        self.runners = (self.runner, self.archive_panel.runner, self.qc_panel.runner)
        session.events.connect_each(self.update_scan_actions, "scan_loaded", "strips_changed", "results_changed",
                                    "calibration_changed")
        qc_page = self.qc_panel.page_with_forms_beside()
        self.qc_side = self.qc_panel.side
        # The window shows the caution under every page; the status need not repeat it.
        self.qc_panel.caution_in_status = False
        self.page_widgets: dict[str, QWidget] = {"scan": scan_page, "archive": self.archive_panel,
                                                 "comparison": self.compare_panel, "qc": qc_page}
        self.pages = QTabWidget()
        self.pages.setDocumentMode(True)
        # A tab widget is as wide as its widest page: each page but the scan scrolls when the window is
        # narrower than it (1024 px), so the scan page keeps its room beside the strip list.
        self._tab_widgets: dict[str, QWidget] = {}
        for name, title, _ in PAGES:
            if name in self.page_widgets:
                tab = self.page_widgets[name]
                if name != "scan":
                    tab = QScrollArea()
                    tab.setWidgetResizable(True)
                    tab.setFrameShape(QFrame.Shape.NoFrame)
                    tab.setWidget(self.page_widgets[name])
                self._tab_widgets[name] = tab
                self.pages.addTab(tab, title)
        #: What was just stored or written, over the pages until the next (the window's centre holds both).
        self.notice = NoticeBar()
        self.widget = QWidget()
        centre = QVBoxLayout(self.widget)
        centre.setContentsMargins(0, 0, 0, 0)
        centre.setSpacing(2)
        centre.addWidget(self.pages, 1)
        centre.addWidget(self.notice)

        self.progress = TaskProgress(self.runner, 340)
        # A lost connection to a server archive, whichever page's work met it, is said once, over the pages.
        for runner in self.runners:
            runner.failed.connect(self._work_failed)
        self.exports = Exports(self)
        self._make_actions()
        self.update_scan_actions()
        self._corner()
        self.set_archive(archive_setting(settings) or default_location(), persist=False)

    # -- actions and menus ----------------------------------------------------------------
    def _act(self, text: str, slot: Callable[[], Any], tip: str = "", shortcut: str | None = None) -> QAction:
        action = QAction(text, self.window)
        action.setStatusTip(tip)
        action.setToolTip(tip or text)
        if shortcut:
            action.setShortcut(QKeySequence(shortcut))
        action.triggered.connect(lambda checked=False: slot())
        return action

    def _make_actions(self) -> None:
        act = self._act
        self.save_action = act("Save strips to the archive…", self.save_to_archive,
                               "Store every strip of the open scan in the lot archive, one snapshot each")
        self.open_archive_action = act("Open archive…", self.ask_open_archive, "Show another lot archive file")
        self.open_shared_action = act("Open shared archive…", self.ask_open_shared_archive,
                                      "Show a lot archive kept on a PostgreSQL server, shared by the group")
        self.new_archive_action = act("New archive…", self.ask_new_archive, "Make an empty lot archive file")
        self.snapshot_report_action = act("Report of the open snapshot (PDF)…", self.exports.ask_snapshot_report,
                                          "One page on the snapshot open in the lot archive")
        self.qc_report_action = act("QC report of the chosen month (PDF)…", self.exports.ask_qc_report,
                                    "Charts, days and corrective actions of the processor shown")
        self.compare_lots_action = act("Compare two lots…", self.ask_compare_lots,
                                       "Two emulsion lots of the archive side by side, with replicate statistics")
        self.compare_scan_action = act("Compare a lot with the strips on this scan…", self.ask_compare_with_scan,
                                       "A lot of the archive against the strips of the open scan")
        self.comparison_report_action = act("Report of this comparison (PDF)…", self.exports.ask_comparison_report,
                                            "One page per compared pair of sets")
        self.steps_csv_action = act("Steps of every strip (CSV)…", lambda: self.exports.ask_export("steps"),
                                    "Every step of every strip on the scan, at full precision")
        self.figures_csv_action = act("Figures of every strip (CSV)…", lambda: self.exports.ask_export("figures"),
                                      "The curve's figures, one row per strip")
        self.curve_png_action = act("Curve plot as a picture (PNG)…", lambda: self.exports.ask_export("png"),
                                    "The selected strip's characteristic curve, as the reports draw it")
        self.curve_svg_action = act("Curve plot as a drawing (SVG)…", lambda: self.exports.ask_export("svg"),
                                    "The selected strip's characteristic curve, with real lines and text")
        self.scan_report_action = act("Report of this scan's strips (PDF)…", lambda: self.exports.ask_export("pdf"),
                                      "One page per strip: curve, figures, steps, calibration")
        self.page_actions = {name: act(title, lambda n=name: self.show_page(n), f"Show the {title.lower()} page",
                                       shortcut) for name, title, shortcut in PAGES}
        # Short words on the buttons beside the tabs (the menus keep the whole words), so that the tabs
        # keep their names at 1024 px.
        for action, short in ((self.save_action, "Store in archive…"), (self.scan_report_action, "Report (PDF)…"),
                              (self.open_archive_action, "Open…"), (self.new_archive_action, "New…"),
                              (self.open_shared_action, "Shared…"),
                              (self.snapshot_report_action, "Snapshot report (PDF)…"),
                              (self.compare_lots_action, "Two lots…"),
                              (self.compare_scan_action, "A lot and this scan…"),
                              (self.comparison_report_action, "Report (PDF)…"),
                              (self.qc_report_action, "Month report (PDF)…")):
            action.setIconText(short)
        # What needs a scan with strips is greyed out until one is read.
        self._scan_actions = (self.save_action, self.scan_report_action, self.compare_scan_action,
                              *self.export_menu_actions())
        self.export_menu = QMenu("E&xport")
        for action in self.export_menu_actions():
            self.export_menu.addAction(action)
        # Greyed out while the demo archive is being built into the file they would use.
        self._archive_actions = (self.save_action, self.open_archive_action, self.new_archive_action,
                                 self.open_shared_action,
                                 self.snapshot_report_action, self.qc_report_action, self.compare_lots_action,
                                 self.compare_scan_action)

    def export_menu_actions(self) -> tuple[QAction, ...]:
        """The Export menu's actions (files of the open scan)."""
        return (self.steps_csv_action, self.figures_csv_action, self.curve_png_action, self.curve_svg_action)

    def update_scan_actions(self, *_: object) -> None:
        """Grey out what needs a scan with strips (storing, its report, exports) while there is none."""
        analysis = self.session.analysis()
        has_strips = analysis is not None and bool(analysis.strips)
        for action in self._scan_actions:
            action.setEnabled(has_strips and not (self.building and action in self._archive_actions))

    def fill_file_menu(self, menu: QMenu) -> None:
        """Add opening a shared archive and the exports of the scan page to the File menu."""
        menu.addAction(self.open_shared_action)
        menu.addSeparator()
        menu.addMenu(self.export_menu)
        menu.addAction(self.scan_report_action)

    def add_menus(self, bar: QMenuBar) -> None:
        """Add the Archive and Compare menus."""
        archive = bar.addMenu("&Archive")
        for action in (self.save_action, None, self.open_archive_action, self.open_shared_action,
                       self.new_archive_action, None,
                       self.snapshot_report_action, self.qc_report_action):
            archive.addSeparator() if action is None else archive.addAction(action)
        compare = bar.addMenu("C&ompare")
        for action in (self.compare_lots_action, self.compare_scan_action, None, self.comparison_report_action):
            compare.addSeparator() if action is None else compare.addAction(action)

    def fill_view_menu(self, menu: QMenu) -> None:
        """Put the pages, with their shortcuts, at the top of the View menu."""
        for action in self.page_actions.values():
            menu.addAction(action)
        menu.addSeparator()

    def _corner(self) -> None:
        # The scan's report and exports share one button: at 1024 px the tabs need the room.
        self.files_menu = QMenu("Files", self.window)
        self.files_menu.addAction(self.scan_report_action)
        self.files_menu.addSeparator()
        for action in self.export_menu_actions():
            self.files_menu.addAction(action)
        rows: dict[str, Sequence[QAction | QMenu]] = {
            "scan": (self.save_action, self.files_menu),
            "archive": (self.open_archive_action, self.open_shared_action, self.new_archive_action,
                        self.snapshot_report_action),
            "comparison": (self.compare_lots_action, self.compare_scan_action, self.comparison_report_action),
            "qc": (self.qc_report_action,),
        }
        self.corner = PageCorner(self.pages, {name: rows[name] for name in self.page_widgets},
                                 menu_tip="The report of the scan's strips (PDF), or its steps, figures or curve "
                                          "plot as files")
        self.corner_buttons = self.corner.buttons

    # -- pages ------------------------------------------------------------------------------------
    def show_page(self, name: str) -> None:
        """Bring a page to the front; "archive" opens its snapshot view, "trend" its trend."""
        panel = self.archive_panel
        if name == "trend":
            panel.tabs.setCurrentWidget(panel.trend)
            name = "archive"
        elif name == "archive":
            panel.tabs.setCurrentWidget(panel.view)
        self.pages.setCurrentWidget(self._tab_widgets[name])

    def current_page(self) -> str:
        widget = self.pages.currentWidget()
        return next(name for name, w in self._tab_widgets.items() if w is widget)

    def status(self, text: str, msecs: int = 8000) -> None:
        """A line in the status bar (``msecs`` 0: until the next)."""
        self.window.statusBar().showMessage(text, msecs)

    def tell(self, title: str, text: str) -> QMessageBox:
        """A message that does not block the window."""
        return show_message(self.window, title, text, icon=QMessageBox.Icon.Information)

    # -- the archive ---------------------------------------------------------------------------------
    def set_archive(self, path: str | os.PathLike[str] | None, *, persist: bool = True) -> None:
        """Point the archive, trend, comparison and QC pages at the archive ``path`` (a file or a server)."""
        self.archive_path = as_location(path)
        self.notice.hide()  # a line about the archive shown before
        self.archive_panel.set_archive(self.archive_path)
        self._point_qc()
        self.compare_panel.set_comparisons(())
        self.compare_panel.title.setText(_NO_COMPARISON)
        if persist:
            set_archive_setting(self.settings, self.archive_path)
        self.archive_changed.emit(location_words(self.archive_path))

    def _work_failed(self, key: str, error: BaseException) -> None:
        # Opening another archive says its own failure, and the pages still show the archive they showed.
        if key == "open-archive" or not connection_lost(error) or not is_server(self.archive_path):
            return
        self.status("The connection to the shared archive was lost", 0)
        self.notice.show_notice(
            f"The connection to the shared archive was lost: {error}. "
            "The pages keep what they showed and the forms what was typed; nothing half-written was stored. "
            "Try again once the server is back.", [("Try again", self.refresh_pages)], warning=True)

    def refresh_pages(self) -> None:
        """Read the archive again for the archive, trend and QC pages (worker threads)."""
        if self.notice.warning:
            self.notice.hide()
        self.archive_panel.refresh()
        self.qc_panel.refresh()

    @property
    def comparison(self) -> jobs.ComparisonResult | None:
        """The comparison the comparison page shows (None: none yet)."""
        return self.compare_panel.model.result

    def _point_qc(self) -> None:
        path = self.archive_path
        if location_exists(path):
            name = "The shared archive" if is_server(path) else Path(path).name  # type: ignore[arg-type]
            self.qc_panel.empty_words = _NO_PROCESSOR.format(where=f"{name} has no processor yet.")
            if self.qc_panel.archive_path == path:
                self.qc_panel.refresh()
            else:
                self.qc_panel.set_archive(path)
            return
        # QcPanel opens the file for writing; a missing file must not be made just by looking
        # (a new processor makes it, on purpose).
        self.qc_panel.archive_path = None
        self.qc_panel.new_archive_path = path
        where = f"No archive yet at {path}; it is made with the first processor or lot." if path is not None \
            else "No archive chosen."
        self.qc_panel.empty_words = _NO_PROCESSOR.format(where=where)
        self.qc_panel.refresh()

    def _scan_for_qc(self) -> tuple[Any, dict[str, Any] | None] | None:
        analysis = self.session.analysis()
        if analysis is None:
            return None
        return analysis, self.session.calibration.to_dict() if self.session.calibration is not None else None

    def _processor_created(self, name: str) -> None:
        if self.archive_path is not None and self.qc_panel.archive_path == self.archive_path:
            self.archive_panel.set_archive(self.archive_path)  # the file may have just been made
        self.status(f"Processor {name} is in {location_words(self.qc_panel.archive_path)}: add its days on the "
                    "processor QC page")

    def _archive_ready(self) -> bool:
        if self.building:
            self.tell("The demo archive is not ready yet",
                       "The demo archive is still being built; the progress is in the status bar.")
            return False
        if not location_exists(self.archive_path):
            self.tell("No archive", "There is no lot archive to read yet. Open one or make a new one "
                                     "(Archive menu), or store the strips of a scan first.")
            return False
        return True

    def ask_open_archive(self) -> None:
        start = str(self.archive_path.parent) if isinstance(self.archive_path, Path) else ""
        path, _ = QFileDialog.getOpenFileName(self.window, "Open a lot archive", start, _ARCHIVE_FILTER)
        if path:
            self.open_archive(path)

    def open_archive(self, path: str | os.PathLike[str]) -> bool:
        """Show the archive at ``path``, a file or a server (checked first, in a worker thread), and remember it.

        An unusable file or a server that cannot be reached is said in a
        message and changes nothing.
        """
        location = as_location(path)
        if location is None:
            return False
        return self._use_archive(location, create=False)

    def ask_open_shared_archive(self) -> SharedArchiveDialog:
        """The form naming a shared archive on a server (the form is :attr:`dialog` then); opened when chosen."""
        dialog = SharedArchiveDialog(self.settings.recent_servers(), parent=self.window)
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        dialog.chosen.connect(self.open_archive)
        self.dialog = dialog
        dialog.open()
        return dialog

    def _use_archive(self, path: ArchiveLocation, *, create: bool) -> bool:
        # Opened once first (worker thread) so a bad file is named now, not by each panel in turn.
        words = location_words(path)

        def usable(_path: ArchiveLocation) -> None:
            self.set_archive(path)
            if is_server(path):
                self.settings.add_recent_server(str(path))
            self.status(f"{'New lot' if create else 'Lot'} archive: {words}")

        self.status(f"{'Making' if create else 'Opening'} {words}…", 0)
        def unusable(error: BaseException) -> None:
            # Said in a box even for a server that cannot be reached: the pages still show the archive they
            # showed, so the line about a lost connection would not fit.
            title = f"The archive could not be {'made' if create else 'opened'}"
            log.error("%s: %s", title, error)
            self.status(f"{words} was not {'made' if create else 'opened'}")
            show_message(self.window, title, str(error) or type(error).__name__)

        self.runner.start(check_archive, path, create=create, key="open-archive", on_done=usable, on_error=unusable)
        return True

    def ask_new_archive(self) -> None:
        start = str(self.archive_path.parent / "archive.sqlite3") if isinstance(self.archive_path, Path) \
            else "archive.sqlite3"
        path, _ = QFileDialog.getSaveFileName(self.window, "Make a new lot archive", start, _ARCHIVE_FILTER,
                                              options=QFileDialog.Option.DontConfirmOverwrite)
        if path:
            self.new_archive(path)

    def new_archive(self, path: str | os.PathLike[str]) -> bool:
        """Make an empty archive at ``path`` (worker thread) and show it; an existing file is opened, never emptied."""
        path = Path(path)
        if not path.suffix:
            path = path.with_suffix(".sqlite3")
        if path.exists():
            self.tell("That archive exists", f"{path} exists already; it is opened as it is, nothing is removed.")
            return self.open_archive(path)
        return self._use_archive(path, create=True)

    def save_to_archive(self) -> SaveSnapshotDialog | None:
        """Open the form that stores the open scan's strips in the archive, one snapshot per strip."""
        if self.building:
            self._archive_ready()
            return None
        analysis = self.session.analysis()
        if analysis is None or not analysis.strips:
            self.tell("Nothing to store", "Open a scan with strips (and a usable calibration) first.")
            return None
        if self.archive_path is None:
            self.tell("No archive", "Choose the lot archive first (Archive menu).")
            return None
        dialog = self.archive_panel.save_dialog(analysis, self.session.calibration)
        # The operator is remembered from the last store: most days the same person reads the strips.
        last_operator = str(self.settings.qsettings.value(_OPERATOR_KEY, "") or "")
        if last_operator and not dialog.operator.currentText():
            dialog.operator.setCurrentText(last_operator)
        dialog.saved.connect(lambda lot, ids: self.settings.qsettings.setValue(_OPERATOR_KEY, dialog.form().operator))
        dialog.saved.connect(lambda lot, ids: self._stored(analysis, lot, ids))
        self.dialog = dialog
        return dialog

    def _stored(self, analysis: Any, lot: str, ids: list[int]) -> None:
        self._point_qc()  # the first snapshot may have made the file
        self._last_stored = (analysis.strips, self.archive_path, list(ids))
        n = len(ids)
        which = f"snapshot {ids[0]}" if n == 1 else f"snapshots {min(ids)}–{max(ids)}"
        text = f"Stored {n} snapshot{'s' if n != 1 else ''} of lot {lot} ({which}) in {location_words(self.archive_path)}"
        self.status(text)
        self.notice.show_notice(text, [("Report of these strips (PDF)…", lambda: self.exports.ask_export("pdf")),
                                       ("Show in the lot archive", lambda: self.show_page("archive"))])

    def stored_snapshots(self, analysis: Any) -> list[int]:
        """The snapshot ids of ``analysis``'s strips when they were stored as they are now (else empty).

        A strip changed since (a step excluded, an outline moved) is a new
        reading, not what the archive holds; so is another archive.
        """
        if self._last_stored is None:
            return []
        strips, path, ids = self._last_stored
        same = (path == self.archive_path and len(strips) == len(analysis.strips)
                and all(a is b for a, b in zip(strips, analysis.strips)))
        return ids if same else []

    # -- comparing lots -------------------------------------------------------------------------------
    def _with_lots(self, then: Callable[[list[str]], None]) -> None:
        """Read the archive's lots with stored strips (worker thread), then call ``then(lots)``."""
        self.runner.start(read_compared_lots, self.archive_path, key="lots", on_done=then,
                          on_error=lambda exc: report_error(self.window, "The archive's lots could not be read", exc))

    def _refused(self, lots: list[str], *, with_scan: bool) -> bool:
        refusal = ComparePage.refusal(lots, with_scan=with_scan)
        if refusal is not None:
            self.tell(*refusal)
        return refusal is not None

    def ask_compare_lots(self) -> None:
        """Offer the archive's lots to compare (read in a worker thread; the form is :attr:`dialog` then)."""
        if not self._archive_ready():
            return

        def choose(lots: list[str]) -> None:
            if not self._refused(lots, with_scan=False):
                self._open_choice(LotChoiceDialog(lots, parent=self.window), lambda two: self.compare_lots(*two))

        self._with_lots(choose)

    def ask_compare_with_scan(self) -> None:
        """Offer the archive's lots to compare with the open scan's strips (the form is :attr:`dialog` then)."""
        analysis = self.session.analysis()
        if analysis is None or not analysis.strips:
            self.tell("No strips to compare", "Open a scan with strips first.")
            return
        if not self._archive_ready():
            return

        def choose(lots: list[str]) -> None:
            if not self._refused(lots, with_scan=True):
                dialog = LotChoiceDialog(lots, scan_name=jobs.scan_set(analysis).name, parent=self.window)
                self._open_choice(dialog, lambda chosen: self.compare_with_scan(chosen[0]))

        self._with_lots(choose)

    def _open_choice(self, dialog: LotChoiceDialog, then: Callable[[list[str]], None]) -> LotChoiceDialog:
        dialog.setAttribute(Qt.WidgetAttribute.WA_DeleteOnClose)
        dialog.chosen.connect(then)
        self.dialog = dialog
        dialog.open()
        return dialog

    def compare_lots(self, lot_a: str, lot_b: str, *, show: bool = True) -> None:
        """Compare lot B with lot A (worker thread); the comparison page shows it (and comes to the front)."""
        self._compare([lot_a, lot_b], show=show)

    def compare_with_scan(self, lot: str) -> None:
        """Compare the open scan's strips (B) with a lot of the archive (A)."""
        analysis = self.session.analysis()
        if analysis is None or not analysis.strips:
            return
        calibration = self.session.calibration.to_dict() if self.session.calibration else {"mode": "direct"}
        self._compare([lot], jobs.scan_set(analysis), calibration)

    def _compare(self, lots: list[str], extra: Any = None, calibration: dict[str, Any] | None = None, *,
                 show: bool = True) -> None:
        if not self._archive_ready():
            return
        self.status(f"Comparing with lot {lots[0]}…")
        self.runner.start(jobs.compare_lots, self.archive_path, lots, extra, calibration, key="compare",
                          on_done=lambda result: self._compared(result, show),
                          on_error=lambda exc: report_error(self.window, "The sets could not be compared", exc))

    def _compared(self, result: jobs.ComparisonResult, show: bool) -> None:
        self.compare_panel.set_comparisons(result.comparisons, result)
        if show:
            self.show_page("comparison")
        self.status(self.compare_panel.model.done_words(), 12000)
        self.comparison_shown.emit()

    # -- the demo ---------------------------------------------------------------------------------------------
    def build_demo(self, folder: str | os.PathLike[str], files: Any) -> None:
        """Build the demo archive (lots, then a QC month) in ``folder`` in a worker thread, then show it.

        Until it is ready the archive's actions are greyed out, so nothing
        else writes the file being built; ``demo_ready`` follows.
        """
        self.building = True
        self._cancel.clear()
        for action in self._archive_actions:
            action.setEnabled(False)
        self.set_archive(jobs.demo_archive_path(folder), persist=False)
        self.archive_panel.where.setText(f"Building the demo archive in {folder}… The scan page can be used "
                                         "meanwhile; the progress is in the status bar.")
        self.qc_panel.status_label.setText("The demo's month of processor QC is added once the lots are stored.")
        self.compare_panel.title.setText("The two demo lots are compared once the demo archive is built.")
        self.runner.start(jobs.build_demo_workspace, folder, files, cancel=self._cancel, key="demo",
                          on_done=self._demo_built, on_error=self._demo_failed)

    def _demo_done(self) -> None:
        self.building = False
        for action in self._archive_actions:
            action.setEnabled(True)
        self.update_scan_actions()

    def _demo_built(self, path: Path) -> None:
        self._demo_done()
        self.set_archive(path)
        self.status(f"Demo archive ready: {path}", 12000)
        # A new user finds every page filled: the latest snapshot open, the two lots compared.
        self.archive_panel.open_latest()

        def compare(lots: list[str]) -> None:
            if len(lots) >= 2:
                self.compare_lots(*lots[:2], show=False)  # the person stays on the page they are reading
            self.demo_ready.emit(str(path))

        self._with_lots(compare)

    def _demo_failed(self, error: BaseException) -> None:
        self._demo_done()
        if isinstance(error, jobs.Cancelled):
            return
        self.set_archive(self.archive_path, persist=False)
        report_error(self.window, "The demo archive was not built", error)

    # -- busy state -------------------------------------------------------------------------------------------
    @property
    def busy(self) -> bool:
        """Whether any work of the pages is under way (the archive read or written, a file, the demo)."""
        return any(runner.busy for runner in self.runners)

    def shut_down(self) -> None:
        """Ask running work to stop (the window is closing)."""
        self._cancel.set()
