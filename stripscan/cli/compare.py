"""Command line: ``stripscan compare`` (emulsion lots side by side) and ``stripscan crossover``.

Naming a set of strips
----------------------
Both commands take *sets*: replicate strips of one film.  A set is written
in one of three ways:

``scan:PATH`` or ``scan:PATH#STRIPS``
    The strips on a scan file, analysed now (with ``--calibration``).
    ``#STRIPS`` picks strips by their number on the scan, as
    ``stripscan analyze`` prints them: ``#1,3`` or ``#2-4`` or ``#1,3-5``.
    A bare path to an existing file means the same as ``scan:PATH``.
``snapshot:ID`` or ``snapshot:ID,ID,...``
    Strips stored in the archive (``--archive``), by snapshot number;
    ranges work as above: ``snapshot:12-16``.
``lot:LOT``
    Every current snapshot of an emulsion lot in the archive.  For a
    crossover only the lot's snapshots of that processor and that date
    count, so earlier readings of the same lot stay out.

The set's name in tables and JSON is what you wrote.  Examples::

    stripscan compare lot:M-2610-A scan:lot_M-2702-B_three_strips.tif --calibration cal.json
    stripscan compare scan:old.tif#1-3 scan:new.tif#1-3 scan:other.tif --json
    stripscan crossover --processor "Processor 1" --old snapshot:21-25 --new snapshot:26-30 --date 2026-11-20

``compare`` compares every set with the first one: differences are
always B − A, the later set minus the first.  Relative speed is
100·(10^(−Δlog E) − 1) %, positive when B is faster.  ``--json`` prints
``{"sets": [...], "differences": {...}, "comparisons": [...]}``:
``sets`` holds every set (``name``, ``n``, ``figures`` with mean, sd, n
per figure, and the mean curves); ``differences`` is the table of the
second set against the first, one entry per figure with ``a``, ``b``,
``difference`` (= b − a), ``ci95`` ([low, high] or null with one strip),
``tolerance`` and ``verdict``; ``comparisons`` lists every pair (set k
against set 1) in the same shape, with ΔD(log E) and Δlog E(net density).

``crossover`` reads the old and the new QC film's strips at the steps the
processor already uses (kept in its QC log, :mod:`stripscan.services.qc_log`; chosen
on the old film's mean densities when none are kept), moves its operating
levels by the mean difference (:func:`stripscan.core.qc.crossover.crossover`: at
least ``--strips`` strips of each film, as many old as new) and stores the
crossover record and a ``crossover`` event with the new levels in the
processor's QC log together: both or neither.  It refuses a second
crossover on one day and a day before the log's latest entry.
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime
import json
import math
import sys
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, Any

from stripscan import CAUTION, __version__
from stripscan.core.compare.table import DEFAULT_TOLERANCES, FIGURES, Tolerance
from stripscan.core.figures import figure_name

from stripscan.services.comparison_sets import SetError, SetLoader, parse_set

if TYPE_CHECKING:
    from stripscan.core.compare.comparison import Comparison
    from stripscan.core.compare.sets import StripSet

__all__ = [
    "comparison_json",
    "format_comparisons",
    "levels_in_force",
    "tolerances_from_args",
    "store_crossover",
    "register",
]


# --------------------------------------------------------------------------
# compare: output


def _signed(value: float | None) -> str:
    return "-" if value is None or not math.isfinite(value) else f"{value:+.3f}"


def format_comparisons(comparisons: Sequence[Comparison], notes: Sequence[str] = ()) -> str:
    """Readable tables, one per pair, with notes, tolerance sources and the caution."""
    first = comparisons[0].a
    out = [f"Comparing {len(comparisons) + 1} sets of strips; differences are B − A, each set against the first.",
           ""]
    for label, s in [("A", first), *((f"B{k}" if len(comparisons) > 1 else "B", c.b)
                                      for k, c in enumerate(comparisons, start=1))]:
        out.append(f"{label:>3}  {s.name}: {s.n} strip(s), {s.n_steps} steps; {s.source}")
    widths = (33, 22, 22, 8, 20, 18)
    titles = ("figure", "A mean ± sd (n)", "B mean ± sd (n)", "B − A", "95 % interval", "tolerance")
    header = "  " + " ".join(t.rjust(w) if t == "B − A" else t.ljust(w) for t, w in zip(titles, widths)) + " verdict"
    for c in comparisons:
        out += ["", f"{c.b.name} (B) against {c.a.name} (A)", header]
        for row in c.rows:
            cells = row.cells()
            texts = [cells[k] for k in ("figure", "a", "b", "difference", "interval", "tolerance")]
            out.append("  " + " ".join(t.rjust(w) if k == 3 else t.ljust(w)
                                       for k, (t, w) in enumerate(zip(texts, widths))) + f" {cells['verdict']}")
        shifts = [(net, c.shift_at(net)) for net in (0.25, 0.50, 1.00, 1.50, 2.00)]
        out.append("  shift along log E, B − A, at net density "
                   + ", ".join(f"{net:.2f}: {_signed(v)}" for net, v in shifts)
                   + "  (negative: B needs less exposure)")
        if c.qc_steps is not None:
            st = c.qc_steps
            out.append(f"  mid-density read at step {st.mid_step}, density difference at step {st.dd_high_step} "
                       f"− step {st.dd_low_step}, on every strip (chosen on {c.a.name}'s mean densities)")
        out += [f"  note: {n}" for n in c.notes]
    out += [f"note: {n}" for n in notes]
    out += ["", "Relative speed: positive = B faster, 100·(10^(−Δlog E) − 1) % from the speed-point shift.",
            "Verdicts put the whole 95 % interval (Welch's t) against the tolerance. Tolerances used:"]
    used = {row.figure: row.tolerance for row in comparisons[0].rows if row.tolerance is not None}
    for figure, tol in used.items():
        if figure != "relative_speed_percent":
            out.append(f"  {figure_name(figure, qualified=True)}: {tol.text()} ({tol.source})")
    out += ["  Set tolerances for your site with --tolerance FIGURE=VALUE.", "", f"Caution: {CAUTION}"]
    return "\n".join(out)


def comparison_json(comparisons: Sequence[Comparison], notes: Sequence[str] = ()) -> dict[str, Any]:
    """The JSON object of ``stripscan compare --json`` (see the module docstring)."""
    sets = [comparisons[0].a] + [c.b for c in comparisons]
    pairs = [c.to_dict() for c in comparisons]
    for pair in pairs:
        # Each set is listed once under "sets"; pairs name them.
        pair.pop("set_a")
        pair.pop("set_b")
    return {
        "sets": [s.to_dict() for s in sets],
        "differences": pairs[0]["differences"],
        "comparisons": pairs,
        "notes": list(notes),
        "sign_convention": "difference = b - a; relative speed positive = b faster",
        "program_version": __version__,
        "caution": CAUTION,
    }


def tolerances_from_args(items: Sequence[str] | None) -> dict[str, Tolerance]:
    """The default tolerances changed by ``--tolerance FIGURE=VALUE`` items (``VALUE`` ``none`` drops one)."""
    tolerances = dict(DEFAULT_TOLERANCES)
    names = [f for f in FIGURES if f != "relative_speed_percent"]
    for item in items or ():
        figure, sep, value = item.partition("=")
        figure = figure.strip().replace("-", "_")
        if not sep or figure not in names:
            raise SetError(f"--tolerance {item!r}: write FIGURE=VALUE with FIGURE one of {', '.join(names)}")
        if value.strip().lower() == "none":
            tolerances.pop(figure, None)
        else:
            tolerances[figure] = Tolerance.parse(value)
    return tolerances


def _guarded(handler: Callable[[argparse.Namespace], int]) -> Callable[[argparse.Namespace], int]:
    # Archive errors are not ValueErrors; every failure becomes one line on stderr.
    def run(args: argparse.Namespace) -> int:
        from stripscan.archive import ArchiveError

        try:
            return handler(args)
        except (ArchiveError, ValueError, OSError) as exc:
            print(f"stripscan: error: {exc}", file=sys.stderr)
            return 1
    run.__doc__ = handler.__doc__
    return run


def cmd_compare(args: argparse.Namespace) -> int:
    """Compare sets of strips: every set against the first."""
    from stripscan.core.compare.comparison import compare_sets
    from stripscan.core.compare.sets import CompareError

    if len(args.sets) < 2:
        raise CompareError(f"compare needs at least two sets, got {len(args.sets)}: {args.sets[0]}")
    specs = [parse_set(text) for text in args.sets]
    tolerances = tolerances_from_args(args.tolerance)
    with SetLoader(args.archive, calibration_path=args.calibration, n_steps=args.steps) as loader:
        sets = [loader.load(spec) for spec in specs]
    comparisons = compare_sets(sets, tolerances=tolerances)
    if args.json:
        print(json.dumps(comparison_json(comparisons, loader.notes), ensure_ascii=False, indent=1))
    else:
        print(format_comparisons(comparisons, loader.notes))
    return 0


# --------------------------------------------------------------------------
# crossover


def _parse_date(text: str) -> datetime.date:
    try:
        return datetime.date.fromisoformat(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a date YYYY-MM-DD") from None


def levels_in_force(archive: Any, processor: str, date: datetime.date, *,
                    log: Any = None) -> tuple[Any, Any, str]:
    """The operating levels a processor's QC film is judged against on ``date``.

    Reads the processor's QC log from the archive
    (:func:`stripscan.services.qc_log.load_processor_log`: entries, events, the levels
    earlier crossovers stored, the site's settings) and takes the levels of
    its latest period up to ``date``.

    ``log`` is the processor's log when already read.

    Returns
    -------
    levels : OperatingLevels
    log : stripscan.services.qc_log.ProcessorLog
        The whole log, for its settings and QC steps.
    source : str
        Where the levels came from, in plain words.

    Raises
    ------
    ValueError
        When the log sets no levels on ``date`` (baseline not complete).
    """
    from stripscan.services.qc_log import load_processor_log

    log = log if log is not None else load_processor_log(archive, processor)
    status = log.status(date)
    if status.levels is not None:
        levels = status.levels
        return levels, log, f"the QC log ({levels.reason}, {levels.established.isoformat()})"
    if status.baseline_in_progress and status.baseline_days:
        why = f"its baseline is not complete ({status.baseline_days} of {status.baseline_needed} days)"
    else:
        why = "it has no QC strips or levels in the log"
    raise ValueError(f"processor {processor!r} has no operating levels to cross over from on "
                     f"{date.isoformat()}: {why}; establish them first (stripscan qc)")


def _steps_in_use(log: Any, levels: Any, old: StripSet, date: datetime.date) -> tuple[Any, str]:
    from stripscan.core.qc.levels import choose_qc_steps
    from stripscan.core.compare.sets import mean_step_densities

    steps = log.steps_on(date)
    if steps is not None:
        return steps, "the QC steps kept in the processor's log"
    if levels.steps is not None:
        return levels.steps, "the steps kept with the operating levels"
    try:
        steps = choose_qc_steps(list(mean_step_densities(old.strips)))
    except ValueError as exc:
        raise ValueError(f"set {old.name!r}: the QC steps cannot be chosen on the old film: {exc}") from None
    return steps, f"chosen now on the old film's mean densities (none were kept for {log.processor!r})"


def store_crossover(archive: Any, processor: str, date: str, record: dict[str, Any],
                    note: Callable[[int], str]) -> tuple[Any, Any]:
    """Store a crossover record and its ``crossover`` QC event in one transaction.

    Parameters
    ----------
    archive : Archive
    processor, date : str
    record : dict
        The crossover as JSON-ready data.
    note : callable
        Makes the event's note from the crossover record's id.

    Returns
    -------
    (Crossover, QcEvent)
        As stored; if anything fails, neither is.
    """
    return archive.add_crossover_with_event(processor, date, record, note)


def _qc_values(s: StripSet, steps: Any) -> list[Any]:
    from stripscan.core.compare.sets import strip_qc_values

    values = []
    for label, strip in zip(s.labels, s.strips):
        try:
            values.append(strip_qc_values(strip, steps))
        except ValueError as exc:
            raise SetError(f"set {s.name!r}, {label}: {exc}") from None
    return values


def _levels_text(levels: Any) -> str:
    return (f"base+fog {levels.base_fog:.3f}, mid-density {levels.mid_density:.3f}, "
            f"density difference {levels.density_difference:.3f}")


def format_crossover(result: Any, old: StripSet, new: StripSet, levels: Any, processor: str,
                     sources: Sequence[str], stored: Sequence[str]) -> str:
    """The crossover's table: old and new means, differences, old and new levels."""
    steps = result.new_levels.steps
    out = [f"Crossover of QC film on {processor!r}, {result.new_levels.established.isoformat()}",
           f"  old film: {old.name}: {len(old.strips)} strip(s); {old.source}",
           f"  new film: {new.name}: {len(new.strips)} strip(s); {new.source}",
           f"  steps: mid-density step {steps.mid_step}, density difference step {steps.dd_high_step} − "
           f"step {steps.dd_low_step}", *(f"  {s}" for s in sources), "",
           f"  {'':<20} {'old mean':>9} {'new mean':>9} {'new − old':>10} {'old level':>10} {'new level':>10}"]
    for q, label in (("base_fog", "base+fog"), ("mid_density", "mid-density"),
                     ("density_difference", "density difference")):
        out.append(f"  {label:<20} {getattr(result.old_means, q):9.3f} {getattr(result.new_means, q):9.3f} "
                   f"{getattr(result.differences, q):+10.3f} {getattr(levels, q):10.3f} "
                   f"{getattr(result.new_levels, q):10.3f}")
    rule = ("the new film's mean" if result.rule == "new_mean" else "the old level moved by the difference")
    out += [f"  new base+fog level: {rule}; mid-density and density difference: old level + (new − old)",
            "", *stored, *(f"note: {n}" for n in result.notes), "", f"Caution: {CAUTION}"]
    return "\n".join(out)


def _check_processed_together(old: StripSet, new: StripSet, loader: SetLoader, day: str) -> None:
    """Refuse strips of old and new QC film that were not processed together, on the crossover's day.

    A crossover measures the difference between two films under one and the
    same processing (common practice: old and new film exposed and processed
    together); strips of other days would move the operating levels by the
    processor's own change between those days.  Each set is one film: one lot.
    """
    dates: set[str] = set()
    for s in (old, new):
        if s.name not in loader.archived:
            loader.notes.append(f"set {s.name!r} is read from a scan: its processing day is not known here; "
                                "old and new film must be processed together on the crossover's day")
            continue
        set_dates, lots = loader.archived[s.name]
        if len(lots) > 1:
            raise SetError(f"set {s.name!r} mixes emulsion lots {', '.join(sorted(lots))}; each side of a "
                           "crossover is one film; nothing was stored")
        dates |= set_dates
    if len(dates) > 1:
        raise SetError(f"the strips were processed on {', '.join(sorted(dates))}; a crossover needs the old and the "
                       "new film processed together on one day; nothing was stored")
    if dates and dates != {day}:
        (strip_day,) = dates
        raise SetError(f"the strips were processed on {strip_day} but the crossover is dated {day}; "
                       f"give --date {strip_day}; nothing was stored")


def cmd_crossover(args: argparse.Namespace) -> int:
    """Move a processor's operating levels to a new box of QC film."""
    from stripscan.archive import Archive
    from stripscan.core.qc.crossover import crossover
    from stripscan.services.qc_log import load_processor_log

    if args.strips < 1:
        raise SetError(f"--strips must be 1 or more, got {args.strips}")
    date = args.date or datetime.date.today()
    day = date.isoformat()
    old_spec, new_spec = parse_set(args.old), parse_set(args.new)
    with Archive.open(args.archive, create=False) as archive:
        log = load_processor_log(archive, args.processor)
        earlier = [c for c in archive.list_crossovers(args.processor) if c.date == day]
        if earlier:
            raise SetError(f"processor {args.processor!r} already has a crossover on {day} (record "
                           f"{earlier[-1].id}); nothing was stored")
        latest = log.latest_entry
        if latest is not None and date < latest.date:
            # As the QC log's own events: an earlier event would re-judge days already reported.
            raise SetError(f"the crossover of {day} is before the latest QC entry of processor {args.processor!r} "
                           f"({latest.date.isoformat()}); it would re-judge days already reported")
        loader = SetLoader(calibration_path=args.calibration, n_steps=args.steps, archive=archive)
        old = loader.load(old_spec, processor=args.processor, date=day)
        new = loader.load(new_spec, processor=args.processor, date=day)
        if old.name == new.name:
            raise SetError(f"the old and the new film are the same set {old.name!r}")
        _check_processed_together(old, new, loader, day)
        n_old, n_new = old.strips[0].geometry.n_steps, new.strips[0].geometry.n_steps
        if n_old != n_new:
            raise SetError(f"set {new.name!r} has {n_new}-step strips but set {old.name!r} has {n_old}-step "
                           "strips; cross over with strips of the same sensitometer")
        levels, log, levels_from = levels_in_force(archive, args.processor, date, log=log)
        steps, steps_from = _steps_in_use(log, levels, old, date)
        levels = levels if levels.steps is not None else dataclasses.replace(levels, steps=steps)
        old_values, new_values = _qc_values(old, steps), _qc_values(new, steps)
        try:
            result = crossover(old_values, new_values, levels, date=date, base_fog_rule=args.base_fog_rule,
                               n_required=args.strips, limits=log.setup.limits)
        except ValueError as exc:
            raise SetError(f"crossover of {old.name} to {new.name}: {exc}") from None
        record = {
            "old": {"set": old.name, "source": old.source, "strips": list(old.labels),
                    "values": [v.to_dict() for v in old_values]},
            "new": {"set": new.name, "source": new.source, "strips": list(new.labels),
                    "values": [v.to_dict() for v in new_values]},
            "old_levels": levels.to_dict(), "levels_from": levels_from, "steps_from": steps_from,
            "result": result.to_dict(), "program_version": __version__,
        }
        stored, event = store_crossover(
            archive, args.processor, day, record,
            lambda rid: f"QC-film crossover from {old.name} to {new.name} (crossover record {rid}): new operating "
                        f"levels {_levels_text(result.new_levels)}; steps {steps.mid_step}, "
                        f"{steps.dd_high_step} − {steps.dd_low_step}",
        )
    print(format_crossover(result, old, new, levels, args.processor,
                           [f"operating levels from {levels_from}", f"steps from {steps_from}"],
                           [f"Stored in {archive.path}: crossover record {stored.id} and event {event.id} "
                            f"('crossover', with the new levels) in the QC log of {args.processor!r}."]))
    for n in loader.notes:
        print(f"note: {n}")
    return 0


# --------------------------------------------------------------------------
# Registration


def register(subparsers: Any) -> None:
    """Add ``compare`` and ``crossover`` to the main parser's sub-commands."""
    set_help = "a set of strips: scan:PATH[#1,3], snapshot:ID[,ID...] or lot:LOT (see 'Naming sets' below)"
    epilog = (
        "Naming sets: scan:PATH (every strip on a scan) or scan:PATH#1,3 / #2-4 (strips by number); "
        "snapshot:12 or snapshot:12,14 or snapshot:12-16 (archived strips); lot:LOT (every current "
        "snapshot of an emulsion lot).  A bare path to a file is a scan.  " + f"Caution: {CAUTION}"
    )
    # argparse expands %-codes in help texts: the per-cent signs must be doubled.
    tolerance_help = "; ".join(f"{figure_name(f, qualified=True)} {t.text()} ({t.source})"
                               for f, t in DEFAULT_TOLERANCES.items()).replace("%", "%%")

    p = subparsers.add_parser(
        "compare", help="compare emulsion lots (or any sets of strips) with replicate statistics",
        description="Compare two or more sets of strips, each against the first: mean curves ± sd, "
                    "density difference and log E shift along the curve, and a table of figures with "
                    "B − A, its 95 % interval (Welch's t) and a verdict against tolerances.",
        epilog=epilog,
    )
    p.add_argument("sets", nargs="+", metavar="SET", help=set_help)
    p.add_argument("--calibration", metavar="CAL.json", help="calibration for scan sets (none: uncalibrated direct mode)")
    p.add_argument("--archive", metavar="LOCATION", help="archive for snapshot: and lot: sets (default: $STRIPSCAN_ARCHIVE "
                   "or the user's data folder)")
    p.add_argument("--steps", type=int, metavar="N", help="steps per strip on scans (default: counted)")
    p.add_argument("--tolerance", action="append", metavar="FIGURE=VALUE",
                   help="tolerance of B − A for a figure: 0.05 (±), 5%% (± per cent of A), +0.03 (rise only) or "
                        f"none; repeat for more figures.  Defaults, set local values: {tolerance_help}")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=_guarded(cmd_compare))

    p = subparsers.add_parser(
        "crossover", help="move a processor's operating levels to a new box of QC film",
        description="Read strips of the old and the new QC film processed together, at the processor's QC "
                    "steps; new level = old level + (mean new − mean old); store the crossover and a "
                    "'crossover' event with the new levels in the processor's QC log, together.",
        epilog=epilog,
    )
    p.add_argument("--processor", required=True, metavar="P", help="processor, as named in the archive")
    p.add_argument("--old", required=True, metavar="SET", help="strips of the old QC film: " + set_help)
    p.add_argument("--new", required=True, metavar="SET", help="strips of the new QC film: " + set_help)
    p.add_argument("--date", type=_parse_date, metavar="YYYY-MM-DD", help="day of the crossover (default: today)")
    p.add_argument("--strips", type=int, default=5, metavar="N",
                   help="strips needed of each film, at least (common practice: 5); as many old as new")
    p.add_argument("--archive", metavar="LOCATION", help="the archive (default: $STRIPSCAN_ARCHIVE or the user's data folder)")
    p.add_argument("--calibration", metavar="CAL.json", help="calibration for scan sets")
    p.add_argument("--steps", type=int, metavar="N", help="steps per strip on scans (default: counted)")
    p.add_argument("--base-fog-rule", choices=("new_mean", "shift"), default="new_mean",
                   help="new base+fog level: the new film's mean (default) or the old level moved by the difference")
    p.set_defaults(func=_guarded(cmd_crossover))

