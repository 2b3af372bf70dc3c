"""Making a new, empty archive on purpose (``stripscan archive init``).

A file archive is otherwise made by the first command that stores
something; a server's database is made by its administrator, who then runs
this once to create the archive's tables in it and, on a server, the three
group roles (reader, recorder, physicist) that people's logins are made
members of.  Running it again is harmless: it says what was already there.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

from stripscan.archive import open_archive
from stripscan.archive.errors import ArchiveError
from stripscan.archive.location import parse_location

__all__ = ["InitReport", "ROLE_RIGHTS", "init_archive"]

#: What each group role may do, in the words ``archive init`` prints (see postgres/schema/roles.sql).
ROLE_RIGHTS = {
    "reader": "reads everything",
    "recorder": "also adds snapshots, notes and QC entries",
    "physicist": "also sets QC limits, records events and crossovers, retires and revises snapshots, "
                 "corrects QC entries",
}


@dataclass(frozen=True)
class InitReport:
    """What :func:`init_archive` found and did.

    Attributes
    ----------
    location : str
        The archive, as messages show it (never with a password).
    created : bool
        The archive's tables were made now; False when they were there.
    upgraded : bool
        On a server, they were there at an older schema version and were
        brought up to date (a file is upgraded by any command that opens it).
    schema_version : int
        The archive's schema version now.
    roles : dict
        Kind (reader, recorder, physicist) -> role name, when roles were asked for.
    roles_created : tuple of str
        Those of the roles made now (the others existed and were granted their rights again).
    on_server : bool
        The archive is on a server (roles apply).
    """

    location: str
    created: bool
    upgraded: bool
    schema_version: int
    roles: dict[str, str] = field(default_factory=dict)
    roles_created: tuple[str, ...] = ()
    on_server: bool = False


def init_archive(location: str | os.PathLike[str], *, roles: bool = False,
                 role_prefix: str | None = None) -> InitReport:
    """Create an archive's schema at ``location`` (a new file, or an empty server database).

    Parameters
    ----------
    location : path-like or str
        A file path, or a PostgreSQL connection string naming a database
        the administrator has created.
    roles : bool
        On a server, also create the three group roles.
    role_prefix : str, optional
        Start of the roles' names (``PREFIX_reader``...); the database's
        name when omitted.

    Raises
    ------
    ArchiveError
        The location holds something other than an archive, cannot be
        reached or written, or roles were asked of a file.
    """
    try:
        where = parse_location(location)
    except ValueError as exc:
        raise ArchiveError(str(exc)) from None
    if where.is_server:
        from stripscan.archive.postgres import schema
        from stripscan.archive.postgres.setup import set_up

        done = set_up(where.conninfo or "", where.display, roles=roles, prefix=role_prefix)
        made = tuple(name for name in done.roles.values() if name not in done.roles_before)
        # Opened once as any command opens it: the hash chain's head is checked, the version read as reported.
        with open_archive(where.conninfo, create=False) as archive:
            version = archive.schema_version
        return InitReport(where.display, done.version_before == 0,
                          0 < done.version_before < schema.latest_version(), version, done.roles, made,
                          on_server=True)
    if roles or role_prefix:
        raise ArchiveError(f"{where.display}: roles are for an archive on a PostgreSQL server; who may change a "
                           "file archive is set by the file's permissions")
    assert where.path is not None
    # An empty file is no archive yet (SQLite makes one in it).
    existed = where.path.exists() and not where.path.is_dir() and where.path.stat().st_size > 0
    with open_archive(where.path, create=True) as archive:
        version = archive.schema_version
    return InitReport(where.display, not existed, False, version)
