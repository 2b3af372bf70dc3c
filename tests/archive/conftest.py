"""Fixtures for the lot archive tests (builders live in ``archive_factory``)."""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

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


def pytest_generate_tests(metafunc: pytest.Metafunc) -> None:
    # Every test of an archive runs on both backends: a file, and a database on the
    # throwaway server.  A test that also asks for the file itself (archive_path,
    # directly or through a fixture of its own) looks behind SQLite's back, so it
    # runs on the file only.
    if "archive_backend" in metafunc.fixturenames:
        kinds: list[Any] = ["sqlite"]
        if "archive_path" not in metafunc.fixturenames:
            kinds.append(pytest.param("postgres", marks=pytest.mark.postgres))
        metafunc.parametrize("archive_backend", kinds, indirect=True)


@pytest.fixture
def archive_backend(request: pytest.FixtureRequest) -> str:
    return request.param


@pytest.fixture
def archive_location(archive_backend: str, request: pytest.FixtureRequest) -> str | Path:
    """Where the test's archive is: a new file, or a new database on the throwaway server."""
    if archive_backend == "postgres":
        return request.getfixturevalue("pg_database").url
    return request.getfixturevalue("tmp_path") / "linden-vale.sqlite3"


@pytest.fixture
def archive(archive_location: str | Path) -> Iterator[Archive]:
    """An archive with the clinic's reference data and no snapshots, on each backend."""
    with Archive.open(archive_location) as opened:
        populate(opened)
        yield opened


@pytest.fixture
def draft() -> Callable[..., NewSnapshot]:
    return make_draft
