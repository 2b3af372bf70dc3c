"""Fixtures for the lot archive tests (builders live in ``archive_factory``)."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path

import pytest
from archive_factory import make_draft, populate

from stripscan.archive import Archive, NewSnapshot


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
