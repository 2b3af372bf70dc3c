"""Setting up an archive on a server: its tables, and, when asked, its three group roles.

What ``stripscan archive init postgresql://...`` runs, as whoever owns (or
is to own) the archive's tables.  Running it again changes nothing but
grants the roles their rights again (after an upgrade, the new tables).
"""

from __future__ import annotations

from dataclasses import dataclass

from ..errors import ArchiveError
from . import driver, schema
from .backend import PostgresBackend
from .dialect import archive_error

__all__ = ["ServerSetup", "set_up"]


@dataclass(frozen=True)
class ServerSetup:
    """What :func:`set_up` found and did.

    Attributes
    ----------
    version_before, version : int
        The server schema version before (0: no archive there yet) and after.
    roles : dict
        Kind (reader, recorder, physicist) -> role name; empty unless asked for.
    roles_before : tuple of str
        Those of the roles that existed already.
    """

    version_before: int
    version: int
    roles: dict[str, str]
    roles_before: tuple[str, ...]


def set_up(conninfo: str, where: str, *, roles: bool, prefix: str | None = None) -> ServerSetup:
    """Create (or bring up to date) the archive's tables in one database, and its roles if asked.

    Parameters
    ----------
    conninfo : str
        libpq connection string of the database, as its owner (with
        CREATEROLE, for ``roles``).
    where : str
        The same without a password, for messages.
    roles : bool
        Also create the reader, recorder and physicist roles (see
        ``schema/roles.sql``).
    prefix : str, optional
        Start of the roles' names; the database's name when omitted.

    Raises
    ------
    ArchiveError
        The server cannot be reached, the database holds another program's
        tables or a newer archive, or the login lacks a right this needs.
    """
    psycopg = driver()
    conn = PostgresBackend._connect(psycopg, conninfo, where)
    try:
        with conn:
            before = schema.schema_version(conn)
            version = schema.migrate(conn, where)
            names: dict[str, str] = {}
            existing: tuple[str, ...] = ()
            if roles:
                database = conn.execute("SELECT current_database()").fetchone()[0]
                wanted = schema.role_names(prefix or database)
                existing = tuple(row[0] for row in conn.execute(
                    "SELECT rolname FROM pg_roles WHERE rolname = ANY(%s) ORDER BY rolname",
                    (list(wanted.values()),)))
                try:
                    names = schema.create_roles(conn, where, prefix)
                except psycopg.errors.InsufficientPrivilege:
                    user = conn.execute("SELECT current_user").fetchone()[0]
                    raise ArchiveError(
                        f"{where}: cannot create the archive's roles: the login {user!r} needs CREATEROLE and "
                        "must own the archive's tables (run it as the administrator who ran it without --roles)"
                    ) from None
    except psycopg.Error as exc:
        raise archive_error(exc, where, "set up the archive there") from None
    return ServerSetup(before, version, names, existing)
