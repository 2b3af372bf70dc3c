"""Settings that outlive a session (QSettings, an INI file).

Tests and anyone who wants a separate profile point the file elsewhere with
``AppSettings(path)`` or ``$STRIPSCAN_SETTINGS``.
"""

from __future__ import annotations

import os
from pathlib import Path

from PySide6.QtCore import QByteArray, QSettings

from stripscan.archive import without_password
from stripscan.gui.models.session import DEFAULT_MAX_AGE_DAYS

__all__ = ["AppSettings", "MAX_RECENT"]

MAX_RECENT = 8


def _as_list(value: object) -> list[str]:
    # INI files give a lone entry back as a plain string.
    if value is None or value == "":
        return []
    if isinstance(value, str):
        return [value]
    return [str(v) for v in value]  # type: ignore[union-attr]


class AppSettings:
    """Typed access to the program's settings.

    Parameters
    ----------
    path : path-like, optional
        INI file to use; default ``$STRIPSCAN_SETTINGS`` or the user's
        standard settings place.
    """

    def __init__(self, path: str | os.PathLike[str] | None = None) -> None:
        path = path if path is not None else os.environ.get("STRIPSCAN_SETTINGS")
        if path is not None:
            self.qsettings = QSettings(str(path), QSettings.Format.IniFormat)
        else:
            self.qsettings = QSettings(
                QSettings.Format.IniFormat, QSettings.Scope.UserScope, "stripscan", "stripscan"
            )

    @property
    def file(self) -> Path:
        return Path(self.qsettings.fileName())

    def sync(self) -> None:
        self.qsettings.sync()

    # -- recent files ------------------------------------------------------
    def recent_files(self) -> list[str]:
        return _as_list(self.qsettings.value("files/recent"))

    def add_recent(self, path: str | os.PathLike[str]) -> list[str]:
        """Put ``path`` first in the recent list; returns the list."""
        return self._put_first("files/recent", str(Path(path).resolve()))

    def _put_first(self, key: str, value: str) -> list[str]:
        # A most-recent-first list of at most MAX_RECENT, without repeats.
        recent = [v for v in _as_list(self.qsettings.value(key)) if v != value]
        recent.insert(0, value)
        recent = recent[:MAX_RECENT]
        self.qsettings.setValue(key, recent)
        return recent

    def remove_recent(self, path: str) -> None:
        self.qsettings.setValue("files/recent", [p for p in self.recent_files() if p != path])

    def clear_recent(self) -> None:
        self.qsettings.setValue("files/recent", [])

    # -- recent shared archives (servers) ------------------------------------
    def recent_servers(self) -> list[str]:
        """Connection strings of the shared archives opened last, newest first (never with a password)."""
        return _as_list(self.qsettings.value("archive/recent_servers"))

    def add_recent_server(self, conninfo: str) -> list[str]:
        """Put a shared archive first in the recent list, its password (if one was written) left out."""
        return self._put_first("archive/recent_servers", without_password(conninfo))

    def remove_recent_server(self, conninfo: str) -> None:
        self.qsettings.setValue("archive/recent_servers", [c for c in self.recent_servers() if c != conninfo])

    def last_folder(self) -> str:
        return str(self.qsettings.value("files/last_folder", "") or "")

    def set_last_folder(self, folder: str | os.PathLike[str]) -> None:
        self.qsettings.setValue("files/last_folder", str(folder))

    # -- calibration ---------------------------------------------------------
    def calibration_path(self) -> str | None:
        value = self.qsettings.value("calibration/active", "")
        return str(value) if value else None

    def set_calibration_path(self, path: str | os.PathLike[str] | None) -> None:
        self.qsettings.setValue("calibration/active", str(path) if path else "")

    def max_age_days(self) -> float:
        try:
            value = float(self.qsettings.value("calibration/max_age_days", DEFAULT_MAX_AGE_DAYS))
        except (TypeError, ValueError):
            return float(DEFAULT_MAX_AGE_DAYS)
        return value if value > 0 else float(DEFAULT_MAX_AGE_DAYS)

    def set_max_age_days(self, days: float) -> None:
        self.qsettings.setValue("calibration/max_age_days", float(days))

    # -- analysis -------------------------------------------------------------
    def levels(self) -> tuple[float, float]:
        """Net density levels last used (ISO 9236-1 defaults 0.25 and 2.00)."""
        try:
            low = float(self.qsettings.value("analysis/level_low", 0.25))
            high = float(self.qsettings.value("analysis/level_high", 2.00))
        except (TypeError, ValueError):
            return 0.25, 2.00
        return (low, high) if 0 < low < high else (0.25, 2.00)

    def set_levels(self, low: float, high: float) -> None:
        self.qsettings.setValue("analysis/level_low", float(low))
        self.qsettings.setValue("analysis/level_high", float(high))

    def increment(self) -> float:
        try:
            value = float(self.qsettings.value("analysis/increment", 0.15))
        except (TypeError, ValueError):
            return 0.15
        return value if 0.0 < value <= 2.0 else 0.15  # as AnalysisOptions accepts (NaN fails both)

    def set_increment(self, value: float) -> None:
        self.qsettings.setValue("analysis/increment", float(value))

    def show_gradient(self) -> bool:
        return str(self.qsettings.value("view/show_gradient", "false")).lower() == "true"

    def set_show_gradient(self, shown: bool) -> None:
        self.qsettings.setValue("view/show_gradient", "true" if shown else "false")

    # -- window ----------------------------------------------------------------
    def window_state(self) -> tuple[QByteArray | None, QByteArray | None]:
        geometry = self.qsettings.value("window/geometry")
        state = self.qsettings.value("window/state")
        return (geometry if isinstance(geometry, QByteArray) else None,
                state if isinstance(state, QByteArray) else None)

    def set_window_state(self, geometry: QByteArray, state: QByteArray) -> None:
        self.qsettings.setValue("window/geometry", geometry)
        self.qsettings.setValue("window/state", state)
