"""Fixtures for the lot archive tests (builders live in ``archive_factory``)."""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

# pytest may run with --import-mode=importlib, which puts no test folder on
# sys.path; the test modules and child processes import the builders by name.
if str(Path(__file__).parent) not in sys.path:
    sys.path.insert(0, str(Path(__file__).parent))

from archive_factory import make_draft, populate  # noqa: E402

from stripscan.archive import Archive, NewSnapshot  # noqa: E402


@pytest.fixture
def archive_path(tmp_path: Path) -> Path:
    return tmp_path / "linden-vale.sqlite3"


@pytest.fixture
def archive(archive_path: Path) -> Iterator[Archive]:
    """An archive with the clinic's reference data and no snapshots."""
    with Archive.open(archive_path) as opened:
        populate(opened)
        yield opened


@pytest.fixture
def draft() -> Callable[..., NewSnapshot]:
    return make_draft
