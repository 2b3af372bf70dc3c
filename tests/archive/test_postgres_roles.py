"""Who may do what in a server archive: the three group roles, shown by SQL sent directly.

Each person logs in as their own role, a member of one group role.
Outside reference: PostgreSQL 15 documentation, "Privileges" (GRANT, column
privileges), "Row Security Policies" (policies for a role apply to its
members; a table's owner is not subject to them) and "Database Roles".
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from pg_plugin import TEMPLATE
from pg_rows import NORTH, copy_rows, filled_archive

from stripscan.archive.postgres import schema

psycopg = pytest.importorskip("psycopg")  # the postgres extra; in CI its absence fails the run

pytestmark = pytest.mark.postgres

DENIED = psycopg.errors.InsufficientPrivilege

# One plain SQL statement per right; ids above those of the filled archive.
SNAPSHOT = ("INSERT INTO snapshots (id, created_at, lot_id, scan_path, scan_sha256, strip_index{extra}) "
            "VALUES ({id}, '2024-11-05T08:00:00Z', 'ALD-2407-11', '/srv/scan.tif', repeat('a', 64), 1{values})")
WRITES = {
    "snapshot": SNAPSHOT.format(id=10, extra="", values=""),
    "revision": SNAPSHOT.format(id=11, extra=", revises, revision_reason", values=", 2, 'wrong processor'"),
    "retired snapshot": SNAPSHOT.format(id=12, extra=", retired_at, retired_reason",
                                        values=", '2024-11-05T09:00:00Z', 'copied in retired'"),
    "note": "INSERT INTO snapshot_notes (id, snapshot_id, created_at, text) VALUES (10, 1, '2024-11-05T08:00:00Z', 'ok')",
    "QC entry": ("INSERT INTO qc_entries (id, processor, date, source) "
                 f"VALUES (10, '{NORTH}', '2024-11-05', 'manual')"),
    "QC repeat": ("INSERT INTO qc_entries (id, processor, date, source, repeat_of) "
                  f"VALUES (11, '{NORTH}', '2024-11-05', 'manual', 10)"),
    "QC correction": ("INSERT INTO qc_entries (id, processor, date, source, corrects, reason) "
                      f"VALUES (12, '{NORTH}', '2024-10-01', 'manual', 4, 'typed wrong')"),
    "new lot": "INSERT INTO emulsion_lots (lot_id) VALUES ('ALD-2411-01')",
    "new processor": "INSERT INTO processors (name) VALUES ('East room')",
    "calibration": "INSERT INTO calibrations (hash, json) VALUES (repeat('b', 64), '{}')",
    "QC settings": f"INSERT INTO qc_settings (processor, settings_json, updated_at) VALUES ('{NORTH}', '{{}}', 'now')",
    "QC event": f"INSERT INTO qc_events (processor, date, kind) VALUES ('{NORTH}', '2024-11-05', 'service')",
    "crossover": f"INSERT INTO crossovers (processor, date, record_json) VALUES ('{NORTH}', '2024-11-05', '{{}}')",
    "film type": "INSERT INTO film_types (name) VALUES ('Birch B')",
    "sensitometer": "INSERT INTO sensitometers (sensitometer_id, log_exposures_json) VALUES ('S-2', '[]')",
    "retirement": "UPDATE snapshots SET retired_at = '2024-11-05T09:00:00Z', retired_reason = 'fogged' WHERE id = 1",
    "lot details": "UPDATE emulsion_lots SET notes = 'second box' WHERE lot_id = 'ALD-2409-03'",
}
RECORDER = {"snapshot", "note", "QC entry", "QC repeat", "new lot", "new processor", "calibration"}
PHYSICIST = set(WRITES)

# What stops each write that a role lacks: a missing grant, or a row policy.
BY_POLICY = {"revision", "retired snapshot", "QC correction"}


@pytest.fixture(scope="module")
def sqlite_archive(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return filled_archive(tmp_path_factory.mktemp("pg-roles") / "linden-vale.sqlite3")


@pytest.fixture
def people(pg_database: Any, sqlite_archive: Path) -> dict[str, str]:
    """The archive's roles created, and one login per group role; returns group -> login name."""
    with pg_database.connect() as conn:
        copy_rows(sqlite_archive, conn)
        groups = schema.create_roles(conn, "postgresql:///archive")
        logins = {}
        for group, role in groups.items():
            login = f"{pg_database.name}_{group}_login"
            conn.execute(f'CREATE ROLE "{login}" LOGIN IN ROLE "{role}"')
            logins[group] = login
    return logins


def _try(pg_database: Any, login: str, sql: str) -> Exception | None:
    with pg_database.connect(login) as conn:
        try:
            conn.execute(sql)
        except psycopg.Error as exc:
            return exc
    return None


def test_roles_are_named_after_the_database_unless_a_prefix_is_given(pg_database: Any) -> None:
    with pg_database.connect() as conn:
        assert schema.create_roles(conn, "here") == {
            kind: f"{pg_database.name}_{kind}" for kind in ("reader", "recorder", "physicist")}
        # Again: nothing new, nothing lost.
        assert schema.create_roles(conn, "here")["reader"] == f"{pg_database.name}_reader"
        named = schema.create_roles(conn, "here", prefix=f"{pg_database.name}_north")
        rows = conn.execute("SELECT rolname, rolcanlogin FROM pg_roles WHERE starts_with(rolname, %s) "
                            "ORDER BY rolname", (pg_database.name + "_",)).fetchall()
    assert named["physicist"] == f"{pg_database.name}_north_physicist"
    assert len(rows) == 6 and not any(login for _, login in rows)


@pytest.mark.parametrize("group, allowed", [("reader", set()), ("recorder", RECORDER), ("physicist", PHYSICIST)])
def test_each_role_may_do_what_it_is_given_and_nothing_more(pg_database: Any, people: dict[str, str],
                                                            group: str, allowed: set[str]) -> None:
    login = people[group]
    with pg_database.connect(login) as conn:
        for table in ("snapshots", "qc_entries", "record_chain", "stripscan_schema"):
            assert conn.execute(f"SELECT count(*) FROM {table}").fetchone()[0] > 0, table
    for right, sql in WRITES.items():
        refused = _try(pg_database, login, sql)
        if right in allowed:
            assert refused is None, f"{group} may store a {right}: {refused}"
        else:
            assert isinstance(refused, DENIED), f"{group} must not store a {right}: {refused!r}"
            words = "row-level security policy" if right in BY_POLICY and group != "reader" else "permission denied"
            assert words in str(refused), (right, str(refused))


def test_no_role_may_change_or_delete_history(pg_database: Any, people: dict[str, str]) -> None:
    statements = ["UPDATE snapshots SET notes = 'edited' WHERE id = 1", "DELETE FROM snapshots WHERE id = 1",
                  "UPDATE qc_entries SET mid_density = 1.0", "DELETE FROM qc_entries", "TRUNCATE qc_settings",
                  "DELETE FROM record_chain", "UPDATE qc_settings SET reason = 'x'", "DELETE FROM crossovers"]
    for login in people.values():
        for sql in statements:
            assert isinstance(_try(pg_database, login, sql), DENIED), (login, sql)
    # Even with the right to retire, a retired snapshot stays retired (the trigger, not the grant).
    physicist = people["physicist"]
    assert _try(pg_database, physicist, WRITES["retirement"]) is None
    refused = _try(pg_database, physicist, "UPDATE snapshots SET retired_at = NULL, retired_reason = NULL "
                                           "WHERE id = 1")
    assert isinstance(refused, psycopg.errors.IntegrityError) and "stays retired" in str(refused)


def test_a_role_of_one_archive_has_no_right_in_another(pg_database: Any, people: dict[str, str],
                                                       sqlite_archive: Path) -> None:
    server = pg_database.server
    other = server.create_database(pg_database.name + "_b", template=TEMPLATE)
    try:
        with server.connect(other) as conn:
            copy_rows(sqlite_archive, conn)
            schema.create_roles(conn, "postgresql:///b")
        with server.connect(other, people["physicist"]) as conn:
            with pytest.raises(DENIED):
                conn.execute("SELECT count(*) FROM snapshots")
    finally:
        server.drop_database(other)


def test_roles_need_the_schema_first(pg_database: Any) -> None:
    server = pg_database.server
    empty = server.create_database(pg_database.name + "_empty")
    try:
        with server.connect(empty) as conn, pytest.raises(Exception, match="create the archive's schema before"):
            schema.create_roles(conn, "postgresql:///empty")
    finally:
        server.drop_database(empty)
