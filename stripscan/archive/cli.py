"""The ``archive`` command group of the stripscan command line.

The main program calls :func:`register` with its sub-command action; each
command stores its handler as ``func`` in the parsed arguments, and the
handler returns the exit status.  Failures print one line
``stripscan: error: ...`` on standard error and return 1.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from .. import CAUTION
from ..figure_table import step_flag
from .entry_checks import already_stored, describe_stored, remove_if_unused
from .errors import ArchiveError
from .records import FIGURES, Snapshot, SnapshotSummary, check_day
from .store import Archive, default_archive_path

__all__ = ["register"]

_Handler = Callable[[argparse.Namespace], int]

# Short column titles for tables printed on a terminal.
_FIGURE_TITLES = {
    "base_fog": "base+fog", "dmax": "Dmax", "speed_log_exposure": "speed logE",
    "average_gradient": "avg grad", "gamma": "gamma", "latitude_log_exposure": "latitude",
    "mid_density": "mid-dens", "density_difference": "dens diff",
}


def _fail(message: str) -> int:
    print(f"stripscan: error: {message}", file=sys.stderr)
    return 1


def _quiet_stdout() -> None:
    """Point stdout at devnull, so that the interpreter's last flush does not fail again."""
    try:
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
    except (OSError, ValueError):
        pass


def _guarded(handler: _Handler) -> _Handler:
    def run(args: argparse.Namespace) -> int:
        try:
            return handler(args)
        except BrokenPipeError:
            # The reader went away (``... | true``).  These commands print only
            # after their write committed, so nothing failed: say nothing.
            _quiet_stdout()
            return 0
        except (ArchiveError, ValueError, OSError) as exc:
            _forget_new_archive(args)
            return _fail(str(exc))
        except BaseException:
            _forget_new_archive(args)
            raise
    run.__doc__ = handler.__doc__
    return run


def _date(text: str) -> str:
    try:
        check_day(text, "date")
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None
    return text


def _open(args: argparse.Namespace, *, create: bool) -> Archive:
    # Reading commands never create a file: a mistyped --archive path must
    # say so rather than show an empty archive.
    path = args.archive if args.archive is not None else default_archive_path()
    if create and not Path(path).expanduser().exists():
        args.new_archive_file = Path(path).expanduser().absolute()
    return Archive.open(path, create=create)


def _forget_new_archive(args: argparse.Namespace) -> None:
    """A command that failed leaves no new, empty archive file behind."""
    created = getattr(args, "new_archive_file", None)
    if created is not None:
        remove_if_unused(created)


def _number(value: float | None, digits: int = 3, *, unit: str = "") -> str:
    if value is None:
        return "-"
    return f"{value:.{digits}f} {unit}" if unit else f"{value:.{digits}f}"


def _status(item: Snapshot | SnapshotSummary, superseded_by: int | None) -> str:
    if item.retired_at is not None:
        return f"retired {item.retired_at[:10]}: {item.retired_reason}"
    if superseded_by is not None:
        return f"revised by {superseded_by}"
    return "current"


def _print_table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> None:
    widths = [max(len(str(c)) for c in column) for column in zip(header, *rows)]
    for line in (header, *rows):
        print("  ".join(str(c).ljust(w) for c, w in zip(line, widths)).rstrip())


def _cmd_add(args: argparse.Namespace) -> int:
    """Analyse a scan and store one snapshot per strip."""
    try:
        from stripscan.core.calibration import load_calibration
        from stripscan.core.pipeline import AnalysisOptions, analyze_scan
    except ImportError as exc:
        return _fail(f"scan analysis is not available in this installation ({exc})")
    # The core's own errors are ValueErrors whose message names the file.
    calibration = load_calibration(args.calibration) if args.calibration is not None else None
    # Read the scan before opening the archive: a bad scan leaves no new, empty archive file behind.
    analysis = analyze_scan(args.scan, calibration=calibration, options=AnalysisOptions(n_steps=args.steps))
    with _open(args, create=True) as archive:
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
            exposed_on=args.exposed, processed_on=args.processed, scanned_on=args.scanned, notes=args.note or "")
    for item in new:
        print(f"note: {item} was not in the archive; added it with no further details")
    if calibration is None:
        print("warning: UNCALIBRATED: stored as read in direct mode, log10(I0/I) straight from the scanner "
              "(no --calibration); such densities are capped by the scanner's flare and are not comparable "
              "with calibrated ones")
    for snapshot in stored:
        f = snapshot.figures
        print(f"snapshot {snapshot.id}: lot {snapshot.lot_id}, strip {snapshot.strip.index}, "
              f"base+fog {_number(f.base_fog)}, mid-density {_number(f.mid_density)}, "
              f"density difference {_number(f.density_difference)}, speed {_number(f.speed_log_exposure)}")
    return 0


def _refuse_stored_scan(archive: Archive, analysis: Any) -> None:
    """A scan whose strips are stored already is stored again only when asked (``--again``)."""
    stored = already_stored(archive, analysis)
    if stored:
        raise ArchiveError(f"{archive.path}: {analysis.scan.path} (sha256 {analysis.scan.sha256[:12]}...) is "
                           f"stored already: {describe_stored(stored)}; nothing was stored "
                           "(give --again to store it again)")


def _cmd_list(args: argparse.Namespace) -> int:
    """List snapshots (current ones unless --all)."""
    with _open(args, create=False) as archive:
        if args.lot is not None:
            archive.get_lot(args.lot)  # an unknown lot is a mistake to name, not an empty list
        rows = archive.list_snapshots(args.lot, args.processor, include_retired=args.all,
                                      include_superseded=args.all)
    table = [[str(r.id), r.date, r.lot_id, r.processor or "-", str(r.strip_index),
              *(_number(getattr(r, name)) for name in FIGURES), _status(r, r.superseded_by)] for r in rows]
    _print_table(["id", "date", "lot", "processor", "strip", *(_FIGURE_TITLES[n] for n in FIGURES), "status"],
                 table)
    print(f"{len(rows)} snapshot(s)")
    return 0


def _cmd_show(args: argparse.Namespace) -> int:
    """Show one snapshot with its steps, revision chain and notes."""
    with _open(args, create=False) as archive:
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
    print(f"snapshot {s.id} ({_status(s, later[0] if later else None)})")
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
    print(f"  base+fog {_number(f.base_fog, unit='OD')}; Dmax {_number(f.dmax, unit='OD')}; "
          f"speed {_number(f.speed_log_exposure, unit='log E')}; average gradient {_number(f.average_gradient, 2)}; "
          f"gamma {_number(f.gamma, 2)}; latitude {_number(f.latitude_log_exposure, unit='log E')}")
    print(f"  mid-density {_number(f.mid_density, unit='OD')} (step {f.mid_density_step or '-'}); density "
          f"difference {_number(f.density_difference, unit='OD')} (steps {f.dd_high_step or '-'} - "
          f"{f.dd_low_step or '-'})")
    _print_table(["  step", "log E", "OD", "+/- OD", "flag"],
                 [[f"  {st.step}", _number(st.log_exposure, 2), _number(st.od), _number(st.od_sd, 4),
                   step_flag(st, f)] for st in s.strip.steps])
    for warning in s.warnings:
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
    with _open(args, create=False) as archive:
        if args.format == "csv":
            written = archive.export_csv(args.output, include_retired=args.all, include_superseded=args.all)
        else:
            if args.all:
                return _fail("--all applies to CSV only; a JSON export always holds everything")
            written = archive.export_json(args.output)
    print(f"wrote {written}")
    return 0


def _cmd_import(args: argparse.Namespace) -> int:
    """Import a JSON export into the archive."""
    with _open(args, create=True) as archive:
        report = archive.import_json(args.file)
    added = ", ".join(f"{n} {k.replace('_', ' ')}" for k, n in report.added.items() if n) or "nothing new"
    same = sum(report.unchanged.values())
    print(f"imported {report.source}: {added}" + (f"; {same} item(s) were already present" if same else ""))
    return 0


def _cmd_backup(args: argparse.Namespace) -> int:
    """Copy the archive to DEST while it stays in use."""
    with _open(args, create=False) as archive:
        written = archive.backup(args.dest, overwrite=args.overwrite)
    print(f"backed up {archive.path} to {written}")
    return 0


def _cmd_lots(args: argparse.Namespace) -> int:
    """List emulsion lots with their snapshot counts and dates."""
    with _open(args, create=False) as archive:
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
    common.add_argument("--archive", metavar="PATH", type=Path, default=None,
                        help=f"archive file (default: $STRIPSCAN_ARCHIVE or {default_archive_path()})")
    parser = subparsers.add_parser("archive", help="keep strip readings for audits and lot comparison",
                                   description="Store, list and export strip readings kept for audits.")
    commands = parser.add_subparsers(dest="archive_command", metavar="COMMAND", required=True)

    def command(name: str, handler: _Handler, help_text: str) -> argparse.ArgumentParser:
        sub = commands.add_parser(name, parents=[common], help=help_text, description=handler.__doc__)
        sub.set_defaults(func=_guarded(handler))
        return sub

    add = command("add", _cmd_add, "analyse a scan and store its strips")
    add.add_argument("scan", metavar="SCAN", type=Path, help="scanned strip(s), as analysed by stripscan")
    add.add_argument("--lot", required=True, metavar="ID", help="emulsion lot of the film")
    add.add_argument("--processor", metavar="P", help="processor the strips went through")
    add.add_argument("--calibration", metavar="CAL.json", type=Path, help="scanner calibration to use")
    add.add_argument("--operator", metavar="NAME", help="who made the strips")
    add.add_argument("--exposed", metavar="DATE", type=_date, help="exposure date, YYYY-MM-DD")
    add.add_argument("--processed", metavar="DATE", type=_date, help="processing date, YYYY-MM-DD")
    add.add_argument("--scanned", metavar="DATE", type=_date, help="scan date, YYYY-MM-DD")
    add.add_argument("--note", metavar="TEXT", help="free text kept with each snapshot")
    add.add_argument("--steps", metavar="N", type=int, help="number of steps on the strip")
    add.add_argument("--again", action="store_true",
                     help="store the scan even if the archive holds its strips already (same file, sha256)")

    listing = command("list", _cmd_list, "list snapshots")
    listing.add_argument("--lot", metavar="ID", help="only this emulsion lot")
    listing.add_argument("--processor", metavar="P", help="only this processor")
    listing.add_argument("--all", action="store_true", help="include retired and revised snapshots")

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
    return parser
