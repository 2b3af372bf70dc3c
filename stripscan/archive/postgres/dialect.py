"""Speaking to the server: the archive's portable SQL in psycopg's terms, and its errors in ours.

The archive's service writes SQL that both backends run, with ``?``
placeholders as SQLite takes them.  psycopg takes ``%s`` and reads every
``%`` as the start of one, so :func:`placeholders` rewrites a statement
once (outside string literals, quoted names and comments) and remembers it;
SQLite's NULL-safe ``IS ?`` becomes PostgreSQL's ``IS NOT DISTINCT FROM``.

:func:`archive_error` turns a psycopg error into the archive's own
(:mod:`stripscan.archive.errors`), as one line that names the archive and,
when the login lacks a right, which right; :func:`retryable` tells the
errors worth trying the whole transaction again for.  Both look only at the
exception: psycopg need not be imported to call them.  :func:`configure`
sets a connection up to pass flags and return sums as SQLite does.
"""

from __future__ import annotations

import re
from functools import lru_cache
from typing import Any

from ..errors import ArchiveBusyError, ArchiveConnectionError, ArchiveError, ArchiveReadOnlyError
from . import driver

__all__ = ["placeholders", "configure", "archive_error", "retryable", "RIGHTS"]


@lru_cache(maxsize=512)
def placeholders(statement: str) -> str:
    """``statement`` with each ``?`` placeholder as ``%s`` and each other ``%`` doubled.

    ``IS ?`` and ``IS NOT ?`` (SQLite's NULL-safe comparisons) become
    ``IS NOT DISTINCT FROM %s`` and ``IS DISTINCT FROM %s``.

    Text inside '...' literals, "..." names, ``--`` line comments and
    ``/* */`` comments is left as it is, apart from doubling ``%``, which
    psycopg undoes.
    """
    out: list[str] = []
    i, n = 0, len(statement)
    while i < n:
        char = statement[i]
        if char in "'\"":
            end = statement.find(char, i + 1)
            while end != -1 and statement.startswith(char, end + 1):  # '' or "" inside: still quoted
                end = statement.find(char, end + 2)
            end = n if end == -1 else end + 1
            out.append(statement[i:end].replace("%", "%%"))
            i = end
        elif statement.startswith("--", i) or statement.startswith("/*", i):
            close = "\n" if char == "-" else "*/"
            end = statement.find(close, i + 2)
            end = n if end == -1 else end + len(close)
            out.append(statement[i:end].replace("%", "%%"))
            i = end
        elif char == "?":
            _null_safe(out)
            out.append("%s")
            i += 1
        else:
            out.append("%%" if char == "%" else char)
            i += 1
    return "".join(out)


def configure(conn: Any) -> None:
    """Make a psycopg connection pass and return values as SQLite does, for identical records.

    * Python's True and False go in as 1 and 0: SQLite keeps flags as
      integers (the schema's columns are bigint), and the hash chain hashes
      the stored value, so ``true`` would not match ``1``.
    * ``numeric`` results (PostgreSQL's sum() and avg() of integers) come
      back as int when whole and float otherwise, as SQLite's do, not as
      Decimal.
    """
    psycopg = driver()
    from psycopg.adapt import Dumper, Loader

    int8 = psycopg.postgres.types["int8"].oid

    class _FlagDumper(Dumper):
        oid = int8

        def dump(self, obj: bool) -> bytes:
            return b"1" if obj else b"0"

    class _NumberLoader(Loader):
        def load(self, data: Any) -> int | float:
            text = bytes(data).decode("ascii")
            return float(text) if any(c in text for c in ".eEnN") else int(text)

    conn.adapters.register_dumper(bool, _FlagDumper)
    conn.adapters.register_loader("numeric", _NumberLoader)


# SQLite's "a IS ?" / "a IS NOT ?" compare NULL-safely; PostgreSQL spells that
# IS [NOT] DISTINCT FROM, and takes no value after a bare IS at all.
_IS_BEFORE = re.compile(r"\bIS(\s+NOT)?\s*$", re.IGNORECASE)


def _null_safe(out: list[str]) -> None:
    """Rewrite a trailing ``IS`` / ``IS NOT`` in ``out`` as its PostgreSQL spelling."""
    tail = "".join(out[-16:])
    found = _IS_BEFORE.search(tail)
    if found is None:
        return
    kept = tail[:found.start()]
    del out[-16:]
    out.append(kept + ("IS DISTINCT FROM " if found.group(1) else "IS NOT DISTINCT FROM "))


# SQLSTATE classes and codes (PostgreSQL documentation, Appendix A "PostgreSQL Error Codes").
_RETRY = {"40001", "40P01"}            # serialization_failure, deadlock_detected
_BUSY = {"55P03", "57014"}             # lock_not_available, query_canceled (a lock or statement timeout)
_READ_ONLY = {"25006"}                 # read_only_sql_transaction
_DENIED = {"42501"}                    # insufficient_privilege (a grant, or a row-level policy)
_FULL = {"53100"}                      # disk_full
_GONE = ("08", "57P")                  # connection exceptions, server shutting down / cannot connect now

#: (first word of the statement, table) -> (the right in plain words, the archive role that has it).
RIGHTS: dict[tuple[str, str], tuple[str, str]] = {
    **{("INSERT", table): ("add to the archive", "recorder") for table in (
        "snapshot_data", "snapshot_steps", "emulsion_lots", "processors", "calibrations", "record_chain")},
    ("INSERT", "snapshots"): ("add snapshots", "recorder"),
    ("INSERT", "snapshot_notes"): ("add notes", "recorder"),
    ("INSERT", "qc_entries"): ("add QC entries", "recorder"),
    ("INSERT", "qc_settings"): ("set QC limits and settings", "physicist"),
    ("INSERT", "qc_events"): ("record QC events", "physicist"),
    ("INSERT", "crossovers"): ("record crossovers", "physicist"),
    ("INSERT", "film_types"): ("add film types", "physicist"),
    ("INSERT", "sensitometers"): ("add sensitometers", "physicist"),
    ("UPDATE", "snapshots"): ("retire snapshots", "physicist"),
    ("UPDATE", "emulsion_lots"): ("change a lot's details", "physicist"),
}
# What a row-level policy refuses a recorder (see schema/roles.sql).
_POLICY_RIGHTS = {
    "snapshots": ("revise snapshots or store retired ones", "physicist"),
    "qc_entries": ("correct QC entries", "physicist"),
}
_TABLE = re.compile(r'for table "?([A-Za-z_][A-Za-z0-9_]*)"?')


def _sqlstate(exc: BaseException) -> str:
    return getattr(exc, "sqlstate", None) or ""


def retryable(exc: BaseException) -> bool:
    """True for a failure that running the same transaction again may get past (serialization, deadlock)."""
    return _sqlstate(exc) in _RETRY


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def _missing_right(exc: BaseException, statement: str | None) -> str:
    text = str(exc)
    table_match = _TABLE.search(text)
    table = table_match.group(1) if table_match else ""
    if "row-level security" in text and table in _POLICY_RIGHTS:
        right, role = _POLICY_RIGHTS[table]
    else:
        verb = (statement or "").lstrip().split(None, 1)[0].upper() if (statement or "").strip() else ""
        right, role = RIGHTS.get((verb, table), ("", ""))
    if not right:
        return "your login on the server lacks a right this needs (" + _first_line(exc) + ")"
    return (f"your login on the server may not {right}; the archive's {role} role may "
            "(ask whoever looks after the archive's server)")


def archive_error(exc: BaseException, where: str, action: str, *, statement: str | None = None,
                  attempts: int = 1) -> ArchiveError:
    """The archive's error for a psycopg error, in one line naming the archive.

    Parameters
    ----------
    exc : psycopg.Error
        What the driver raised.
    where : str
        The archive's place, its password left out.
    action : str
        What was being done, as in "cannot {action}".
    statement : str, optional
        The statement that failed, to tell which right a refusal is about.
    attempts : int
        How many times the transaction was tried (said when more than one).
    """
    state = _sqlstate(exc)
    tried = f" (tried {attempts} times)" if attempts > 1 else ""
    if state in _DENIED:
        return ArchiveReadOnlyError(f"{where}: cannot {action}: {_missing_right(exc, statement)}")
    if state in _READ_ONLY:
        return ArchiveReadOnlyError(f"{where} is read-only: cannot {action}")
    if state in _RETRY or state in _BUSY:
        return ArchiveBusyError(f"{where} is busy: other clients were writing the same records{tried}; "
                                f"cannot {action} now, try again")
    if state in _FULL:
        return ArchiveError(f"{where}: cannot {action}: the server's disk is full")
    if state.startswith(_GONE) or (not state and type(exc).__name__ == "OperationalError"):
        return ArchiveConnectionError(f"{where}: cannot {action}: the connection to the server failed{tried} "
                            f"({_first_line(exc)})")
    # A constraint or a history trigger (class 23) reads as SQLite's refusal does: a plain ArchiveError.
    return ArchiveError(f"{where}: cannot {action}: {_first_line(exc)}")
