"""The command line starts without the heavy libraries.

Building the parser (``--help``, ``--version``, a group's ``--help``) must
not import numpy, scipy, scikit-image, tifffile or Qt: each command imports
what it needs when it runs.  Checked in a fresh interpreter with
``python -X importtime``, which lists every module a process imports.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

import stripscan

HEAVY = ("numpy", "scipy", "skimage", "tifffile", "PySide6", "pyqtgraph")
ROOT = Path(stripscan.__file__).resolve().parent.parent


def imported_modules(*args: str) -> tuple[set[str], subprocess.CompletedProcess]:
    """Run ``python -X importtime -m stripscan ARGS``; the modules it imported and the process."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    done = subprocess.run([sys.executable, "-X", "importtime", "-m", "stripscan", *args],
                          capture_output=True, text=True, env=env, cwd=ROOT, timeout=120)
    # Lines read "import time: self [us] | cumulative | <indent>package.module".
    names = {line.rsplit("|", 1)[1].strip() for line in done.stderr.splitlines()
             if line.startswith("import time:") and line.count("|") == 2}
    return names - {"package"}, done


@pytest.mark.parametrize("args", [("--help",), ("--version",), ("archive", "--help"), ("qc", "--help"),
                                  ("compare", "--help"), ("report", "--help"), ("analyze", "--help")])
def test_parser_builds_without_heavy_libraries(args):
    names, done = imported_modules(*args)
    assert done.returncode == 0, done.stderr[-2000:]
    assert "stripscan.cli.main" in names  # the parser was really built in that process
    heavy = sorted(n for n in names if n.split(".")[0] in HEAVY)
    assert not heavy, f"'stripscan {' '.join(args)}' imported {heavy[:8]}"


def test_help_still_lists_every_command():
    # The lazy imports must not lose a group: every command registered today is listed.
    from stripscan.cli.main import build_parser

    names, done = imported_modules("--help")
    assert done.returncode == 0
    parser = build_parser()
    commands = next(a for a in parser._actions if a.dest == "command").choices
    assert {"analyze", "calibrate", "demo", "archive", "qc", "compare", "crossover", "report", "export"} <= set(commands)
    for name in commands:
        assert f"    {name}" in done.stdout, name


def test_analyze_imports_only_what_it_needs():
    # Issue 18: the analysis of a page needs numpy and tifffile, not scipy (its import alone cost
    # more than reading and hashing a 600-dpi page), numpy's masked arrays, Qt, or the other commands.
    scan = ROOT / "sample_scans" / "lot_M-2610-A_three_strips.tif"
    names, done = imported_modules("analyze", str(scan), "--json")
    assert done.returncode == 0, done.stderr[-2000:]
    assert '"strips"' in done.stdout
    assert {"numpy", "tifffile", "stripscan.core.pipeline"} <= names
    unneeded = sorted(n for n in names if n.split(".")[0] in ("scipy", "skimage", "PySide6", "pyqtgraph")
                      or n == "numpy.ma" or n.startswith(("stripscan.archive", "stripscan.cli.archive",
                                                          "stripscan.cli.qc", "stripscan.cli.report")))
    assert not unneeded, unneeded[:8]
