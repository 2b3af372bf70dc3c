"""The archive's schema on a PostgreSQL server: SQLite's tables, and history the server itself keeps.

Every check talks to a throwaway server in plain SQL, not through stripscan.
Outside references: PostgreSQL 15 documentation, "CREATE TRIGGER" (a BEFORE
row trigger that raises aborts the statement; TRUNCATE fires only statement
triggers), "Constraints" (CHECK, UNIQUE, partial unique indexes) and
"Identity columns"; SQLite's behaviour on the same rows is the other side of
each comparison.
"""

from __future__ import annotations

import json
import sqlite3
import subprocess
import sys
from contextlib import closing
from pathlib import Path
from typing import Any

import pytest
from archive_factory import raw_connection
from pg_rows import NORTH, TABLES, copy_rows, filled_archive, sqlite_objects, sqlite_rows, sqlite_schema

from stripscan.archive import ArchiveError
from stripscan.archive.sqlite.migrations import LATEST_VERSION as SQLITE_VERSION
from stripscan.archive.postgres import schema

psycopg = pytest.importorskip("psycopg")  # the postgres extra; in CI its absence fails the run

pytestmark = pytest.mark.postgres

RETIREMENT = {"retired_at", "retired_reason"}

# Tables SQLite never lets a row be changed or deleted from, with the words of its refusals.
HISTORY = {
    "snapshot_data": ("stored snapshot data is never changed", "stored snapshot data is never deleted"),
    "snapshot_steps": ("stored step densities are never changed", "stored step densities are never deleted"),
    "calibrations": ("a stored calibration is never changed", "a stored calibration is never deleted"),
    "snapshot_notes": ("notes are never changed", "notes are never deleted"),
    "qc_entries": ("QC entries are never changed", "QC entries are never deleted"),
    "qc_events": ("QC events are never changed", "QC events are never deleted"),
    "qc_settings": ("QC settings rows are never changed", "QC settings rows are never deleted"),
    "crossovers": ("crossover records are never changed", "crossover records are never deleted"),
    "record_chain": ("the record chain is never changed", "the record chain is never changed"),
}


@pytest.fixture(scope="module")
def sqlite_archive(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return filled_archive(tmp_path_factory.mktemp("pg-schema") / "linden-vale.sqlite3")


@pytest.fixture
def owner(pg_database: Any, sqlite_archive: Path) -> Any:
    """A connection as the tables' owner to a database holding the SQLite archive's rows."""
    with pg_database.connect() as conn:
        copy_rows(sqlite_archive, conn)
        yield conn


def _rows(conn: Any, table: str) -> list[tuple[Any, ...]]:
    return conn.execute(f"SELECT * FROM {table} ORDER BY 1, 2").fetchall()


def _columns(conn: Any, table: str) -> list[str]:
    return [row[0] for row in conn.execute(
        "SELECT column_name FROM information_schema.columns WHERE table_schema = 'public' AND table_name = %s "
        "ORDER BY ordinal_position", (table,))]


def test_the_template_is_at_the_latest_version_with_sqlites_tables_and_columns(pg_database: Any,
                                                                                 sqlite_archive: Path) -> None:
    with pg_database.connect() as conn:
        assert schema.schema_version(conn) == schema.latest_version() == 1
        summary = conn.execute("SELECT summary FROM stripscan_schema WHERE version = 1").fetchone()[0]
        tables = {row[0] for row in conn.execute("SELECT tablename FROM pg_tables WHERE schemaname = 'public'")}
        expected = sqlite_schema(sqlite_archive)
        assert tables == set(expected) | {"stripscan_schema"}
        for table, columns in expected.items():
            assert _columns(conn, table) == columns, table
        indexes = {row[0] for row in conn.execute("SELECT indexname FROM pg_indexes WHERE schemaname = 'public'")}
    # The latest server version holds the SQLite schema this stripscan writes (a new SQLite
    # step needs a server step too), and says so.
    assert schema.SQLITE_EQUIVALENT[schema.latest_version()] == SQLITE_VERSION
    assert f"schema version {SQLITE_VERSION}" in summary
    assert sqlite_objects(sqlite_archive, "index") <= indexes


def test_an_sqlite_archives_rows_go_in_as_they_are_and_read_back_equal(owner: Any, sqlite_archive: Path) -> None:
    for table in TABLES:
        _, rows = sqlite_rows(sqlite_archive, table)
        assert rows, f"the filled archive has no {table} row"
        assert _rows(owner, table) == rows, table


@pytest.mark.parametrize("table", sorted(HISTORY))
def test_history_cannot_be_changed_deleted_or_truncated_even_by_the_owner(owner: Any, table: str) -> None:
    changed, deleted = HISTORY[table]
    before = _rows(owner, table)
    for column in _columns(owner, table):
        with pytest.raises(psycopg.errors.IntegrityError, match=changed):
            owner.execute(f"UPDATE {table} SET {column} = {column}")
    with pytest.raises(psycopg.errors.IntegrityError, match=deleted):
        owner.execute(f"DELETE FROM {table}")
    with pytest.raises(psycopg.errors.IntegrityError, match=deleted):
        owner.execute(f"TRUNCATE {table} CASCADE")
    assert _rows(owner, table) == before


def test_every_snapshot_column_but_retirement_is_frozen_by_name_and_by_value(owner: Any) -> None:
    before = _rows(owner, "snapshots")
    for column in _columns(owner, "snapshots"):
        if column in RETIREMENT:
            continue
        with pytest.raises(psycopg.errors.IntegrityError, match="snapshots are never changed; store a revision"):
            owner.execute(f"UPDATE snapshots SET {column} = {column} WHERE id = 1")
    # A column left out of the list by name is still caught by its value (here: one added by hand).
    owner.execute("ALTER TABLE snapshots ADD COLUMN later_column text")
    with pytest.raises(psycopg.errors.IntegrityError, match="snapshots are never changed"):
        owner.execute("UPDATE snapshots SET later_column = 'x' WHERE id = 1")
    owner.execute("ALTER TABLE snapshots DROP COLUMN later_column")
    for sql in ("DELETE FROM snapshots WHERE id = 3", "TRUNCATE snapshots CASCADE"):
        with pytest.raises(psycopg.errors.IntegrityError, match="snapshots are never deleted"):
            owner.execute(sql)
    assert _rows(owner, "snapshots") == before


def test_a_lots_details_may_change_but_not_its_key_and_it_is_never_deleted(owner: Any) -> None:
    owner.execute("UPDATE emulsion_lots SET notes = 'box 2 opened' WHERE lot_id = 'ALD-2407-11'")
    with pytest.raises(psycopg.errors.IntegrityError, match="a lot id is never changed"):
        owner.execute("UPDATE emulsion_lots SET lot_id = lot_id")
    for sql in ("DELETE FROM emulsion_lots WHERE lot_id = 'ALD-2409-03'", "TRUNCATE emulsion_lots CASCADE"):
        with pytest.raises(psycopg.errors.IntegrityError, match="a lot is never deleted"):
            owner.execute(sql)
    # Reference data SQLite leaves open is kept by its references: a processor with history stays.
    with pytest.raises(psycopg.errors.ForeignKeyViolation):
        owner.execute("DELETE FROM processors WHERE name = %s", (NORTH,))
    with pytest.raises(psycopg.errors.IntegrityError, match="never deleted"):
        owner.execute("TRUNCATE processors CASCADE")


def test_retirement_is_set_once_with_a_reason_and_never_undone(owner: Any) -> None:
    for sql in ("UPDATE snapshots SET retired_at = '2024-11-01T09:00:00Z', retired_reason = '  ' WHERE id = 3",
                "UPDATE snapshots SET retired_at = NULL, retired_reason = 'why' WHERE id = 3"):
        with pytest.raises(psycopg.errors.IntegrityError, match="retired once, with a reason"):
            owner.execute(sql)
    owner.execute("UPDATE snapshots SET retired_at = '2024-11-01T09:00:00Z', retired_reason = 'fogged' WHERE id = 3")
    for sql in ("UPDATE snapshots SET retired_at = NULL, retired_reason = NULL WHERE id = 3",
                "UPDATE snapshots SET retired_at = '2024-12-01T09:00:00Z', retired_reason = 'later' WHERE id = 3"):
        with pytest.raises(psycopg.errors.IntegrityError, match="retired once, with a reason, and stays retired"):
            owner.execute(sql)
    assert owner.execute("SELECT retired_at, retired_reason FROM snapshots WHERE id = 3").fetchone() == (
        "2024-11-01T09:00:00Z", "fogged")


def test_insert_on_conflict_update_is_refused_like_an_update(owner: Any) -> None:
    # PostgreSQL docs (INSERT, ON CONFLICT DO UPDATE): the conflicting row is updated, firing UPDATE triggers.
    with pytest.raises(psycopg.errors.IntegrityError, match="a stored calibration is never changed"):
        owner.execute("INSERT INTO calibrations SELECT * FROM calibrations ON CONFLICT (hash) "
                      "DO UPDATE SET json = excluded.json")
    with pytest.raises(psycopg.errors.UniqueViolation):
        owner.execute("INSERT INTO snapshot_notes SELECT * FROM snapshot_notes")


def test_one_revision_per_snapshot_and_revisions_point_back(owner: Any) -> None:
    listed = ", ".join(c for c in _columns(owner, "snapshots") if c != "id")
    with pytest.raises(psycopg.errors.UniqueViolation, match="snapshots_revises"):
        owner.execute(f"INSERT INTO snapshots ({listed}) SELECT {listed} FROM snapshots WHERE id = 3")
    with pytest.raises(psycopg.errors.CheckViolation):
        owner.execute(f"INSERT INTO snapshots (id, {listed}) SELECT 5, {listed.replace('revises,', '9,', 1)} "
                      "FROM snapshots WHERE id = 3")


# Rows SQLite refuses by a CHECK; the server must refuse each too.
BAD_ROWS = [
    ("emulsion_lots (lot_id, expiry_date)", "('L-1', '2025-13-01')"),      # no such month
    ("emulsion_lots (lot_id, expiry_date)", "('L-2', '2025-2-3')"),        # not YYYY-MM-DD
    ("emulsion_lots (lot_id)", "('   ')"),                                  # blank key
    ("sensitometers (sensitometer_id, log_exposures_json)", "('S-2', '[0.0, 0.15')"),  # not JSON
    ("calibrations (hash, json)", "('abc', '{}')"),                         # hash not 64 characters
    ("qc_events (processor, date, kind)", "('North room', '2024-10-05', '')"),
    ("qc_entries (processor, date, source)", "('North room', '2024-10-09', 'guess')"),
    ("snapshot_notes (snapshot_id, created_at, text)", "(1, '2024-10-09 10:00', 'no T and Z')"),
    ("snapshot_data (snapshot_id, scan_json, strip_json, preview_png)", "(99, '{}', '{}', X'00')"),  # not a PNG
]


@pytest.mark.parametrize("target, values", BAD_ROWS)
def test_rows_sqlite_refuses_are_refused_by_the_server(owner: Any, sqlite_archive: Path, tmp_path: Path,
                                                       target: str, values: str) -> None:
    copy = tmp_path / "copy.sqlite3"
    copy.write_bytes(sqlite_archive.read_bytes())
    with raw_connection(copy) as conn, pytest.raises(sqlite3.IntegrityError):
        conn.execute(f"INSERT INTO {target} VALUES {values}")
    pg_values = values.replace("X'00'", "'\\x00'::bytea")
    with pytest.raises((psycopg.errors.CheckViolation, psycopg.errors.IntegrityError)):
        owner.execute(f"INSERT INTO {target} VALUES {pg_values}")


def test_a_day_that_does_not_exist_is_refused_though_sqlite_lets_it_in(owner: Any, tmp_path: Path) -> None:
    # SQLite docs (lang_datefunc.html): day values up to 31 are accepted in any month; date()
    # gives 2025-02-30 back unchanged, so SQLite's CHECK passes it.  The server is stricter;
    # stripscan's own entry checks refuse the day before either sees it.
    with closing(sqlite3.connect(":memory:")) as conn:
        assert conn.execute("SELECT date('2025-02-30') IS '2025-02-30'").fetchone() == (1,)
    with pytest.raises(psycopg.errors.CheckViolation):
        owner.execute("INSERT INTO emulsion_lots (lot_id, expiry_date) VALUES ('L-1', '2025-02-30')")
    owner.execute("INSERT INTO emulsion_lots (lot_id, expiry_date) VALUES ('L-1', '2028-02-29')")


# QC entries stored one after another, and SQLite's answer to each (None: stored).
QC_DAY = [
    ("'2024-10-02', NULL, NULL, NULL, 0", "one QC entry in use per processor and day"),
    ("'2024-10-05', 2, NULL, NULL, 0", "a repeat names an entry of the same processor and day"),
    ("'2024-09-30', NULL, NULL, NULL, 0", "stored marked as entered late"),
    ("'2024-09-30', NULL, NULL, NULL, 1", None),
    ("'2024-10-06', NULL, NULL, NULL, 0", None),
    # A correction moves entry 6 (2024-10-06) to the right day, which frees its old one ...
    ("'2024-10-07', NULL, 6, 'wrong day', 0", None),
    # ... for an entry marked late, since a later day (the 7th) is in the log now.
    ("'2024-10-06', NULL, NULL, NULL, 0", "stored marked as entered late"),
    ("'2024-10-06', NULL, NULL, NULL, 1", None),
    ("'2024-10-07', NULL, NULL, NULL, 0", "one QC entry in use per processor and day"),
]


def test_the_rules_of_a_qc_day_hold_on_the_server_as_in_sqlite(owner: Any, sqlite_archive: Path,
                                                               tmp_path: Path) -> None:
    copy = tmp_path / "copy.sqlite3"
    copy.write_bytes(sqlite_archive.read_bytes())
    # Ids given as the archive gives them: a refused insert takes no number on either side.
    insert = ("INSERT INTO qc_entries (id, processor, date, base_fog, mid_density, density_difference, source, "
              "repeat_of, corrects, reason, entered_late) VALUES ((SELECT max(id) + 1 FROM qc_entries), "
              "'North room', {}, 0.2, 1.2, 1.8, 'manual', {})")
    with raw_connection(copy) as lite:
        for values, refusal in QC_DAY:
            day, rest = values.split(", ", 1)
            sql = insert.format(day, rest)
            if refusal is None:
                lite.execute(sql)
                owner.execute(sql)
                continue
            with pytest.raises(sqlite3.IntegrityError, match=refusal):
                lite.execute(sql)
            with pytest.raises(psycopg.errors.IntegrityError, match=refusal):
                owner.execute(sql)
        assert _rows(owner, "qc_entries") == lite.execute("SELECT * FROM qc_entries ORDER BY 1, 2").fetchall()


def test_the_record_chain_only_grows_at_its_end(owner: Any) -> None:
    seq, head = owner.execute("SELECT seq, chain_sha256 FROM record_chain ORDER BY seq DESC LIMIT 1").fetchone()
    for wrong in (seq, seq + 2):
        with pytest.raises(psycopg.errors.IntegrityError, match="only grows at its end"):
            owner.execute("INSERT INTO record_chain VALUES (%s, 'note', '9', %s, %s)", (wrong, head, head))
    owner.execute("INSERT INTO record_chain VALUES (%s, 'note', '9', %s, %s)", (seq + 1, head, head))


def test_upgrading_is_idempotent_and_a_newer_or_foreign_database_is_refused(pg_database: Any) -> None:
    where = "postgresql:///archive"
    with pg_database.connect() as conn:
        assert schema.migrate(conn, where) == 1
        assert conn.execute("SELECT count(*) FROM stripscan_schema").fetchone()[0] == 1
        conn.execute("INSERT INTO stripscan_schema (version, summary) VALUES (2, 'from a later stripscan')")
        with pytest.raises(ArchiveError, match=r"newer stripscan \(server schema version 2; this one knows up to "
                                               r"1\); update stripscan"):
            schema.migrate(conn, where)
    other = pg_database.server.create_database(pg_database.name + "_other")
    try:
        with pg_database.server.connect(other) as conn:
            conn.execute("CREATE TABLE invoices (id int)")
            with pytest.raises(ArchiveError, match="1 table.s. of its own, but not a stripscan archive"):
                schema.migrate(conn, "postgresql:///other")
            assert schema.schema_version(conn) == 0
    finally:
        pg_database.server.drop_database(other)


def test_a_failing_step_leaves_the_database_as_it_was(pg_database: Any, monkeypatch: pytest.MonkeyPatch) -> None:
    other = pg_database.server.create_database(pg_database.name + "_fresh")
    try:
        broken = schema.SchemaStep(1, "0001_archive.sql", schema.steps()[0].sql.replace(
            "CREATE TABLE crossovers", "CREATE TABLE crossovers_typo (x int); CREATE TABLE film_types"))
        monkeypatch.setattr(schema, "steps", lambda: (broken,))
        with pg_database.server.connect(other) as conn:
            with pytest.raises(psycopg.errors.DuplicateTable):
                schema.migrate(conn, "postgresql:///fresh")
            assert conn.execute("SELECT count(*) FROM pg_tables WHERE schemaname = 'public'").fetchone()[0] == 0
    finally:
        pg_database.server.drop_database(other)


def test_an_archive_on_a_path_never_loads_the_postgresql_driver(tmp_path: Path) -> None:
    code = ("import sys; from stripscan.archive import Archive\n"
            f"with Archive.open({str(tmp_path / 'a.sqlite3')!r}) as a: a.list_lots()\n"
            "import stripscan.archive.postgres\n"
            "print('psycopg' in sys.modules)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip() == "False"


def test_without_the_driver_one_line_names_the_extra() -> None:
    code = ("import sys; sys.modules['psycopg'] = None\n"
            "from stripscan.archive.postgres import driver\n"
            "try:\n    driver()\nexcept Exception as exc:\n    print(type(exc).__name__, exc)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip().splitlines() == [
        'ArchiveError a PostgreSQL archive needs the PostgreSQL driver, which is not installed: '
        'pip install "stripscan[postgres]"']


def test_text_sorts_byte_by_byte_as_in_sqlite_whatever_the_databases_locale(pg_database: Any) -> None:
    server = pg_database.server
    name = pg_database.name + "_icu"
    # A database whose own locale sorts letters case-blind (ICU's en-US), as many servers are set up.
    server.admin(f"CREATE DATABASE {name} TEMPLATE template0 LOCALE_PROVIDER icu ICU_LOCALE 'en-US' "
                 "LOCALE 'C.UTF-8'")
    lots = ["b-lot", "B-lot", "a-lot", "_x", "Ä-lot"]
    try:
        with server.connect(name) as conn:
            schema.migrate(conn, "postgresql:///icu")
            for lot in lots:
                conn.execute("INSERT INTO emulsion_lots (lot_id) VALUES (%s)", (lot,))
            on_server = [row[0] for row in conn.execute("SELECT lot_id FROM emulsion_lots ORDER BY lot_id")]
            by_locale = [row[0] for row in conn.execute(
                'SELECT lot_id FROM emulsion_lots ORDER BY lot_id COLLATE "default"')]
    finally:
        server.drop_database(name)
    with closing(sqlite3.connect(":memory:")) as lite:
        lite.execute("CREATE TABLE t (lot_id TEXT)")
        lite.executemany("INSERT INTO t VALUES (?)", [(lot,) for lot in lots])
        in_sqlite = [row[0] for row in lite.execute("SELECT lot_id FROM t ORDER BY lot_id")]
    assert on_server == in_sqlite == ["B-lot", "_x", "a-lot", "b-lot", "Ä-lot"]  # UTF-8 byte order
    assert by_locale != in_sqlite


@pytest.mark.parametrize("path", ["$.metrics.mid_density_step", "$.metrics.gamma", "$.steps[2].od", "$.name",
                                  "$.missing", "$.metrics.none", "$.metrics", "$"])
def test_json_extract_reads_what_sqlites_does(pg_database: Any, path: str) -> None:
    document = json.dumps({"metrics": {"mid_density_step": 11, "gamma": 2.75, "none": None}, "name": "strip 1",
                           "steps": [{"od": 0.19}, {"od": 0.2}, {"od": 0.31}]})
    with closing(sqlite3.connect(":memory:")) as lite:
        expected = lite.execute("SELECT json_extract(?, ?)", (document, path)).fetchone()[0]
    with pg_database.connect() as conn:
        got = conn.execute("SELECT json_extract(%s, %s)", (document, path)).fetchone()[0]
    # SQLite docs (json1.html): an object or array comes back as its JSON text; the server gives it parsed.
    assert (json.loads(expected) if isinstance(expected, str) and expected[:1] in "{[" else expected) == got
