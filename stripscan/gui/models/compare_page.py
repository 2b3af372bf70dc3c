"""The lot comparison page without Qt: the comparison shown, the pair in the table, what can be compared.

:class:`ComparePage` holds the comparison the page shows (set k against
the first set, from :func:`stripscan.core.compare.comparison.compare_sets`),
which pair the table shows and the words around it, and decides whether
the archive's lots allow a comparison; :func:`read_compared_lots` is the
one look at the archive it needs, run by a worker thread.  The panel
(:class:`~stripscan.gui.panels.compare_panel.ComparePanel`) draws what it holds.
"""

from __future__ import annotations

import os
import re
from collections.abc import Sequence
from typing import Any

from stripscan.archive import Archive
from stripscan.core.compare.comparison import Comparison
from stripscan.gui.models.events import Event

__all__ = ["ComparePage", "read_compared_lots", "plain_names", "EMPTY_WORDS"]

#: What the page says before any comparison.
EMPTY_WORDS = "No comparison to show: compare two or more sets of strips."


def plain_names(text: str) -> str:
    """Set names as a person reads them: ``lot:M-2610-A`` (the command line's way to name a set) as ``lot M-2610-A``."""
    return re.sub(r"'?\blot:([^\s',()]+)'?", r"lot \1", text)


def read_compared_lots(path: str | os.PathLike[str], *, progress: Any = None) -> list[str]:
    """The archive's lots that hold stored strips (those a comparison can read)."""
    with Archive.open(path, read_only=True) as archive:
        return [s.lot.lot_id for s in archive.list_lots() if s.snapshot_count > 0]


class ComparePage:
    """The comparisons shown and the pair the table shows.

    Attributes
    ----------
    comparisons : tuple of Comparison
        Set k against set 0.
    result : object or None
        The whole result the comparisons came with (notes, calibrations), for reports.
    pair : int
        Index of the comparison the table shows.
    changed : Event
        New comparisons are in place; no arguments.
    """

    def __init__(self) -> None:
        self.comparisons: tuple[Comparison, ...] = ()
        self.result: Any = None
        self.pair = 0
        self.changed = Event("changed")

    def set_comparisons(self, comparisons: Sequence[Comparison], result: Any = None) -> None:
        """Show new comparisons (``result``: what they came with, None when shown on their own)."""
        self.comparisons = tuple(comparisons)
        self.result = result
        self.pair = 0
        self.changed.emit()

    def pair_names(self) -> list[str]:
        """What the pair chooser offers, one line per comparison."""
        return [plain_names(f"{c.b.name} against {c.a.name}") for c in self.comparisons]

    def choose_pair(self, index: int) -> bool:
        """Show comparison ``index`` in the table; False when there is none such."""
        if not 0 <= index < len(self.comparisons):
            return False
        self.pair = index
        return True

    def title(self) -> str:
        """The heading over the table of the chosen pair."""
        if not self.comparisons:
            return EMPTY_WORDS
        c = self.comparisons[self.pair]
        return plain_names(f"{c.b.name} (B, {c.b.n} strips) against {c.a.name} (A, {c.a.n} strips): "
                           "differences B − A, relative speed positive = B faster")

    def notes(self) -> str:
        """The chosen pair's notes, the QC steps used first."""
        if not self.comparisons:
            return ""
        c = self.comparisons[self.pair]
        notes = list(c.notes)
        if c.qc_steps is not None:
            st = c.qc_steps
            notes.insert(0, f"Mid-density at step {st.mid_step}, density difference at step {st.dd_high_step} − "
                            f"step {st.dd_low_step} on every strip (chosen on {c.a.name}).")
        return plain_names("\n".join(notes))

    def done_words(self) -> str:
        """What the status bar says once a comparison is shown."""
        if not self.comparisons:
            return ""
        first = self.comparisons[0]
        extra = getattr(self.result, "notes", ()) or ()
        return plain_names(f"Compared {first.b.name} with {first.a.name}" + (f"; {'; '.join(extra)}" if extra else ""))

    @staticmethod
    def refusal(lots: Sequence[str], *, with_scan: bool) -> tuple[str, str] | None:
        """Why the archive's ``lots`` allow no comparison, as (title, text); None when they do.

        Two lots are needed, or one lot and the open scan's strips (``with_scan``).
        """
        if with_scan and not lots:
            return "No lot to compare with", "The archive holds no snapshot of any lot yet."
        if not with_scan and len(lots) < 2:
            return ("Two lots are needed", f"The archive holds snapshots of {len(lots)} lot(s); a comparison "
                    "needs two lots with stored strips.")
        return None
