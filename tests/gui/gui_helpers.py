"""Small helpers of the GUI tests."""

from __future__ import annotations


def settle(qtbot, *widgets, timeout: int = 20_000) -> None:
    """Wait until the archive work of ``widgets`` (panels, forms: anything with ``busy``) has come back."""
    qtbot.waitUntil(lambda: not any(w.busy for w in widgets), timeout=timeout)
