"""The window's archive: a file path or a shared archive on a server, as the pages hold it.

Every page reads the archive through :func:`stripscan.archive.open_archive`,
which takes either; the pages only need to know which it is: a file that
does not exist yet is an empty page (the first stored snapshot makes it),
while a server's database is made by its administrator and is always read.
A file is held as a :class:`~pathlib.Path`, a server as its libpq connection
string (``str``): a connection string passed through ``Path`` would lose the
second slash of ``postgresql://``.  What the window shows and remembers of a
server never has a password (:func:`stripscan.archive.without_password`).
"""

from __future__ import annotations

import os
from pathlib import Path
from urllib.parse import quote

from stripscan.archive import ArchiveConnectionError, parse_location

__all__ = ["ArchiveLocation", "as_location", "default_location", "location_exists", "location_words", "is_server", "connection_lost",
           "server_location", "SSL_MODES"]

#: libpq's ``sslmode`` values, the default ("prefer") first.
SSL_MODES = ("prefer", "require", "verify-ca", "verify-full", "allow", "disable")

#: A file (Path) or a server's connection string (str).
ArchiveLocation = Path | str


def as_location(value: str | os.PathLike[str] | None) -> ArchiveLocation | None:
    """A file path as a :class:`Path`, a server's connection string as it is written; None stays None.

    ``sqlite:///PATH`` is a file too.
    """
    if value is None:
        return None
    if isinstance(value, str) and not value.strip():
        return None
    where = parse_location(value)
    return where.conninfo if where.is_server else where.path  # type: ignore[return-value]


def default_location() -> ArchiveLocation:
    """The archive used when none was chosen: ``$STRIPSCAN_ARCHIVE`` (a path or a server), else the default file."""
    where = parse_location(None)
    return where.conninfo if where.is_server else where.path  # type: ignore[return-value]


def is_server(location: ArchiveLocation | None) -> bool:
    """Whether ``location`` names an archive on a server."""
    return isinstance(location, str)


def location_exists(location: ArchiveLocation | None) -> bool:
    """Whether there is an archive to read: the file exists, or a server is named (its database is made there)."""
    if location is None:
        return False
    return True if is_server(location) else Path(location).is_file()


def location_words(location: ArchiveLocation | None) -> str:
    """The location as the window shows and remembers it: the file's path, or the server's without a password."""
    if location is None:
        return ""
    return parse_location(location).display


def connection_lost(error: BaseException) -> bool:
    """Whether ``error`` says the archive's server could not be reached (the work may be tried again)."""
    return isinstance(error, ArchiveConnectionError)


def server_location(*, host: str = "", port: int | None = None, database: str = "", user: str = "",
                    service: str = "", sslmode: str = "prefer") -> str:
    """A libpq connection URI from the fields of the window's form; never with a password.

    ``service`` (a name in ``pg_service.conf``) gives
    ``postgresql:///?service=NAME`` and the other fields but ``sslmode`` are
    left to the service file.  Otherwise
    ``postgresql://user@host:port/database``; a host starting with ``/`` is a
    Unix-socket folder and goes in the query (``?host=/run/postgresql``), as
    libpq reads it.  Empty fields are left out (libpq's defaults: the local
    socket, port 5432, the login's name).  ``sslmode`` is written only when
    it is not libpq's default.

    Raises
    ------
    ValueError
        For an ``sslmode`` libpq does not know, a port outside 1–65535, or
        neither a database nor a service.
    """
    if sslmode not in SSL_MODES:
        raise ValueError(f"sslmode must be one of {', '.join(SSL_MODES)}, not {sslmode!r}")
    query: list[str] = []
    service, host, database, user = service.strip(), host.strip(), database.strip(), user.strip()
    if service:
        query.append(f"service={quote(service, safe='')}")
        netloc, path = "", "/"
    else:
        if not database:
            raise ValueError("name the archive's database (or a service of pg_service.conf)")
        if port is not None and not 1 <= int(port) <= 65535:
            raise ValueError(f"the port must be between 1 and 65535, not {port}")
        netloc = f"{quote(user, safe='')}@" if user else ""
        if host.startswith("/"):
            query.append(f"host={quote(host, safe='/')}")
        elif ":" in host:  # an IPv6 address
            netloc += f"[{host}]"
        else:
            netloc += quote(host, safe=".-")
        if port is not None:
            netloc += f":{int(port)}"
        path = "/" + quote(database, safe="")
    if sslmode != SSL_MODES[0]:
        query.append(f"sslmode={sslmode}")
    return f"postgresql://{netloc}{path}" + (f"?{'&'.join(query)}" if query else "")
