"""Errors raised by the lot archive.

Every message names the archive file (or the file being read) and says in
plain words what went wrong, so that the command line can print it as one
line and a person knows what to do next.
"""

from __future__ import annotations

__all__ = [
    "ArchiveError",
    "ArchiveBusyError",
    "ArchiveConnectionError",
    "ArchiveReadOnlyError",
    "ArchiveConflictError",
    "ArchiveLookupError",
    "ArchiveIntegrityError",
    "DuplicateDayError",
    "OutOfOrderError",
]


class ArchiveError(Exception):
    """The archive cannot do what was asked; the message says why."""


class ArchiveBusyError(ArchiveError):
    """Another program held the archive's write lock for longer than the busy timeout."""


class ArchiveConnectionError(ArchiveError):
    """The archive's server could not be reached, or the connection to it was lost (a server archive only).

    Nothing half-written is kept (the server rolls back what it had not
    committed); the same work may be tried again once the server is back.
    """


class ArchiveReadOnlyError(ArchiveError):
    """A write was asked of an archive that is opened or stored read-only."""


class ArchiveConflictError(ArchiveError):
    """The new data clashes with data already stored (same key, other content)."""


class ArchiveLookupError(ArchiveError, LookupError):
    """A snapshot, lot, processor or other item is not in the archive."""


class ArchiveIntegrityError(ArchiveError):
    """The stored history does not match its hash chain: it was changed outside stripscan."""


class DuplicateDayError(ArchiveConflictError):
    """A day's first strip when the day has one already; a second strip of the day is a repeat."""


class OutOfOrderError(ArchiveConflictError, ValueError):
    """A QC entry or event dated before the latest day of its processor's log, not declared entered late.

    Also a ValueError, as the date-order refusal was before the archive itself checked it.
    """
