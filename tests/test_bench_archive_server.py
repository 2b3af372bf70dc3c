"""``benchmarks/bench_archive_server.py`` still runs, and every query it times answers the same on both backends.

Like tests/test_benchmarks.py this guards the script against rot and never
looks at how fast anything ran.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import pytest

SCRIPT = Path(__file__).resolve().parents[1] / "benchmarks" / "bench_archive_server.py"

pytestmark = pytest.mark.postgres


def test_the_server_benchmark_runs_and_both_backends_answer_alike(pg_server: object,
                                                                   capsys: pytest.CaptureFixture[str]) -> None:
    spec = importlib.util.spec_from_file_location("stripscan_bench_archive_server", SCRIPT)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(sys, "path", list(sys.path))  # the script adds its folders; give the suite its own back
        spec.loader.exec_module(module)
        module.compare(snapshots=40, repeat=1)
    printed = capsys.readouterr().out
    timed = [line for line in printed.splitlines() if line.startswith(("list_", "trend(", "get_snapshot"))]
    assert len(timed) == 7 and "copy of the whole archive" in printed
    assert "RESULTS DIFFER" not in printed
