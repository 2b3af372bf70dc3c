"""Keep the program alive under a Qt binding that drops references to ``True`` and ``None``.

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
"""

from __future__ import annotations

import ctypes
import sys

from PySide6.QtCore import QObject, Signal

__all__ = ["reference_losses", "guard", "GUARDED"]

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
