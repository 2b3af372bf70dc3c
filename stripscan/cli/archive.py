"""The ``archive`` command group of the stripscan command line.

The main program calls :func:`register` with its sub-command action; each
command stores its handler as ``func`` in the parsed arguments, and the
handler returns the exit status.  Failures print one line
``stripscan: error: ...`` on standard error and return 1.

Length (about 620 lines, a little over the project's ~600): one module per
command group, and this group has thirteen commands (add, list, show,
export, import, backup, lots, lot, revise, retire, verify, init, copy).
"""

from __future__ import annotations

import argparse
import dataclasses
import json
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from stripscan import CAUTION
from stripscan.core.records import warnings_of_strip
from stripscan.core.figures import NOISE_ONLY_NOTE, read_in_direct_mode, step_flag, uncertainty_title
from stripscan.archive.entry_checks import already_stored, describe_stored
from stripscan.archive.errors import ArchiveError
from stripscan.archive.records import FIGURES, NewSnapshot, Sensitometer, Snapshot, snapshot_status
from stripscan.archive.values import check_day
from stripscan.archive.service import Archive, default_archive_path
from stripscan.cli.batch import add_batch_arguments
from stripscan.cli.common import fail, forget_new_archive, guarded, open_from_args
from stripscan.core.figures import figure_digits

__all__ = ["register"]

_Handler = Callable[[argparse.Namespace], int]

# Short column titles for tables printed on a terminal.
_FIGURE_TITLES = {
    "base_fog": "base+fog", "dmax": "Dmax", "speed_log_exposure": "speed logE",
    "average_gradient": "avg grad", "gamma": "gamma", "latitude_log_exposure": "latitude",
    "mid_density": "mid-dens", "density_difference": "dens diff",
}


def _date(text: str) -> str:
    try:
        check_day(text, "date")
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None
    return text


def _number(value: float | None, digits: int = 3, *, unit: str = "") -> str:
    if value is None:
        return "-"
    return f"{value:.{digits}f} {unit}" if unit else f"{value:.{digits}f}"


def _figure(key: str, value: float | None, *, unit: str = "") -> str:
    """A curve figure at the decimals of the one figure table (as every report prints it)."""
    return _number(value, figure_digits(key), unit=unit)


def _print_table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> None:
    widths = [max(len(str(c)) for c in column) for column in zip(header, *rows)]
    for line in (header, *rows):
        print("  ".join(str(c).ljust(w) for c, w in zip(line, widths)).rstrip())


def _exposure_table(path: Path) -> tuple[float, ...]:
    from stripscan.cli.main import CommandError, read_exposure_table

    try:
        return read_exposure_table(str(path))
    except CommandError as exc:
        raise ValueError(str(exc)) from None


def _analyse(args: argparse.Namespace, archive: Archive) -> tuple[Any, Any, Sensitometer | None]:
    """Analyse ``args.scan`` with the options ``archive add`` and ``archive revise`` share.

    Returns the analysis, the calibration used (or None) and a sensitometer
    to store with the snapshots (or None).  ``--sensitometer`` names a
    stored sensitometer whose step table is used unless ``--exposures`` is
    given; one not stored yet is stored with the table the strips were read
    with (``--exposures``, or ``--increment`` per step).
    """
    from stripscan.core.pipeline import analyze_scan

    calibration, options, known = _reading_setup(args, archive)
    analysis = analyze_scan(args.scan, calibration=calibration, options=options)
    return analysis, calibration, _new_sensitometer(args, known, analysis)


def _new_sensitometer(args: argparse.Namespace, known: Sensitometer | None, analysis: Any) -> Sensitometer | None:
    """The sensitometer ``--sensitometer`` names, to store with the snapshots when the archive lacks it."""
    if args.sensitometer is not None and known is None and analysis.strips:
        return Sensitometer(args.sensitometer, log_exposures=tuple(s.log_exposure for s in analysis.strips[0].steps))
    return None


def _reading_setup(args: argparse.Namespace, archive: Archive) -> tuple[Any, Any, Sensitometer | None]:
    """The calibration (or None), the analysis options and the stored sensitometer named (or None).

    Read once for all the scans of a command.
    """
    from stripscan.core.calibration_files import load_calibration
    from stripscan.core.figure_settings import FigureSettings
    from stripscan.core.reading import AnalysisOptions

    # The core's own errors are ValueErrors whose message names the file.
    calibration = load_calibration(args.calibration) if args.calibration is not None else None
    table = _exposure_table(args.exposures) if args.exposures is not None else None
    known = None
    if args.sensitometer is not None:
        known = next((s for s in archive.list_sensitometers() if s.sensitometer_id == args.sensitometer), None)
        if table is None and known is not None:
            table = known.log_exposures
        elif known is not None and tuple(table) != known.log_exposures:  # type: ignore[arg-type]
            raise ValueError(f"{args.exposures}: the step table differs from the one stored for sensitometer "
                             f"{args.sensitometer!r}; name another sensitometer, or leave out --exposures")
    n_steps = args.steps if args.steps is not None or table is None else len(table)
    options = AnalysisOptions(n_steps=n_steps, increment=args.increment, exposure_table=table,
                              figures=FigureSettings(gradient_low=args.low, gradient_high=args.high))
    return calibration, options, known


def _sensitometer_note(new: Sensitometer) -> str:
    return (f"sensitometer {new.sensitometer_id!r} was not in the archive; added it with the "
            f"{len(new.log_exposures)}-step log exposure table these strips were read with")


def _cmd_add(args: argparse.Namespace) -> int:
    """Analyse a scan (or several, or a folder of them) and store one snapshot per strip."""
    from stripscan.cli.batch import is_batch

    if is_batch(args.scan):
        return _add_batch(args)
    args.scan = args.scan[0]
    with open_from_args(args, create=True) as archive:
        analysis, calibration, sensitometer = _analyse(args, archive)
        new, stored = _store(args, archive, analysis, calibration, sensitometer)
    for item in new:
        print(f"note: {item} was not in the archive; added it with no further details")
    if sensitometer is not None:
        print(f"note: {_sensitometer_note(sensitometer)}")
    if calibration is None:
        print(_UNCALIBRATED)
    for snapshot in stored:
        print(f"snapshot {snapshot.id}: {_stored_line(snapshot)}")
    return 0


_UNCALIBRATED = ("warning: UNCALIBRATED: stored as read in direct mode, log10(I0/I) straight from the scanner "
                 "(no --calibration); such densities are capped by the scanner's flare and are not comparable "
                 "with calibrated ones")


def _store(args: argparse.Namespace, archive: Archive, analysis: Any, calibration: Any,
           sensitometer: Sensitometer | None) -> tuple[list[str], list[Snapshot]]:
    """Store one scan's strips in one transaction; what was new to the archive, and the snapshots."""
    if not args.again:
        _refuse_stored_scan(archive, analysis)
    new = []
    if not any(s.lot.lot_id == args.lot for s in archive.list_lots()):
        new.append(f"lot {args.lot!r}")
    if args.processor is not None and all(p.name != args.processor for p in archive.list_processors()):
        new.append(f"processor {args.processor!r}")
    stored = archive.add_analysis(
        analysis, args.lot, calibration=calibration.to_dict() if calibration is not None else None,
        create_missing=True, processor=args.processor, operator=args.operator or "",
        exposed_on=args.exposed, processed_on=args.processed, scanned_on=args.scanned, notes=args.note or "",
        sensitometer=args.sensitometer, new_sensitometer=sensitometer)
    return new, stored


def _add_batch(args: argparse.Namespace) -> int:
    """Several scans: read on every core, each stored here as it comes, in the order given, one transaction each.

    A scan that cannot be read or stored is reported and skipped; the
    others are stored.
    """
    import functools

    from stripscan.cli.batch import run_batch_command, start_workers
    from stripscan.services.batch import collect_scans

    scans = collect_scans(args.scan)
    with start_workers(args, scans) as workers, open_from_args(args, create=True) as archive:
        from stripscan.core.pipeline import analyze_scan

        calibration, options, known = _reading_setup(args, archive)

        def store(item: Any) -> None:
            nonlocal known
            sensitometer = _new_sensitometer(args, known, item.result)
            new, stored = _store(args, archive, item.result, calibration, sensitometer)
            for what in new:
                print(f"note: {what} was not in the archive; added it with no further details")
            if sensitometer is not None:
                print(f"note: {_sensitometer_note(sensitometer)}")
                known = sensitometer
            for snapshot in stored:
                print(f"snapshot {snapshot.id}: {_stored_line(snapshot)} ({item.path.name})")

        work = functools.partial(analyze_scan, calibration=calibration, options=options)
        summary = run_batch_command(args, scans, work, workers=workers, done_word="stored", ordered=True,
                                    on_result=store, expected=(ArchiveError,))
    if not summary.done:
        forget_new_archive(args)
    elif calibration is None:
        print(_UNCALIBRATED)
    return 1 if summary.failed or summary.cancelled else 0


def _stored_line(snapshot: Snapshot) -> str:
    f = snapshot.figures
    return (f"lot {snapshot.lot_id}, strip {snapshot.strip.index}, base+fog {_figure('base_fog', f.base_fog)}, "
            f"mid-density {_figure('mid_density', f.mid_density)}, density difference "
            f"{_figure('density_difference', f.density_difference)}, speed "
            f"{_figure('speed_log_exposure', f.speed_log_exposure)}")


def _refuse_stored_scan(archive: Archive, analysis: Any) -> None:
    """A scan whose strips are stored already is stored again only when asked (``--again``)."""
    stored = already_stored(archive, analysis)
    if stored:
        raise ArchiveError(f"{archive.path}: {analysis.scan.path} (sha256 {analysis.scan.sha256[:12]}...) is "
                           f"stored already: {describe_stored(stored)}; nothing was stored "
                           "(give --again to store it again)")


def _cmd_list(args: argparse.Namespace) -> int:
    """List snapshots (current ones unless --all)."""
    with open_from_args(args, create=False) as archive:
        if args.lot is not None:
            archive.get_lot(args.lot)  # an unknown lot is a mistake to name, not an empty list
        rows = archive.list_snapshots(args.lot, args.processor, include_retired=args.all,
                                      include_superseded=args.all)
        readings = archive.step_readings(args.lot, args.processor, at_lot_steps=not args.own_steps,
                                         include_retired=args.all, include_superseded=args.all)
    # Mid-density and density difference go with the steps they were read at, so strips read at
    # different steps are never set side by side unmarked.
    plain = [n for n in FIGURES if n not in ("mid_density", "density_difference")]
    table = []
    for r in rows:
        qc = readings.get(r.id)
        md_step = str(qc.mid_step) if qc and qc.mid_step is not None else "-"
        dd_steps = f"{qc.dd_high_step}-{qc.dd_low_step}" if qc and qc.dd_high_step is not None else "-"
        table.append([str(r.id), r.date, r.lot_id, r.processor or "-", str(r.strip_index),
                      *(_figure(name, getattr(r, name)) for name in plain),
                      _figure("mid_density", qc.mid_density if qc else None), md_step,
                      _figure("density_difference", qc.density_difference if qc else None), dd_steps, snapshot_status(r)])
    _print_table(["id", "date", "lot", "processor", "strip", *(_FIGURE_TITLES[n] for n in plain),
                  _FIGURE_TITLES["mid_density"], "MD step", _FIGURE_TITLES["density_difference"], "DD steps",
                  "status"], table)
    print(f"{len(rows)} snapshot(s); " + (
        "mid-density and density difference at each strip's own steps" if args.own_steps else
        "mid-density and density difference at each lot's kept steps (those its first snapshot chose, as the "
        "trends read them; --own-steps for each strip's own)"))
    return 0


def _cmd_show(args: argparse.Namespace) -> int:
    """Show one snapshot with its steps, revision chain and notes."""
    with open_from_args(args, create=False) as archive:
        snapshot = archive.get_snapshot(args.id)
        chain = archive.history(args.id)
        notes = archive.list_notes(args.id)
        calibration = archive.get_calibration(snapshot.calibration_hash) if snapshot.calibration_hash else None
    later = [s.id for s in chain if s.revises == snapshot.id]
    if args.json:
        data = snapshot.to_dict()
        data["history"] = [s.id for s in chain]
        data["notes_added"] = [n.to_dict() for n in notes]
        print(json.dumps(data, ensure_ascii=False, indent=1))
        return 0
    s, f = snapshot, snapshot.figures
    print(f"snapshot {s.id} ({snapshot_status(s, later[0] if later else None)})")
    print(f"  lot {s.lot_id}; processor {s.processor or '-'}; sensitometer {s.sensitometer or '-'}; "
          f"operator {s.operator or '-'}")
    print(f"  exposed {s.exposed_on or '-'}; processed {s.processed_on or '-'}; scanned {s.scanned_on or '-'}")
    print(f"  stored {s.created_at} by stripscan {s.program_version or '?'}")
    print(f"  scan {s.scan.path} (sha256 {s.scan.sha256}), strip {s.strip.index}")
    if calibration is None or calibration.get("mode") == "direct":
        print("  calibration NONE: UNCALIBRATED direct mode, densities are log10(I0/I) straight from the scanner")
    else:
        print(f"  calibration {s.calibration_hash}")
    if s.revises is not None:
        print(f"  corrects snapshot {s.revises}: {s.revision_reason}")
    print(f"  base+fog {_figure('base_fog', f.base_fog, unit='OD')}; Dmax {_figure('dmax', f.dmax, unit='OD')}; "
          f"speed {_figure('speed_log_exposure', f.speed_log_exposure, unit='log E')}; "
          f"average gradient {_figure('average_gradient', f.average_gradient)}; gamma {_figure('gamma', f.gamma)}; "
          f"latitude {_figure('latitude_log_exposure', f.latitude_log_exposure, unit='log E')}")
    print(f"  mid-density {_figure('mid_density', f.mid_density, unit='OD')} (step {f.mid_density_step or '-'}); "
          f"density difference {_figure('density_difference', f.density_difference, unit='OD')} (steps {f.dd_high_step or '-'} - "
          f"{f.dd_low_step or '-'})")
    if read_in_direct_mode(s.strip):
        print(f"  ({NOISE_ONLY_NOTE})")
    _print_table(["  step", "log E", "OD", uncertainty_title("+/- OD", s.strip), "flag"],
                 [[f"  {st.step}", _number(st.log_exposure, 2), _number(st.od), _number(st.od_sd, 4),
                   step_flag(st, f)] for st in s.strip.steps])
    # Only this strip's warnings: the scan's copy of the others' is left out.
    for warning in warnings_of_strip(s.warnings, s.strip):
        print(f"  ! {warning}")
    if len(chain) > 1:
        print("  revisions: " + " -> ".join(str(c.id) for c in chain))
    for note in notes:
        print(f"  note {note.created_at} {note.author or '-'}: {note.text}")
    if s.notes:
        print(f"  notes: {s.notes}")
    print(f"\n{CAUTION}")
    return 0


def _cmd_export(args: argparse.Namespace) -> int:
    """Export snapshots' figures (CSV) or the whole archive (JSON)."""
    with open_from_args(args, create=False) as archive:
        if args.format == "csv":
            written = archive.export_csv(args.output, include_retired=args.all, include_superseded=args.all)
        else:
            if args.all:
                return fail("--all applies to CSV only; a JSON export always holds everything")
            written = archive.export_json(args.output)
    print(f"wrote {written}")
    return 0


def _cmd_import(args: argparse.Namespace) -> int:
    """Import a JSON export into the archive."""
    with open_from_args(args, create=True) as archive:
        report = archive.import_json(args.file)
    added = ", ".join(f"{n} {k.replace('_', ' ')}" for k, n in report.added.items() if n) or "nothing new"
    same = sum(report.unchanged.values())
    print(f"imported {report.source}: {added}" + (f"; {same} item(s) were already present" if same else ""))
    if report.entered_late:
        print(f"note: QC entr{'y' if len(report.entered_late) == 1 else 'ies'} "
              f"{', '.join(map(str, report.entered_late))} of the file are dated before days already in the log "
              "and are not marked as entered late there; stored marked as entered late: the days after them are "
              "judged again (see 'stripscan qc list')")
    return 0


def _cmd_backup(args: argparse.Namespace) -> int:
    """Copy the archive to DEST while it stays in use."""
    with open_from_args(args, create=False) as archive:
        written = archive.backup(args.dest, overwrite=args.overwrite)
    print(f"backed up {archive.path} to {written}")
    return 0


def _sql_name(name: str) -> str:
    """A role name as psql takes it: bare when plain, else double-quoted."""
    import re

    return name if re.fullmatch(r"[a-z_][a-z0-9_]*", name) else '"' + name.replace('"', '""') + '"'


def _cmd_init(args: argparse.Namespace) -> int:
    """Create an archive's tables in a new file or an empty server database (and, on a server, its roles)."""
    from stripscan.archive.creating import ROLE_RIGHTS, init_archive

    report = init_archive(args.location, roles=args.roles, role_prefix=args.role_prefix)
    where = report.location
    if report.created:
        print(f"created the archive's tables in {where} (schema version {report.schema_version})")
    elif report.upgraded:
        print(f"the archive's tables were already in {where}; brought them up to schema version "
              f"{report.schema_version}")
    else:
        print(f"the archive's tables are already in {where} (schema version {report.schema_version}); "
              "nothing to create")
    if report.roles:
        made = [name for name in report.roles.values() if name in report.roles_created]
        kept = [name for name in report.roles.values() if name not in report.roles_created]
        if made:
            print(f"created the roles {', '.join(made)}")
        if kept:
            print(f"the roles {', '.join(kept)} were already there; granted their rights again")
        print("To let a person in, an administrator makes their login role a member of one of them, in psql "
              "(LOGIN_NAME being theirs):")
        width = max(len(_sql_name(name)) for name in report.roles.values())
        for kind, name in report.roles.items():
            print(f"  GRANT {_sql_name(name).ljust(width)} TO LOGIN_NAME;  -- {kind}: {ROLE_RIGHTS[kind]}")
    elif report.on_server:
        print("(add --roles to create the reader, recorder and physicist roles that people's logins join)")
    return 0


def _cmd_copy(args: argparse.Namespace) -> int:
    """Copy a whole archive to a new file or an empty server database (file to server, server to file...)."""
    from stripscan.archive.copying import copy_location

    report = copy_location(args.source, args.dest)
    words = {"snapshots": "snapshots", "snapshot_notes": "notes", "qc_entries": "QC entries",
             "qc_events": "QC events", "crossovers": "crossovers", "emulsion_lots": "lots",
             "processors": "processors"}
    counts = ", ".join(f"{report.rows[table]} {word}" for table, word in words.items())
    print(f"copied {report.source} to {report.dest}: {counts}")
    print(f"  hash chain: {report.head_seq} records, head sha256 {report.head_sha256} (the same as the source's)")
    return 0


def _cmd_revise(args: argparse.Namespace) -> int:
    """Correct a snapshot: store a revision with a reason; the old snapshot stays readable, marked revised."""
    with open_from_args(args, create=False) as archive:
        old = archive.get_snapshot(args.id)
        draft = NewSnapshot(
            lot_id=old.lot_id, scan=old.scan, strip=old.strip, processor=old.processor,
            sensitometer=old.sensitometer,
            calibration=archive.get_calibration(old.calibration_hash) if old.calibration_hash else None,
            operator=old.operator, exposed_on=old.exposed_on, processed_on=old.processed_on,
            scanned_on=old.scanned_on, settings=old.settings, warnings=old.warnings,
            program_version=old.program_version, notes=old.notes, preview_png=old.preview_png)
        changes = {k: v for k, v in (("lot_id", args.lot), ("processor", args.processor),
                                     ("sensitometer", args.sensitometer), ("operator", args.operator),
                                     ("exposed_on", args.exposed), ("processed_on", args.processed),
                                     ("scanned_on", args.scanned), ("notes", args.note)) if v is not None}
        sensitometer = None
        if args.scan is not None:
            analysis, calibration, sensitometer = _analyse(args, archive)
            index = args.strip if args.strip is not None else old.strip.index
            strip = next((s for s in analysis.strips if s.index == index), None)
            if strip is None:
                raise ValueError(f"{args.scan} has no strip {index} (it holds {len(analysis.strips)}); "
                                 "say which with --strip N")
            changes.update(scan=analysis.scan, strip=strip, settings=dict(analysis.settings),
                           warnings=tuple(analysis.warnings), program_version=analysis.program_version,
                           calibration=calibration.to_dict() if calibration is not None else analysis.calibration,
                           preview_png=None)
        elif any(v is not None for v in (args.calibration, args.exposures, args.strip)):
            raise ValueError("--calibration, --exposures and --strip apply when the scan is read again; give SCAN")
        if not changes:
            raise ValueError(f"snapshot {args.id}: say what the revision changes (a detail such as --processed, "
                             "or SCAN to read the strip again)")
        revision = archive.revise(args.id, dataclasses.replace(draft, **changes), args.reason or "",
                                  new_sensitometer=sensitometer)
    if sensitometer is not None:
        print(f"note: {_sensitometer_note(sensitometer)}")
    print(f"snapshot {revision.id} revises snapshot {args.id} ({revision.revision_reason}): "
          f"{_stored_line(revision)}; snapshot {args.id} is kept, marked revised")
    return 0


def _cmd_retire(args: argparse.Namespace) -> int:
    """Withdraw a snapshot from listings and trends, with a reason; it stays readable ('archive show')."""
    with open_from_args(args, create=False) as archive:
        retired = archive.retire(args.id, args.reason or "")
    print(f"snapshot {retired.id} retired {retired.retired_at}: {retired.retired_reason}; "
          "it stays in the archive, left out of listings, trends and comparisons")
    return 0


def _cmd_lot(args: argparse.Namespace) -> int:
    """Store an emulsion lot's film type, expiry date and date received (a new lot is added)."""
    with open_from_args(args, create=True) as archive:
        lot = archive.update_lot(args.lot, film_type=args.film_type, expiry_date=args.expires,
                                 received_date=args.received, notes=args.note, create_missing=True)
    print(f"lot {lot.lot_id}: film type {lot.film_type or '-'}; expires {lot.expiry_date or '-'}; "
          f"received {lot.received_date or '-'}" + (f"; {lot.notes}" if lot.notes else ""))
    return 0


def _cmd_verify(args: argparse.Namespace) -> int:
    """Check every stored record against the archive's hash chain; name the first one that does not match."""
    with Archive.open(args.archive, create=False, check_chain=False) as archive:
        report = archive.verify()
    if not report.ok:
        return fail(f"{archive.path}: {report.problem}")
    print(f"{archive.path}: all {report.records} records match the hash chain")
    print(f"  head: record {report.head_seq}, sha256 {report.head_sha256}")
    print("  (this detects changes made outside stripscan; it cannot prevent them. Keep the head line elsewhere "
          "to show later that the chain up to it was not rebuilt)")
    return 0


def _cmd_lots(args: argparse.Namespace) -> int:
    """List emulsion lots with their snapshot counts and dates."""
    with open_from_args(args, create=False) as archive:
        lots = archive.list_lots()
    _print_table(["lot", "film type", "expires", "received", "snapshots", "first", "last"],
                 [[s.lot.lot_id, s.lot.film_type or "-", s.lot.expiry_date or "-", s.lot.received_date or "-",
                   str(s.snapshot_count), s.first_date or "-", s.last_date or "-"] for s in lots])
    return 0


def register(subparsers: Any) -> argparse.ArgumentParser:
    """Add the ``archive`` command group to a main parser's sub-commands.

    Parameters
    ----------
    subparsers
        What ``ArgumentParser.add_subparsers()`` returned.

    Returns
    -------
    argparse.ArgumentParser
        The ``archive`` parser.  Every leaf command sets ``func``, a
        callable taking the parsed arguments and returning the exit status.
    """
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--archive", metavar="LOCATION", default=None,
                        help=f"archive: a file, or a PostgreSQL server as postgresql://USER@HOST/DB "
                             f"(default: $STRIPSCAN_ARCHIVE or {default_archive_path()})")
    parser = subparsers.add_parser("archive", help="keep strip readings for audits and lot comparison",
                                   description="Store, list and export strip readings kept for audits.")
    commands = parser.add_subparsers(dest="archive_command", metavar="COMMAND", required=True)

    def command(name: str, handler: _Handler, help_text: str) -> argparse.ArgumentParser:
        sub = commands.add_parser(name, parents=[common], help=help_text, description=handler.__doc__)
        sub.set_defaults(func=guarded(handler))
        return sub

    add = command("add", _cmd_add, "analyse a scan (or several) and store its strips")
    add.add_argument("scan", metavar="SCAN", type=Path, nargs="+",
                     help="scanned strip(s), as analysed by stripscan; several scans, or a folder of them, are read "
                          "on every core and stored one after the other, in the order given")
    add.add_argument("--lot", required=True, metavar="ID", help="emulsion lot of the film")
    add.add_argument("--processor", metavar="P", help="processor the strips went through")
    add.add_argument("--calibration", metavar="CAL.json", type=Path, help="scanner calibration to use")
    add.add_argument("--operator", metavar="NAME", help="who made the strips")
    add.add_argument("--exposed", metavar="DATE", type=_date, help="exposure date, YYYY-MM-DD")
    add.add_argument("--processed", metavar="DATE", type=_date, help="processing date, YYYY-MM-DD")
    add.add_argument("--scanned", metavar="DATE", type=_date, help="scan date, YYYY-MM-DD")
    add.add_argument("--note", metavar="TEXT", help="free text kept with each snapshot")
    _reading_arguments(add)
    add.add_argument("--again", action="store_true",
                     help="store the scan even if the archive holds its strips already (same file, sha256)")
    add_batch_arguments(add)

    listing = command("list", _cmd_list, "list snapshots")
    listing.add_argument("--lot", metavar="ID", help="only this emulsion lot")
    listing.add_argument("--processor", metavar="P", help="only this processor")
    listing.add_argument("--all", action="store_true", help="include retired and revised snapshots")
    listing.add_argument("--own-steps", action="store_true",
                         help="mid-density and density difference at the steps each strip chose itself (default: "
                              "at the lot's kept steps, those its first snapshot chose, as the trends use)")

    show = command("show", _cmd_show, "show one snapshot")
    show.add_argument("id", metavar="ID", type=int, help="snapshot number")
    show.add_argument("--json", action="store_true", help="print the snapshot as JSON")

    export = command("export", _cmd_export, "export to CSV (figures) or JSON (everything)")
    export.add_argument("--format", required=True, choices=("csv", "json"))
    export.add_argument("-o", "--output", required=True, metavar="FILE", type=Path)
    export.add_argument("--all", action="store_true", help="CSV: include retired and revised snapshots")

    importing = command("import", _cmd_import, "import a JSON export")
    importing.add_argument("file", metavar="FILE.json", type=Path)

    backup = command("backup", _cmd_backup, "copy the archive safely while in use")
    backup.add_argument("dest", metavar="DEST", type=Path)
    backup.add_argument("--overwrite", action="store_true", help="replace DEST if it exists")

    command("lots", _cmd_lots, "list emulsion lots")

    lot = command("lot", _cmd_lot, "store a lot's film type, expiry date and date received")
    lot.add_argument("lot", metavar="ID", help="emulsion lot id (added when new)")
    lot.add_argument("--film-type", metavar="NAME", help="kind of film (added to the archive when new)")
    lot.add_argument("--expires", metavar="DATE", type=_date, help="expiry date on the box, YYYY-MM-DD")
    lot.add_argument("--received", metavar="DATE", type=_date, help="date the box arrived, YYYY-MM-DD")
    lot.add_argument("--note", metavar="TEXT", help="free text kept with the lot")

    revise = command("revise", _cmd_revise, "correct a snapshot by storing a revision, with a reason")
    revise.add_argument("id", metavar="ID", type=int, help="snapshot number (the latest of its chain)")
    revise.add_argument("scan", metavar="SCAN", type=Path, nargs="?",
                        help="read the strip again from this scan (default: keep the stored reading)")
    revise.add_argument("--reason", metavar="TEXT", required=True, help="why the snapshot is corrected (needed)")
    revise.add_argument("--strip", metavar="N", type=int, help="which strip of SCAN (default: the same number)")
    revise.add_argument("--lot", metavar="ID", help="the right emulsion lot")
    revise.add_argument("--processor", metavar="P", help="the right processor")
    revise.add_argument("--calibration", metavar="CAL.json", type=Path, help="with SCAN: scanner calibration")
    revise.add_argument("--operator", metavar="NAME", help="the right operator")
    revise.add_argument("--exposed", metavar="DATE", type=_date, help="the right exposure date")
    revise.add_argument("--processed", metavar="DATE", type=_date, help="the right processing date")
    revise.add_argument("--scanned", metavar="DATE", type=_date, help="the right scan date")
    revise.add_argument("--note", metavar="TEXT", help="the right free text")
    _reading_arguments(revise)

    retire = command("retire", _cmd_retire, "withdraw a snapshot from listings and trends, with a reason")
    retire.add_argument("id", metavar="ID", type=int, help="snapshot number (the latest of its chain)")
    retire.add_argument("--reason", metavar="TEXT", required=True, help="why it no longer counts (needed)")

    command("verify", _cmd_verify, "check every stored record against the hash chain")

    def plain(name: str, handler: _Handler, help_text: str) -> argparse.ArgumentParser:
        # Commands that name their locations themselves, not through --archive.
        sub = commands.add_parser(name, help=help_text, description=handler.__doc__)
        sub.set_defaults(func=guarded(handler))
        return sub

    init = plain("init", _cmd_init, "create an archive's tables in a new file or an empty server database")
    init.add_argument("location", metavar="LOCATION",
                      help="a new file, or a server database as postgresql://USER@HOST/DB (made by its administrator)")
    init.add_argument("--roles", action="store_true",
                      help="on a server, also create the reader, recorder and physicist roles")
    init.add_argument("--role-prefix", metavar="NAME",
                      help="start of the roles' names (default: the database's name), as NAME_reader ...")

    copy = plain("copy", _cmd_copy, "copy a whole archive to a new file or an empty server database")
    copy.add_argument("source", metavar="SOURCE", help="the archive to copy: a file or a server location")
    copy.add_argument("dest", metavar="DEST",
                      help="a new file, or an empty server database (its tables are created when it has none)")
    return parser


def _reading_arguments(parser: argparse.ArgumentParser) -> None:
    """How the strips are read, as ``stripscan analyze`` takes it (``archive add`` and ``archive revise``)."""
    parser.add_argument("--steps", metavar="N", type=int, help="number of steps on the strip")
    parser.add_argument("--increment", type=float, default=0.15, metavar="LOGE",
                        help="log exposure per step (default 0.15 = log10 √2)")
    parser.add_argument("--exposures", metavar="FILE", type=Path,
                        help="per-step log exposure table from the sensitometer, one per line")
    parser.add_argument("--sensitometer", metavar="ID",
                        help="sensitometer used: its stored step table is used (unless --exposures); a new one is "
                             "added with the table the strips were read with")
    parser.add_argument("--low", type=float, default=0.25,
                        help="lower net density for average gradient and latitude (ISO 9236-1: 0.25)")
    parser.add_argument("--high", type=float, default=2.00, help="upper net density (ISO 9236-1: 2.00)")
