"""The workbench's session model: one scan, its strips, the active calibration.

Plain Python, no Qt: widgets subscribe to :attr:`Session.events` and write
back through the setters.  Every density and figure comes from the core
(:func:`stripscan.core.reading.strip_result`), from signal readings kept
per strip, so editing an outline re-reads one strip and moving a density
level only recomputes figures.

Results are recomputed lazily: a change marks every strip stale and a
strip is brought up to date when it is next read (:meth:`Session.result`,
:attr:`Session.strips`), so a density-level drag only pays for the strips
on screen.

The slow part, loading a scan and finding its strips, is the free function
:func:`load_and_find`, meant to run in a worker thread; its result is handed
to :meth:`Session.set_loaded` on the UI thread.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
import os
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from stripscan import __version__
from stripscan.core.calibration import Calibration, DirectMode
from stripscan.core.locate import LocateError, LocateOptions, locate_in_scan, with_step_count
from stripscan.core.reading import AnalysisOptions, CorrectedMap, density_map_for, read_found_strip, strip_result
from stripscan.core.scan_checks import check_exposure
from stripscan.core.records import Analysis, StepReading, StripGeometry, StripResult
from stripscan.core.sample import read_strip
from stripscan.core.scan import Scan, load_scan
from stripscan.gui.models.events import SessionEvents

__all__ = [
    "DEFAULT_MAX_AGE_DAYS",
    "MIN_LEVEL_GAP",
    "StripState",
    "LoadedScan",
    "Session",
    "load_and_find",
    "read_state",
    "density_image",
    "calibration_messages",
]

#: Days after which a calibration is called old (common practice: recalibrate monthly).
DEFAULT_MAX_AGE_DAYS = 30
#: Smallest net density gap kept between the two density levels, OD.
MIN_LEVEL_GAP = 0.05

Progress = Callable[[float, str], None]


def _no_progress(fraction: float, text: str) -> None:
    """Progress sink for callers that do not show any."""


@dataclass(frozen=True)
class StripState:
    """One strip as the session holds it.

    Attributes
    ----------
    geometry : StripGeometry
    readings : tuple of StepReading
        Signal readings of the steps, step 1 first (full resolution).
    base_fog_reading : StepReading or None
    notes : tuple of str
        What finding and reading the strip noticed.
    excluded : frozenset of int
        Steps the user excluded (dust, damage).
    result : StripResult or None
        Densities and figures; None while no density mapping can be used.
    """

    geometry: StripGeometry
    readings: tuple[StepReading, ...]
    base_fog_reading: StepReading | None
    notes: tuple[str, ...] = ()
    excluded: frozenset[int] = frozenset()
    result: StripResult | None = None


@dataclass(frozen=True, eq=False)
class LoadedScan:
    """A scan read and searched, ready for :meth:`Session.set_loaded`.

    Attributes
    ----------
    scan : Scan
    display : ndarray, float32, shape (rows, cols)
        Density image for the screen (open platen = 0).
    display_levels : tuple of float
        Black and white points of the display, OD.
    strips : tuple of StripState
        Without results (the mapping is the session's business).
    notes : tuple of str
        Why no strip was found, when none was.
    """

    scan: Scan
    display: np.ndarray
    display_levels: tuple[float, float]
    strips: tuple[StripState, ...]
    notes: tuple[str, ...] = ()


def density_image(signal: np.ndarray) -> tuple[np.ndarray, tuple[float, float]]:
    """Density (OD above the open platen) of every pixel, for display.

    Shown as density, the dense steps that are all but black in signal stay
    distinct on screen.

    Returns
    -------
    image : ndarray, float32
    levels : (float, float)
        0 and a top that keeps the densest film just short of black.
    """
    stride = max(1, int(math.sqrt(signal.size / 250_000)))
    sample = signal[::stride, ::stride]
    platen = float(np.percentile(sample, 99.5)) or 1.0
    image = np.empty(signal.shape, dtype=np.float32)
    np.divide(signal, np.float32(platen), out=image)
    np.clip(image, 1e-5, None, out=image)
    np.log10(image, out=image)
    np.negative(image, out=image)
    top = float(np.percentile(image[::stride, ::stride], 99.9))
    return image, (0.0, float(min(max(top * 1.02, 1.0), 5.0)))


def read_state(
    scan: Scan,
    geometry: StripGeometry,
    *,
    notes: Sequence[str] = (),
    excluded: frozenset[int] = frozenset(),
) -> StripState:
    """Read one strip's steps from the full-resolution scan."""
    # From the stored pixels, exactly as the core's pipeline reads them.
    readings, base_fog, read_notes = read_strip(scan, None, geometry)
    return StripState(geometry, tuple(readings), base_fog, tuple(notes) + tuple(read_notes), excluded)


def load_and_find(
    path: str | os.PathLike[str],
    *,
    n_steps: int | None = None,
    progress: Progress = _no_progress,
) -> LoadedScan:
    """Load a scan, find its strips and read their steps (slow: run off the UI thread).

    Parameters
    ----------
    path : path-like
    n_steps : int, optional
        Fixed step count; None to count.
    progress : callable(fraction, text)

    Raises
    ------
    ScanError
        When the file cannot be read; the message names the file.
    """
    progress(0.02, f"Reading {os.path.basename(os.fspath(path))}")
    scan = load_scan(path)
    progress(0.3, "Looking for strips")
    strips, notes = find_strips(scan, n_steps=n_steps, progress=progress)
    progress(0.92, "Preparing the display")
    display, levels = density_image(scan.signal)
    progress(1.0, "Done")
    return LoadedScan(scan, display, levels, tuple(strips), tuple(notes))


def find_strips(
    scan: Scan, *, n_steps: int | None = None, progress: Progress = _no_progress
) -> tuple[list[StripState], list[str]]:
    """Find and read every strip; a scan with none gives a note, not an error."""
    try:
        found = locate_in_scan(scan, LocateOptions(n_steps=n_steps))
    except LocateError as exc:
        return [], [f"{scan.info.path}: {exc}. Draw the strip by hand (Strip menu)."]
    strips = []
    for k, item in enumerate(found):
        progress(0.35 + 0.55 * k / len(found), f"Reading strip {k + 1} of {len(found)}")
        # The core's own reading of a found strip (it refuses to number a strip cut at its dense end).
        readings, base_fog, notes = read_found_strip(scan, item)
        strips.append(StripState(item.geometry, tuple(readings), base_fog, tuple(notes), frozenset()))
    return strips, []


def _created(calibration: Calibration) -> dt.datetime | None:
    try:
        when = dt.datetime.fromisoformat(calibration.created)
    except ValueError:
        return None
    return when if when.tzinfo else when.replace(tzinfo=dt.timezone.utc)


def calibration_messages(
    calibration: Calibration | None,
    scan: Scan | None,
    *,
    max_age_days: float = DEFAULT_MAX_AGE_DAYS,
    now: dt.datetime | None = None,
) -> list[str]:
    """What the user must know about the active calibration, for the banner.

    Parameters
    ----------
    calibration : Calibration or None
        None means direct mode (uncalibrated).
    scan : Scan or None
        The open scan, to compare bit depth and resolution.
    max_age_days : float
        Age after which the calibration is called old.
    now : datetime, optional
        For tests; default the current time.
    """
    if calibration is None:
        return [
            "No calibration is active: densities are uncalibrated scanner readings (direct mode). "
            "Use the calibration assistant with your reference step tablet."
        ]
    messages = []
    created = _created(calibration)
    now = now or dt.datetime.now(dt.timezone.utc)
    if created is None:
        messages.append(f"The calibration's date ({calibration.created!r}) cannot be read; check its age yourself.")
    else:
        age = (now - created).total_seconds() / 86400.0
        if age > max_age_days:
            messages.append(
                f"The calibration is {age:.0f} days old (limit {max_age_days:g} days): "
                "scan the reference tablet again."
            )
    if scan is not None:
        info = scan.info
        if info.bits != calibration.bits:
            messages.append(
                f"This scan is {info.bits}-bit but the calibration was made from a {calibration.bits}-bit scan."
            )
        if info.dpi and calibration.dpi and abs(info.dpi - calibration.dpi) > 0.5:
            messages.append(
                f"This scan is at {info.dpi:g} dpi but the calibration at {calibration.dpi:g} dpi."
            )
    return messages


class Session:
    """One scan under study, its strips, the active calibration and the figure settings.

    Parameters
    ----------
    options : AnalysisOptions
        Step increment, fixed step count and figure settings.
    max_calibration_age_days : float
        Age after which the banner calls the calibration old.

    Notes
    -----
    Strip positions in this API are 0-based; the core's ``StripResult.index``
    (shown to the user) is position + 1.
    """

    def __init__(
        self,
        *,
        options: AnalysisOptions = AnalysisOptions(),
        max_calibration_age_days: float = DEFAULT_MAX_AGE_DAYS,
    ) -> None:
        self.events = SessionEvents()
        self.options = options
        self.max_calibration_age_days = max_calibration_age_days
        self.scan: Scan | None = None
        self.display: np.ndarray | None = None
        self.display_levels: tuple[float, float] = (0.0, 3.0)
        self.search_notes: tuple[str, ...] = ()
        self.calibration: Calibration | None = None
        self.calibration_path: str | None = None
        self.mapping: Calibration | DirectMode | CorrectedMap | None = None
        self.mapping_error: str | None = None
        self.mapping_warnings: tuple[str, ...] = ()
        self._strips: list[StripState] = []
        self._stale: set[int] = set()
        self._selected: int | None = None
        self._overlay: set[int] = set()

    # -- reading the state ---------------------------------------------------
    @property
    def strips(self) -> tuple[StripState, ...]:
        """Every strip, results up to date."""
        for index in sorted(self._stale):
            self._fresh(index)
        return tuple(self._strips)

    @property
    def selected(self) -> int | None:
        """Position of the selected strip, or None."""
        return self._selected

    @property
    def overlay(self) -> frozenset[int]:
        """Strips drawn on the curve besides the selected one."""
        return frozenset(self._overlay)

    @property
    def levels(self) -> tuple[float, float]:
        """(low, high) net densities of the average gradient and latitude, OD."""
        f = self.options.figures
        return f.gradient_low, f.gradient_high

    def result(self, index: int | None = None) -> StripResult | None:
        """The core's result for a strip (default the selected one)."""
        index = self._selected if index is None else index
        if index is None or not 0 <= index < len(self._strips):
            return None
        self._fresh(index)
        return self._strips[index].result

    def messages(self) -> list[str]:
        """Banner lines: mapping errors first, then calibration cautions."""
        lines = [self.mapping_error] if self.mapping_error else []
        return lines + calibration_messages(
            self.calibration, self.scan, max_age_days=self.max_calibration_age_days
        )

    # -- whole-session changes ------------------------------------------------
    def set_loaded(self, loaded: LoadedScan) -> None:
        """Take a scan read by :func:`load_and_find`."""
        self.scan = loaded.scan
        self.display = loaded.display
        self.display_levels = loaded.display_levels
        self.search_notes = loaded.notes
        self._update_mapping()
        self._strips = list(loaded.strips)
        self._recompute_all()
        self._selected = 0 if self._strips else None
        self._overlay = set()
        self.events.scan_loaded.emit()
        self.events.calibration_changed.emit()
        self.events.strips_changed.emit()
        self.events.selection_changed.emit(self._selected)

    def set_calibration(self, calibration: Calibration | None, path: str | None = None) -> None:
        """Make ``calibration`` active (None: direct mode) and recompute every strip."""
        self.calibration = calibration
        self.calibration_path = None if calibration is None else path
        self._update_mapping()
        self._recompute_all()
        self.events.calibration_changed.emit()
        self.events.results_changed.emit()

    def set_options(self, options: AnalysisOptions) -> None:
        """New analysis settings (increment, figure targets); recompute every strip."""
        old_levels = self.levels
        self.options = options
        self._update_mapping()
        self._recompute_all()
        self.events.results_changed.emit()
        if self.levels != old_levels:
            self.events.levels_changed.emit(*self.levels)

    def set_max_calibration_age(self, days: float) -> None:
        """Change the age limit of the calibration (only the banner changes)."""
        if not days > 0:
            raise ValueError("the calibration age limit must be a positive number of days")
        self.max_calibration_age_days = float(days)
        self.events.calibration_changed.emit()

    def set_levels(self, low: float | None = None, high: float | None = None) -> None:
        """Move the net density levels; the figures of every strip follow.

        A level pushed past the other stops :data:`MIN_LEVEL_GAP` short of it,
        so dragging one level never swaps them.
        """
        old_low, old_high = self.levels
        new_low = old_low if low is None else float(low)
        new_high = old_high if high is None else float(high)
        if not (math.isfinite(new_low) and math.isfinite(new_high)):
            raise ValueError("density levels must be numbers")
        new_low = max(new_low, 0.01)
        if new_high - new_low < MIN_LEVEL_GAP:
            if low is not None and high is None:
                new_low = new_high - MIN_LEVEL_GAP
            else:
                new_high = new_low + MIN_LEVEL_GAP
        new_low, new_high = round(new_low, 6), round(new_high, 6)
        if (new_low, new_high) == (old_low, old_high):
            return
        figures = dataclasses.replace(self.options.figures, gradient_low=new_low, gradient_high=new_high)
        self.options = dataclasses.replace(self.options, figures=figures)
        self._recompute_all()
        self.events.levels_changed.emit(new_low, new_high)

    # -- selection and overlay ------------------------------------------------
    def select(self, index: int | None) -> None:
        """Select a strip by position (None for none)."""
        if index is not None and not 0 <= index < len(self._strips):
            raise IndexError(f"there is no strip {index + 1}")
        if index == self._selected:
            return
        self._selected = index
        self.events.selection_changed.emit(index)

    def select_next(self, step: int = 1) -> None:
        """Select the next (``step`` = 1) or previous (-1) strip, wrapping round."""
        if not self._strips:
            return
        current = -1 if self._selected is None and step > 0 else (self._selected or 0)
        self.select((current + step) % len(self._strips))

    def set_overlay(self, index: int, shown: bool) -> None:
        """Draw strip ``index`` on the curve together with the selected one."""
        self._check(index)
        changed = (index in self._overlay) != shown
        (self._overlay.add if shown else self._overlay.discard)(index)
        if changed:
            self.events.overlay_changed.emit()

    # -- editing one strip ------------------------------------------------------
    def set_geometry(self, index: int, geometry: StripGeometry) -> None:
        """Replace a strip's outline; its steps are read again."""
        self._check(index)
        old = self._strips[index]
        state = read_state(self._require_scan(), geometry, excluded=old.excluded)
        self._store(index, self._computed(index, state))
        self.events.strip_changed.emit(index)

    def set_state(self, index: int, state: StripState) -> None:
        """Take a strip read elsewhere (by :func:`read_state` in a worker thread) for strip ``index``."""
        self._check(index)
        self._store(index, self._computed(index, dataclasses.replace(state, excluded=self._strips[index].excluded)))
        self.events.strip_changed.emit(index)

    def set_step_count(self, index: int, n_steps: int) -> None:
        """Divide a strip's band into ``n_steps`` equal steps (exclusions beyond it are dropped)."""
        self._check(index)
        state = self._strips[index]
        if n_steps == state.geometry.n_steps:
            return
        geometry = with_step_count(state.geometry, n_steps)
        kept = frozenset(s for s in state.excluded if s <= n_steps)
        self._strips[index] = dataclasses.replace(state, excluded=kept)
        self.set_geometry(index, geometry)

    def set_excluded(self, index: int, step: int, excluded: bool = True) -> None:
        """Exclude a step from the curve (dust, damage) or use it again."""
        self._check(index)
        state = self._strips[index]
        if not 1 <= step <= state.geometry.n_steps:
            raise ValueError(f"strip {index + 1} has no step {step}")
        steps = set(state.excluded)
        (steps.add if excluded else steps.discard)(step)
        if frozenset(steps) == state.excluded:
            return
        self._store(index, self._computed(index, dataclasses.replace(state, excluded=frozenset(steps))))
        self.events.strip_changed.emit(index)

    def toggle_excluded(self, index: int, step: int) -> None:
        """Exclude a used step, or use an excluded one."""
        self._check(index)
        self.set_excluded(index, step, step not in self._strips[index].excluded)

    def add_strip(self, geometry: StripGeometry) -> int:
        """Add a strip (drawn by hand); it becomes the selected one."""
        scan = self._require_scan()
        index = len(self._strips)
        self._strips.append(self._computed(index, read_state(scan, geometry)))
        self._stale.discard(index)
        self.events.strips_changed.emit()
        self._selected = None
        self.select(index)
        return index

    def remove_strip(self, index: int) -> None:
        """Remove a strip; those after it move up one place."""
        self._check(index)
        del self._strips[index]
        self._overlay = {k - (k > index) for k in self._overlay if k != index}
        self._recompute_all()  # results carry their 1-based number
        if self._selected is not None and self._selected >= len(self._strips):
            self._selected = len(self._strips) - 1 if self._strips else None
        self.events.strips_changed.emit()
        self.events.selection_changed.emit(self._selected)

    def replace_strips(self, strips: Sequence[StripState]) -> None:
        """Take newly found strips for the open scan (e.g. after a new step count)."""
        self._require_scan()
        self._strips = list(strips)
        self._recompute_all()
        self._overlay = set()
        self._selected = 0 if self._strips else None
        self.events.strips_changed.emit()
        self.events.selection_changed.emit(self._selected)

    # -- the record ----------------------------------------------------------------
    def analysis(self) -> Analysis | None:
        """The open scan's results as the core's :class:`Analysis` record."""
        if self.scan is None or self.mapping is None:
            return None
        results = [s.result for s in self.strips if s.result is not None]
        warnings = list(self.mapping_warnings)
        for result in results:
            warnings += [f"strip {result.index}: {w}" for w in result.warnings]
        return Analysis(
            scan=self.scan.info,
            calibration=self.mapping.summary(),
            strips=tuple(results),
            warnings=tuple(warnings),
            program_version=__version__,
            settings=self.options.to_dict(),
        )

    # -- internals ---------------------------------------------------------------------
    def _check(self, index: int) -> None:
        if not 0 <= index < len(self._strips):
            raise IndexError(f"there is no strip {index + 1}")

    def _require_scan(self) -> Scan:
        if self.scan is None:
            raise ValueError("open a scan first")
        return self.scan

    def _update_mapping(self) -> None:
        """Choose the signal-to-density map for the open scan, by the core's own rules."""
        self.mapping, self.mapping_error, self.mapping_warnings = None, None, ()
        if self.scan is None:
            return
        try:
            # The core's own rules: direct mode, or the calibration with this
            # scan's stray light; the same checks and warnings as the command line.
            check_exposure(self.scan)
            mapping, warnings = density_map_for(self.scan, self.calibration, self.options)
            self.mapping = mapping
            self.mapping_warnings = tuple(warnings)
        except ValueError as exc:
            self.mapping_error = str(exc)

    def _computed(self, index: int, state: StripState) -> StripState:
        if self.mapping is None or self.scan is None:
            return dataclasses.replace(state, result=None)
        result = strip_result(
            index + 1,
            state.geometry,
            state.readings,
            state.base_fog_reading,
            self.mapping,
            self.options,
            pixel_mm=self.scan.info.pixel_mm,
            excluded=sorted(state.excluded),
            notes=state.notes,
        )
        return dataclasses.replace(state, result=result)

    def _recompute_all(self) -> None:
        """Mark every result out of date; each is recomputed when next read."""
        self._stale = set(range(len(self._strips)))

    def _fresh(self, index: int) -> None:
        if index in self._stale:
            self._stale.discard(index)
            self._strips[index] = self._computed(index, self._strips[index])

    def _store(self, index: int, state: StripState) -> None:
        self._strips[index] = state
        self._stale.discard(index)
