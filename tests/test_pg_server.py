"""The throwaway PostgreSQL server the tests and benchmarks start themselves (tests/pg_server.py).

Outside reference: PostgreSQL 15 documentation, "Connections and
Authentication" (listen_addresses = '' opens no TCP port;
unix_socket_directories) and "CREATE DATABASE" (TEMPLATE copies a database).
"""

from __future__ import annotations

import os
import pwd
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path
from typing import Any

import pytest
from pg_server import PgServer

from stripscan.archive.postgres import schema

TESTS = Path(__file__).resolve().parent
ROOT = TESTS.parent


def _gone(path: Path, seconds: float) -> bool:
    deadline = time.monotonic() + seconds
    while path.exists() and time.monotonic() < deadline:
        time.sleep(0.2)
    return not path.exists()


def test_the_server_listens_on_its_own_socket_only(pg_server: PgServer) -> None:
    with pg_server.connect() as conn:
        assert conn.execute("SHOW listen_addresses").fetchone()[0] == ""
        assert conn.execute("SHOW unix_socket_directories").fetchone()[0] == str(pg_server.socket_dir)
        assert int(conn.execute("SHOW server_version_num").fetchone()[0]) >= 150000
    assert (pg_server.socket_dir / ".s.PGSQL.5432").is_socket()
    if os.geteuid() == 0:
        # The server refuses to run as root: its tools run as the postgres OS user, who owns the folder.
        assert pwd.getpwuid(pg_server.socket_dir.stat().st_uid).pw_name == "postgres"
        assert pwd.getpwuid(pg_server.data_dir.stat().st_uid).pw_name == "postgres"


def test_each_test_gets_its_own_database_with_the_archive_schema(pg_database: Any) -> None:
    assert pg_database.name in pg_database.server.databases()
    with pg_database.connect() as conn:
        assert conn.execute("SELECT current_database()").fetchone()[0] == pg_database.name
        assert schema.schema_version(conn) == schema.latest_version()


def _run_pytest(folder: Path, *, ci: bool, extra_env: dict[str, str] | None = None) -> subprocess.CompletedProcess:
    env = {key: value for key, value in os.environ.items() if key != "CI"}
    env["PYTHONPATH"] = os.pathsep.join([str(TESTS), str(ROOT)])
    if ci:
        env["CI"] = "1"
    env.update(extra_env or {})
    return subprocess.run([sys.executable, "-m", "pytest", "-q", "-p", "pg_plugin", "-p", "no:cacheprovider",
                           "-c", str(folder / "pytest.ini"), str(folder)],
                          capture_output=True, text=True, env=env, cwd=folder, timeout=300)


def _write_suite(folder: Path, body: str) -> None:
    (folder / "pytest.ini").write_text("[pytest]\naddopts = --strict-markers\nmarkers =\n"
                                       "    postgres: needs the throwaway PostgreSQL server\n")
    (folder / "test_inner.py").write_text(textwrap.dedent(body))


@pytest.mark.postgres
def test_databases_are_dropped_after_each_test_and_the_server_stopped_after_the_run(tmp_path: Path) -> None:
    record = tmp_path / "seen.txt"
    _write_suite(tmp_path, f"""
        from pathlib import Path
        RECORD = Path({str(record)!r})

        def test_first(pg_database):
            RECORD.write_text(f"{{pg_database.server.folder}}\\n{{pg_database.name}}\\n")

        def test_second(pg_database):
            folder, first = RECORD.read_text().split()
            assert first not in pg_database.server.databases()
            assert pg_database.name != first

        def test_third_fails_and_the_server_still_stops(pg_server):
            assert False, "on purpose"
    """)
    done = _run_pytest(tmp_path, ci=False)
    assert "1 failed, 2 passed" in done.stdout, done.stdout + done.stderr
    folder = Path(record.read_text().split()[0])
    assert folder.name.startswith("stripscan-pg-") and not folder.exists()


@pytest.mark.postgres
def test_the_server_goes_when_the_process_that_started_it_is_killed(tmp_path: Path) -> None:
    code = textwrap.dedent("""
        import os, signal, sys
        sys.path.insert(0, sys.argv[1])
        from pg_server import PgServer
        server = PgServer().start()
        print(server.folder, flush=True)
        os.kill(os.getpid(), signal.SIGKILL)
    """)
    done = subprocess.run([sys.executable, "-c", code, str(TESTS)], capture_output=True, text=True, timeout=120)
    assert done.returncode == -signal.SIGKILL
    folder = Path(done.stdout.strip())
    # The watcher polls twice a second, then stops the server and removes its folder.
    assert folder.name.startswith("stripscan-pg-") and _gone(folder, 30)
    running = subprocess.run(["pgrep", "-f", f"postgres -D {folder}"], capture_output=True, text=True)
    assert running.stdout.strip() == ""


@pytest.mark.parametrize("ci, returncode", [(False, 0), (True, 1)])
def test_in_ci_a_skipped_postgres_test_fails_the_run(tmp_path: Path, ci: bool, returncode: int) -> None:
    _write_suite(tmp_path, """
        import pytest

        def test_plain():
            pass

        def test_needs_a_server(pg_database):
            pass

        @pytest.mark.postgres
        def test_marked():
            pytest.skip("no server here")
    """)
    # No PostgreSQL tools: the server's tests skip.
    done = _run_pytest(tmp_path, ci=ci, extra_env={"STRIPSCAN_PG_BIN": str(tmp_path / "nowhere")})
    assert done.returncode == returncode, done.stdout + done.stderr
    assert "1 passed, 2 skipped" in done.stdout
    assert ("PostgreSQL tests skipped in CI" in done.stdout) is ci
