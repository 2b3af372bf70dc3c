"""Processor QC's names: the quantities, verdicts, event kinds and rule choices, and their words.

Plain constants, kept apart from the QC arithmetic (which needs numpy) so
that the command line can offer them as choices and in its help without
importing a heavy library.  Import them from here: no other module
re-exports them.
"""

from __future__ import annotations

__all__ = ["QUANTITIES", "VERDICTS", "SOURCES", "EVENT_KINDS", "STEP_RULES", "TREND_RULE_NAMES",
           "BASE_FOG_RULES", "LABELS", "VERDICT_WORDS"]

QUANTITIES = ("base_fog", "mid_density", "density_difference")
VERDICTS = ("ok", "warning", "action")
SOURCES = ("scan", "manual")
EVENT_KINDS = ("new_chemistry", "service", "new_film_type", "new_sensitometer", "crossover", "other")
STEP_RULES = ("closest", "bounded")
TREND_RULE_NAMES = ("run", "drift", "two_warnings")
BASE_FOG_RULES = ("new_mean", "shift")

#: How each quantity is named to a person.
LABELS = {"base_fog": "base+fog", "mid_density": "mid-density", "density_difference": "density difference"}

#: How each verdict is shown to a person.
VERDICT_WORDS = {"ok": "WITHIN LIMITS", "warning": "WARNING", "action": "ACT"}
