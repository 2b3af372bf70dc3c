"""Lot archive speed: listing and trend queries over 10,000 snapshots.

Creates a temporary archive of the invented clinic's strips (two lots, two
processors, a few revisions and retirements), then times the queries the
GUI runs on every redraw.  Prints each time (best of several runs) and its
ratio to the 100 ms target; a ratio below 1 meets it.

    python3 benchmarks/bench_archive.py [--snapshots N] [--repeat R] [--transfer]

``--transfer`` also times one JSON export, CSV export and backup (no target).
:func:`measure` returns the times as an :class:`ArchiveTiming` for ``run_all.py``.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path[:0] = [str(ROOT), str(ROOT / "tests" / "archive")]

from archive_factory import LOTS, PROCESSORS, make_draft, populate  # noqa: E402

from stripscan.archive import Archive  # noqa: E402

TARGET_S = 0.100


def _timed(call: Callable[[], object], repeat: int) -> tuple[float, float, object]:
    times, result = [], None
    for _ in range(repeat):
        started = time.perf_counter()
        result = call()
        times.append(time.perf_counter() - started)
    return min(times), statistics.median(times), result


def fill(archive: Archive, count: int, batch: int = 500) -> None:
    populate(archive)
    for start in range(0, count, batch):
        archive.add_snapshots(
            make_draft(n, lot=LOTS[n % 2].lot_id, processor=PROCESSORS[(n // 2) % 2].name)
            for n in range(start, min(start + batch, count)))
    # A realistic sprinkling of corrections and withdrawals.
    for snapshot_id in range(7, count, 97):
        archive.revise(snapshot_id, make_draft(snapshot_id, lot=LOTS[snapshot_id % 2].lot_id), "rescanned")
    for snapshot_id in range(11, count, 131):
        try:
            archive.retire(snapshot_id, "strip damaged")
        except Exception:  # already revised: retire only the latest, skip here
            continue


@dataclass(frozen=True)
class QueryTiming:
    """One query the GUI runs, timed ``repeat`` times; ``rows`` is None for opening the archive."""

    name: str
    best_s: float
    median_s: float
    rows: int | None


@dataclass(frozen=True)
class ArchiveTiming:
    """A filled archive and the times of its queries (and, if asked, of one export and backup each)."""

    snapshots: int
    fill_s: float
    file_bytes: int
    queries: tuple[QueryTiming, ...]
    transfers_s: dict[str, float]


def measure(snapshots: int = 10_000, repeat: int = 7, transfer: bool = False) -> ArchiveTiming:
    """Fill a temporary archive with ``snapshots`` snapshots and time the GUI's queries over it."""
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "bench.sqlite3"
        with Archive.open(path) as archive:
            started = time.perf_counter()
            fill(archive, snapshots)
            filled = time.perf_counter() - started
        size = path.stat().st_size
        best, median, _ = _timed(lambda: Archive.open(path).close(), repeat)
        queries = [QueryTiming("open (with integrity check)", best, median, None)]
        transfers: dict[str, float] = {}
        with Archive.open(path) as archive:
            cases: list[tuple[str, Callable[[], object]]] = [
                ("list_snapshots()", archive.list_snapshots),
                ("list_snapshots(everything)", lambda: archive.list_snapshots(include_retired=True,
                                                                              include_superseded=True)),
                ("list_snapshots(lot)", lambda: archive.list_snapshots(LOTS[0].lot_id)),
                ("list_snapshots(processor)", lambda: archive.list_snapshots(processor=PROCESSORS[1].name)),
                ("trend('speed_log_exposure')", lambda: archive.trend("speed_log_exposure")),
                ("trend('mid_density', lots=[1])", lambda: archive.trend("mid_density", lots=[LOTS[1].lot_id])),
                ("list_lots()", archive.list_lots),
                ("get_snapshot(id)", lambda: archive.get_snapshot(snapshots // 2)),
            ]
            for name, call in cases:
                best, median, result = _timed(call, repeat)
                queries.append(QueryTiming(name, best, median, len(result) if isinstance(result, list) else 1))
            if transfer:
                for name, call in (("export_json", lambda: archive.export_json(Path(folder) / "all.json")),
                                   ("export_csv", lambda: archive.export_csv(Path(folder) / "all.csv")),
                                   ("backup", lambda: archive.backup(Path(folder) / "copy.sqlite3"))):
                    transfers[name], _, _ = _timed(call, 1)
        return ArchiveTiming(snapshots, filled, size, tuple(queries), transfers)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--snapshots", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=7)
    parser.add_argument("--transfer", action="store_true", help="also time export and backup once")
    args = parser.parse_args(argv)
    timing = measure(args.snapshots, args.repeat, args.transfer)
    print(f"archive: {timing.snapshots} snapshots stored in {timing.fill_s:.1f} s "
          f"({1000 * timing.fill_s / timing.snapshots:.2f} ms each), file {timing.file_bytes / 2**20:.1f} MiB")
    for q in timing.queries:
        rows = "" if q.rows is None else f"  ({q.rows} rows)"
        print(f"{q.name:34s} best {q.best_s * 1000:7.1f} ms  median {q.median_s * 1000:7.1f} ms  "
              f"ratio to 100 ms {q.best_s / TARGET_S:5.2f}{rows}")
    for name, once in timing.transfers_s.items():
        print(f"{name:34s} once {once:7.2f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
