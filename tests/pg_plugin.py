"""pytest fixtures for tests that need a PostgreSQL server, and the CI rule that they run.

* ``pg_server`` (session): one throwaway server (:mod:`pg_server`) with a
  template database ``stripscan_template`` holding the archive's schema at
  its latest version; stopped at the end of the session whatever happens.
* ``pg_database`` (function): a fresh database copied from the template
  (``CREATE DATABASE ... TEMPLATE``), dropped after the test together with
  every role named after it.
* Tests using either are marked ``postgres`` automatically.  Where the
  server cannot run (no PostgreSQL tools, no driver) they are skipped, unless
  ``$CI`` is set: then every skipped ``postgres`` test fails the run.
"""

from __future__ import annotations

import itertools
import os
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import pytest
from pg_server import PgServer, unavailable_reason

TEMPLATE = "stripscan_template"
_numbers = itertools.count(1)


@dataclass(frozen=True)
class PgDatabase:
    """One database on the throwaway server, for one test."""

    server: PgServer
    name: str

    @property
    def conninfo(self) -> str:
        return self.server.conninfo(self.name)

    @property
    def url(self) -> str:
        return self.server.url(self.name)

    def connect(self, user: str | None = None, **kwargs: Any) -> Any:
        """A psycopg connection to this database (as the superuser unless ``user`` is given)."""
        return self.server.connect(self.name, user or "postgres", **kwargs)


def pytest_collection_modifyitems(items: list[pytest.Item]) -> None:
    for item in items:
        if {"pg_server", "pg_database"} & set(getattr(item, "fixturenames", ())):
            item.add_marker(pytest.mark.postgres)


@pytest.fixture(scope="session")
def pg_server() -> Iterator[PgServer]:
    reason = unavailable_reason()
    if reason is not None:
        pytest.skip(f"no PostgreSQL server for this test: {reason}")
    from stripscan.archive.postgres import schema

    server = PgServer()
    try:
        server.start()
        server.create_database(TEMPLATE)
        with server.connect(TEMPLATE) as conn:
            schema.migrate(conn, f"template database {TEMPLATE}")
        # A template must have no connections when it is copied; refusing them
        # keeps a stray test from holding one.
        server.admin(f"ALTER DATABASE {TEMPLATE} WITH ALLOW_CONNECTIONS false")
        yield server
    finally:
        server.stop()


@pytest.fixture
def pg_database(pg_server: PgServer) -> Iterator[PgDatabase]:
    name = pg_server.create_database(f"t{os.getpid()}_{next(_numbers)}", template=TEMPLATE)
    try:
        yield PgDatabase(pg_server, name)
    finally:
        pg_server.drop_database(name)


# ---------------------------------------------------- in CI they must run

_skipped: list[str] = []


def pytest_sessionstart(session: pytest.Session) -> None:
    reason = unavailable_reason()
    if reason is not None:
        # Test modules that need the driver skip whole (importorskip) before any test reports.
        _skipped.append(f"every PostgreSQL test: {reason}")


def pytest_runtest_logreport(report: pytest.TestReport) -> None:
    if report.skipped and "postgres" in report.keywords:
        _skipped.append(report.nodeid)


def pytest_terminal_summary(terminalreporter: Any) -> None:
    if _skipped and os.environ.get("CI"):
        terminalreporter.section("PostgreSQL tests skipped in CI", red=True)
        for nodeid in _skipped:
            terminalreporter.line(nodeid)


def pytest_sessionfinish(session: pytest.Session, exitstatus: int) -> None:
    if _skipped and os.environ.get("CI") and exitstatus == pytest.ExitCode.OK:
        session.exitstatus = pytest.ExitCode.TESTS_FAILED
