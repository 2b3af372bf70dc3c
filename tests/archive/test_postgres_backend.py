"""The server backend on its own: opening, one writer at a time, nothing half-written, plain errors.

Outside references: PostgreSQL 15 documentation, "Advisory Locks"
(pg_advisory_xact_lock is held to the end of the transaction),
"lock_timeout", "Transaction Isolation" (REPEATABLE READ sees one
snapshot) and "Server Shutdown" (immediate mode: the next start recovers,
transactions not committed are gone).
"""

from __future__ import annotations

import threading
import time
from contextlib import closing
from typing import Any

import pytest

from stripscan.archive import ArchiveBusyError, ArchiveError, ArchiveReadOnlyError, parse_location
from stripscan.archive.postgres import open_backend, schema
from stripscan.archive.postgres.backend import PostgresBackend
from stripscan.archive.sqlite.migrations import LATEST_VERSION as SQLITE_VERSION

psycopg = pytest.importorskip("psycopg")  # the postgres extra; in CI its absence fails the run

pytestmark = pytest.mark.postgres

ADD_TYPE = "INSERT INTO film_types (name, description) VALUES (?, ?)"


def _open(url: str, *, busy_timeout_ms: int = 5000, read_only: bool = False, create: bool = True) -> PostgresBackend:
    return open_backend(parse_location(url), busy_timeout_ms=busy_timeout_ms, read_only=read_only, create=create)


def _names(backend: PostgresBackend) -> list[str]:
    return [row["name"] for row in backend.named("SELECT name FROM film_types ORDER BY name")]


def test_opening_names_the_archive_without_its_password_and_reads_by_name_and_position(pg_database: Any) -> None:
    url = pg_database.url.replace("postgres@", "postgres:not-needed@", 1)
    with closing(_open(url)) as backend:
        assert "not-needed" not in backend.location and backend.location.startswith("postgresql://postgres@/")
        assert backend.server_schema_version() == schema.latest_version() and backend.path is None
        assert backend.schema_version() == SQLITE_VERSION
        with backend.writing("add a film type") as conn:
            conn.execute(ADD_TYPE, ("Alder G", "100% green"))
        row = backend.named("SELECT name, description FROM film_types WHERE name = ?", ("Alder G",))[0]
    assert row == ("Alder G", "100% green") and row["description"] == "100% green" and row.keys() == [
        "name", "description"]


def test_an_empty_database_gets_the_schema_unless_told_not_to(pg_database: Any) -> None:
    server = pg_database.server
    name = server.create_database(pg_database.name + "_empty")
    try:
        with pytest.raises(ArchiveError, match="holds no stripscan archive yet"):
            _open(server.url(name), create=False)
        with pytest.raises(ArchiveError, match="holds no stripscan archive yet"):
            _open(server.url(name), read_only=True)
        with closing(_open(server.url(name))) as backend:
            assert backend.server_schema_version() == schema.latest_version()
    finally:
        server.drop_database(name)


def test_a_newer_schema_is_refused_in_one_line(pg_database: Any) -> None:
    with pg_database.connect() as conn:
        conn.execute("INSERT INTO stripscan_schema (version, summary) VALUES (99, 'later')")
    with pytest.raises(ArchiveError) as caught:
        _open(pg_database.url)
    assert "written by a newer stripscan (server schema version 99" in str(caught.value)
    assert "\n" not in str(caught.value)


def test_a_failed_write_leaves_nothing_behind(pg_database: Any) -> None:
    with closing(_open(pg_database.url)) as backend:
        with pytest.raises(ArchiveError, match="cannot add two film types: .*violates check constraint"):
            with backend.writing("add two film types") as conn:
                conn.execute(ADD_TYPE, ("Alder G", ""))
                conn.execute(ADD_TYPE, ("   ", ""))
        assert _names(backend) == []
        with pytest.raises(RuntimeError), backend.writing("add a film type") as conn:
            conn.execute(ADD_TYPE, ("Alder G", ""))
            raise RuntimeError("the caller's own failure")
        assert _names(backend) == [] and not backend.connection.in_transaction


def test_one_writer_at_a_time_and_a_waiting_one_gives_up_after_the_busy_timeout(pg_database: Any) -> None:
    with closing(_open(pg_database.url)) as first, \
            closing(_open(pg_database.url, busy_timeout_ms=300)) as second:
        with first.writing("add a film type") as conn:
            conn.execute(ADD_TYPE, ("Alder G", ""))
            started = time.monotonic()
            with pytest.raises(ArchiveBusyError, match="is busy: .*cannot add another film type now, try again"):
                with second.writing("add another film type") as conn:
                    conn.execute(ADD_TYPE, ("Birch B", ""))
            assert time.monotonic() - started >= 0.3
            # Readers do not wait, and see only what is committed.
            assert _names(second) == []
        assert _names(second) == ["Alder G"]


def test_a_second_writer_waits_its_turn_and_then_sees_the_first_ones_rows(pg_database: Any) -> None:
    seen: list[int] = []

    def count_then_add(backend: PostgresBackend, name: str) -> None:
        with backend.writing(f"add {name}") as conn:
            # The archive's "next id is max + 1" pattern: safe only with one writer at a time.
            seen.append(conn.execute("SELECT count(*) FROM film_types").fetchone()[0])
            time.sleep(0.2)
            conn.execute(ADD_TYPE, (name, ""))

    backends = [_open(pg_database.url) for _ in range(3)]
    try:
        threads = [threading.Thread(target=count_then_add, args=(b, f"type {i}")) for i, b in enumerate(backends)]
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join()
        assert sorted(seen) == [0, 1, 2]
        assert len(_names(backends[0])) == 3
    finally:
        for backend in backends:
            backend.close()


def test_reads_in_one_reading_see_one_state(pg_database: Any) -> None:
    with closing(_open(pg_database.url)) as reader, closing(_open(pg_database.url)) as writer:
        with reader.reading():
            before = _names(reader)
            with writer.writing("add a film type") as conn:
                conn.execute(ADD_TYPE, ("Alder G", ""))
            assert _names(reader) == before == []
        assert _names(reader) == ["Alder G"]


def test_read_only_refuses_writes_here_and_on_the_server(pg_database: Any) -> None:
    with closing(_open(pg_database.url, read_only=True)) as backend:
        with pytest.raises(ArchiveReadOnlyError, match="is read-only: cannot add a film type"):
            with backend.writing("add a film type"):
                pass
        # Even a statement sent past the backend's own check is refused by the server.
        with pytest.raises(psycopg.errors.ReadOnlySqlTransaction) as caught:
            backend.connection.execute(ADD_TYPE, ("Alder G", ""))
        assert isinstance(backend.translate(caught.value, "add it"), ArchiveReadOnlyError)


def test_a_reader_login_is_told_which_right_it_lacks(pg_database: Any) -> None:
    with pg_database.connect() as conn:
        role = schema.create_roles(conn, "here")["reader"]
        conn.execute(f'CREATE ROLE "{pg_database.name}_ann" LOGIN IN ROLE "{role}"')
    url = pg_database.server.url(pg_database.name, f"{pg_database.name}_ann")
    with closing(_open(url)) as backend:
        with pytest.raises(ArchiveReadOnlyError) as caught, backend.writing("add film type 'Alder G'") as conn:
            conn.execute(ADD_TYPE, ("Alder G", ""))
    assert str(caught.value) == (f"{backend.location}: cannot add film type 'Alder G': your login on the server may "
                                 "not add film types; the archive's physicist role may (ask whoever looks after "
                                 "the archive's server)")


def test_the_server_stopping_during_a_write_leaves_nothing_half_written(pg_database: Any) -> None:
    server = pg_database.server
    backend = _open(pg_database.url)
    try:
        with pytest.raises(ArchiveError, match="cannot add two film types: the connection to the server failed"):
            with backend.writing("add two film types") as conn:
                conn.execute(ADD_TYPE, ("Alder G", ""))
                server.kill()
                conn.execute(ADD_TYPE, ("Birch B", ""))
    finally:
        backend.close()
        if not server.running:
            server.restart()
    with closing(_open(pg_database.url)) as again:
        assert _names(again) == []


def test_a_server_that_does_not_answer_is_said_plainly_after_a_few_tries(tmp_path: Any) -> None:
    started = time.monotonic()
    with pytest.raises(ArchiveError) as caught:
        _open(f"postgresql://ann:hunter2@/lots?host={tmp_path}")
    message = str(caught.value)
    assert message.startswith("postgresql://ann@/lots?host=") and "hunter2" not in message
    assert "cannot open it: the connection to the server failed (tried 3 times)" in message
    assert time.monotonic() - started >= 0.6  # the pauses between the tries


def _add_events(url: str, worker: int, count: int) -> None:
    """One client: ``count`` events, each numbered max + 1 and chained as the archive does."""
    with closing(_open(url)) as backend:
        for n in range(count):
            with backend.writing(f"record event {worker}.{n}") as conn:
                next_id = conn.execute("SELECT coalesce(max(id), 0) + 1 FROM qc_events").fetchone()[0]
                conn.execute("INSERT INTO qc_events (id, processor, date, kind, note) VALUES (?, ?, ?, ?, ?)",
                                (next_id, "North room", "2024-10-01", "check", f"{worker}.{n}"))
                seq = conn.execute("SELECT coalesce(max(seq), 0) + 1 FROM record_chain").fetchone()[0]
                conn.execute("INSERT INTO record_chain VALUES (?, 'qc_event', ?, ?, ?)",
                                (seq, str(next_id), "0" * 64, "0" * 64))


def test_eight_clients_writing_at_once_lose_and_double_nothing(pg_database: Any) -> None:
    import multiprocessing

    with pg_database.connect() as conn:
        conn.execute("INSERT INTO processors (name) VALUES ('North room')")
    context = multiprocessing.get_context("spawn")
    workers = [context.Process(target=_add_events, args=(pg_database.url, w, 50)) for w in range(8)]
    for process in workers:
        process.start()
    for process in workers:
        process.join(timeout=120)
    assert [p.exitcode for p in workers] == [0] * 8
    with pg_database.connect() as conn:
        notes = sorted(row[0] for row in conn.execute("SELECT note FROM qc_events"))
        ids = [row[0] for row in conn.execute("SELECT id FROM qc_events ORDER BY id")]
        chained = [row[0] for row in conn.execute("SELECT key::bigint FROM record_chain ORDER BY seq")]
    assert notes == sorted(f"{w}.{n}" for w in range(8) for n in range(50))
    assert ids == list(range(1, 401)) and sorted(chained) == ids
