"""Lot archive speed on a PostgreSQL server against the same on an SQLite file.

Fills an SQLite file with 10,000 snapshots through the archive
(bench_archive.fill), copies it whole into a database on a throwaway local
server (Unix socket, crash-safe settings as shipped; tests/pg_server.py),
timing the copy (target ≤ 30 s), then times the queries the window runs on
each.  Prints each time (best of several runs), its ratio to SQLite's
(target ≤ 2) and to 100 ms (target ≤ 1), and whether both gave the same
answer.

    python3 benchmarks/bench_archive_server.py [--snapshots N] [--repeat R] [--million]

``--million`` also generates 1,000,000 snapshots (1,000 lots of 1,000,
21 steps each) straight into a second server database with SQL, and times
one lot's listing and trends there (target ≤ 200 ms each).  Those rows
are made by SQL, not stored through stripscan, so they are not in the hash
chain: that archive is opened without the chain check (``check_chain=False``).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
# Run as a script this folder is on sys.path already; loaded by path (the test) it is not.
sys.path[:0] = [str(ROOT), str(ROOT / "benchmarks"), str(ROOT / "tests"), str(ROOT / "tests" / "archive")]

import bench_archive  # noqa: E402
from archive_factory import LOTS, PROCESSORS  # noqa: E402
from pg_server import PgServer, unavailable_reason  # noqa: E402

from stripscan.archive import Archive, open_archive  # noqa: E402
from stripscan.archive.copying import copy_archive  # noqa: E402

TARGET_S = 0.100
MILLION_TARGET_S = 0.200


def _best(call: Callable[[], object], repeat: int) -> tuple[float, float, object]:
    times, result = [], None
    for _ in range(repeat):
        started = time.perf_counter()
        result = call()
        times.append(time.perf_counter() - started)
    return min(times), statistics.median(times), result


def _cases(archive: Archive, snapshots: int) -> list[tuple[str, Callable[[], object]]]:
    return [
        ("list_snapshots()", archive.list_snapshots),
        ("list_snapshots(lot)", lambda: archive.list_snapshots(LOTS[0].lot_id)),
        ("list_snapshots(processor)", lambda: archive.list_snapshots(processor=PROCESSORS[1].name)),
        ("trend('speed_log_exposure')", lambda: archive.trend("speed_log_exposure")),
        ("trend('mid_density', lots=[1])", lambda: archive.trend("mid_density", lots=[LOTS[1].lot_id])),
        ("list_lots()", archive.list_lots),
        ("get_snapshot(id)", lambda: archive.get_snapshot(snapshots // 2)),
    ]


def compare(snapshots: int, repeat: int) -> None:
    """Fill both archives the same way and print each query's time on both and the ratios."""
    with tempfile.TemporaryDirectory() as folder, PgServer(durable=True) as server:
        server.create_database("bench")
        places = {"sqlite": Path(folder) / "bench.sqlite3", "server": server.url("bench")}
        with open_archive(places["sqlite"]) as lite:
            started = time.perf_counter()
            bench_archive.fill(lite, snapshots)
            print(f"sqlite  filled with {snapshots} snapshots in {time.perf_counter() - started:.1f} s")
            with open_archive(places["server"]) as served:
                started = time.perf_counter()
                copy_archive(lite, served)
                took = time.perf_counter() - started
                print(f"server  copy of the whole archive in {took:.1f} s (ratio to 30 s {took / 30:.2f})")
        with open_archive(places["sqlite"]) as lite, open_archive(places["server"]) as served:
            print(f"{'query':32s} {'sqlite':>9s} {'server':>9s}  server÷sqlite (≤ 2)  server÷100 ms (≤ 1)")
            for (name, on_file), (_, on_server) in zip(_cases(lite, snapshots), _cases(served, snapshots)):
                file_s, _, file_result = _best(on_file, repeat)
                server_s, _, server_result = _best(on_server, repeat)
                same = "" if file_result == server_result else "  RESULTS DIFFER"
                print(f"{name:32s} {file_s * 1000:7.1f}ms {server_s * 1000:7.1f}ms  {server_s / file_s:10.2f}"
                      f"{server_s / TARGET_S:20.2f}{same}")


_MILLION = """
INSERT INTO film_types (name) VALUES ('Alder G');
INSERT INTO processors (name) VALUES ('North room'), ('South room');
INSERT INTO emulsion_lots (lot_id, film_type)
    SELECT 'LOT-' || lpad(i::text, 5, '0'), 'Alder G' FROM generate_series(1, {lots}) i;
INSERT INTO snapshots (id, created_at, lot_id, processor, operator, processed_on, scan_path, scan_sha256,
    strip_index, base_fog, dmax, speed_log_exposure, average_gradient, gamma, latitude_log_exposure,
    mid_density, density_difference)
SELECT i, '2024-10-01T08:00:00Z', 'LOT-' || lpad((1 + i % {lots})::text, 5, '0'),
    CASE WHEN i % 2 = 0 THEN 'North room' ELSE 'South room' END, 'bench',
    to_char(date '2020-01-01' + (i / {lots}) % 2000, 'YYYY-MM-DD'), '/scans/' || i || '.tif', repeat('a', 64), 1,
    0.19 + (i % 7) / 1000.0, 3.4, 1.5 + (i % 11) / 100.0, 2.8, 3.1, 0.9, 1.4, 1.8
FROM generate_series(1, {count}) i;
INSERT INTO snapshot_data (snapshot_id, scan_json, strip_json)
SELECT i, '{{}}', '{{"metrics": {{"mid_density_step": 11, "dd_high_step": 14, "dd_low_step": 6}}}}'
FROM generate_series(1, {count}) i;
INSERT INTO snapshot_steps (snapshot_id, step, log_exposure, od, od_sd, pixels, in_range, excluded)
SELECT i, st, 0.15 * (st - 1), 0.19 + st * 0.15, 0.01, 1800, 1, 0
FROM generate_series(1, {count}) i, generate_series(1, 21) st;
ANALYZE;
"""


def million(repeat: int, count: int = 1_000_000, lots: int = 1000) -> None:
    """Generate ``count`` snapshots with SQL and time one lot's listing and trends."""
    from stripscan.archive.postgres import schema

    settings = {"max_wal_size": "'4GB'", "maintenance_work_mem": "'256MB'"}
    with PgServer(durable=True, settings=settings) as server:
        server.create_database("million")
        with server.connect("million") as conn:
            schema.migrate(conn, "million")
            started = time.perf_counter()
            conn.execute(_MILLION.format(count=count, lots=lots))
            print(f"server  {count} snapshots generated by SQL in {time.perf_counter() - started:.0f} s")
        lot = f"LOT-{lots // 2:05d}"
        with open_archive(server.url("million"), check_chain=False) as archive:
            for name, call in (("list_snapshots(lot)", lambda: archive.list_snapshots(lot)),
                               ("trend('gamma', lot)", lambda: archive.trend("gamma", lot)),
                               ("trend('mid_density', lot)", lambda: archive.trend("mid_density", lot))):
                best, median, result = _best(call, repeat)
                print(f"{name:32s} best {best * 1000:7.1f} ms  median {median * 1000:7.1f} ms  "
                      f"ratio to 200 ms {best / MILLION_TARGET_S:5.2f}  ({len(result)} rows)")  # type: ignore[arg-type]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--snapshots", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=7)
    parser.add_argument("--million", action="store_true", help="also time a lot of 1,000,000 generated snapshots")
    args = parser.parse_args(argv)
    reason = unavailable_reason()
    if reason is not None:
        print(f"no PostgreSQL server here: {reason}")
        return 1
    compare(args.snapshots, args.repeat)
    if args.million:
        million(args.repeat)
    return 0


if __name__ == "__main__":
    sys.exit(main())
