"""A processor's QC status in words and as JSON, for the command line, the window and the reports."""

from __future__ import annotations

import datetime
from typing import Any

from stripscan import CAUTION
from stripscan.core.qc.names import LABELS, QUANTITIES, VERDICT_WORDS
from stripscan.core.qc.records import (
    ProcessorStatus,
    QCValues,
)
from stripscan.core.qc.rules import evaluate_day

from stripscan.services.qc_log import LoggedEntry, ProcessorLog

__all__ = ["latest_words", "signed", "status_json", "status_text"]


# --------------------------------------------------------------------------
# Reporting


def _values_dict(values: QCValues | None) -> dict[str, float] | None:
    return None if values is None else {q: round(getattr(values, q), 4) for q in QUANTITIES}


def status_json(plog: ProcessorLog, status: ProcessorStatus | None = None) -> dict[str, Any]:
    """The status as JSON-ready data (``stripscan qc status --json``).

    Keys: ``processor``; ``operating_levels`` (``base_fog``, ``mid_density``,
    ``density_difference``, ``established``, ``reason``, or null during a
    baseline); ``latest`` (``date``, ``values``, ``deviations``, ``verdict``
    one of ok / warning / action, ``rules``, ``reasons``, ``advice``,
    ``entries``: every entry stored for that day with ``entry`` id,
    ``kind``, ``in_use``, ``entered_late``, ``verdict`` and ``standing`` in words);
    ``baseline`` (``in_progress``, ``days``, ``needed``, ``set_by``: see
    :func:`_baseline_json`); ``limits``; ``steps``; ``caution``.
    """
    status = status or plog.status()
    levels = status.levels
    reasons: tuple[str, ...] = ()
    if status.values is not None and levels is not None:
        reasons = evaluate_day(status.values, levels, plog.setup.limits).reasons
    steps = plog.steps_on(status.latest_date) if status.latest_date else None
    return {
        "processor": plog.processor,
        "operating_levels": None if levels is None else {
            **_values_dict(levels.values),  # type: ignore[arg-type]
            "established": levels.established.isoformat(), "n_days": levels.n_days, "reason": levels.reason},
        "latest": {
            "date": status.latest_date.isoformat() if status.latest_date else None,
            "values": _values_dict(status.values),
            "deviations": _values_dict(status.deviations),
            "verdict": status.verdict,
            "rules": list(status.rules_fired),
            "rule_messages": [f.message for f in status.findings],
            "reasons": list(reasons),
            "advice": status.advice,
            "entries": [{"entry": item.entry.id, "kind": item.entry.kind, "in_use": item.state.in_use,
                         "entered_late": item.entry.entered_late,
                         # A value corrected as a slip is not a reading to judge.
                         "verdict": item.verdict.verdict if item.verdict and item.set_aside != "corrected" else None,
                         "standing": item.standing()}
                        for item in _day_entries(plog, status.latest_date)],
        },
        "baseline": _baseline_json(plog, status),
        "limits": plog.setup.limits.to_dict(),
        "steps": steps.to_dict() if steps else None,
        "notes": list(plog.notes),
        "caution": CAUTION,
    }


def _baseline_json(plog: ProcessorLog, status: ProcessorStatus) -> dict[str, Any]:
    """The baseline of the levels in force: strips so far or strips that set them, and what set them.

    ``days`` counts the strips of the baseline in progress, or, once the
    levels are set, the strips averaged for them (0 when a crossover set
    them); ``set_by`` is ``"baseline"``, ``"crossover"`` or null while in progress.
    """
    if status.baseline_in_progress or not plog.log.periods:
        return {"in_progress": True, "days": status.baseline_days, "needed": plog.setup.baseline_days,
                "set_by": None}
    period = plog.log.periods[-1]
    set_by = "crossover" if period.event is not None and period.event.levels is not None else "baseline"
    return {"in_progress": False, "days": len(period.setting_days), "needed": plog.setup.baseline_days,
            "set_by": set_by}


def _day_entries(plog: ProcessorLog, day: datetime.date | None) -> tuple[LoggedEntry, ...]:
    return plog.logged(day, day) if day is not None else ()


def signed(value: float) -> str:
    """A deviation as +0.012 (a rounded -0.000 shows as +0.000)."""
    # Adding 0.0 turns a rounded -0.0 into 0.0: no "-0.000" for a point on its level.
    return f"{round(value, 3) + 0.0:+.3f}"


def latest_words(status: ProcessorStatus) -> str:
    """``"latest strip YYYY-MM-DD"``, or ``"no strip yet"`` when no strip is recorded."""
    return f"latest strip {status.latest_date.isoformat()}" if status.latest_date else "no strip yet"


def status_text(plog: ProcessorLog, status: ProcessorStatus | None = None) -> str:
    """The status in plain lines: verdict, numbers, rules fired, advice (ending with the caution)."""
    status = status or plog.status()
    head = "BASELINE IN PROGRESS" if status.baseline_in_progress else VERDICT_WORDS[status.verdict]
    lines = [f"{plog.processor}: {head} ({latest_words(status)})"]
    if status.levels is not None:
        lv = status.levels
        lines.append(f"  operating levels ({lv.reason}, set {lv.established.isoformat()}): "
                     + ", ".join(f"{LABELS[q]} {getattr(lv, q):.3f}" for q in QUANTITIES))
    if status.values is not None:
        dev = status.deviations
        lines.append("  latest: " + ", ".join(
            f"{LABELS[q]} {getattr(status.values, q):.3f}"
            + (f" ({signed(getattr(dev, q))})" if dev is not None else "") for q in QUANTITIES))
    day = _day_entries(plog, status.latest_date)
    if len(day) > 1:
        # A repeated or corrected day: say which entry counts and which are kept.
        lines.extend(f"  {item.describe()}" for item in day)
    if status.rules_fired:
        lines.append("  trend rules fired: " + ", ".join(status.rules_fired))
    lines.extend(f"  note: {n}" for n in plog.notes)
    lines.append(f"  {status.advice}")
    return "\n".join(lines)
