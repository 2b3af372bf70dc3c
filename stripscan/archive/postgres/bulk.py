"""Many rows into one table of a server archive at once, with PostgreSQL's COPY.

``archive copy`` moves whole tables; row-by-row INSERTs, even pipelined,
took about 30 s for 10 000 snapshots (their steps are 21 rows each), COPY
a few seconds.  COPY runs inside the caller's write transaction, so a copy
is still stored whole or not at all.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from typing import Any

from ..errors import ArchiveReadOnlyError
from . import driver
from .backend import ServerConnection

__all__ = ["copy_rows"]


def copy_rows(conn: ServerConnection, table: str, columns: Sequence[str], rows: Iterable[Sequence[Any]], *,
              where: str) -> None:
    """Store ``rows`` (values in the order of ``columns``) in ``table`` inside the open transaction.

    Parameters
    ----------
    conn : ServerConnection
        The connection of a write transaction
        (:meth:`~stripscan.archive.postgres.backend.PostgresBackend.writing`).
    table : str
        One of the archive's tables.
    columns : sequence of str
        Its columns, as named in the rows.
    rows : iterable of sequences
        One value per column; None is NULL, bytes are bytea.
    where : str
        The archive's place, for messages.

    Raises
    ------
    ArchiveReadOnlyError
        When the login is not the tables' owner: COPY does not run under
        the row-level policies that keep a recorder's and a physicist's
        rights apart.
    psycopg.Error
        As the driver raises it; the write transaction translates it (a
        missing right is named as for an INSERT into ``table``).
    """
    sql = driver().sql
    statement = sql.SQL("COPY {} ({}) FROM STDIN").format(
        sql.Identifier(table), sql.SQL(", ").join(sql.Identifier(c) for c in columns))
    psycopg = driver()
    try:
        with conn.raw.cursor() as cursor, cursor.copy(statement) as copy:
            for row in rows:
                copy.write_row(tuple(row))
    except psycopg.errors.FeatureNotSupported:
        user = conn.raw.info.user
        raise ArchiveReadOnlyError(
            f"{where}: cannot copy an archive into it as {user!r}: a whole archive is copied in by the owner of "
            "the archive's tables (the login that ran 'stripscan archive init')") from None
    except psycopg.Error:
        # What a refusal is about: the same right as adding these rows one by one.
        conn.failed_statement = f"INSERT INTO {table}"
        raise
