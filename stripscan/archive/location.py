"""Where an archive lives: a file path, ``sqlite:///PATH``, or a PostgreSQL connection string.

A server is named the way libpq names it, so users and administrators
write what they already know: ``postgresql://user@host:5432/dbname``,
``postgresql:///dbname?host=/run/postgresql``,
``postgresql:///?service=NAME`` (with ``pg_service.conf``).  Passwords come
from ``.pgpass`` or ``PGPASSWORD``; one written in the string works but is
never shown or stored by stripscan (:attr:`Location.display`).
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import urlsplit

__all__ = ["Location", "parse_location", "SERVER_SCHEMES"]

#: URI schemes libpq accepts for a server.
SERVER_SCHEMES = ("postgresql://", "postgres://")
_FILE_SCHEME = "sqlite://"
_PASSWORD_WORD = re.compile(r"(?i)\bpassword\s*=\s*('(?:[^'\\]|\\.)*'|\S+)")


@dataclass(frozen=True)
class Location:
    """A parsed archive location.

    Attributes
    ----------
    kind : str
        ``"sqlite"`` or ``"postgresql"``.
    path : Path or None
        The file, absolute, for ``"sqlite"``.
    conninfo : str or None
        The connection string as written, for ``"postgresql"`` (handed to
        the driver unchanged, so libpq's own rules apply).
    """

    kind: str
    path: Path | None = None
    conninfo: str | None = None

    @property
    def is_server(self) -> bool:
        return self.kind == "postgresql"

    @property
    def display(self) -> str:
        """The location as messages and saved settings show it: never with a password."""
        if self.path is not None:
            return str(self.path)
        return without_password(self.conninfo or "")


def without_password(conninfo: str) -> str:
    """A connection string with any password taken out (URI or ``key=value`` form)."""
    if conninfo.startswith(SERVER_SCHEMES):
        parts = urlsplit(conninfo)
        netloc = parts.netloc
        if "@" in netloc:
            user, _, host = netloc.rpartition("@")
            netloc = f"{user.partition(':')[0]}@{host}"
        query = "&".join(p for p in parts.query.split("&") if p and not p.lower().startswith("password="))
        # Put together by hand: urlunsplit drops the "//" of an empty host (postgresql:///?service=NAME),
        # which libpq then no longer reads as a URI.
        return f"{parts.scheme}://{netloc}{parts.path}" + (f"?{query}" if query else "") \
            + (f"#{parts.fragment}" if parts.fragment else "")
    return " ".join(_PASSWORD_WORD.sub("", conninfo).split())


def parse_location(location: str | os.PathLike[str] | None) -> Location:
    """Read an archive location.

    ``None`` means ``$STRIPSCAN_ARCHIVE`` when set, else the default file
    (:func:`stripscan.archive.default_archive_path`).  A string starting
    ``postgresql://`` or ``postgres://`` names a server; ``sqlite:///PATH``
    or anything else names a file.
    """
    if location is None:
        location = os.environ.get("STRIPSCAN_ARCHIVE") or None
        if location is None:
            from stripscan.archive.service import default_archive_path

            location = default_archive_path()
    if isinstance(location, str):
        text = location.strip()
        if text.lower().startswith(SERVER_SCHEMES):
            return Location("postgresql", conninfo=text)
        if text.lower().startswith(_FILE_SCHEME):
            text = text[len(_FILE_SCHEME):]
            if not text.startswith("/"):
                raise ValueError(f"{location!r}: write sqlite:///PATH with an absolute path, or just the path")
        location = text
    return Location("sqlite", path=Path(location).expanduser().absolute())
