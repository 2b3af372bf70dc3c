"""What every command group of the command line shares: one-line failures and opening the archive.

Failures print one line ``stripscan: error: ...`` on standard error and
return 1 (:func:`guarded`); a reading command never creates an archive,
and a command that failed leaves no new, empty archive file behind
(:func:`open_from_args`).
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Callable

from stripscan.archive import discard_if_empty, parse_location
from stripscan.archive.errors import ArchiveError
from stripscan.archive.service import Archive

__all__ = ["Handler", "fail", "guarded", "open_from_args", "forget_new_archive"]

Handler = Callable[[argparse.Namespace], int]


def fail(message: str) -> int:
    print(f"stripscan: error: {message}", file=sys.stderr)
    return 1


def _quiet_stdout() -> None:
    """Point stdout at devnull, so that the interpreter's last flush does not fail again."""
    try:
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
    except (OSError, ValueError):
        pass


def guarded(handler: Handler) -> Handler:
    def run(args: argparse.Namespace) -> int:
        try:
            return handler(args)
        except BrokenPipeError:
            # The reader went away (``... | true``).  These commands print only
            # after their write committed, so nothing failed: say nothing.
            _quiet_stdout()
            return 0
        except (ArchiveError, ValueError, OSError) as exc:
            forget_new_archive(args)
            return fail(str(exc))
        except BaseException:
            forget_new_archive(args)
            raise
    run.__doc__ = handler.__doc__
    return run


def open_from_args(args: argparse.Namespace, *, create: bool) -> Archive:
    # Reading commands never create a file: a mistyped --archive path must
    # say so rather than show an empty archive.  A server's database is made
    # by its administrator (stripscan archive init), never by a typo.
    try:
        where = parse_location(args.archive)
    except ValueError as exc:
        raise ArchiveError(str(exc)) from None
    if where.is_server:
        return Archive.open(where.conninfo, create=create)
    path = where.path
    if not path.exists():
        if not create:
            raise ArchiveError(_NO_ARCHIVE.format(path=path))
        args.new_archive_file = path
    return Archive.open(path, create=create)


#: What a reading command says when the archive file is not there, and how one is made.
_NO_ARCHIVE = (
    "{path} does not exist: there is no archive there yet (check --archive or $STRIPSCAN_ARCHIVE). An archive "
    "is made by the first command that stores something in it: 'stripscan archive add SCAN --lot ID', or "
    "'stripscan qc add|event|limits --processor P --new-processor ...' to start a processor's QC log, or "
    "'stripscan qc demo' for the invented demo"
)


def forget_new_archive(args: argparse.Namespace) -> None:
    """A command that failed leaves no new, empty archive file behind."""
    created = getattr(args, "new_archive_file", None)
    if created is not None:
        discard_if_empty(created)
