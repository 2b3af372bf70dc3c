"""The lot archive on a PostgreSQL server (a shared archive for a physics group).

:func:`open_backend` is what :func:`stripscan.archive.open_archive` calls
for a ``postgresql://`` location; :mod:`.backend` is the open database (one
writer at a time, consistent reads, errors in one line through
:mod:`.dialect`).  The schema lives in ``schema/`` as plain SQL, one file
per version (``0001_archive.sql`` is SQLite's schema version 4 for the
server), with ``roles.sql`` for the three group roles; :mod:`.schema`
applies them (:func:`.schema.create_roles` for an administrator).

This package is the only one that imports the PostgreSQL driver (psycopg 3),
and it imports it only when a server is named: an archive on a path never
loads it, and without the ``postgres`` extra the one line of
:func:`driver` says what to install.
"""

from __future__ import annotations

from types import ModuleType
from typing import Any

from ..errors import ArchiveError

__all__ = ["INSTALL_HINT", "driver", "open_backend"]

#: What to install when the driver is missing.
INSTALL_HINT = 'pip install "stripscan[postgres]"'


def driver() -> ModuleType:
    """The psycopg module, imported on first use.

    Raises
    ------
    ArchiveError
        One line naming the extra to install, when psycopg is not installed.
    """
    try:
        import psycopg
    except ImportError:
        raise ArchiveError("a PostgreSQL archive needs the PostgreSQL driver, which is not installed: "
                           f'{INSTALL_HINT}') from None
    return psycopg


def open_backend(location: Any, *, busy_timeout_ms: int, read_only: bool, create: bool) -> Any:
    """Open the server archive at ``location`` (a :class:`stripscan.archive.location.Location`).

    Returns
    -------
    PostgresBackend
        The open archive database (see :mod:`.backend`).
    """
    try:
        driver()
    except ArchiveError:
        raise ArchiveError(f"{location.display}: a PostgreSQL archive needs the PostgreSQL driver: "
                           f"{INSTALL_HINT}") from None
    from .backend import PostgresBackend

    return PostgresBackend.open(location.conninfo, location.display, busy_timeout_ms=busy_timeout_ms,
                                read_only=read_only, create=create)
