"""Command line: ``stripscan report`` (PDF) and ``stripscan export`` (CSV, PNG, SVG, JSON).

The main program calls :func:`register` with its sub-command action.
Qt is loaded only when a command runs, so ``stripscan --help`` stays quick
and works where Qt cannot start.

Sources
-------
``SCAN``
    A scan file, analysed now, with ``--calibration CAL.json`` (without
    it the reading is uncalibrated direct mode and every page says so).
    The analysis options of ``stripscan analyze`` apply (``--steps``,
    ``--increment``, ``--low``/``--high``, ...).
``snapshot:ID`` or ``snapshot:ID,ID,...``
    Readings stored in the archive (``--archive PATH``).

``stripscan report``
--------------------
::

    stripscan report SCAN --calibration CAL.json -o OUT.pdf [--site TEXT] [--lot ID]
                     [--processor NAME] [--operator NAME] [--exposed DATE] [--processed DATE] [--scanned DATE]
    stripscan report snapshot:ID[,ID...] --archive PATH -o OUT.pdf [--site TEXT]
    stripscan report --compare SET SET [SET...] -o OUT.pdf [--archive PATH] [--calibration CAL.json]
                     [--tolerance FIGURE=VALUE ...]
    stripscan report --qc PROCESSOR --month YYYY-MM --archive PATH -o OUT.pdf [--site TEXT]

One A4 page per strip (a scan) or per snapshot; with ``--compare``, one
page per pair (each later set against the first), the sets written as for
``stripscan compare`` (``scan:PATH[#1,3]``, ``snapshot:ID[,ID...]``,
``lot:LOT``) and its ``--tolerance`` settings; with ``--qc``, the month's
processor QC (two pages: the three deviation charts, then the day table,
actions, where the numbers came from and trend findings).  ``--lot``,
``--processor``, ``--operator`` and the dates only label a scan's pages;
a snapshot's come from the archive.  ``--site`` names the site in the
header (the archive does not keep one).

``stripscan export``
--------------------
::

    stripscan export steps   SOURCE -o OUT.csv [--strip N]
    stripscan export figures SOURCE -o OUT.csv
    stripscan export plot    SOURCE -o OUT.png|OUT.svg [--strip N] [--width-mm W] [--height-mm H] [--resolution D]
    stripscan export plot    --compare SET SET -o OUT.png|OUT.svg --chart overlay|delta-density|delta-log-exposure
    stripscan export plot    --qc PROCESSOR --month YYYY-MM --archive PATH -o OUT.png|OUT.svg
                             --chart base-fog|mid-density|density-difference
    stripscan export json    snapshot:ID --archive PATH -o OUT.json

``steps`` writes the step table (strip, step, log E, OD, sd, flags) of
every strip, or of strip N; ``figures`` one row of figures per strip;
``plot`` the characteristic curve of strip N (default 1) as PNG or SVG,
chosen by the file's suffix or ``--format``; ``json`` one snapshot in the
archive's export form (``stripscan archive import`` reads it).  With
``--compare``, ``plot`` draws one of the comparison's charts (of the second
set against the first); with ``--qc``, one of the month's QC charts.  For a
scan's full JSON use ``stripscan analyze SCAN -o OUT.json``.

Every output is written under a temporary name and renamed when complete.
A failure prints one line ``stripscan: error: ...`` and exits with 1.
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from stripscan.render.qt import ReportError

__all__ = ["register", "Source", "parse_source"]

_Handler = Callable[[argparse.Namespace], int]


@dataclass(frozen=True)
class Source:
    """What a command reads: a scan file or archived snapshots."""

    text: str
    kind: str  # "scan" or "snapshot"
    path: str = ""
    ids: tuple[int, ...] = field(default_factory=tuple)


def parse_source(text: str) -> Source:
    """Read ``SCAN`` or ``snapshot:ID[,ID...]``.

    Raises
    ------
    ReportError
        When ``snapshot:`` is not followed by snapshot numbers, or a scan
        file does not exist.
    """
    if text.startswith("snapshot:"):
        body = text[len("snapshot:"):].strip()
        try:
            ids = tuple(int(part) for part in body.split(","))
        except ValueError:
            raise ReportError(f"{text!r}: write snapshot:ID or snapshot:ID,ID,... with snapshot numbers") from None
        if not ids or min(ids) < 1:
            raise ReportError(f"{text!r}: snapshot numbers start at 1")
        return Source(text, "snapshot", ids=ids)
    if not Path(text).is_file():
        raise ReportError(f"{text}: no such scan file (for a stored reading write snapshot:ID)")
    return Source(text, "scan", path=text)


def _guarded(handler: _Handler) -> _Handler:
    # The archive's commands print failures the same way: one line, exit 1.
    from stripscan.cli.common import guarded as archive_guarded

    return archive_guarded(handler)


def _date(text: str) -> str:
    try:
        dt.date.fromisoformat(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a date YYYY-MM-DD") from None
    return text


def _open_archive(args: argparse.Namespace) -> Any:
    from stripscan.archive import Archive, default_archive_path

    # Reading never creates a file: a mistyped path must say so.
    return Archive.open(args.archive if args.archive is not None else default_archive_path(),
                        read_only=True, create=False)


def _analysis(args: argparse.Namespace, source: Source) -> tuple[Any, Any]:
    from stripscan.cli.main import analysis_from_args

    return analysis_from_args(args, source.path)


def _pick(strips: tuple[Any, ...], number: int | None, what: str) -> tuple[Any, ...]:
    if number is None:
        return strips
    chosen = tuple(s for s in strips if s.index == number)
    if not chosen:
        raise ReportError(f"{what} has {len(strips)} strip(s); there is no strip {number}")
    return chosen


def _scan_only(args: argparse.Namespace, source: Source) -> None:
    given = [f"--{name}" for name in ("lot", "processor", "operator", "exposed", "processed", "scanned")
             if getattr(args, name, None)]
    if source.kind != "scan" and given:
        raise ReportError(f"{', '.join(given)} label a scan's pages only; a snapshot's come from the archive")


def _check_mode(args: argparse.Namespace) -> None:
    """One of: a SOURCE, --compare SETS, or --qc PROCESSOR --month M; said plainly when mixed up."""
    if args.qc is not None:
        if args.sources or args.compare:
            raise ReportError("--qc reports a processor's month from the archive; give no SOURCE and no --compare")
        if not args.month:
            raise ReportError(f"--qc {args.qc!r} needs --month YYYY-MM")
    elif args.month:
        raise ReportError("--month goes with --qc PROCESSOR")
    if args.compare and args.sources:
        raise ReportError(f"--compare takes the sets itself; {args.sources[0]!r} is left over "
                          "(write --compare SET SET ..., then the options)")


def _one_source(args: argparse.Namespace) -> Source:
    if args.compare:
        raise ReportError("internal: a comparison has sets, not one source")
    if len(args.sources) != 1:
        raise ReportError(f"give one SOURCE (a scan file or snapshot:ID[,ID...]), got {len(args.sources)}; "
                          "to compare sets use --compare")
    return parse_source(args.sources[0])


def _cmd_report(args: argparse.Namespace) -> int:
    """Write a PDF report: one page per strip of a scan, per archived snapshot, or per compared pair of sets."""
    from stripscan.render.canvas import write_pdf
    from stripscan.render.snapshot import StripContext, report_from_snapshot, reports_from_analysis

    _check_mode(args)
    if args.qc:
        from stripscan.render.qcmonth import qc_month_report_pdf

        with _open_archive(args) as archive:
            path = qc_month_report_pdf(archive, args.qc, args.month, args.output, site=args.site or "")
        print(f"Wrote {path} (2 pages)")
        return 0
    if args.compare:
        comparisons, uses, notes = _comparisons(args)
        from stripscan.render.comparison import comparison_report_pdf

        path = comparison_report_pdf(comparisons, args.output, calibrations=uses, notes=notes, site=args.site or "")
        print(f"Wrote {path} ({len(comparisons)} page{'s' if len(comparisons) != 1 else ''})")
        return 0
    source = _one_source(args)
    _scan_only(args, source)
    if source.kind == "scan":
        analysis, calibration = _analysis(args, source)
        context = StripContext(site=args.site or "", lot=args.lot or "", processor=args.processor or "",
                               operator=args.operator or "", exposed_on=args.exposed or "",
                               processed_on=args.processed or "", scanned_on=args.scanned or "")
        pages = reports_from_analysis(analysis, calibration=calibration, context=context)
        title = f"stripscan strip report - {Path(source.path).name}"
    else:
        with _open_archive(args) as archive:
            pages = [report_from_snapshot(archive.get_snapshot(i), archive=archive, site=args.site or "")
                     for i in source.ids]
        title = f"stripscan report - {source.text}"
    path = write_pdf(pages, args.output, title=title)
    print(f"Wrote {path} ({len(pages)} page{'s' if len(pages) != 1 else ''})")
    return 0


def _comparisons(args: argparse.Namespace) -> tuple[Any, list[Any], list[str]]:
    """Compare the sets named on the command line as ``stripscan compare`` does; with the calibrations used."""
    from stripscan.cli.compare import tolerances_from_args as _tolerances
    from stripscan.services.comparison_sets import SetLoader, parse_set
    from stripscan.core.compare.comparison import compare_sets

    if len(args.compare) < 2:
        raise ReportError(f"--compare needs at least two sets, got {len(args.compare)}")
    specs = [parse_set(text) for text in args.compare]
    with SetLoader(args.archive, calibration_path=args.calibration, n_steps=args.steps) as loader:
        sets = [loader.load(spec) for spec in specs]
    comparisons = compare_sets(sets, tolerances=_tolerances(args.tolerance))
    return comparisons, _calibration_uses(args, specs), list(loader.notes)


def _calibration_uses(args: argparse.Namespace, specs: list[Any]) -> list[Any]:
    """Which calibration gave each set's densities: the scans' file, or the archived snapshots' own."""
    from stripscan.core.calibration_files import load_calibration
    from stripscan.render.comparison import CalibrationUse

    groups: dict[str, tuple[list[str], dict[str, Any] | None, str | None]] = {}

    def add(key: str, name: str, calibration: dict[str, Any] | None, digest: str | None) -> None:
        names = groups.setdefault(key, ([], calibration, digest))[0]
        if name not in names:
            names.append(name)

    archive = None
    try:
        for spec in specs:
            if spec.kind == "scan":
                if args.calibration:
                    calibration = load_calibration(args.calibration)
                    add(calibration.sha256, spec.text, calibration.to_dict(), calibration.sha256)
                else:
                    add("direct", spec.text, {"mode": "direct"}, None)
                continue
            archive = archive or _open_archive(args)
            ids = spec.numbers if spec.kind == "snapshot" else [r.id for r in archive.list_snapshots(lot=spec.target)]
            for digest in sorted({archive.get_snapshot(i).calibration_hash or "" for i in ids}):
                add(digest or "unknown", spec.text, archive.get_calibration(digest) if digest else None, digest or None)
    finally:
        if archive is not None:
            archive.close()
    return [CalibrationUse(tuple(names), calibration, digest) for names, calibration, digest in groups.values()]


def _strips_of(args: argparse.Namespace, source: Source) -> tuple[list[Any], dict[str, Any] | None]:
    """Strip results or snapshots named by ``source``, and the calibration record for plots."""
    if source.kind == "scan":
        analysis, calibration = _analysis(args, source)
        if not analysis.strips:
            raise ReportError(f"{source.path}: no strip was found on the scan")
        strips = list(_pick(analysis.strips, getattr(args, "strip", None), source.path))
        return strips, calibration.to_dict() if calibration is not None else analysis.calibration
    with _open_archive(args) as archive:
        snapshots = [archive.get_snapshot(i) for i in source.ids]
        first = snapshots[0]
        calibration = archive.get_calibration(first.calibration_hash) if first.calibration_hash else None
    return snapshots, calibration


def _cmd_export(args: argparse.Namespace) -> int:
    """Export steps or figures (CSV), a plot (PNG or SVG) or a snapshot (JSON)."""
    from stripscan.render import export

    _check_mode(args)
    if args.qc:
        if args.kind != "plot":
            raise ReportError(f"--qc goes with 'export plot' or 'stripscan report --qc', not 'export {args.kind}'")
        path = _export_qc_plot(args)
        print(f"Wrote {path}")
        return 0
    if args.compare:
        if args.kind != "plot":
            raise ReportError(f"--compare goes with 'export plot' (a comparison's table is in 'stripscan compare "
                              f"--json'), not 'export {args.kind}'")
        path = _export_comparison_plot(args)
        print(f"Wrote {path}")
        return 0
    source = _one_source(args)
    if args.kind == "json":
        if source.kind != "snapshot" or len(source.ids) != 1:
            raise ReportError("export json takes one snapshot:ID (for a scan use 'stripscan analyze SCAN -o OUT.json')")
        with _open_archive(args) as archive:
            path = export.export_snapshot_json(archive, source.ids[0], args.output)
    elif args.kind in ("steps", "figures"):
        items, _ = _strips_of(args, source)
        writer = export.export_steps_csv if args.kind == "steps" else export.export_figures_csv
        path = writer(items, args.output)
    else:
        path = _export_plot(args, source)
    print(f"Wrote {path}")
    return 0


def _plot_format(args: argparse.Namespace) -> str:
    if args.format:
        return args.format
    suffix = Path(args.output).suffix.lower().lstrip(".")
    if suffix not in ("png", "svg"):
        raise ReportError(f"{args.output}: name the file .png or .svg, or give --format png|svg")
    return suffix


def _save_plot(args: argparse.Namespace, plot: Any) -> Path:
    from stripscan.render.pictures import save_plot_png, save_plot_svg

    size = {"width_mm": args.width_mm, "height_mm": args.height_mm}
    if _plot_format(args) == "png":
        return save_plot_png(plot, args.output, dpi=args.dpi_out, **size)
    return save_plot_svg(plot, args.output, **size)


def _export_comparison_plot(args: argparse.Namespace) -> Path:
    from stripscan.render.comparison import comparison_plots

    _plot_format(args)
    chart = args.chart or "overlay"
    if chart not in ("overlay", "delta-density", "delta-log-exposure"):
        raise ReportError(f"--chart {chart} is not a comparison chart; choose overlay, delta-density or "
                          "delta-log-exposure")
    comparisons, _, _ = _comparisons(args)
    return _save_plot(args, comparison_plots(comparisons[0])[chart])


def _export_qc_plot(args: argparse.Namespace) -> Path:
    from stripscan.render.qcmonth import CHARTS, qc_month, qc_month_plots

    _plot_format(args)
    chart = args.chart or "mid-density"
    if chart not in CHARTS:
        raise ReportError(f"--chart {chart} is not a QC chart; choose {', '.join(CHARTS)}")
    with _open_archive(args) as archive:
        month = qc_month(archive, args.qc, args.month)
    plot = qc_month_plots(month)[chart]
    # A chart alone gets its own legend, axis title and processor in the title.
    plot = dataclasses.replace(plot, legend=True, x_label="day of the month",
                               title=f"{month.processor}, {month.month_name} - {plot.title}")
    return _save_plot(args, plot)


def _export_plot(args: argparse.Namespace, source: Source) -> Path:
    from stripscan.render.provenance import is_uncalibrated, valid_range
    from stripscan.render.snapshot import curve_plot

    _plot_format(args)
    if args.chart not in (None, "curve"):
        raise ReportError(f"--chart {args.chart} is not a strip's chart; a strip's plot is its curve")
    if args.strip is None:
        args.strip = 1 if source.kind == "scan" else None
    items, calibration = _strips_of(args, source)
    if len(items) != 1:
        raise ReportError("a plot shows one strip: give one snapshot:ID, or --strip N for a scan")
    item = items[0]
    strip = item.strip if hasattr(item, "strip") else item
    label = f"snapshot {item.id}, lot {item.lot_id}" if hasattr(item, "strip") else \
        f"{Path(source.path).name}, strip {strip.index}"
    if is_uncalibrated(calibration):
        label += " (UNCALIBRATED direct mode)"
    plot = curve_plot(strip, valid_od=valid_range(calibration), title=f"Characteristic curve - {label}")
    return _save_plot(args, plot)


def register(subparsers: Any) -> None:
    """Add ``report`` and ``export`` to the main parser's sub-commands."""
    from stripscan.cli.main import add_analysis_arguments as _add_analysis_arguments, add_scan_arguments as _add_scan_arguments

    def common(p: argparse.ArgumentParser) -> None:
        p.add_argument("--archive", metavar="LOCATION", help="archive for snapshot: sources "
                       "(default: $STRIPSCAN_ARCHIVE or the user's data folder)")
        _add_analysis_arguments(p)
        _add_scan_arguments(p)

    def qc_options(p: argparse.ArgumentParser) -> None:
        p.add_argument("--qc", metavar="PROCESSOR", help="a processor's QC month from the archive (with --month)")
        p.add_argument("--month", metavar="YYYY-MM", help="with --qc: the month")

    def compare_options(p: argparse.ArgumentParser) -> None:
        p.add_argument("--compare", nargs="+", metavar="SET",
                       help="compare these sets, each against the first, as 'stripscan compare' does: "
                            "scan:PATH[#1,3], snapshot:ID[,ID...] or lot:LOT")
        p.add_argument("--tolerance", action="append", metavar="FIGURE=VALUE",
                       help="with --compare: tolerance of B - A, as for 'stripscan compare'")

    p = subparsers.add_parser("report", help="PDF report of a scan's strips, archived snapshots or a lot comparison",
                              description=_cmd_report.__doc__,
                              epilog="SOURCE is a scan file or snapshot:ID[,ID...] (with --archive); with "
                                     "--compare, two or more sets instead.")
    p.add_argument("sources", nargs="*", metavar="SOURCE", help="scan file, or snapshot:ID[,ID...]")
    compare_options(p)
    qc_options(p)
    p.add_argument("-o", "--output", required=True, metavar="OUT.pdf", help="the PDF to write")
    p.add_argument("--site", metavar="TEXT", help="site name for the page header")
    p.add_argument("--lot", metavar="ID", help="emulsion lot (labels a scan's pages)")
    p.add_argument("--processor", metavar="NAME", help="processor (labels a scan's pages)")
    p.add_argument("--operator", metavar="NAME", help="who made the strips (labels a scan's pages)")
    p.add_argument("--exposed", metavar="DATE", type=_date, help="exposure date YYYY-MM-DD (scan)")
    p.add_argument("--processed", metavar="DATE", type=_date, help="processing date YYYY-MM-DD (scan)")
    p.add_argument("--scanned", metavar="DATE", type=_date, help="scan date YYYY-MM-DD (scan)")
    common(p)
    p.set_defaults(func=_guarded(_cmd_report))

    p = subparsers.add_parser("export", help="CSV of steps or figures, PNG/SVG of a plot, JSON of a snapshot",
                              description=_cmd_export.__doc__)
    p.add_argument("kind", choices=("steps", "figures", "plot", "json"), help="what to export")
    p.add_argument("sources", nargs="*", metavar="SOURCE", help="scan file, or snapshot:ID[,ID...]")
    p.add_argument("-o", "--output", required=True, metavar="FILE", help="the file to write")
    compare_options(p)
    qc_options(p)
    p.add_argument("--chart", choices=("curve", "overlay", "delta-density", "delta-log-exposure", "base-fog",
                                       "mid-density", "density-difference"),
                   help="which plot: a strip's curve (default); with --compare the overlay (default), "
                        "delta-density or delta-log-exposure; with --qc base-fog, mid-density (default) or "
                        "density-difference")
    p.add_argument("--strip", type=int, metavar="N", help="only strip N of a scan (plot: default 1)")
    p.add_argument("--format", choices=("png", "svg"), help="plot format (default: from the file's suffix)")
    p.add_argument("--width-mm", type=float, default=160.0, metavar="W", help="plot width, mm (160)")
    p.add_argument("--height-mm", type=float, default=100.0, metavar="H", help="plot height, mm (100)")
    p.add_argument("--resolution", dest="dpi_out", type=float, default=150.0, metavar="D",
                   help="PNG resolution, dots per inch (150)")
    common(p)
    p.set_defaults(func=_guarded(_cmd_export))
