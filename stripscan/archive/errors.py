"""Errors raised by the lot archive.

Every message names the archive file (or the file being read) and says in
plain words what went wrong, so that the command line can print it as one
line and a person knows what to do next.
"""

from __future__ import annotations

__all__ = [
    "ArchiveError",
    "ArchiveBusyError",
    "ArchiveReadOnlyError",
    "ArchiveConflictError",
    "ArchiveLookupError",
]


class ArchiveError(Exception):
    """The archive cannot do what was asked; the message says why."""


class ArchiveBusyError(ArchiveError):
    """Another program held the archive's write lock for longer than the busy timeout."""


class ArchiveReadOnlyError(ArchiveError):
    """A write was asked of an archive that is opened or stored read-only."""


class ArchiveConflictError(ArchiveError):
    """The new data clashes with data already stored (same key, other content)."""


class ArchiveLookupError(ArchiveError, LookupError):
    """A snapshot, lot, processor or other item is not in the archive."""
