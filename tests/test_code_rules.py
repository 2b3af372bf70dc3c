"""The code's own rules, checked in the suite so CI fails when one breaks.

- The layering of DESIGN.md §2, as import-linter contracts in pyproject.toml
  (layers, no Qt below the drawing layer, only the storage backends import
  their drivers, nothing imports the command line, no cycles).
- ruff with the short rule set stated in pyproject.toml.

Each contract is also shown to fail: a copy of the package with one
deliberate violation per contract must break every one of them, so a
contract that can never fail (a misspelt module name, say) is caught.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
CONTRACTS = [c["name"] for c in tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["importlinter"]["contracts"]]

LINT = "import sys; from importlinter.cli import lint_imports; sys.exit(lint_imports(no_cache=True))"


def _lint(folder: Path) -> subprocess.CompletedProcess:
    env = {"PYTHONPATH": str(folder), "PATH": "/usr/bin:/bin", "NO_COLOR": "1", "COLUMNS": "300"}
    return subprocess.run([sys.executable, "-c", LINT], cwd=folder, env=env, capture_output=True, text=True,
                          timeout=300)


def test_the_layer_contracts_hold() -> None:
    run = _lint(ROOT)
    assert run.returncode == 0, run.stdout + run.stderr
    for name in CONTRACTS:
        assert f"{name} KEPT" in run.stdout


#: One deliberate violation per contract: (file, line added at its end).
VIOLATIONS = {
    "Layers, top to bottom": ("core/checks.py", "import stripscan.services.qc_log"),
    "Nothing imports the command line": ("gui/errors.py", "import stripscan.cli.main"),
    "No Qt below the drawing layer": ("gui/models/events.py", "import PySide6.QtCore"),
    "Only the SQLite backend imports sqlite3": ("services/qc_log.py", "import sqlite3"),
    "Only the PostgreSQL backend imports": ("archive/records.py", "import psycopg"),
    "Only the archive package itself chooses": ("render/provenance.py", "import stripscan.archive.sqlite"),
    "The drawing layer never imports the window": ("render/plot.py", "import stripscan.gui.style"),
    "No cycles inside the core": ("core/records.py", "import stripscan.core.checks"),
    "No cycles inside the window": ("gui/style.py", "import stripscan.gui.workspace"),
}


def test_every_contract_fails_on_a_deliberate_violation(tmp_path: Path) -> None:
    pytest.importorskip("psycopg")  # the driver contract needs the driver in the import graph
    assert len(VIOLATIONS) == len(CONTRACTS)
    copy = tmp_path / "tree"
    shutil.copytree(ROOT / "stripscan", copy / "stripscan", ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(ROOT / "pyproject.toml", copy / "pyproject.toml")
    for file, line in VIOLATIONS.values():
        target = copy / "stripscan" / file
        target.write_text(target.read_text() + f"\n{line}  # deliberate violation\n")
    run = _lint(copy)
    assert run.returncode != 0
    for start in VIOLATIONS:
        names = [n for n in CONTRACTS if n.startswith(start)]
        assert len(names) == 1, start
        assert f"{names[0]} BROKEN" in run.stdout, run.stdout


def test_ruff_finds_nothing() -> None:
    ruff = shutil.which("ruff") or str(Path(sys.executable).parent / "ruff")
    run = subprocess.run([ruff, "check", "--no-cache", "stripscan", "tests", "benchmarks", "tools"], cwd=ROOT,
                         capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stdout + run.stderr
