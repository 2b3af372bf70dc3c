"""Settings for the whole suite.

Qt reads its platform when first imported; tests outside ``tests/gui``
(reports, QC charts) draw with Qt too, so every test runs offscreen, with
no display, whichever file is run first or alone.
"""

from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
