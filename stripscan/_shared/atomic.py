"""Files that appear whole or not at all.

Every file stripscan writes for a user (results, calibrations, reports,
exports, charts, backups) is written under a temporary name beside its
destination, flushed to disk and renamed into place only when complete:
a crash, a full disk or a failing drawing never leaves a half-written file
under the real name, and an older file of that name stays as it was.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

__all__ = ["replacing", "write_text", "write_bytes"]


def _plain_file_mode() -> int:
    # What a plainly created file gets under the user's umask (temporary files are private, 0600).
    mask = os.umask(0o022)
    os.umask(mask)
    return 0o666 & ~mask


def _sync(path: Path) -> None:
    with open(path, "rb+") as handle:
        os.fsync(handle.fileno())


@contextmanager
def replacing(path: str | os.PathLike[str], *, allow_empty: bool = False) -> Iterator[Path]:
    """Yield a fresh temporary path beside ``path``; rename it to ``path`` only if the block succeeds.

    Parameters
    ----------
    path : path-like
        The destination.  Its folder must exist.
    allow_empty : bool
        Accept an empty result; by default an empty (or never written)
        temporary file is an error, since every writer here writes something.

    Raises
    ------
    OSError
        When the folder is missing or cannot be written, or nothing was
        written; the message names the destination.  The caller words it
        in its own terms.

    Notes
    -----
    The temporary name is unique (``.NAME.XXXXXXXX.partial``), so two
    programs writing the same destination never share it; the later rename
    wins whole.
    """
    target = Path(path).expanduser().absolute()
    if target.is_dir():
        raise IsADirectoryError(21, "is a folder; give a file name", str(target))
    if not target.parent.is_dir():
        raise FileNotFoundError(2, f"the folder {target.parent} does not exist", str(target))
    handle, name = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".partial")
    os.close(handle)
    temp = Path(name)
    try:
        yield temp
        if not temp.exists() or (temp.stat().st_size == 0 and not allow_empty):
            raise OSError(5, "nothing was written", str(target))
        _sync(temp)
        os.chmod(temp, _plain_file_mode())
        os.replace(temp, target)
    finally:
        try:
            temp.unlink(missing_ok=True)
        except OSError:  # a read-only folder refuses even that; nothing was left there
            pass


def write_text(path: str | os.PathLike[str], text: str) -> Path:
    """Write UTF-8 ``text`` to ``path`` through :func:`replacing`; return the absolute path.

    Line ends are written as given (``newline=""``), so the csv module's
    ``\\r\\n`` rows stay as they are.
    """
    with replacing(path) as temp:
        with open(temp, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
    return Path(path).expanduser().absolute()


def write_bytes(path: str | os.PathLike[str], data: bytes) -> Path:
    """Write ``data`` to ``path`` through :func:`replacing`; return the absolute path."""
    with replacing(path) as temp:
        temp.write_bytes(data)
    return Path(path).expanduser().absolute()
