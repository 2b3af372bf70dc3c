"""A server archive's location: a libpq connection string, shown and kept without its password.

stripscan takes libpq's own forms (``postgresql://user@host:5432/dbname``,
``postgresql:///?service=NAME`` with ``pg_service.conf``, or ``key=value``
pairs) and leaves passwords to libpq (``.pgpass``, ``PGPASSWORD``).  A
password written into the string still works for the connection, but never
appears in a message, a report or the window's list of recent archives.
"""

from __future__ import annotations

from urllib.parse import quote, urlencode

from ..errors import ArchiveError
from . import driver

__all__ = ["SCHEMES", "is_server_location", "public_location"]

#: How a connection string given as a URL starts (libpq accepts both).
SCHEMES = ("postgresql://", "postgres://")

# Shown in the URL's own parts; every other parameter goes in its query.
_IN_URL = ("user", "host", "port", "dbname")


def is_server_location(location: object) -> bool:
    """True when ``location`` names a PostgreSQL server rather than a file (a URL of libpq's scheme)."""
    return isinstance(location, str) and location.strip().lower().startswith(SCHEMES)


def public_location(conninfo: str) -> str:
    """The connection string as a ``postgresql://`` URL, the password left out.

    Raises
    ------
    ArchiveError
        When libpq cannot read the string (the message says why, and shows
        no password).
    """
    psycopg = driver()
    try:
        parts = psycopg.conninfo.conninfo_to_dict(conninfo)
    except psycopg.ProgrammingError as exc:
        # libpq's message quotes no part of the string, so no password shows.
        raise ArchiveError(f"not a PostgreSQL connection string: {str(exc).strip()}") from None
    parts.pop("password", None)
    user = quote(str(parts.pop("user", "")), safe="")
    host = str(parts.get("host", ""))
    # A socket folder (or several hosts) cannot stand in a URL's host part.
    if "," not in host and not host.startswith("/") and host:
        parts.pop("host")
        host = f"[{host}]" if ":" in host else host
        port = str(parts.pop("port", ""))
        authority = f"{user + '@' if user else ''}{host}{':' + port if port else ''}"
    else:
        authority = f"{user}@" if user else ""
    dbname = quote(str(parts.pop("dbname", "")), safe="")
    query = urlencode(sorted((k, str(v)) for k, v in parts.items()))
    return f"postgresql://{authority}/{dbname}{'?' + query if query else ''}"
