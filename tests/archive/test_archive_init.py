"""``stripscan archive init LOCATION [--roles]``: an archive's tables, and on a server its three group roles.

The roles are checked by what a login made a member of each may do, with
SQL sent directly (PostgreSQL 15 documentation, "Database Roles",
"Privileges": a member of a role has its rights).
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from stripscan.archive import Archive, ArchiveReadOnlyError, Processor
from stripscan.cli.main import main

psycopg = pytest.importorskip("psycopg")  # the postgres extra; in CI its absence fails the run


@pytest.fixture
def bare(pg_server: Any) -> Iterator[tuple[str, str]]:
    """A database with nothing in it, as an administrator makes one: (name, url)."""
    name = pg_server.create_database(f"init_{os.getpid()}_{id(object())}")
    try:
        yield name, pg_server.url(name)
    finally:
        pg_server.drop_database(name)


def test_init_on_a_server_with_roles_then_again(bare: tuple[str, str], pg_server: Any,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    name, url = bare
    assert main(["archive", "init", url, "--roles"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0] == f"created the archive's tables in {url} (schema version 4)"
    assert out[1] == f"created the roles {name}_reader, {name}_recorder, {name}_physicist"
    assert [line.split("--")[0].split() for line in out[3:]] == [
        ["GRANT", f"{name}_{kind}", "TO", "LOGIN_NAME;"] for kind in ("reader", "recorder", "physicist")]
    # The printed line, run by an administrator, lets a person in with that role's rights.
    grant = out[3].split("--")[0].strip().replace("LOGIN_NAME", f"{name}_mira")
    pg_server.admin(f'CREATE ROLE "{name}_mira" LOGIN')
    with pg_server.connect(name) as conn:
        conn.execute(grant)
    with Archive.open(pg_server.url(name, user=f"{name}_mira"), create=False) as archive:
        assert archive.list_lots() == []
        with pytest.raises(ArchiveReadOnlyError, match="may not add to the archive; the archive's recorder role may"):
            archive.add_processor(Processor("North room"))

    assert main(["archive", "init", url, "--roles"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0] == f"the archive's tables are already in {url} (schema version 4); nothing to create"
    assert out[1] == (f"the roles {name}_reader, {name}_recorder, {name}_physicist were already there; "
                      "granted their rights again")


def test_init_without_roles_says_how_to_get_them(bare: tuple[str, str], capsys: pytest.CaptureFixture[str]) -> None:
    _, url = bare
    assert main(["archive", "init", url]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out == [f"created the archive's tables in {url} (schema version 4)",
                   "(add --roles to create the reader, recorder and physicist roles that people's logins join)"]
    assert main(["archive", "list", "--archive", url]) == 0


def test_init_refuses_another_programs_database(bare: tuple[str, str], pg_server: Any,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    name, url = bare
    with pg_server.connect(name) as conn:
        conn.execute("CREATE TABLE patients (id integer)")
    assert main(["archive", "init", url]) == 1
    assert capsys.readouterr().err == (
        f"stripscan: error: {url} is a PostgreSQL database with 1 table(s) of its own, but not a stripscan "
        "archive; name an empty database or an archive\n")


def test_roles_need_a_login_that_may_create_them(bare: tuple[str, str], pg_server: Any,
                                                 capsys: pytest.CaptureFixture[str]) -> None:
    name, _ = bare
    owner = f"{name}_owner"
    pg_server.admin(f'CREATE ROLE "{owner}" LOGIN')
    pg_server.admin(f'ALTER DATABASE "{name}" OWNER TO "{owner}"')
    with pg_server.connect(name) as conn:
        conn.execute(f'ALTER SCHEMA public OWNER TO "{owner}"')
    url = pg_server.url(name, user=owner)
    assert main(["archive", "init", url, "--roles"]) == 1
    assert capsys.readouterr().err == (
        f"stripscan: error: {url}: cannot create the archive's roles: the login {owner!r} needs CREATEROLE and "
        "must own the archive's tables (run it as the administrator who ran it without --roles)\n")
    # The tables were made (their own step, kept); the roles were not.
    assert not pg_server.admin("SELECT 1 FROM pg_roles WHERE rolname = %s", (f"{name}_reader",))
    assert main(["archive", "init", url]) == 0
    assert "already in" in capsys.readouterr().out


def test_init_a_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "site.sqlite3"
    assert main(["archive", "init", str(path)]) == 0
    assert capsys.readouterr().out == f"created the archive's tables in {path} (schema version 4)\n"
    assert main(["archive", "init", str(path)]) == 0
    assert capsys.readouterr().out == (f"the archive's tables are already in {path} (schema version 4); "
                                       "nothing to create\n")
    assert main(["archive", "init", str(path), "--roles"]) == 1
    assert capsys.readouterr().err == (
        f"stripscan: error: {path}: roles are for an archive on a PostgreSQL server; who may change a file "
        "archive is set by the file's permissions\n")
    other = tmp_path / "notes.txt"
    other.write_text("not an archive\n")
    assert main(["archive", "init", str(other)]) == 1
    assert "is not an SQLite database" in capsys.readouterr().err


def test_the_readme_set_up_by_an_administrator_who_is_not_a_superuser(bare: tuple[str, str], pg_server: Any,
                                                                       capsys: pytest.CaptureFixture[str]) -> None:
    # README "Shared archive": createuser --createrole archive_admin; createdb --owner archive_admin; init --roles.
    name, _ = bare
    admin, person = f"{name}_admin", f"{name}_mira"
    pg_server.admin(f'CREATE ROLE "{admin}" LOGIN CREATEROLE')
    pg_server.admin(f'ALTER DATABASE "{name}" OWNER TO "{admin}"')
    admin_url = pg_server.url(name, user=admin)
    assert main(["archive", "init", admin_url, "--roles"]) == 0
    grants = [line.split("--")[0].strip() for line in capsys.readouterr().out.splitlines() if "GRANT" in line]
    with pg_server.connect(name, admin) as conn:
        conn.execute(f'CREATE ROLE "{person}" LOGIN')
        conn.execute(grants[1].replace("LOGIN_NAME", f'"{person}"'))  # the recorder's line
    url = pg_server.url(name, user=person)
    day = ["--processor", "North room", "--base-fog", "0.19", "--mid-density", "1.20", "--density-difference", "1.84"]
    # A new processor's QC settings are a physicist's to set; the owner starts the log here.
    assert main(["qc", "add", "--archive", admin_url, "--new-processor", "--date", "2024-10-01", *day]) == 0
    assert main(["qc", "add", "--archive", url, "--date", "2024-10-02", *day]) == 0
    assert main(["qc", "limits", "--archive", url, "--processor", "North room", "--md-dd", "0.12", "--no-warning"]) == 1
    assert "may not set QC limits and settings; the archive's physicist role may" in capsys.readouterr().err
