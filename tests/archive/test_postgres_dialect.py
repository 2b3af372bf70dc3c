"""Portable SQL in psycopg's placeholders, and server errors as the archive's own.

Outside references: psycopg 3 documentation, "Passing parameters to SQL
queries" (``%s`` placeholders; a literal ``%`` is written ``%%``);
PostgreSQL documentation, Appendix A "Error Codes".
"""

from __future__ import annotations

import sqlite3
from contextlib import closing
from pathlib import Path
from typing import Any

import pytest
from pg_rows import copy_rows, filled_archive

from stripscan.archive import ArchiveBusyError, ArchiveError, ArchiveReadOnlyError
from stripscan.archive.postgres import schema
from stripscan.archive.postgres.dialect import archive_error, configure, placeholders, retryable

psycopg = pytest.importorskip("psycopg")  # the postgres extra; in CI its absence fails the run

WHERE = "postgresql://db.example/lots"


@pytest.mark.parametrize("portable, expected", [
    ("SELECT * FROM t WHERE a = ? AND b > ?", "SELECT * FROM t WHERE a = %s AND b > %s"),
    ("SELECT '?', \"odd?name\", x FROM t WHERE y = ?", "SELECT '?', \"odd?name\", x FROM t WHERE y = %s"),
    ("SELECT 'it''s ?' || ? FROM t", "SELECT 'it''s ?' || %s FROM t"),
    ("SELECT 5 % 2, '100%' -- why?\nFROM t WHERE a = ?", "SELECT 5 %% 2, '100%%' -- why?\nFROM t WHERE a = %s"),
    ("SELECT /* a ? here */ ?", "SELECT /* a ? here */ %s"),
    ("SELECT 1 WHERE e.id IS NOT ? AND x is ? AND this = ?",
     "SELECT 1 WHERE e.id IS DISTINCT FROM %s AND x IS NOT DISTINCT FROM %s AND this = %s"),
])
def test_placeholders_are_rewritten_outside_quotes_and_comments(portable: str, expected: str) -> None:
    assert placeholders(portable) == expected


@pytest.mark.postgres
@pytest.mark.parametrize("statement, params, expected", [
    ("SELECT ? || '?' || ?, 7 % 4, 'it''s 100%' -- a ? in a comment\n, /* and ? here */ ? + 1",
     ("a", "b", 41), ("a?b", 3, "it's 100%", 42)),
    # SQLite docs (lang_expr.html): IS and IS NOT compare NULL as a value.
    ("SELECT count(*) FROM (SELECT 1 AS a UNION ALL SELECT NULL) t WHERE a IS ?", (None,), (1,)),
    ("SELECT count(*) FROM (SELECT 1 AS a UNION ALL SELECT NULL) t WHERE a IS NOT ?", (None,), (1,)),
    ("SELECT count(*) FROM (SELECT 1 AS a UNION ALL SELECT NULL) t WHERE a IS NOT ?", (1,), (1,)),
])
def test_a_rewritten_statement_gives_on_the_server_what_sqlite_gives(pg_database: Any, statement: str,
                                                                     params: tuple, expected: tuple) -> None:
    with closing(sqlite3.connect(":memory:")) as lite:
        assert lite.execute(statement, params).fetchone() == expected
    with pg_database.connect() as conn:
        assert conn.execute(placeholders(statement), params).fetchone() == expected


@pytest.mark.postgres
def test_flags_and_sums_come_and_go_as_in_sqlite(pg_database: Any) -> None:
    statement = "SELECT ?, sum(v), avg(v), sum(v) / 2.0, count(*) FROM (SELECT 1 AS v UNION ALL SELECT 2) t"
    with closing(sqlite3.connect(":memory:")) as lite:
        expected = lite.execute(statement, (True,)).fetchone()
    with pg_database.connect() as conn:
        configure(conn)
        got = conn.execute(placeholders(statement), (True,)).fetchone()
        # A flag goes into the schema's integer column as SQLite stores it.
        conn.execute("INSERT INTO processors (name) VALUES ('North room')")
        conn.execute("INSERT INTO qc_entries (processor, date, source, entered_late) "
                     "VALUES ('North room', '2024-10-01', 'manual', %s)", (True,))
        stored = conn.execute("SELECT entered_late FROM qc_entries").fetchone()[0]
    assert expected == (1, 3, 1.5, 1.5, 2)
    assert got == expected and [type(v) for v in got] == [type(v) for v in expected]
    assert stored == 1 and type(stored) is int


@pytest.fixture
def recorder(pg_database: Any, tmp_path: Path) -> Any:
    with pg_database.connect() as conn:
        copy_rows(filled_archive(tmp_path / "a.sqlite3"), conn)
        role = schema.create_roles(conn, WHERE)["recorder"]
        conn.execute(f'CREATE ROLE "{pg_database.name}_rec" LOGIN IN ROLE "{role}"')
    with pg_database.connect(f"{pg_database.name}_rec") as conn:
        yield conn


def _raised(conn: Any, statement: str) -> psycopg.Error:
    with pytest.raises(psycopg.Error) as caught:
        conn.execute(statement)
    return caught.value


@pytest.mark.postgres
def test_a_missing_right_is_named_in_one_line(recorder: Any) -> None:
    cases = {
        "INSERT INTO qc_settings (processor, settings_json, updated_at) VALUES ('North room', '{}', 'x')":
            "may not set QC limits and settings; the archive's physicist role may",
        "UPDATE snapshots SET retired_at = 'x', retired_reason = 'y' WHERE id = 1":
            "may not retire snapshots; the archive's physicist role may",
        ("INSERT INTO qc_entries (id, processor, date, source, corrects, reason) "
         "VALUES (20, 'North room', '2024-10-01', 'manual', 4, 'typo')"):
            "may not correct QC entries; the archive's physicist role may",
        "DELETE FROM crossovers": "lacks a right this needs (permission denied for table crossovers)",
    }
    for statement, words in cases.items():
        error = archive_error(_raised(recorder, statement), WHERE, "store it", statement=statement)
        assert isinstance(error, ArchiveReadOnlyError)
        assert str(error).startswith(f"{WHERE}: cannot store it: your login on the server ")
        assert words in str(error) and "\n" not in str(error)


@pytest.mark.postgres
def test_a_history_trigger_reads_as_sqlites_refusal(pg_database: Any, tmp_path: Path) -> None:
    with pg_database.connect() as conn:
        copy_rows(filled_archive(tmp_path / "a.sqlite3"), conn)
        error = archive_error(_raised(conn, "DELETE FROM qc_events"), WHERE, "delete it")
    assert type(error) is ArchiveError
    assert str(error) == f"{WHERE}: cannot delete it: QC events are never deleted"


@pytest.mark.postgres
def test_a_serialization_failure_is_retryable_and_then_busy(pg_database: Any) -> None:
    first = pg_database.connect(autocommit=False)
    second = pg_database.connect(autocommit=False)
    try:
        for conn in (first, second):
            conn.execute("SET TRANSACTION ISOLATION LEVEL SERIALIZABLE")
            conn.execute("SELECT count(*) FROM film_types").fetchone()
        first.execute("INSERT INTO film_types (name) VALUES ('one')")
        second.execute("INSERT INTO film_types (name) VALUES ('two')")
        first.commit()
        with pytest.raises(psycopg.errors.SerializationFailure) as caught:
            second.commit()
    finally:
        first.close()
        second.close()
    assert retryable(caught.value)
    error = archive_error(caught.value, WHERE, "add film type 'two'", attempts=3)
    assert isinstance(error, ArchiveBusyError) and "(tried 3 times)" in str(error)


@pytest.mark.postgres
def test_a_server_that_cannot_be_reached_is_said_plainly(pg_server: Any, tmp_path: Path) -> None:
    with pytest.raises(psycopg.OperationalError) as caught:
        psycopg.connect(f"host={tmp_path} dbname=lots connect_timeout=2")
    assert not retryable(caught.value)
    error = archive_error(caught.value, WHERE, "open it")
    assert str(error).startswith(f"{WHERE}: cannot open it: the connection to the server failed (")
