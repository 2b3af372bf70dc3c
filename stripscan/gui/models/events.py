"""Plain callback events for the session model (no Qt)."""

from __future__ import annotations

import logging
from typing import Any, Callable

__all__ = ["Event", "SessionEvents"]

log = logging.getLogger(__name__)

Callback = Callable[..., Any]


class Event:
    """A named list of callbacks, called in order with the event's arguments.

    Parameters
    ----------
    name : str
        For log messages.
    """

    def __init__(self, name: str) -> None:
        self.name = name
        self._callbacks: list[Callback] = []

    def connect(self, callback: Callback) -> Callback:
        """Call ``callback(*args)`` on every :meth:`emit`; returns it (usable as a decorator)."""
        if callback not in self._callbacks:
            self._callbacks.append(callback)
        return callback

    def disconnect(self, callback: Callback) -> None:
        """Stop calling ``callback``; unknown callbacks are ignored."""
        if callback in self._callbacks:
            self._callbacks.remove(callback)

    def emit(self, *args: Any) -> None:
        """Call every callback.

        A failing callback does not stop the others (one broken view must not
        leave the rest showing stale numbers); the first error is raised once
        all have run, so it still reaches the user.
        """
        first: BaseException | None = None
        for callback in list(self._callbacks):
            try:
                callback(*args)
            except Exception as exc:
                log.exception("a listener of the %s event failed", self.name)
                first = first or exc
        if first is not None:
            raise first

    def __len__(self) -> int:
        return len(self._callbacks)


class SessionEvents:
    """The events a :class:`~stripscan.gui.models.session.Session` emits.

    Attributes
    ----------
    scan_loaded : Event
        A new scan (and its display image) is in place; no arguments.
    strips_changed : Event
        Strips were found, added, removed or renumbered; no arguments.
    strip_changed : Event
        One strip's outline, step count or exclusions changed; ``(index)``.
    results_changed : Event
        Every strip's densities were recomputed (calibration or settings
        changed, outlines unchanged); no arguments.
    levels_changed : Event
        The two net density levels moved and the figures follow; ``(low, high)``.
    selection_changed : Event
        ``(index or None)``.
    overlay_changed : Event
        The set of strips drawn together on the curve changed; no arguments.
    calibration_changed : Event
        The active calibration (or the lack of one) changed; no arguments.
    """

    def __init__(self) -> None:
        for name in (
            "scan_loaded",
            "strips_changed",
            "strip_changed",
            "results_changed",
            "levels_changed",
            "selection_changed",
            "overlay_changed",
            "calibration_changed",
        ):
            setattr(self, name, Event(name))

    def connect_each(self, callback: Callback, *names: str) -> None:
        """Connect one callback (taking any arguments) to several events by name."""
        for name in names:
            getattr(self, name).connect(callback)

    #: What a view of the selected strip's results listens to.
    RESULT_EVENTS = ("strips_changed", "results_changed", "strip_changed", "selection_changed", "levels_changed")

    scan_loaded: Event
    strips_changed: Event
    strip_changed: Event
    results_changed: Event
    levels_changed: Event
    selection_changed: Event
    overlay_changed: Event
    calibration_changed: Event
