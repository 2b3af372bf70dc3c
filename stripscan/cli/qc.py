"""The ``qc`` command group: a processor's daily QC log, its status and chart.

::

    stripscan qc add --processor P --date YYYY-MM-DD SCAN --calibration CAL.json [--strip N] [--lot ID]
    stripscan qc add --processor P --date YYYY-MM-DD --base-fog X --mid-density Y --density-difference Z
    stripscan qc add ... --repeat          (a second strip of the latest day; it then counts for the day)
    stripscan qc add ... --late            (a missed earlier day, stored marked as entered late)
    stripscan qc add --processor P --calibration CAL.json SCAN SCAN ... | FOLDER
                                           (several days' scans, each day from its file's name)
    stripscan qc correct ENTRY [--base-fog X] [--mid-density Y] [--density-difference Z] [--date D]
                         [--note T] [--action T] --reason TEXT
    stripscan qc status [--processor P] [--json] [--on YYYY-MM-DD]
    stripscan qc list --processor P
    stripscan qc chart --processor P -o FILE.png [--month YYYY-MM]
    stripscan qc event --processor P --date YYYY-MM-DD --kind KIND [--note TEXT]
    stripscan qc limits --processor P [--md-dd 0.15] [--warning 0.10 | --no-warning] [--base-fog 0.03]
                        [--baseline-days 5] [--reason TEXT]
    stripscan qc demo --archive PATH

Every command takes ``--archive PATH``; reading commands never create the
file.  ``add``, ``event`` and ``limits`` refuse a processor the archive does
not know unless ``--new-processor`` is given.  Nothing stored is changed:
a repeat strip and a correction are new entries linked to the one they
follow or correct, and ``list`` shows them all with their entry numbers.
A failure prints one line ``stripscan: error: ...`` and exits with status
1; nothing is stored.
"""

from __future__ import annotations

import argparse
import json
import re
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

from stripscan import CAUTION
from stripscan.archive import default_archive_path
# The archive commands' own error reporting and opening rules, shared so both groups answer alike.
from stripscan.cli.batch import add_batch_arguments
from stripscan.cli.common import fail, guarded, open_from_args
from stripscan.core.qc.names import EVENT_KINDS, LABELS, QUANTITIES, VERDICT_WORDS
from stripscan.archive import ArchiveError, DuplicateDayError, OutOfOrderError

if TYPE_CHECKING:
    from stripscan.services.qc_log import LoggedEntry

__all__ = ["register"]

_Handler = Callable[[argparse.Namespace], int]


def _processor(args: argparse.Namespace) -> str:
    if not args.processor or not args.processor.strip():
        raise ValueError("--processor is needed: the name of the processor, as stored in the archive")
    return args.processor


def _day(text: str | None, what: str = "--date") -> Any:
    if text is None:
        raise ValueError(f"{what} is needed (YYYY-MM-DD)")
    from stripscan.services.qc_log import parse_day

    return parse_day(text, what)


def _cmd_add(args: argparse.Namespace) -> int:
    """Add a day's QC entry, read off a scan or typed in from a densitometer (or several days' scans)."""
    from stripscan.cli.batch import is_batch
    from stripscan.core.qc.records import QCValues
    from stripscan.services.qc_recording import uncalibrated_refusal
    from stripscan.services.qc_status import status_text

    if is_batch(args.scan):
        return _add_days(args)
    args.scan = args.scan[0] if args.scan else None
    _processor(args)
    day = _day(args.date)
    typed = [args.base_fog, args.mid_density, args.density_difference]
    if args.scan is not None and any(v is not None for v in typed):
        return fail("give either SCAN or the three typed values (--base-fog, --mid-density, "
                     "--density-difference), not both")
    if args.scan is None and None in typed:
        missing = [f"--{q.replace('_', '-')}" for q, v in zip(QUANTITIES, typed) if v is None]
        return fail(f"give a SCAN, or all three typed values (missing: {', '.join(missing)})")
    if args.scan is None and (args.calibration or args.strip is not None or args.lot):
        return fail("--calibration, --strip and --lot apply to a scan; no SCAN was given")
    if args.scan is not None and args.calibration is None:
        # The log refuses an uncalibrated read anyway (qc_recording.read_strip); say so before the scan is analysed.
        return fail(uncalibrated_refusal(Path(args.scan).name))
    analysis = calibration = None
    if args.scan is not None:
        from stripscan.core.calibration_files import load_calibration
        from stripscan.core.pipeline import analyze_scan

        cal = load_calibration(args.calibration)
        calibration = cal.to_dict()
        analysis = analyze_scan(args.scan, calibration=cal)
    values = None if analysis is not None else QCValues(*typed)
    with open_from_args(args, create=args.new_processor) as archive:
        added = _store_day(args, archive, day, values=values, analysis=analysis, calibration=calibration)
    _print_stored(args, added)
    print(status_text(added.plog, added.plog.status(day)))
    if added.status.verdict == "action" and not added.status.baseline_in_progress:
        print(f"  To keep a repeat strip of {day.isoformat()} beside this one: stripscan qc add --repeat ...")
    return 0


def _store_day(args: argparse.Namespace, archive: Any, day: Any, **reading: Any) -> Any:
    """``add_day`` with the command's options; its refusals say which option would allow the entry."""
    from stripscan.services.qc_recording import add_day

    try:
        return add_day(archive, args.processor, day, strip=args.strip, lot=args.lot, note=args.note or "",
                       action=args.action or "", new_processor=args.new_processor, repeat=args.repeat,
                       late=args.late, **reading)
    except DuplicateDayError as exc:
        raise DuplicateDayError(f"{exc} (give --repeat); nothing was stored") from None
    except OutOfOrderError as exc:
        if args.repeat:
            raise OutOfOrderError(f"{exc}; nothing was stored") from None
        # A year typed wrong must not slip in as a late day: entering a day late is asked for by name.
        raise OutOfOrderError(f"{exc}: give --late for that; nothing was stored") from None


def _print_stored(args: argparse.Namespace, added: Any, source: str = "") -> None:
    """The notes of a stored entry and its line: entry number, day, steps, values (``source``: the file)."""
    for note in added.notes:
        print(f"note: {note}")
    e = added.entry
    where = ""
    if added.reading is not None:
        s = added.reading.steps
        where = f" at steps {s.mid_step} (mid-density), {s.dd_high_step} - {s.dd_low_step} (density difference)"
    kind = f", repeat of entry {e.repeat_of}" if e.repeat_of is not None else ""
    kind += ", entered late" if e.entered_late else ""
    print(f"stored entry {e.id}: {args.processor!r} {e.date} ({e.source}{where}{kind}): "
          + ", ".join(f"{LABELS[q]} {getattr(e, q):.3f}" for q in QUANTITIES) + (f" ({source})" if source else ""))


#: A day written in a file's name, as the demo's daily scans carry it (``daily_processor-1_2026-11-02.tif``).
_DAY_IN_NAME = re.compile(r"(?<!\d)(\d{4}-\d{2}-\d{2})(?!\d)")


def _day_in_name(path: Path) -> Any:
    days = set(_DAY_IN_NAME.findall(path.name))
    if len(days) != 1:
        found = "no date" if not days else f"{len(days)} dates ({', '.join(sorted(days))})"
        raise ValueError(f"{path}: {found} in its name; with several scans each file's name gives the day its strip "
                         "was processed, written YYYY-MM-DD (or add the scan alone with --date)")
    return _day(days.pop(), f"{path}: the date in its name,")


def _add_days(args: argparse.Namespace) -> int:
    """Several days' scans (or a folder of them): read on every core, stored day after day.

    Each file's name gives its day (YYYY-MM-DD in it); the entries are
    stored in date order, one transaction each.  A scan that cannot be read
    or stored is reported and skipped; the days after it are still stored.
    """
    import functools

    from stripscan.cli.batch import run_batch_command, start_workers
    from stripscan.services.batch import collect_scans
    from stripscan.services.qc_recording import uncalibrated_refusal
    from stripscan.services.qc_status import status_text

    _processor(args)
    if any(v is not None for v in (args.base_fog, args.mid_density, args.density_difference)):
        return fail("typed values are one day's: give them without a SCAN")
    one_day = [name for name, given in (("--date", args.date), ("--note", args.note), ("--action", args.action),
                                        ("--repeat", args.repeat)) if given]
    if one_day:
        return fail(f"{', '.join(one_day)} {'belongs' if len(one_day) == 1 else 'belong'} to one day: with several scans each file's name gives its "
                     "day; add that day's scan alone (a note or an action can also be added later with "
                     "'stripscan qc correct')")
    scans = collect_scans(args.scan)
    if args.calibration is None:
        return fail(uncalibrated_refusal(", ".join(p.name for p in scans[:3]) + (", ..." if len(scans) > 3 else "")))
    days = {path: _day_in_name(path) for path in scans}
    scans.sort(key=lambda p: (days[p], p.name))  # the log takes its days in order
    stored: list[Any] = []
    with start_workers(args, scans) as workers, open_from_args(args, create=args.new_processor) as archive:
        from stripscan.core.calibration_files import load_calibration
        from stripscan.core.pipeline import analyze_scan

        calibration = load_calibration(args.calibration)

        def store(item: Any) -> None:
            added = _store_day(args, archive, days[item.path], analysis=item.result,
                               calibration=calibration.to_dict())
            stored.append(added)
            _print_stored(args, added, item.path.name)
            # Each day's verdict as it was stored: a day that called for action stays in view.
            st = added.status
            print("  that day: " + (f"baseline, {st.baseline_days} of {st.baseline_needed} strips"
                                    if st.baseline_in_progress else VERDICT_WORDS[st.verdict])
                  + (f" (trend rules fired: {', '.join(st.rules_fired)})" if st.rules_fired else ""))

        summary = run_batch_command(args, scans, functools.partial(analyze_scan, calibration=calibration),
                                    workers=workers, done_word="stored", ordered=True, on_result=store,
                                    expected=(ArchiveError,))
    if stored:
        print(status_text(stored[-1].plog, stored[-1].plog.status(days[summary.done[-1].path])))
    return 1 if summary.failed or summary.cancelled else 0


def _cmd_correct(args: argparse.Namespace) -> int:
    """Correct a wrongly entered QC entry: store the right values with a reason, keeping the wrong ones."""
    from stripscan.services.qc_recording import correct_entry
    from stripscan.services.qc_status import status_text

    if not args.reason or not args.reason.strip():
        raise ValueError("--reason is needed: say why the entry was wrong (it is kept with the correction)")
    with open_from_args(args, create=False) as archive:
        old = archive.get_qc_entry(args.entry)
        added = correct_entry(archive, args.entry, reason=args.reason, base_fog=args.base_fog,
                              mid_density=args.mid_density, density_difference=args.density_difference,
                              note=args.note, action=args.action,
                              date=_day(args.date) if args.date is not None else None)
    e = added.entry
    changed = [f"{LABELS[q]} {getattr(e, q):.3f} (was {getattr(old, q):.3f})" for q in QUANTITIES
               if getattr(e, q) != getattr(old, q) and None not in (getattr(e, q), getattr(old, q))]
    changed += [f"{k} {getattr(e, k)!r}" for k in ("date", "note", "action") if getattr(e, k) != getattr(old, k)]
    print(f"stored entry {e.id}: correction of entry {e.corrects} ({e.processor!r}, {old.date}): "
          f"{', '.join(changed)}; reason: {e.reason}")
    for note in added.notes:
        print(f"note: {note}")
    print(status_text(added.plog))
    return 0


def _cmd_status(args: argparse.Namespace) -> int:
    """Today's status of one processor, or of every processor in the archive."""
    from stripscan.services.qc_log import load_processor_log
    from stripscan.services.qc_status import status_json, status_text

    on = _day(args.on, "--on") if args.on is not None else None
    with open_from_args(args, create=False) as archive:
        names = [args.processor] if args.processor is not None else [p.name for p in archive.list_processors()]
        logs = [load_processor_log(archive, name) for name in names]
    if args.processor is None:
        # Processors without any QC (only lot readings) have nothing to report.
        logs = [p for p in logs if p.log.entries or p.log.events]
    if not logs:
        return fail(f"{archive.path} holds no processor with a QC log")
    if args.json:
        data = [status_json(p, p.status(on)) for p in logs]
        print(json.dumps(data[0] if args.processor is not None else data, ensure_ascii=False, indent=1))
        return 0
    print("\n\n".join(status_text(p, p.status(on)) for p in logs))
    return 0


def _entry_row(item: LoggedEntry) -> list[str]:
    from stripscan.services.qc_status import signed

    e, v = item.entry, item.verdict
    remark = "; ".join(t for t in (item.standing(), e.note, f"action: {e.action}" if e.action else "") if t)
    values = [f"{getattr(e, q):.3f}" if getattr(e, q) is not None else "-" for q in QUANTITIES]
    devs = [signed(getattr(v.deviations, q)) if v else "-" for q in QUANTITIES]
    verdict = "-" if item.set_aside == "corrected" else (VERDICT_WORDS[v.verdict] if v else "baseline")
    used = "yes" if item.state.in_use else "no"
    return [str(e.id), e.date, e.source, *values, *devs, verdict, used, remark]


def _event_row(event: Any, width: int) -> list[str]:
    return ["--", event.label, *[""] * (width - 3), event.note]


def _cmd_list(args: argparse.Namespace) -> int:
    """List a processor's QC entries (repeats and corrections too) with deviations and verdicts, and its events.

    A day's verdict is the one 'qc add' and 'qc status' gave it: the control limits, the warning tier and
    the trend rules that fired on that day.
    """
    from stripscan.services.qc_log import load_processor_log

    _processor(args)
    with open_from_args(args, create=False) as archive:
        plog = load_processor_log(archive, args.processor)
    header = ["entry", "date", "source", *(LABELS[q] for q in QUANTITIES), *(f"dev {LABELS[q]}" for q in QUANTITIES),
              "verdict", "used", "note"]
    entries = list(plog.logged())
    events = list(plog.log.events)
    rows = []
    for item in entries:
        # An event applies from its day on, so it is listed before that day's entries.
        while events and events[0].date <= item.date:
            rows.append(_event_row(events.pop(0), len(header)))
        rows.append(_entry_row(item))
    rows += [_event_row(event, len(header)) for event in events]
    widths = [max(len(str(c)) for c in col) for col in zip(header, *rows)]
    for line in (header, *rows):
        print("  ".join(str(c).ljust(w) for c, w in zip(line, widths)).rstrip())
    kinds = [i.entry.kind for i in entries]
    print(f"{len(plog.log.entries)} day(s), {len(plog.log.events)} event(s); {len(entries)} entries kept, "
          f"{kinds.count('repeat')} repeat strip(s), {kinds.count('correction')} correction(s)")
    return 0


def _cmd_chart(args: argparse.Namespace) -> int:
    """Draw the three deviation plots with their limit bands to a PNG file."""
    from stripscan.render.qc_chart import render_chart_png
    from stripscan.services.qc_chart import chart_data
    from stripscan.services.qc_log import load_processor_log

    _processor(args)
    if args.output is None:
        raise ValueError("-o FILE.png is needed: where to write the chart")

    with open_from_args(args, create=False) as archive:
        plog = load_processor_log(archive, args.processor)
    data = chart_data(plog, month=args.month)
    written = render_chart_png(data, args.output, size=(args.width, args.height))
    print(f"wrote {written} ({args.width} x {args.height} px): {data.title}")
    print(f"Caution: {CAUTION}")
    return 0


def _cmd_event(args: argparse.Namespace) -> int:
    """Record an event that restarts the baseline (new chemistry, service, crossover...)."""
    from stripscan.services.qc_recording import add_event

    _processor(args)
    day = _day(args.date)
    if args.kind is None:
        raise ValueError(f"--kind is needed, one of: {', '.join(EVENT_KINDS)}")
    with open_from_args(args, create=args.new_processor) as archive:
        plog = add_event(archive, args.processor, day, args.kind, args.note or "", new_processor=args.new_processor)
        crossover_records = [c for c in archive.list_crossovers(args.processor) if c.date == day.isoformat()]
    event = [e for e in plog.log.events if e.date == day][-1]
    print(f"stored event for {args.processor!r}: {event.label}" + (f" ({event.note})" if event.note else ""))
    if event.levels is not None:
        print(f"  the crossover record of {day.isoformat()} sets the operating levels from this day on")
    else:
        print(f"  the baseline starts again: operating levels are the mean of the first "
              f"{plog.setup.baseline_days} strips from {day.isoformat()} on")
        if args.kind == "crossover" and not crossover_records:
            print("  note: no crossover record is stored for this day; 'stripscan crossover' moves the levels "
                  "by the old and new films' difference instead of starting a new baseline")
    return 0


def _cmd_limits(args: argparse.Namespace) -> int:
    """Show or change a processor's control limits, warning tier and baseline length."""
    from stripscan.services.qc_log import load_setup
    from stripscan.services.qc_recording import set_limits

    _processor(args)
    changes: dict[str, Any] = {}
    for key, value in (("md_dd_action", args.md_dd), ("base_fog_action", args.base_fog),
                       ("base_fog_warning", args.base_fog_warning), ("baseline_days", args.baseline_days),
                       ("run_length", args.run), ("drift_length", args.drift)):
        if value is not None:
            changes[key] = value
    if args.no_warning and args.warning is not None:
        return fail("give --warning or --no-warning, not both")
    if args.warning is not None:
        changes["md_dd_warning"] = args.warning
    if args.no_warning:
        changes["md_dd_warning"] = None
    with open_from_args(args, create=bool(changes) and args.new_processor) as archive:
        if changes or args.new_processor:
            setup = set_limits(archive, args.processor, new_processor=args.new_processor, reason=args.reason or "",
                               **changes)
        else:
            archive.get_processor(args.processor)
            setup = load_setup(archive, args.processor)
        history = archive.qc_settings_history(args.processor)
    lim = setup.limits
    warn = f"±{lim.md_dd_warning:.3f}" if lim.md_dd_warning is not None else "none"
    bf_warn = f"+{lim.base_fog_warning:.3f}" if lim.base_fog_warning is not None else "none"
    print(f"{args.processor}: {'stored' if changes else 'current'} QC settings")
    print(f"  mid-density and density difference: control limit ±{lim.md_dd_action:.3f} OD, warning tier {warn}")
    print(f"  base+fog: control limit +{lim.base_fog_action:.3f} OD above its level, warning tier {bf_warn}")
    print(f"  operating levels: mean of the first {setup.baseline_days} strips after each restart")
    print(f"  trend rules: {', '.join(setup.rules.rules)}; run of {setup.rules.run_length}, drift of "
          f"{setup.rules.drift_length}, {setup.rules.warning_count} of {setup.rules.warning_window} past the "
          "warning tier")
    for choice in setup.step_choices:
        s = choice.steps
        print(f"  QC steps from {choice.since.isoformat()}: mid-density step {s.mid_step}, density difference "
              f"step {s.dd_high_step} - step {s.dd_low_step} (chosen on {choice.chosen_on})")
    if args.history:
        for row in history:
            print(f"  settings of {row.updated_at}: {row.reason or '(no reason kept)'}")
    if changes:
        print("  every stored day is judged again with these settings; the settings before are kept "
              "(qc limits --history)")
    return 0


def _cmd_demo(args: argparse.Namespace) -> int:
    """Fill an archive with the invented demo month of Processor 1's QC."""
    from stripscan.sim.demo_data import demo_files
    from stripscan.services.qc_demo import build_demo_qc
    from stripscan.services.qc_status import status_text

    with open_from_args(args, create=True) as archive:
        summary = build_demo_qc(archive, demo_files())
    print(f"built the demo QC month in {archive.path}: {summary.describe()}")
    print(status_text(summary.plog))
    return 0


def _number(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None


def register(subparsers: Any) -> argparse.ArgumentParser:
    """Add the ``qc`` command group to the main parser's sub-commands.

    Returns
    -------
    argparse.ArgumentParser
        The ``qc`` parser; every leaf sets ``func`` (parsed arguments -> exit status).
    """
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--archive", metavar="LOCATION", default=None,
                        help=f"archive: a file, or a PostgreSQL server as postgresql://USER@HOST/DB "
                             f"(default: $STRIPSCAN_ARCHIVE or {default_archive_path()})")
    parser = subparsers.add_parser("qc", help="daily processor QC: log, status, chart",
                                   description="Keep each processor's daily QC strips and judge them against "
                                               "operating levels and control limits.",
                                   epilog=f"Caution: {CAUTION}")
    commands = parser.add_subparsers(dest="qc_command", metavar="COMMAND", required=True)

    def command(name: str, handler: _Handler, help_text: str, *, processor: str = "required") -> Any:
        sub = commands.add_parser(name, parents=[common], help=help_text, description=handler.__doc__)
        sub.set_defaults(func=guarded(handler))
        if processor != "none":
            # Checked by the handlers, so that a missing name is answered in one line like every other error.
            sub.add_argument("--processor", metavar="P", help="processor name, as stored in the archive"
                             + (" (needed)" if processor == "required" else "; all of them when omitted"))
        if name in ("add", "event", "limits"):
            sub.add_argument("--new-processor", action="store_true",
                             help="add the processor to the archive if it is not there yet")
        return sub

    add = command("add", _cmd_add, "add a day's QC entry from a scan or typed values (or several days' scans)")
    add.add_argument("scan", metavar="SCAN", nargs="*",
                     help="scan of the day's processed QC strip; several days' scans, or a folder of them, are read "
                          "on every core and stored in date order, each day taken from its file's name "
                          "(YYYY-MM-DD in it)")
    add.add_argument("--date", metavar="YYYY-MM-DD", help="day the strip was processed")
    add.add_argument("--calibration", metavar="CAL.json", help="scanner calibration (from 'stripscan calibrate'); needed with a "
                     "SCAN: an uncalibrated read is not stored")
    add.add_argument("--strip", metavar="N", type=int, help="which strip of the scan, when it holds several")
    add.add_argument("--lot", metavar="ID", help="emulsion lot of the QC film: also keep the strip in the archive")
    for q in QUANTITIES:
        add.add_argument(f"--{q.replace('_', '-')}", metavar="OD", type=_number, dest=q,
                         help=f"typed {LABELS[q]} (from a densitometer)")
    add.add_argument("--note", metavar="TEXT", help="remark for the day")
    add.add_argument("--action", metavar="TEXT", help="corrective action taken that day")
    add.add_argument("--repeat", action="store_true",
                     help="a repeat strip of the latest day: kept beside the day's entry, and the day's value from "
                          "now on (the earlier strip is kept and shown, not used)")
    add.add_argument("--late", action="store_true",
                     help="a missed day before the latest one, entered now: stored marked as entered late with "
                          "the time it was entered; levels, limits and trend rules take the days in date order")
    add_batch_arguments(add)

    correct = command("correct", _cmd_correct, "correct a wrongly entered QC entry, with a reason",
                      processor="none")
    correct.add_argument("entry", metavar="ENTRY", type=int, help="number of the entry to correct (see 'qc list')")
    for q in QUANTITIES:
        correct.add_argument(f"--{q.replace('_', '-')}", metavar="OD", type=_number, dest=q,
                             help=f"the right {LABELS[q]} (kept as it was when not given)")
    correct.add_argument("--date", metavar="YYYY-MM-DD", help="the right date (a day's single strip moves to a day "
                         "without an entry; moved before the latest day, it is marked entered late)")
    correct.add_argument("--note", metavar="TEXT", help="the right remark")
    correct.add_argument("--action", metavar="TEXT", help="the right corrective action")
    correct.add_argument("--reason", metavar="TEXT", help="why the entry was wrong (needed)")

    status = command("status", _cmd_status, "today's status: within limits, warning or act",
                     processor="optional")
    status.add_argument("--json", action="store_true", help="print the status as JSON")
    status.add_argument("--on", metavar="YYYY-MM-DD", help="status as it stood on that day")

    command("list", _cmd_list, "list a processor's QC days and events, each day with the verdict the status gave "
                               "it (trend rules included)")

    chart = command("chart", _cmd_chart, "draw the QC chart to a PNG file")
    chart.add_argument("-o", "--output", metavar="FILE.png", type=Path, help="the PNG file to write (needed)")
    chart.add_argument("--month", metavar="YYYY-MM", help="only this month (default: the whole log)")
    chart.add_argument("--width", metavar="PX", type=int, default=1200, help="image width (default 1200)")
    chart.add_argument("--height", metavar="PX", type=int, default=1100, help="image height (default 1100)")

    event = command("event", _cmd_event, "record an event that restarts the baseline")
    event.add_argument("--date", metavar="YYYY-MM-DD")
    event.add_argument("--kind", metavar="KIND", help=f"what happened: {', '.join(EVENT_KINDS)}")
    event.add_argument("--note", metavar="TEXT")

    limits = command("limits", _cmd_limits, "show or change control limits and baseline length")
    limits.add_argument("--md-dd", metavar="OD", type=_number, help="control limit ± for mid-density and "
                        "density difference (21 CFR 900.12(e)(1): 0.15)")
    limits.add_argument("--warning", metavar="OD", type=_number, help="warning tier ± (commonly 0.10)")
    limits.add_argument("--no-warning", action="store_true", help="no warning tier")
    limits.add_argument("--base-fog", metavar="OD", type=_number,
                        help="how far base+fog may rise above its level (21 CFR 900.12(e)(1): 0.03)")
    limits.add_argument("--base-fog-warning", metavar="OD", type=_number, help="warning tier for a base+fog rise")
    limits.add_argument("--baseline-days", metavar="N", type=int, help="strips averaged for the levels (5)")
    limits.add_argument("--run", metavar="N", type=int, help="strips on one side of the level that make a run (7)")
    limits.add_argument("--drift", metavar="N", type=int, help="strips each higher (or lower) that make a drift (5)")
    limits.add_argument("--reason", metavar="TEXT", help="why the settings change, kept with them (default: the "
                        "changes in words); the settings before are kept")
    limits.add_argument("--history", action="store_true", help="also list every settings change with its time "
                        "and reason")

    command("demo", _cmd_demo, "fill an archive with the invented demo month", processor="none")
    return parser
