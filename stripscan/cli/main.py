"""Command line: ``stripscan calibrate``, ``stripscan analyze`` and friends.

Every subcommand reads files, calls the core and prints; a bad input gives
one line on stderr and a non-zero exit, and nothing is written.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import re
import sys
from pathlib import Path

from typing import Callable, Sequence

from stripscan import CAUTION, __version__
from stripscan.cli.batch import add_batch_arguments
from stripscan.core.figures import NOISE_ONLY_NOTE, figure_digits, read_in_direct_mode, step_flag, uncertainty_title

EXIT_OK, EXIT_ERROR, EXIT_USAGE = 0, 1, 2


class CommandError(Exception):
    """A user-facing failure: printed as one line, exit status 1."""


# C0 and C1 control characters but tab and line feed (escape sequences that
# clear a terminal, move its cursor or set its title), and directional marks
# that turn the text around them.
_TERMINAL_UNSAFE = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028\u2029"
                              "\u202a-\u202e\u2066-\u2069]")


def terminal_safe(text: str) -> str:
    """``text`` with control characters and directional marks written as ``\\uXXXX``.

    Names stored before they were refused at entry, file names and text
    from files are printed this way, so they show what they hold instead of
    acting on the terminal.  Inside JSON strings the same form is a valid
    escape of the same character.
    """
    return _TERMINAL_UNSAFE.sub(lambda m: f"\\u{ord(m.group()):04x}", text)


class _TerminalSafe:
    """A text stream that writes :func:`terminal_safe` text to another one."""

    def __init__(self, stream) -> None:
        self._stream = stream
        #: The stream itself, for what must reach the terminal as it is (a progress line's carriage return).
        self.raw_stream = stream

    def write(self, text: str) -> int:
        return self._stream.write(terminal_safe(text))

    def writelines(self, lines) -> None:
        for line in lines:
            self.write(line)

    def __getattr__(self, name: str):
        return getattr(self._stream, name)


def _fmt(value: float | None, digits: int = 2, unit: str = "") -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "not reached"
    return f"{value:.{digits}f}{unit}"


def _write_text_atomic(path: Path, text: str) -> None:
    from stripscan._shared.atomic import write_text

    try:
        write_text(path, text)
    except OSError as exc:
        raise CommandError(f"{path}: cannot write ({exc.strerror or exc})") from None


def read_exposure_table(path: str) -> tuple[float, ...]:
    """A sensitometer's per-step log exposure: one number per line (``#`` comments allowed)."""
    from stripscan.core.certificate import read_table_text

    lines = read_table_text(path, "step table", "one number per step, one per line").splitlines()
    values = []
    for lineno, line in enumerate(lines, start=1):
        text = line.split("#", 1)[0].strip()
        if not text:
            continue
        cell = text.split(",")[-1].strip()
        try:
            value = float(cell)
        except ValueError:
            if not values:  # a header row
                continue
            raise CommandError(f"{path}, line {lineno}: {cell!r} is not a number") from None
        if not math.isfinite(value):
            raise CommandError(f"{path}, line {lineno}: {cell!r} is not a finite number")
        values.append(value)
    if len(values) < 2:
        raise CommandError(f"{path}: an exposure table needs one log exposure per step")
    return tuple(values)


def stray_light_text(calibration) -> str:
    """One line on the calibration's stray-light model."""
    model = calibration.stray_light
    if model is None:
        return "Stray light: not modelled (no resolution known); strips are read as if in the tablet's surroundings"
    reach = ", ".join(f"{100 * f:.3f} % over {s:g} mm" for s, f in zip(model.sigmas_mm, model.fractions) if f > 0)
    lamp = "not measured (no open platen beside the tablet)" if model.lamp_span_mm is None else (
        f"measured across {model.lamp_span_mm[0]:.0f}-{model.lamp_span_mm[1]:.0f} mm")
    return (f"Stray light: {100 * model.total:.3f} % of the light spread ({reach or 'none found'}), "
            f"±{100 * model.fraction_sd:.3f} %; lamp {lamp}")


def format_analysis(analysis) -> str:
    """Readable tables, one per strip."""
    from stripscan.core.calibration import ACCURACY_GOAL

    out = []
    info = analysis.scan
    dpi = f"{info.dpi:g} dpi" if info.dpi else "unknown dpi"
    out.append(f"Scan: {info.path}  ({info.width} x {info.height} px, {dpi}, {info.bits}-bit, {info.channel})")
    cal = analysis.calibration
    if cal and cal.get("mode") == "tablet":
        out.append(
            f"Calibration {cal['sha256'][:12]}: reads within ±{ACCURACY_GOAL:.2f} OD from "
            f"{cal['od_min']:.2f} to {cal['od_max']:.2f} OD (made {cal['created'][:10]}"
            + (", from the tablet on this scan)" if cal.get("tablet_on_scan") else ")")
        )
    else:
        out.append("Calibration: NONE (direct mode, uncalibrated log10(I0/I))")
    for strip in analysis.strips:
        f = strip.figures
        out.append("")
        out.append(f"Strip {strip.index}: {strip.geometry.n_steps} steps, axis {strip.geometry.angle_deg:.1f}°")
        stray = any(s.stray_light_share is not None for s in strip.steps)
        sd_title = uncertainty_title("± sd", strip)
        out.append(f"  {'step':>4} {'log E':>6} {'OD':>6} {sd_title:>6} {'pixels':>7}"
                   + (f" {'stray':>6}" if stray else "") + "  note")
        if read_in_direct_mode(strip):
            out.append(f"  ({NOISE_ONLY_NOTE})")
        for s in strip.steps:
            note = step_flag(s, f)  # the window's and the reports' wording; the warnings below say why
            od = f"{s.od:6.3f}" if math.isfinite(s.od) else "     -"
            sd = f"{s.od_sd:6.3f}" if math.isfinite(s.od_sd) else "     -"
            share = ""
            if stray:
                share = f" {100 * s.stray_light_share:5.1f}%" if s.stray_light_share is not None else "      -"
            out.append(f"  {s.step:>4} {s.log_exposure:6.2f} {od} {sd} {s.pixels:>7}{share}  {note}")
        d = figure_digits  # the one figure table's decimals, as every report prints them
        out.append(f"  base+fog              "
                   f"{_fmt(f.base_fog, d('base_fog')) if f.base_fog is not None else 'not read'}")
        out.append(f"  Dmax                  "
                   f"{_fmt(f.dmax, d('dmax')) if f.dmax is not None else 'not stated (denser than the usable steps)'}")
        out.append(f"  speed point (net {f.settings.get('speed_net_density', 1.0):.2f})  "
                   f"log E {_fmt(f.speed_log_exposure, d('speed_log_exposure'))}")
        if f.relative_speed_percent is not None:
            out.append(f"  relative speed        {f.relative_speed_percent:+.{d('relative_speed_percent')}f} %")
        low, high = f.settings.get("gradient_low", 0.25), f.settings.get("gradient_high", 2.0)
        out.append(f"  average gradient ({low:.2f}-{high:.2f})  {_fmt(f.average_gradient, d('average_gradient'))}")
        gamma_at = f" at log E {_fmt(f.gamma_log_exposure, d('gamma_log_exposure'))}" if f.gamma is not None else ""
        out.append(f"  gamma (max slope)     {_fmt(f.gamma, d('gamma'))}{gamma_at}")
        out.append(f"  latitude              {_fmt(f.latitude_log_exposure, d('latitude_log_exposure'), ' log E')}")
        if f.mid_density_step is not None:
            out.append(f"  mid-density           {_fmt(f.mid_density, d('mid_density'))} (step {f.mid_density_step})")
        if f.density_difference is not None:
            out.append(
                f"  density difference    {_fmt(f.density_difference, d('density_difference'))} "
                f"(step {f.dd_high_step} - step {f.dd_low_step})"
            )
        if f.iso_speed is not None:
            out.append(f"  ISO speed             {f.iso_speed:.{d('iso_speed')}f}")
        for w in strip.warnings:
            out.append(f"  ! {w}")
    top = [w for w in analysis.warnings if not w.startswith("strip ")]
    if top:
        out.append("")
        out += [f"! {w}" for w in top]
    out.append("")
    out.append(f"Caution: {CAUTION}")
    return "\n".join(out)


def _analysis_options(args):
    from stripscan.core.figure_settings import FigureSettings
    from stripscan.core.reading import AnalysisOptions

    figures = FigureSettings(
        gradient_low=args.low,
        gradient_high=args.high,
        mid_density_target=args.mid_target,
        dd_high_target=args.dd_high,
        dd_low_target=args.dd_low,
        dd_rule=args.dd_rule,
        reference_speed_log_exposure=args.reference_speed,
    )
    table = read_exposure_table(args.exposures) if args.exposures else None
    kerma = read_exposure_table(args.air_kerma) if args.air_kerma else None
    n_steps = args.steps
    if table is not None and n_steps is None:
        n_steps = len(table)
    clear_area = None
    if args.clear_area:
        try:
            x0, y0, x1, y1 = (int(v) for v in args.clear_area.split(","))
        except ValueError:
            raise CommandError(f"--clear-area wants X0,Y0,X1,Y1 in pixels, got {args.clear_area!r}") from None
        clear_area = (min(y0, y1), min(x0, x1), max(y0, y1), max(x0, x1))
    return AnalysisOptions(
        n_steps=n_steps, increment=args.increment, exposure_table=table, air_kerma_ugy=kerma, figures=figures,
        dark=args.dark, clear_area=clear_area,
    )


def _analysis_inputs(args):
    """The calibration (or None), the on-scan tablet's certificate (or None) and the options, read once."""
    from stripscan.core.calibration_files import load_calibration
    from stripscan.core.certificate import read_certificate

    tablet_certificate = getattr(args, "tablet_certificate", None)
    if tablet_certificate and args.calibration:
        raise CommandError("give --calibration or --tablet-certificate, not both")
    calibration = load_calibration(args.calibration) if args.calibration else None
    certificate = read_certificate(tablet_certificate) if tablet_certificate else None
    return calibration, certificate, _analysis_options(args)


def analysis_from_args(args, path):
    """Analyse one scan as the analysis options say; returns the analysis and the calibration used (or None).

    With ``--tablet-certificate`` the calibration is the one fitted on the
    tablet lying on the scan itself (also kept in the result's JSON).
    """
    from stripscan.core.calibration import Calibration
    from stripscan.core.pipeline import analyze_scan

    calibration, certificate, options = _analysis_inputs(args)
    analysis = analyze_scan(
        path, calibration=calibration, options=options, dpi=args.dpi, channel=args.channel,
        flat_field_scan=args.flat_field, tablet_certificate=certificate,
    )
    if certificate is not None:
        calibration = Calibration.from_dict(analysis.calibration["fit"], source=str(path))
    return analysis, calibration


def cmd_analyze(args) -> int:
    from stripscan.cli.batch import is_batch
    from stripscan.services.scan_results import analysis_json

    if is_batch(args.scan):
        return _analyze_batch(args)
    analysis, _ = analysis_from_args(args, args.scan[0])
    text = json.dumps(analysis_json(analysis), indent=1, ensure_ascii=False)
    # Everything printed is made before the file is written: a failure leaves no file behind.
    shown = text if args.json else format_analysis(analysis)
    if args.output:
        _write_text_atomic(Path(args.output), text + "\n")
    print(shown)
    return EXIT_OK


def _analyze_batch(args) -> int:
    """Several scans, or a folder: each scan's result into the -o folder, on every core."""
    import functools

    from stripscan.cli.batch import run_batch_command, start_workers
    from stripscan.services.batch import collect_scans
    from stripscan.services.scan_results import analyse_into_folder, check_result_names

    if args.json:
        raise CommandError("--json prints the result of one scan; with several, each result is written into "
                           "the -o folder")
    if not args.output:
        raise CommandError("several scans, or a folder of them: give -o FOLDER, where each scan's result is "
                           "written as NAME.results.json")
    folder = Path(args.output)
    if folder.exists() and not folder.is_dir():
        raise CommandError(f"{folder}: is a file; with several scans -o names the folder for their results")
    scans = collect_scans(args.scan)
    check_result_names(scans, folder)
    with start_workers(args, scans) as workers:
        calibration, certificate, options = _analysis_inputs(args)
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise CommandError(f"{folder}: cannot make the folder ({exc.strerror or exc})") from None
        work = functools.partial(analyse_into_folder, folder=folder, calibration=calibration, options=options,
                                 dpi=args.dpi, channel=args.channel, flat_field_scan=args.flat_field,
                                 tablet_certificate=certificate)
        summary = run_batch_command(args, scans, work, workers=workers, done_word="analysed")
    if summary.done:
        print(f"Results in {folder}, one NAME.results.json per scan")
    warned = sum(bool(item.result.warnings) for item in summary.done)
    if warned:
        print(f"note: {warned} of the results hold warnings (each file's \"warnings\")")
    if calibration is None and certificate is None and summary.done:
        print("warning: UNCALIBRATED: read in direct mode, log10(I0/I) straight from the scanner (no --calibration)")
    print(f"Caution: {CAUTION}")
    return EXIT_ERROR if summary.failed or summary.cancelled else EXIT_OK


def cmd_calibrate(args) -> int:
    from stripscan.core.calibration import ACCURACY_GOAL
    from stripscan.core.calibration_files import save_calibration
    from stripscan.core.certificate import read_certificate
    from stripscan.core.tablet import calibrate_tablet

    certificate = read_certificate(args.densities)
    lateral = None
    if args.lateral_from:
        from stripscan.core.calibration import fit_lateral
        from stripscan.core.scan import load_scan

        blank = load_scan(args.lateral_from, dpi=args.dpi, channel=args.channel)
        if not blank.info.pixel_mm:
            raise CommandError(f"{args.lateral_from}: the resolution is unknown; give it with --dpi")
        lateral = fit_lateral(blank.signal, pixel_mm=blank.info.pixel_mm, axis=args.lateral_axis)
    calibration, tablet, warnings = calibrate_tablet(
        args.tablet_scan, certificate, dpi=args.dpi, channel=args.channel, flat_field_scan=args.flat_field,
        lateral=lateral, note=args.note or "",
    )
    save_calibration(calibration, args.output)
    print(f"Tablet: {len(certificate.densities)} certified steps, found at axis {tablet.geometry.angle_deg:.1f}°")
    print(f"  {'step':>4} {'certified':>9} {'signal':>9} {'residual':>9}")
    used = len(calibration.residuals)
    for k, (step, density) in enumerate(zip(certificate.steps, certificate.densities)):
        reading = calibration.readings[k]
        res = calibration.residuals[k] if k < used else None
        res_text = f"{res:+9.4f}" if res is not None else ("    start" if k < used else " not used")
        print(f"  {step:>4} {density:9.3f} {reading['signal'] or float('nan'):9.5f} {res_text}")
    rms = calibration.rms_residual
    print(f"Held-out residual RMS within the valid range: {rms:.4f} OD" if rms is not None
          else "Held-out residual RMS within the valid range: n/a")
    lo, hi = calibration.valid_od
    print(f"Reads within ±{ACCURACY_GOAL:.2f} OD from {lo:.2f} to {hi:.2f} OD; steps outside are flagged.")
    if calibration.lateral is not None:
        print(f"Lateral response: c = {calibration.lateral.c_per_mm2:.3g} OD/mm² across the carriage")
    print(stray_light_text(calibration))
    for w in warnings:
        print(f"! {w}")
    print(f"Saved {args.output}")
    return EXIT_OK


def add_analysis_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--calibration", metavar="CAL.json", help="calibration from 'stripscan calibrate' (none: uncalibrated direct mode)")
    p.add_argument("--tablet-certificate", metavar="CERT.csv",
                   help="a reference tablet lies on this scan beside the strips: calibrate the scan with it "
                        "(certified densities, CSV 'step,density'); the most robust way")
    p.add_argument("--steps", type=int, metavar="N", help="number of steps per strip (default: counted); checked against the measured step pitch and "
                   "the film's length, with a warning when it cannot be right")
    p.add_argument("--increment", type=float, default=0.15, metavar="LOGE", help="log exposure per step (default 0.15 = log10 √2)")
    p.add_argument("--exposures", metavar="FILE", help="per-step log exposure table from the sensitometer, one per line")
    p.add_argument("--air-kerma", metavar="FILE", help="per-step air kerma in µGy, one per line (gives ISO speed)")
    p.add_argument("--low", type=float, default=0.25, help="lower net density for average gradient and latitude (ISO 9236-1: 0.25)")
    p.add_argument("--high", type=float, default=2.00, help="upper net density (ISO 9236-1: 2.00)")
    p.add_argument("--mid-target", type=float, default=1.20, help="density the mid-density step is chosen near (1.20)")
    p.add_argument("--dd-high", type=float, default=2.20, help="high density-difference target (2.20)")
    p.add_argument("--dd-low", type=float, default=0.45, help="low density-difference target (0.45)")
    p.add_argument("--dd-rule", choices=("closest", "bounded"), default="closest", help="how density-difference steps are chosen: closest = the steps closest to both targets; bounded = the "
                   "high step closest to its target, the low step the lightest at or above its target")
    p.add_argument("--reference-speed", type=float, metavar="LOGE", help="speed point of a reference film, for relative speed")
    p.add_argument("--dark", type=float, default=0.0, help="direct mode: the scanner's dark signal, 0..1 of full scale")
    p.add_argument("--clear-area", metavar="X0,Y0,X1,Y1", help="direct mode: a clear area (px) whose signal is I0")


def add_scan_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--dpi", type=float, help="resolution, overriding the file's tags")
    p.add_argument("--channel", default="auto", choices=("auto", "mean", "red", "green", "blue", "luminance"),
                   help="how colour channels become one signal (default: mean of R, G, B)")
    p.add_argument("--flat-field", metavar="BLANK_SCAN", help="blank-platen scan of the same size to divide by")


# Subcommand groups that live beside their own code register here.
_REGISTRARS: list[str] = [
    "stripscan.cli.archive",
    "stripscan.cli.qc",
    "stripscan.cli.compare",
    "stripscan.cli.report",
]


#: Commands defined in this module: running one needs no other group's parser.
_OWN_COMMANDS = ("analyze", "calibrate", "demo")


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """The command line's parser; for one of :data:`_OWN_COMMANDS`, only this module's commands.

    Registering the other groups imports their modules (the archive's records
    and storage among them, some 40 ms at start-up); running ``analyze``,
    ``calibrate`` or ``demo`` does not need them.
    """
    parser = argparse.ArgumentParser(
        prog="stripscan",
        description="Read processed sensitometric film strips off a flatbed scanner.",
        epilog=f"Caution: {CAUTION}",
    )
    parser.add_argument("--version", action="version", version=f"stripscan {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("analyze", help="read every strip on a scan (or on several): densities, curve figures")
    p.add_argument("scan", nargs="+", metavar="SCAN",
                   help="scan of processed strips (TIFF, PNG or JPEG); several scans, or a folder of them, are read "
                        "on every core, each result written into the -o folder")
    add_analysis_arguments(p)
    add_scan_arguments(p)
    p.add_argument("--json", action="store_true", help="print the full result as JSON (one scan)")
    p.add_argument("-o", "--output", metavar="OUT.json|FOLDER",
                   help="also save the JSON result here; with several scans, the folder that gets each scan's "
                        "NAME.results.json (made when missing)")
    add_batch_arguments(p)
    p.set_defaults(func=cmd_analyze)

    p = sub.add_parser("calibrate", help="fit the scanner's signal-to-density map from a step tablet scan")
    p.add_argument("tablet_scan", help="scan of the reference step tablet")
    p.add_argument("--densities", required=True, metavar="CERT.csv", help="certified densities: CSV 'step,density'")
    p.add_argument("-o", "--output", required=True, metavar="CAL.json", help="where to save the calibration")
    p.add_argument("--note", help="free text kept with the calibration")
    p.add_argument("--lateral-from", metavar="UNIFORM_SCAN",
                   help="fit the across-carriage response OD = c0 + c x^2 from a uniform scan (open platen or uniform film)")
    p.add_argument("--lateral-axis", choices=("col", "row"), default="col",
                   help="image axis that runs across the carriage (default: columns)")
    add_scan_arguments(p)
    p.set_defaults(func=cmd_calibrate)

    p = sub.add_parser("demo", help="open the desktop window on the bundled invented scenario")
    p.add_argument("--folder", help="where to put the demo's archive and files (default: a temporary folder)")
    p.set_defaults(func=cmd_demo)
    if command in _OWN_COMMANDS:
        return parser

    import importlib

    for name in _REGISTRARS:
        try:
            module = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name and name.startswith(exc.name):
                continue
            raise
        module.register(sub)
    return parser


def _require_display() -> None:
    """Refuse plainly when no graphical session is there (Qt would abort with a cryptic message)."""
    if os.environ.get("QT_QPA_PLATFORM") or not sys.platform.startswith("linux"):
        return
    if not (os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY")):
        raise CommandError(
            "the desktop window needs a graphical session (no DISPLAY or WAYLAND_DISPLAY is set); "
            "the command line works without one: see 'stripscan --help'"
        )
    if not os.environ.get("WAYLAND_DISPLAY") and not _xcb_cursor_found():
        # On X11 Qt uses its xcb platform, which will not start without this library (and aborts the process).
        raise CommandError(
            "the desktop window needs the libxcb-cursor library for Qt's xcb platform, which is not installed; "
            "install the package libxcb-cursor0 (Debian, Ubuntu: sudo apt install libxcb-cursor0; elsewhere "
            "xcb-util-cursor); the command line works without it: see 'stripscan --help'"
        )


def _xcb_cursor_found() -> bool:
    """Whether the X11 cursor library Qt's xcb platform loads is on this machine.

    Asked of the dynamic loader itself, as Qt will ask it: a library the
    loader finds is there, wherever it was installed.
    """
    import ctypes
    import ctypes.util

    try:
        ctypes.CDLL("libxcb-cursor.so.0")
        return True
    except OSError:
        return ctypes.util.find_library("xcb-cursor") is not None


def cmd_demo(args) -> int:
    _require_display()
    try:
        from stripscan.gui.app import run_demo
    except ModuleNotFoundError as exc:
        raise CommandError(f"the desktop window is not available ({exc})") from None
    return run_demo(args.folder)


def cmd_gui() -> int:
    _require_display()
    try:
        from stripscan.gui.app import run_gui
    except ModuleNotFoundError as exc:
        raise CommandError(f"the desktop window is not available ({exc}); try 'stripscan --help'") from None
    return run_gui()


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``stripscan`` command."""
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser(argv[0] if argv else None)
    if not argv:
        try:
            return cmd_gui()
        except CommandError as exc:
            print(f"stripscan: error: {exc}", file=sys.stderr)
            return EXIT_ERROR
    streams = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = _TerminalSafe(streams[0]), _TerminalSafe(streams[1])
    try:
        return _run(parser, argv)
    finally:
        sys.stdout, sys.stderr = streams


def _run(parser: argparse.ArgumentParser, argv: list[str]) -> int:
    args = parser.parse_args(argv)
    func: Callable | None = getattr(args, "func", None)
    if func is None:
        parser.print_help()
        return EXIT_USAGE
    try:
        return int(func(args) or 0)
    except BrokenPipeError:
        # The reader went away (``stripscan analyze ... | head``): nothing is wrong with the input.
        # Point stdout at devnull so that the interpreter's last flush does not fail again.
        try:
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        except (OSError, ValueError):
            pass
        return 128 + 13  # as a shell reports a process ended by SIGPIPE
    except (CommandError, ValueError, OSError) as exc:
        # Our errors (ScanError, CalibrationError, LocateError, ...) are
        # ValueErrors whose message already names the file.
        print(f"stripscan: error: {exc}", file=sys.stderr)
        return EXIT_ERROR
    except KeyboardInterrupt:
        print("stripscan: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
