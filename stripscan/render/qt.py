"""What every drawing needs before it starts: a Qt application and a safe file.

Qt draws text only once a ``QGuiApplication`` exists (it owns the font
database).  A command-line run or a test has none, so one is made lazily;
on a machine without a display the ``offscreen`` platform is chosen before
Qt starts, because Qt cannot change platform once it has one.

PySide6 6.12.0 on Python 3.11 drops one reference to ``None`` on every
call of a method that returns nothing (``setFont``, ``drawLine``, ...); a
page makes tens of thousands of such calls, and before Python 3.12 ``None``
is not immortal, so the interpreter would free it and abort.
:func:`ensure_app` applies :mod:`stripscan.render.qtguard`, which measures the
loss and, only when it sees one, gives ``None``, ``True`` and ``False`` a
reference count that cannot reach zero (what Python 3.12 does for every
build).  The project excludes that PySide6 release; the guard stays for
environments that have it anyway.

Outputs are written under a temporary name beside the destination and
renamed into place only when complete, so a crash, a full disk or a
drawing error never leaves a half-written file under the real name.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from stripscan._shared import atomic

__all__ = ["ReportError", "ensure_app", "replacing", "write_text_atomic"]


class ReportError(ValueError):
    """A report or export cannot be made as asked; the message says why."""


_APP: Any = None


def ensure_app() -> Any:
    """Return the running Qt application, creating a ``QGuiApplication`` if there is none."""
    global _APP
    if "PySide6.QtGui" not in sys.modules and not _has_display():
        # Must be decided before Qt is loaded; a set value is respected.
        os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from PySide6.QtGui import QGuiApplication

    # The one guard against a Qt binding that drops references to None/True
    # (see stripscan.render.qtguard); importing it applies it when needed.
    from stripscan.render import qtguard  # noqa: F401

    app = QGuiApplication.instance()
    if app is None:
        # A widgets application (a QGuiApplication too), so that a window
        # opened later in the same process can still use it.  Kept in a
        # module global: Qt must not be torn down while pages are drawn.
        from PySide6.QtWidgets import QApplication

        _APP = app = QApplication(["stripscan-report"])
    return app


def _has_display() -> bool:
    if sys.platform in ("win32", "darwin"):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


@contextmanager
def replacing(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it to ``path`` only if the block succeeds.

    :func:`stripscan._shared.atomic.replacing`, with its complaints worded as report errors.

    Raises
    ------
    ReportError
        When the folder does not exist or cannot be written, naming the file.
    """
    target = Path(path).expanduser().absolute()
    if target.is_dir():
        raise ReportError(f"{target} is a folder; give a file name")
    if not target.parent.is_dir():
        raise ReportError(f"{target}: the folder {target.parent} does not exist")
    try:
        with atomic.replacing(target) as temp:
            yield temp
    except OSError as exc:
        raise ReportError(f"{target}: cannot write ({exc.strerror or exc})") from None


def write_text_atomic(path: str | os.PathLike[str], text: str) -> Path:
    """Write UTF-8 text to ``path`` through :func:`replacing`; return the absolute path."""
    with replacing(path) as temp:
        # newline="" keeps the csv module's \r\n row ends as written.
        with open(temp, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
    return Path(path).expanduser().absolute()
