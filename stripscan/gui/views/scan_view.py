"""The scan as density, with every strip's outline, steps and base+fog area.

The selected strip carries a rectangle with handles: drag it to move,
pull the handles to stretch or turn it, and the steps are read again.  A
double click on a step excludes it (or uses it again); three clicks draw a
strip by hand where the search found none.
"""

from __future__ import annotations

import logging
from typing import Sequence

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QPointF, Qt, QTimer, Signal
from PySide6.QtGui import QAction, QFont
from PySide6.QtWidgets import QGridLayout, QLabel, QMenu, QVBoxLayout, QWidget

from stripscan.core.locate import geometry_from_outline
from stripscan.core.records import StripGeometry
from stripscan.gui.views.outline import frame_of, geometry_from_corners, hand_drawn_corners, step_at
from stripscan.gui.models.session import Session, StripState, read_state
from stripscan.gui.style import FILM_LUT, LOOKS, SCAN_BACKGROUND, look_pen, strip_colour, swatch
from stripscan.gui.tasks import TaskRunner

__all__ = ["ScanView"]

log = logging.getLogger(__name__)

# Coalesce outline drags: re-read the strip at most this often, ms.
_EDIT_INTERVAL_MS = 60


def _polygons_xy(boxes: Sequence[Sequence[tuple[float, float]]], cross: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Closed (row, col) polygons as one NaN-separated (x, y) path."""
    xs: list[float] = []
    ys: list[float] = []
    for box in boxes:
        ring = list(box) + [box[0]]
        if cross and len(box) == 4:
            ring += [box[2], box[3], box[1]]
        ys += [p[0] for p in ring] + [np.nan]
        xs += [p[1] for p in ring] + [np.nan]
    return np.asarray(xs, dtype=np.float64), np.asarray(ys, dtype=np.float64)


def _read_in_worker(scan, geometry: StripGeometry, *, progress) -> StripState:
    return read_state(scan, geometry)


def step_look(state: StripState, step: int) -> str:
    """Which legend kind a step is drawn as."""
    if step in state.excluded:
        return "excluded"
    if state.result is None:
        return "unread"
    return "used" if state.result.steps[step - 1].in_range else "outside"


class _StripOverlay:
    """The drawn items of one strip."""

    def __init__(self, plot: pg.PlotItem) -> None:
        self.plot = plot
        self.outline = pg.PlotCurveItem(pen=look_pen(LOOKS["outline"]))
        self.boxes = {
            name: pg.PlotCurveItem(pen=look_pen(LOOKS[name]), connect="finite")
            for name in ("used", "outside", "excluded", "unread")
        }
        self.base_fog = pg.PlotCurveItem(pen=look_pen(LOOKS["base_fog"]), connect="finite")
        self.title = pg.TextItem(anchor=(0.5, 0.5))
        self.labels: list[pg.TextItem] = []
        self.steps_by_look: dict[str, list[int]] = {}
        for item in (self.outline, *self.boxes.values(), self.base_fog, self.title):
            plot.addItem(item)

    def update(self, index: int, state: StripState, selected: bool) -> None:
        g = state.geometry
        xs, ys = _polygons_xy([g.outline_rc()])
        self.outline.setData(xs, ys)
        self.outline.setPen(pg.mkPen("#ffd54f" if selected else LOOKS["outline"].colour, width=2 if selected else 1))
        self.steps_by_look = {name: [] for name in self.boxes}
        for step in range(1, g.n_steps + 1):
            self.steps_by_look[step_look(state, step)].append(step)
        for name, item in self.boxes.items():
            boxes = [g.step_box_rc(s) for s in self.steps_by_look[name]]
            item.setData(*_polygons_xy(boxes, cross=LOOKS[name].cross))
        bf = g.base_fog_box_rc()
        self.base_fog.setData(*_polygons_xy([bf] if bf else []))
        self._update_labels(g)
        # The strip's number sits just beyond its step 1.
        r, c = g.point_rc(-0.6 * g.step_pitch_px, 0.5 * g.band_width_px)
        self.title.setHtml(f'<span style="color:#ffffff;font-weight:700">&nbsp;{index + 1}&nbsp;</span>')
        self.title.fill = pg.mkBrush(strip_colour(index))
        self.title.setPos(c, r)

    def _update_labels(self, g: StripGeometry) -> None:
        while len(self.labels) < g.n_steps:
            # A dark backing keeps the numbers readable on clear and dense steps alike.
            label = pg.TextItem(color="#ffffff", anchor=(0.5, 0.5), fill=pg.mkBrush(0, 0, 0, 140))
            label.setFont(QFont("", 7))
            self.plot.addItem(label)
            self.labels.append(label)
        for k, label in enumerate(self.labels):
            if k < g.n_steps:
                r, c = g.step_center_rc(k + 1)
                label.setText(str(k + 1))
                label.setPos(c, r)
                label.show()
            else:
                label.hide()

    @property
    def n_boxes(self) -> int:
        return sum(len(v) for v in self.steps_by_look.values())

    def remove(self) -> None:
        for item in (self.outline, *self.boxes.values(), self.base_fog, self.title, *self.labels):
            self.plot.removeItem(item)


class _Legend(QWidget):
    """Swatches that explain the overlays, beside (not over) the scan."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        layout = QGridLayout(self)
        layout.setContentsMargins(6, 3, 6, 3)
        layout.setHorizontalSpacing(6)
        layout.setVerticalSpacing(2)
        for k, name in enumerate(("used", "outside", "excluded", "base_fog")):
            icon = QLabel()
            icon.setPixmap(swatch(LOOKS[name]))
            text = QLabel(LOOKS[name].text)
            text.setWordWrap(True)
            row, col = divmod(k, 2)
            layout.addWidget(icon, row, 2 * col)
            layout.addWidget(text, row, 2 * col + 1)
        layout.setColumnStretch(1, 1)
        layout.setColumnStretch(3, 1)


class ScanView(QWidget):
    """Scan image, strip overlays, outline editing and drawing by hand.

    Parameters
    ----------
    session : Session

    Signals
    -------
    hint(str)
        A line for the status bar (what a click will do now).
    """

    hint = Signal(str)

    def __init__(self, session: Session, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.session = session
        self.plot_widget = pg.PlotWidget(background=SCAN_BACKGROUND)
        self.plot = self.plot_widget.getPlotItem()
        self.plot.hideAxis("left")
        self.plot.hideAxis("bottom")
        self.plot.setMenuEnabled(False)
        self.plot.hideButtons()
        self.view = self.plot.getViewBox()
        self.view.setAspectLocked(True)
        self.view.invertY(True)
        self.image = pg.ImageItem(autoDownsample=True)
        # Dense film dark, clear film light: the scan looks like the film on a light box.
        self.image.setLookupTable(FILM_LUT)
        self.plot.addItem(self.image)
        self.overlays: list[_StripOverlay] = []
        self.roi: pg.ROI | None = None
        self._roi_index: int | None = None
        self._roi_flipped = False
        self._draw_points: list[tuple[float, float]] | None = None
        self._draw_marks = pg.PlotDataItem(pen=pg.mkPen("#ffd54f", width=2, style=Qt.PenStyle.DashLine),
                                           symbol="o", symbolBrush="#ffd54f", symbolSize=8)
        self.plot.addItem(self._draw_marks)
        # Outline edits re-read the strip in a worker: at 600 dpi one read takes ~0.15 s.
        self.runner = TaskRunner(self)
        self._dragging = False
        self._read_again = False
        self._edit_timer = QTimer(self, singleShot=True, interval=_EDIT_INTERVAL_MS)
        self._edit_timer.timeout.connect(self._apply_roi)
        self.plot_widget.scene().sigMouseClicked.connect(self._clicked)

        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.setSpacing(0)
        layout.addWidget(self.plot_widget, 1)
        self.legend = _Legend(self)
        layout.addWidget(self.legend)

        ev = session.events
        ev.scan_loaded.connect(self._scan_loaded)
        ev.strips_changed.connect(self._rebuild)
        ev.results_changed.connect(self._rebuild)
        ev.strip_changed.connect(self._strip_changed)
        ev.selection_changed.connect(self._selection_changed)

    # -- what tests and the window ask -----------------------------------------
    def overlay_count(self) -> int:
        return len(self.overlays)

    def step_box_count(self, index: int) -> int:
        return self.overlays[index].n_boxes

    def steps_drawn_as(self, index: int, look: str) -> list[int]:
        """Steps of strip ``index`` drawn with legend kind ``look``."""
        return list(self.overlays[index].steps_by_look.get(look, []))

    @property
    def drawing(self) -> bool:
        return self._draw_points is not None

    # -- zoom ---------------------------------------------------------------------
    def zoom(self, factor: float) -> None:
        """Zoom in (factor > 1) or out about the view's centre."""
        self.view.scaleBy((1.0 / factor, 1.0 / factor))

    def fit(self) -> None:
        """Show the whole scan."""
        if self.session.display is not None:
            self.view.autoRange(items=[self.image], padding=0.02)

    # -- model → view ----------------------------------------------------------------
    def _scan_loaded(self) -> None:
        display = self.session.display
        if display is None:
            self.image.clear()
            return
        self.image.setImage(display, levels=self.session.display_levels, autoLevels=False)
        # The core puts pixel (r, c)'s centre at (r, c); pyqtgraph its corner.
        self.image.setRect(-0.5, -0.5, display.shape[1], display.shape[0])
        self.cancel_drawing()
        self.fit()

    def _rebuild(self, *_: object) -> None:
        for overlay in self.overlays:
            overlay.remove()
        self.overlays = []
        for k, state in enumerate(self.session.strips):
            overlay = _StripOverlay(self.plot)
            overlay.update(k, state, k == self.session.selected)
            self.overlays.append(overlay)
        self._place_roi()

    def _strip_changed(self, index: int) -> None:
        if 0 <= index < len(self.overlays):
            self.overlays[index].update(index, self.session.strips[index], index == self.session.selected)
        # Not while the user is still moving it: a read that lags behind would pull it back.
        if index == self._roi_index and not (self._edit_timer.isActive() or self._dragging or self.runner.busy):
            self._sync_roi()

    def _selection_changed(self, index: int | None) -> None:
        for k, overlay in enumerate(self.overlays):
            overlay.update(k, self.session.strips[k], k == index)
        self._place_roi()

    # -- the editable rectangle ------------------------------------------------------------
    def _place_roi(self) -> None:
        if self.roi is not None:
            self._apply_pending()
            self.plot.removeItem(self.roi)
            # Qt deletes the outline and its handles; left to the garbage collector, several
            # outlines freed in one pass crash (a handle deletes an object already gone).
            self.roi.deleteLater()
            self.roi, self._roi_index = None, None
        index = self.session.selected
        if index is None or index >= len(self.session.strips):
            return
        frame = frame_of(self.session.strips[index].geometry)
        roi = pg.ROI(
            frame.pos_xy, frame.size, angle=frame.angle_deg,
            pen=pg.mkPen("#ffd54f", width=2), hoverPen=pg.mkPen("#fff59d", width=3),
            handlePen=pg.mkPen("#ffd54f"), handleHoverPen=pg.mkPen("#ffffff"),
            movable=True, rotatable=True, resizable=True, removable=False,
        )
        # Ends stretch the length, sides the width; corner handles turn it about its centre.
        roi.addScaleHandle([1.0, 0.5], [0.0, 0.5])
        roi.addScaleHandle([0.0, 0.5], [1.0, 0.5])
        roi.addScaleHandle([0.5, 1.0], [0.5, 0.0])
        roi.addScaleHandle([0.5, 0.0], [0.5, 1.0])
        roi.addRotateHandle([1.0, 1.0], [0.5, 0.5])
        roi.addRotateHandle([0.0, 0.0], [0.5, 0.5])
        roi.setToolTip("Drag to move the strip's outline; the handles stretch and turn it.\n"
                       "Double-click a step to exclude it or use it again.")
        roi.sigRegionChanged.connect(self._roi_moving)
        roi.sigRegionChangeFinished.connect(self._roi_finished)
        self.plot.addItem(roi)
        self.roi, self._roi_index, self._roi_flipped = roi, index, frame.flipped

    def _sync_roi(self) -> None:
        """Put the rectangle where the model's strip is, without echoing back."""
        if self.roi is None or self._roi_index is None:
            return
        frame = frame_of(self.session.strips[self._roi_index].geometry)
        self.roi.blockSignals(True)
        try:
            self.roi.setState({"pos": frame.pos_xy, "size": frame.size, "angle": frame.angle_deg})
        finally:
            self.roi.blockSignals(False)
        self._roi_flipped = frame.flipped

    def roi_corners_xy(self) -> list[tuple[float, float]]:
        """The rectangle's corners in view coordinates, in its own order."""
        assert self.roi is not None
        w, h = self.roi.size()
        points = [self.roi.mapToParent(QPointF(x, y)) for x, y in ((0, 0), (w, 0), (w, h), (0, h))]
        return [(p.x(), p.y()) for p in points]

    def _roi_moving(self) -> None:
        self._dragging = True
        if not self._edit_timer.isActive():
            self._edit_timer.start()

    def _roi_finished(self) -> None:
        self._dragging = False
        self._edit_timer.stop()
        self._apply_roi()

    def _apply_pending(self) -> None:
        if self._edit_timer.isActive():
            self._edit_timer.stop()
            self._apply_roi()

    def _apply_roi(self) -> None:
        if self.roi is None or self._roi_index is None:
            return
        if self.runner.busy:
            self._read_again = True  # one read at a time; the latest outline follows
            return
        index = self._roi_index
        old = self.session.strips[index].geometry
        try:
            geometry = geometry_from_corners(old, self.roi_corners_xy(), flipped=self._roi_flipped)
        except ValueError as exc:
            self.hint.emit(str(exc))
            return
        scan = self.session.scan

        def done(state: StripState) -> None:
            # The scan or the strip list may have changed while it was read.
            if self.session.scan is scan and index < len(self.session.strips):
                self.session.set_state(index, state)
            follow()

        def failed(error: BaseException) -> None:
            self.hint.emit(f"The strip could not be read: {error}")
            follow()

        def follow() -> None:
            if self._read_again:
                self._read_again = False
                self._apply_roi()

        self.runner.start(_read_in_worker, scan, geometry, key="outline", on_done=done, on_error=failed)

    # -- clicks -------------------------------------------------------------------------
    def _clicked(self, event) -> None:  # pyqtgraph's MouseClickEvent
        point = self.view.mapSceneToView(event.scenePos())
        rc = (point.y(), point.x())
        if self._draw_points is not None:
            if event.button() == Qt.MouseButton.LeftButton:
                event.accept()
                self._add_draw_point(rc)
            elif event.button() == Qt.MouseButton.RightButton:
                event.accept()
                self.cancel_drawing()
            return
        if event.button() == Qt.MouseButton.RightButton:
            event.accept()
            self._context_menu(rc, event.screenPos())
            return
        if event.button() != Qt.MouseButton.LeftButton:
            return
        hit = self.strip_at(rc)
        if event.double() and hit is not None:
            index, step = hit
            if step is not None:
                self.session.toggle_excluded(index, step)
        elif hit is not None:
            self.session.select(hit[0])

    def strip_at(self, rc: tuple[float, float]) -> tuple[int, int | None] | None:
        """(strip, step or None) under an image point; the selected strip wins."""
        order = list(range(len(self.session.strips)))
        if self.session.selected is not None:
            order.remove(self.session.selected)
            order.insert(0, self.session.selected)
        for index in order:
            g = self.session.strips[index].geometry
            step = step_at(g, rc)
            if step is not None:
                return index, step
        return None

    def _context_menu(self, rc: tuple[float, float], screen_pos: QPointF) -> None:
        hit = self.strip_at(rc)
        if hit is None or hit[1] is None:
            return
        index, step = hit
        excluded = step in self.session.strips[index].excluded
        menu = QMenu(self)
        act = QAction(f"Use step {step} again" if excluded else f"Exclude step {step} (dust, damage)", menu)
        act.triggered.connect(lambda: self.session.set_excluded(index, step, not excluded))
        menu.addAction(act)
        if index != self.session.selected:
            pick = QAction(f"Select strip {index + 1}", menu)
            pick.triggered.connect(lambda: self.session.select(index))
            menu.addAction(pick)
        menu.popup(screen_pos.toPoint())

    # -- drawing by hand --------------------------------------------------------------------
    def start_drawing(self) -> None:
        """Wait for three clicks that outline a strip's step band."""
        if self.session.scan is None:
            raise ValueError("open a scan first, then draw the strip on it")
        self._draw_points = []
        self._draw_marks.setData([], [])
        self.plot_widget.setCursor(Qt.CursorShape.CrossCursor)
        self.hint.emit("Click the outer corner of step 1 (the lightest step).  Right-click or Esc cancels.")

    def cancel_drawing(self) -> None:
        if self._draw_points is None:
            return
        self._draw_points = None
        self._draw_marks.setData([], [])
        self.plot_widget.unsetCursor()
        self.hint.emit("")

    def keyPressEvent(self, event) -> None:  # noqa: N802 (Qt's name)
        if event.key() == Qt.Key.Key_Escape and self.drawing:
            self.cancel_drawing()
            return
        super().keyPressEvent(event)

    def _add_draw_point(self, rc: tuple[float, float]) -> None:
        assert self._draw_points is not None
        self._draw_points.append(rc)
        pts = self._draw_points
        self._draw_marks.setData([p[1] for p in pts], [p[0] for p in pts])
        if len(pts) == 1:
            self.hint.emit("Click the far end of the step band, on the same edge (after the densest step).")
        elif len(pts) == 2:
            self.hint.emit("Click the band's other edge, on the side of the unexposed film.")
        else:
            points = list(pts)
            self.cancel_drawing()
            self.add_drawn_strip(points)

    def add_drawn_strip(self, points_rc: Sequence[tuple[float, float]], n_steps: int | None = None) -> int | None:
        """Add the strip outlined by three points (see :func:`hand_drawn_corners`)."""
        try:
            corners = hand_drawn_corners(points_rc)
        except ValueError as exc:
            self.hint.emit(f"Not drawn: {exc}.")
            return None
        n = n_steps or self.session.options.n_steps or 21
        width = float(np.hypot(*(corners[3] - corners[0])))
        # Unexposed film is sampled beside the band's second edge, half a band wide.
        geometry = geometry_from_outline(corners, n, base_fog_side=0.5 * width)
        index = self.session.add_strip(geometry)
        self.hint.emit(f"Strip {index + 1} drawn with {n} steps; set the step count if it has another.")
        return index
