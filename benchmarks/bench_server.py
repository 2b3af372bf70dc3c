"""Shared archive speed: the window's queries on a PostgreSQL server against the same on a SQLite file.

Starts a throwaway server on a Unix socket (``tests/pg_server.py``, durable
as a real one: fsync on), then:

1. fills a SQLite archive with 10,000 snapshots as ``bench_archive.py``
   does (two lots, two processors, revisions, retirements), copies it to a
   database on the server through the JSON export and import
   (``stripscan archive copy``, :func:`stripscan.archive.copying.copy_location`; timed whole) and
   times the window's listing and trend queries on both, each on an open
   archive, best of ``--repeat``;
2. generates 1,000,000 snapshots on the server in one statement
   (``INSERT ... SELECT ... FROM generate_series``), 1,000 lots of 1,000
   strips each, copying the values of one snapshot stored through the
   archive, and times a lot's listing and trends there.

The generated rows are a shortcut valid for these reads only: they have no
``snapshot_data``, ``snapshot_steps`` or hash-chain rows (the listing and
the trend of a figure stored on the snapshot read the ``snapshots`` table
alone), so that archive is opened without its chain check, and the
mid-density trend, which reads each strip's steps, is not timed at that
size.  Prints each time and its ratio to its target.

    python3 benchmarks/bench_server.py [--snapshots N] [--big N] [--repeat R]

:func:`measure` returns a :class:`ServerTiming` for ``run_all.py``.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(p) for p in (ROOT, ROOT / "tests", ROOT / "tests" / "archive", HERE) if str(p) not in sys.path]

import bench_archive  # noqa: E402
from archive_factory import LOTS, PROCESSORS, make_draft, populate  # noqa: E402
from pg_server import PgServer, unavailable_reason  # noqa: E402

from stripscan.archive import Archive  # noqa: E402
from stripscan.archive.copying import copy_location  # noqa: E402

#: A query on the server: at most this many times the same on SQLite, and at most LIST_S.
PER_SQLITE = 2.0
LIST_S = 0.100
#: A lot's listing and trend among a million snapshots.
BIG_S = 0.200
#: Copying 10,000 snapshots from a file to the server.
COPY_S = 30.0
BIG_LOTS = 1000


@dataclass(frozen=True)
class Compared:
    """One query timed on the SQLite file and on the server (best of the repeats, seconds)."""

    name: str
    sqlite_s: float
    server_s: float
    rows: int | None


@dataclass(frozen=True)
class ServerTiming:
    """The figures of one run."""

    snapshots: int
    fill_s: float
    copy_s: float
    copy_how: str
    compared: tuple[Compared, ...]
    big_snapshots: int
    big_fill_s: float
    big_queries: tuple[bench_archive.QueryTiming, ...]


def _best(call: Callable[[], object], repeat: int) -> tuple[float, object]:
    best, median, result = bench_archive._timed(call, repeat)
    return best, result


def _window_queries(archive: Archive, lot: str) -> list[tuple[str, Callable[[], object]]]:
    """What the window's archive page and trend read (gui/models/archive_page.py)."""
    return [
        ("list_snapshots() (every snapshot)", archive.list_snapshots),
        ("list_snapshots(lot)", lambda: archive.list_snapshots(lot)),
        ("trend('speed_log_exposure', lot)", lambda: archive.trend("speed_log_exposure", [lot])),
        ("trend('mid_density', lot)", lambda: archive.trend("mid_density", [lot])),
        ("list_lots()", archive.list_lots),
    ]


def compare(server: PgServer, snapshots: int, repeat: int, folder: Path) -> tuple[float, float, tuple[Compared, ...]]:
    """Fill a file, copy it to a new database on ``server``; time the window's queries on both."""
    path = folder / "bench.sqlite3"
    with Archive.open(path) as archive:
        started = time.perf_counter()
        bench_archive.fill(archive, snapshots)
        filled = time.perf_counter() - started
    url = server.url(server.create_database("bench"))
    started = time.perf_counter()
    copy_location(path, url)  # what 'stripscan archive copy FILE URL' runs
    copied = time.perf_counter() - started
    lot = LOTS[1].lot_id
    times: dict[str, list[float]] = {}
    rows: dict[str, int] = {}
    results: dict[str, list[object]] = {}
    open_s: dict[str, float] = {}
    for where in (path, url):
        open_s[str(where)], _ = _best(lambda: Archive.open(where).close(), repeat)
        with Archive.open(where) as archive:
            for name, call in _window_queries(archive, lot):
                best, result = _best(call, repeat)
                times.setdefault(name, []).append(best)
                results.setdefault(name, []).append(result)
                rows[name] = len(result) if isinstance(result, list) else 1
    for name, (on_file, on_server) in results.items():
        if on_file != on_server:
            raise AssertionError(f"{name}: the server's answer differs from the file's")
    compared = [Compared("open (with chain check)", open_s[str(path)], open_s[url], None)]
    compared += [Compared(name, file_s, server_s, rows[name]) for name, (file_s, server_s) in times.items()]
    return filled, copied, tuple(compared)


def generate(server: PgServer, count: int, lots: int = BIG_LOTS) -> tuple[str, float]:
    """A database of ``count`` snapshots in ``lots`` lots, made on the server; its URL and the seconds taken."""
    url = server.url(server.create_database("big"))
    started = time.perf_counter()
    with Archive.open(url) as archive:
        populate(archive)
        archive.add_snapshots([make_draft(0, lot=LOTS[0].lot_id, processor=PROCESSORS[0].name)])
    with server.connect("big") as conn:
        film_type = conn.execute("SELECT film_type FROM emulsion_lots WHERE lot_id = %s",
                                 (LOTS[0].lot_id,)).fetchone()[0]
        conn.execute("INSERT INTO emulsion_lots (lot_id, film_type) "
                     "SELECT 'G-' || lpad(g::text, 4, '0'), %s FROM generate_series(0, %s) g", (film_type, lots - 1))
        columns = [row[0] for row in conn.execute(
            "SELECT column_name FROM information_schema.columns WHERE table_name = 'snapshots' "
            "AND column_name NOT IN ('id', 'lot_id', 'processed_on', 'exposed_on', 'scanned_on', "
            "'speed_log_exposure', 'strip_index') ORDER BY ordinal_position")]
        kept = ", ".join(columns)
        # Lot g % lots, one strip a day per lot from 2020-01-01: a lot's strips lie all over the table,
        # as a group's archive fills over the years.  The archive numbers snapshots itself (not by the
        # column's sequence): the generated ones follow snapshot 1.
        conn.execute(
            f"INSERT INTO snapshots (id, lot_id, processed_on, exposed_on, scanned_on, speed_log_exposure, "
            f"strip_index, {kept}) SELECT 1 + g, 'G-' || lpad((g %% %s)::text, 4, '0'), "
            "to_char(date '2020-01-01' + (g / %s), 'YYYY-MM-DD'), NULL, NULL, "
            "t.speed_log_exposure + (g %% 97) * 0.0001, 1 + g %% 3, "
            f"{', '.join('t.' + c for c in columns)} "
            "FROM generate_series(1, %s) g, (SELECT * FROM snapshots WHERE id = 1) t",
            (lots, lots, count - 1))
        conn.execute("ANALYZE snapshots")
    return url, time.perf_counter() - started


def measure(snapshots: int = 10_000, repeat: int = 7, big: int = 1_000_000) -> ServerTiming:
    """Start a server, run both parts, stop it."""
    reason = unavailable_reason()
    if reason is not None:
        raise RuntimeError(f"no PostgreSQL server for this benchmark: {reason}")
    with tempfile.TemporaryDirectory() as folder, PgServer(durable=True) as server:
        filled, copied, compared = compare(server, snapshots, repeat, Path(folder))
        big_queries: list[bench_archive.QueryTiming] = []
        big_fill = 0.0
        if big:
            url, big_fill = generate(server, big)
            lot = f"G-{BIG_LOTS // 2:04d}"
            # No chain rows for the generated snapshots (see the module's note): no chain check on opening.
            with Archive.open(url, check_chain=False) as archive:
                for name, call in (("list_snapshots(lot)", lambda: archive.list_snapshots(lot)),
                                   ("trend('speed_log_exposure', lot)",
                                    lambda: archive.trend("speed_log_exposure", [lot])),
                                   ("list_lots()", archive.list_lots)):
                    best, median, result = bench_archive._timed(call, repeat)
                    big_queries.append(bench_archive.QueryTiming(name, best, median, len(result)))
        return ServerTiming(snapshots, filled, copied, "'archive copy' (copy_location)",
                            compared, big, big_fill, tuple(big_queries))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--snapshots", type=int, default=10_000)
    parser.add_argument("--big", type=int, default=1_000_000, help="snapshots generated on the server (0: skip)")
    parser.add_argument("--repeat", type=int, default=7)
    args = parser.parse_args(argv)
    t = measure(args.snapshots, args.repeat, args.big)
    print(f"{t.snapshots} snapshots: filled the file in {t.fill_s:.1f} s; copied to the server in {t.copy_s:.1f} s "
          f"by {t.copy_how} (target ≤ {COPY_S:g} s)")
    for c in t.compared:
        rows = "" if c.rows is None else f"  ({c.rows} rows)"
        print(f"{c.name:36s} file {c.sqlite_s * 1000:7.1f} ms  server {c.server_s * 1000:7.1f} ms  "
              f"server ÷ file {c.server_s / c.sqlite_s:5.2f} (≤ {PER_SQLITE:g})  "
              f"server ÷ {LIST_S * 1000:g} ms {c.server_s / LIST_S:5.2f}{rows}")
    if t.big_snapshots:
        print(f"{t.big_snapshots} snapshots generated on the server in {t.big_fill_s:.1f} s ({BIG_LOTS} lots)")
        for q in t.big_queries:
            print(f"{q.name:36s} best {q.best_s * 1000:7.1f} ms  median {q.median_s * 1000:7.1f} ms  "
                  f"ratio to {BIG_S * 1000:g} ms {q.best_s / BIG_S:5.2f}  ({q.rows} rows)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
