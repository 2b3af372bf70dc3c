"""Keep the program alive under two hazards of the Qt binding: lost references and worker-thread collections.

PySide6 6.12.0 on Python 3.11 loses one reference to ``True`` each time a
signal is emitted from Python to a Python callable, and one to ``None``
each time Qt hands back an empty value (a C++ signal calling a Python slot,
an unset item property, a method that returns nothing such as the painter's
drawing calls, ...).  Before Python 3.12 these singletons are not
immortal, so after a few thousand such calls (a minute of dragging) the
interpreter frees one and aborts ("bool_dealloc", "none_dealloc").  6.11.3
does not do this.  When the loss is seen, :func:`guard` gives ``True``,
``False`` and ``None`` a reference count so large that it never reaches
zero, which is what Python 3.12 does for every build.  Nothing is done when
the probes see no loss.

Python's cyclic garbage collector runs on whichever thread happens to
allocate when a threshold is crossed, a worker thread as readily as the GUI
thread.  Qt objects made on the GUI thread that end up in a reference cycle
(pyqtgraph's plot items with their menus, the widgets of a closed window, a
replaced strip outline) are then freed by the worker: a QObject's C++
destructor runs there, takes Qt's signal-slot lock and waits for Python's
lock to look up the wrapper's overrides, while shiboken hands a widget's
destruction to the GUI thread as a pending call that holds Python's lock and
waits for that same Qt lock.  Each waits for the other and the window hangs
(seen in the GUI tests on a loaded machine: ``QObject::~QObject`` in a
worker in ``PyGILState_Ensure``, the GUI thread in
``runDeletionInMainThread`` -> ``QMenu::~QMenu`` -> ``QBasicMutex::lockInternal``).
:func:`keep_collector_on_gui_thread`, applied on import, therefore keeps
every collection that starts on another thread away from all objects (they
are frozen for that pass, :func:`gc.freeze`, and thawed after it), so
garbage is only ever freed on the GUI thread; :func:`collect_deferred` and
:func:`start_gui_collector` free there what such passes left.
"""

from __future__ import annotations

import ctypes
import gc
import sys
import threading

import shiboken6
from PySide6.QtCore import QCoreApplication, QObject, QTimer, Signal

__all__ = ["reference_losses", "guard", "GUARDED", "keep_collector_on_gui_thread", "collect_deferred",
           "deferred_passes", "start_gui_collector", "GUI_COLLECT_MSECS"]

# Far beyond any number of calls in a session, yet no overflow risk.
_PIN = 1 << 40


class _Probe(QObject):
    ping = Signal()


def _listener() -> None:
    """The probe's slot: does nothing."""


def reference_losses(calls: int = 64) -> dict[str, float]:
    """References lost per call to ``True`` (signal emission) and ``None`` (empty value); 0 when sound."""
    probe = _Probe()
    probe.ping.connect(_listener)
    before = sys.getrefcount(True), sys.getrefcount(None)
    for _ in range(calls):
        probe.ping.emit()
        probe.property("stripscan_probe_unset")
        probe.setObjectName("stripscan-probe")  # a method returning nothing (the drawing calls' kind)
    after = sys.getrefcount(True), sys.getrefcount(None)
    probe.ping.disconnect(_listener)
    return {"True": (before[0] - after[0]) / calls, "None": (before[1] - after[1]) / calls}


def _pin(value: object) -> None:
    # ob_refcnt is the first field of every CPython object.
    ctypes.c_ssize_t.from_address(id(value)).value += _PIN


def guard() -> bool:
    """Apply the fix when this Python and Qt binding need it; True when applied."""
    if sys.version_info >= (3, 12) or sys.implementation.name != "cpython":
        return False
    if max(reference_losses().values()) <= 0:
        return False
    for value in (True, False, None):
        _pin(value)
    return True


#: Whether the fix was needed (and applied) in this process.
GUARDED = guard()


# --------------------------------------------------------------------------
# The cyclic collector, on the GUI thread only

#: The thread Qt's widgets live on (where QApplication is made) and shiboken's "main thread".
_GUI_THREAD = threading.main_thread().ident
#: How often the GUI thread frees what passes on other threads left, in ms.
GUI_COLLECT_MSECS = 5000
_deferred = 0  # collections kept off other threads since the GUI thread last made a full one
_timer: QTimer | None = None


def _collector_gate(phase: str, info: dict) -> None:
    """gc callback: a pass that starts off the GUI thread sees no object (runs with the GIL held throughout)."""
    global _deferred
    if threading.get_ident() == _GUI_THREAD:
        if phase == "stop" and info.get("generation") == 2:
            _deferred = 0  # a full pass here has seen everything the deferred ones skipped
        return
    if phase == "start":
        gc.freeze()  # every tracked object out of this pass's reach: it frees nothing
    else:
        gc.unfreeze()  # back, into the oldest generation, for the GUI thread's next full pass
        _deferred += 1


def keep_collector_on_gui_thread() -> None:
    """Make every garbage collection that starts off the GUI thread free nothing (idempotent).

    Objects a worker thread itself discards without a cycle are still freed
    at once by reference counting; only cycles wait for the GUI thread.
    Another user of :func:`gc.freeze` in the same process would see its
    objects thawed after such a pass.
    """
    if _collector_gate not in gc.callbacks:
        gc.callbacks.insert(0, _collector_gate)  # first, so no other callback meets the frozen state


def deferred_passes() -> int:
    """Collections kept off other threads since the GUI thread last collected fully."""
    return _deferred


def collect_deferred() -> int:
    """On the GUI thread, when passes elsewhere were skipped: a full collection; the objects freed.

    Returns 0 (doing nothing) on any other thread or when nothing waits.
    """
    if threading.get_ident() != _GUI_THREAD or not _deferred:
        return 0
    return gc.collect()


def start_gui_collector() -> QTimer | None:
    """Run :func:`collect_deferred` every :data:`GUI_COLLECT_MSECS` on the GUI thread (once per application).

    Call it on the GUI thread once the QApplication exists; None without one.
    """
    global _timer
    app = QCoreApplication.instance()
    if app is None or threading.get_ident() != _GUI_THREAD:
        return None
    if _timer is None or not shiboken6.isValid(_timer):
        _timer = QTimer(app)
        _timer.setObjectName("stripscan-gui-collector")
        _timer.timeout.connect(collect_deferred)
        _timer.start(GUI_COLLECT_MSECS)
    return _timer


keep_collector_on_gui_thread()
