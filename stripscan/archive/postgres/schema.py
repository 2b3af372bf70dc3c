"""Create and upgrade the archive's schema on a PostgreSQL server, and its roles.

The schema versions are the files ``schema/NNNN_*.sql`` (numbered one after
another from 0001); each ends by inserting its own row into
``stripscan_schema``, the server's counterpart of SQLite's ``PRAGMA
user_version``.  :func:`migrate` applies every file above the database's
version, each in its own transaction, so a database is always at exactly one
version; two clients upgrading at once queue on a lock.

Every function takes an open psycopg connection (see
:func:`stripscan.archive.postgres.driver`) and the place the archive is, a
plain string used only in messages.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import cache
from importlib import resources
from typing import Any

from ..errors import ArchiveError
from . import driver

__all__ = ["SQLITE_EQUIVALENT", "SchemaStep", "steps", "latest_version", "schema_version", "migrate", "sync_identities", "role_names", "create_roles"]

#: Server schema version -> the SQLite schema version (:mod:`stripscan.archive.sqlite.migrations`)
#: whose tables and rules it holds.  The archive reports the latter, so that an export, a report
#: or a check says the same of the same records wherever they are kept.
SQLITE_EQUIVALENT = {1: 4}

_STEP_FILE = re.compile(r"^(\d{4})_[a-z0-9_]+\.sql$")

# Key of the advisory lock that queues upgrades (any constant of our own).
_UPGRADE_LOCK = 0x53534152


@dataclass(frozen=True)
class SchemaStep:
    """One version of the server schema: run ``sql`` to go from ``version - 1`` to ``version``."""

    version: int
    name: str
    sql: str


def _folder() -> Any:
    return resources.files(__package__).joinpath("schema")


@cache
def steps() -> tuple[SchemaStep, ...]:
    """Every schema version, in order, read from the package's ``schema/`` folder."""
    found = []
    for entry in _folder().iterdir():
        match = _STEP_FILE.match(entry.name)
        if match:
            found.append(SchemaStep(int(match.group(1)), entry.name, entry.read_text(encoding="utf-8")))
    found.sort(key=lambda step: step.version)
    numbers = [step.version for step in found]
    if numbers != list(range(1, len(found) + 1)):
        raise RuntimeError(f"the server schema files are not numbered 1, 2, ... one after another: {numbers}")
    return tuple(found)


def latest_version() -> int:
    """The schema version this stripscan writes (the last file's number)."""
    return steps()[-1].version


def schema_version(conn: Any) -> int:
    """The database's schema version; 0 for a database without stripscan's tables."""
    row = conn.execute("SELECT to_regclass('stripscan_schema') IS NOT NULL").fetchone()
    if not row[0]:
        return 0
    return int(conn.execute("SELECT coalesce(max(version), 0) FROM stripscan_schema").fetchone()[0])


def _refuse_unknown(conn: Any, where: str, version: int) -> None:
    if version > latest_version():
        raise ArchiveError(f"{where} was written by a newer stripscan (server schema version {version}; "
                           f"this one knows up to {latest_version()}); update stripscan to open it")
    if version == 0:
        tables = conn.execute("SELECT count(*) FROM pg_tables WHERE schemaname = 'public'").fetchone()[0]
        if tables:
            raise ArchiveError(f"{where} is a PostgreSQL database with {tables} table(s) of its own, but not "
                               "a stripscan archive; name an empty database or an archive")


def migrate(conn: Any, where: str) -> int:
    """Bring the database's schema up to :func:`latest_version`; return the version reached.

    Parameters
    ----------
    conn : psycopg.Connection
        Open connection as the role that owns (or is to own) the archive's tables.
    where : str
        The archive's place for messages (its connection string without a password).

    Raises
    ------
    ArchiveError
        When the database holds tables of another program, or a schema
        newer than this stripscan knows.
    """
    _refuse_unknown(conn, where, schema_version(conn))
    for step in steps():
        if schema_version(conn) >= step.version:
            continue
        with conn.transaction():
            conn.execute("SELECT pg_advisory_xact_lock(%s)", (_UPGRADE_LOCK,))
            # Another client may have upgraded the database while we waited.
            if schema_version(conn) < step.version:
                conn.execute(step.sql)
                if schema_version(conn) != step.version:
                    raise RuntimeError(f"{step.name} does not record its version {step.version}")
    return schema_version(conn)


def sync_identities(conn: Any) -> None:
    """Move each identity column's next value past the highest id stored.

    The archive gives ids itself (SQLite's ``max(id) + 1``) and a copy keeps
    them, which leaves the identity's own counter behind; an INSERT that
    leaves the id to the server (by hand, or another tool) would then take a
    number in use.  Call after rows are inserted with their ids.
    """
    columns = conn.execute(
        "SELECT table_name, column_name FROM information_schema.columns "
        "WHERE table_schema = 'public' AND is_identity = 'YES' ORDER BY table_name").fetchall()
    sql = driver().sql
    for table, column in columns:
        conn.execute(sql.SQL("SELECT setval(pg_get_serial_sequence({t}, {c}), "
                             "coalesce((SELECT max({col}) FROM {table}), 0) + 1, false)").format(
            t=sql.Literal(table), c=sql.Literal(column), col=sql.Identifier(column), table=sql.Identifier(table)))


def role_names(prefix: str) -> dict[str, str]:
    """The three group roles' names for an archive: reader, recorder, physicist."""
    if not prefix or len(prefix) > 50:
        raise ValueError(f"a role prefix has 1 to 50 characters, not {prefix!r}")
    return {kind: f"{prefix}_{kind}" for kind in ("reader", "recorder", "physicist")}


def create_roles(conn: Any, where: str, prefix: str | None = None) -> dict[str, str]:
    """Create (or grant again) the archive's three group roles; return their names.

    Parameters
    ----------
    conn : psycopg.Connection
        Connection as the owner of the archive's tables, with CREATEROLE.
    where : str
        The archive's place for messages.
    prefix : str, optional
        Start of the roles' names; the database's name when omitted.
    """
    sql = driver().sql
    version = schema_version(conn)
    if version != latest_version():
        raise ArchiveError(f"{where}: create the archive's schema before its roles "
                           f"(schema version {version}, expected {latest_version()})")
    database = conn.execute("SELECT current_database()").fetchone()[0]
    names = role_names(prefix or database)
    text = _folder().joinpath("roles.sql").read_text(encoding="utf-8")
    statement = sql.SQL(text).format(
        database=sql.Identifier(database),
        **{kind: sql.Identifier(name) for kind, name in names.items()},
        **{f"{kind}_name": sql.Literal(name) for kind, name in names.items()})
    with conn.transaction():
        conn.execute(statement)
    return names
