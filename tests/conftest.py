"""Settings for the whole suite.

Qt reads its platform when first imported; tests outside ``tests/gui``
(reports, QC charts) draw with Qt too, so every test runs offscreen, with
no display, whichever file is run first or alone.

The PostgreSQL fixtures (a throwaway server, a database per test) come from
``pg_plugin.py``.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

# pytest runs with --import-mode=importlib, which puts no test folder on
# sys.path; the plugin, the benchmarks and child processes import the
# server helper by name.
if str(Path(__file__).parent) not in sys.path:
    sys.path.insert(0, str(Path(__file__).parent))

pytest_plugins = ["pg_plugin"]
