"""The ``fallcam`` command: argument parsing, printing, exit codes (INTERFACE.md "Commands").

This is the only module that prints or decides the exit status. Each subcommand is a small
function ``_cmd_<name>(args, out) -> int`` that calls the module doing the work (imported inside
the function, so that ``fallcam --help`` stays fast) and prints either a short human summary or,
with ``--json``, the result as JSON and nothing else on stdout.

Errors (INTERFACE.md "Exit codes and errors"): one line ``fallcam: error: …`` on stderr, at most
one ``hint: …`` line, and the exit code of the exception (:func:`exit_code_for`): 2 for the
command line, rig file or manifest (argparse's own errors included), 3 for an unusable clip, 4
for no usable track, 1 for anything unexpected (the traceback goes to a file whose path is
printed; ``--debug`` prints it instead), 130 for Ctrl-C. Outputs of ``analyze``, ``track``,
``series`` and ``demo`` are staged and published only on success
(:func:`fallcam.atomic.atomic_output_dir`), so a failed or interrupted run leaves nothing
half-written.
"""

from __future__ import annotations

import argparse
import datetime
import difflib
import json
import math
import os
import shlex
import sys
import tempfile
import traceback
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any, TextIO

import fallcam
from fallcam.errors import EXIT_INTERNAL, EXIT_USAGE, FallcamError, UsageError

__all__ = ["EXIT_INTERRUPTED", "build_parser", "error_line", "exit_code_for", "format_pm", "main", "require_clip"]

EXIT_INTERRUPTED = 130
"""Exit status after Ctrl-C (128 + SIGINT, the shell convention)."""
EXIT_BROKEN_PIPE = 141
"""Exit status when the reader of stdout went away (``fallcam … | head``): 128 + SIGPIPE, the
shell convention; nothing more is printed, and outputs already published stay."""

COMMANDS = ("analyze", "track", "series", "batch", "plan", "fluid", "demo", "lens")
_PROG = "fallcam"


# ---------------------------------------------------------------------------------------------
# Exceptions → exit code and one-line message


def exit_code_for(exc: BaseException) -> int:
    """Exit code for an exception (INTERFACE.md table).

    Parameters
    ----------
    exc : BaseException
        The exception a command raised.

    Returns
    -------
    int
        The :class:`fallcam.errors.FallcamError` subclass's code; 3 for
        :class:`tracker.errors.ClipError`; 4 for :class:`tracker.errors.TrackingError`;
        130 for ``KeyboardInterrupt``; otherwise 1 (internal error).
    """
    from tracker.errors import ClipError, TrackingError

    if isinstance(exc, FallcamError):
        return int(exc.exit_code)
    if isinstance(exc, ClipError):
        return 3
    if isinstance(exc, TrackingError):
        return 4
    if isinstance(exc, KeyboardInterrupt):
        return EXIT_INTERRUPTED
    return EXIT_INTERNAL


def error_line(exc: BaseException) -> str:
    """The one-line message for an exception (without the ``fallcam: error:`` prefix).

    Parameters
    ----------
    exc : BaseException
        The exception.

    Returns
    -------
    str
        The message on one line; for internal errors ``internal error: <type>: <message>``.
    """
    text = " ".join(str(exc).split()) or type(exc).__name__
    if exit_code_for(exc) == EXIT_INTERNAL:
        return f"internal error: {type(exc).__name__}: {text}"
    return text


# ---------------------------------------------------------------------------------------------
# Parser


class _Parser(argparse.ArgumentParser):
    """ArgumentParser whose errors become :class:`UsageError` (one line + a hint, exit 2)."""

    def error(self, message: str) -> None:  # type: ignore[override]
        where = self.prog.removeprefix(_PROG).strip()
        hint = f"see '{self.prog} --help'"
        if "invalid choice" in message and "argument command" in message:
            wrong = message.split("invalid choice: ", 1)[1].split(" ", 1)[0].strip("'\"")
            close = difflib.get_close_matches(wrong, COMMANDS, n=1)
            if close:
                hint = f"did you mean '{_PROG} {close[0]}'?"
        raise UsageError(f"{where}: {message}" if where else message, hint=hint)


def _add_common(p: argparse.ArgumentParser, *, json_output: bool = True) -> None:
    g = p.add_argument_group("output")
    if json_output:
        g.add_argument("--json", action="store_true",
                       help="print the result as JSON on stdout (and nothing else there)")
    g.add_argument("--quiet", action="store_true",
                   help="no progress bar and no summary text (errors are still printed)")
    g.add_argument("--debug", action="store_true",
                   help="on an error, print the full traceback")


def _add_overrides(p: argparse.ArgumentParser) -> None:
    from fallcam.rig import OVERRIDES

    g = p.add_argument_group("rig overrides", "replace single values of the rig file for this run")
    for name, opt in OVERRIDES.items():
        text = opt.help + (f"; one of {', '.join(opt.choices)}" if opt.choices else "")
        g.add_argument("--" + name.replace("_", "-"), dest=f"override_{name}", type=opt.type,
                       choices=opt.choices or None, default=None, help=text.replace("%", "%%"),
                       metavar="NAME" if opt.choices else "X")


def _overrides(args: argparse.Namespace) -> dict[str, Any]:
    prefix = "override_"
    return {k.removeprefix(prefix): v for k, v in vars(args).items()
            if k.startswith(prefix) and v is not None}


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number; expected ≥ 1") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{value} is not allowed; expected a whole number ≥ 1")
    return value


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """Build the argument parser of ``fallcam`` and its subcommands.

    Parameters
    ----------
    command : str, optional
        The subcommand about to run (the first word of ``argv`` that is not an option). Only
        this subcommand gets the options whose lists come from the heavier modules (the rig
        overrides of :data:`fallcam.rig.OVERRIDES`, the liquid names of :mod:`physics.fluids`),
        so ``fallcam --help`` does not import them. None builds every subcommand in full, ""
        none.

    Returns
    -------
    argparse.ArgumentParser
        Parses ``argv`` into a namespace whose ``func`` runs the subcommand.
    """

    def full(name: str) -> bool:
        return command is None or command == name

    parser = _Parser(prog=_PROG, description=(
        "Falling-ball viscometry from phone and webcam video: track the sphere, prove terminal "
        "speed, fit the terminal velocity, correct for walls and inertia, and give the viscosity "
        "with a GUM uncertainty budget."),
        epilog="Exit codes: 0 ok, 1 internal error, 2 bad command line/rig/manifest, "
               "3 clip unusable, 4 no usable track or plateau, 130 interrupted.")
    parser.add_argument("--version", action="version", version=f"{_PROG} {fallcam.__version__}")
    sub = parser.add_subparsers(dest="command", metavar="command", required=True,
                                parser_class=_Parser)

    p = sub.add_parser("analyze", usage="%(prog)s CLIP --rig RIG.toml --out DIR [--overlay] [options]",
                       help="analyse one clip: track, plateau, v_t, viscosity, report",
                       description="Analyse one clip: track the sphere, find the plateau and the "
                                   "terminal velocity, infer the viscosity with its uncertainty "
                                   "budget, write summary.json, trajectory.csv, plots and "
                                   "report.html into --out.")
    p.add_argument("clip", metavar="CLIP", help="the video file")
    p.add_argument("--rig", required=True, metavar="RIG.toml", help="rig file")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created if needed)")
    p.add_argument("--overlay", action="store_true",
                   help="also write an overlay video (detected centre, track, plateau, marks)")
    _add_common(p)
    if full("analyze"):
        _add_overrides(p)
    p.set_defaults(func=_cmd_analyze)

    p = sub.add_parser("track", usage="%(prog)s CLIP --rig RIG.toml --out DIR [options]",
                       help="tracking only: trajectory CSV and a tracking check picture",
                       description="Track the sphere and write the trajectory (mm, s) and a "
                                   "tracking check picture into --out.")
    p.add_argument("clip", metavar="CLIP", help="the video file")
    p.add_argument("--rig", required=True, metavar="RIG.toml", help="rig file")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created if needed)")
    _add_common(p)
    if full("track"):
        _add_overrides(p)
    p.set_defaults(func=_cmd_track)

    p = sub.add_parser("series", usage="%(prog)s MANIFEST.csv --rig RIG.toml --out DIR [options]",
                       help="several clips: per-ball table, v vs d² fit, pooled viscosity",
                       description="Analyse the clips of a manifest (repeats, ball sizes): "
                                   "per-ball table, v against d² with the fit and residuals, "
                                   "pooled viscosity with its budget.")
    p.add_argument("manifest", metavar="MANIFEST.csv", help="manifest CSV (column clip, overrides)")
    p.add_argument("--rig", required=True, metavar="RIG.toml", help="rig file shared by the clips")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created if needed)")
    _add_common(p)
    if full("series"):
        _add_overrides(p)
    p.set_defaults(func=_cmd_series)

    p = sub.add_parser("batch", usage="%(prog)s (DIR | MANIFEST.csv) --rig RIG.toml --out DIR [--jobs N] [options]",
                       help="reprocess an archive: parallel, resumable, failures recorded",
                       description="Analyse every clip of a folder (by extension) or a manifest. "
                                   "Parallel, resumable (finished clips with unchanged inputs are "
                                   "reused), one bad clip never stops the batch: failures go to "
                                   "failures.csv, every clip to batch_summary.csv. Exit status 0 "
                                   "when at least one clip succeeded, else the first failure's "
                                   "code.")
    p.add_argument("source", metavar="DIR|MANIFEST.csv", help="folder of clips or manifest CSV")
    p.add_argument("--rig", required=True, metavar="RIG.toml", help="rig file shared by the clips")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created if needed)")
    p.add_argument("--jobs", type=_positive_int, default=1, metavar="N",
                   help="worker processes (default 1)")
    p.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="run on a Dask distributed cluster (tcp://host:8786); needs fallcam[dask]")
    _add_common(p)
    if full("batch"):
        _add_overrides(p)
    p.set_defaults(func=_cmd_batch)

    p = sub.add_parser("plan", usage="%(prog)s --rig RIG.toml [--viscosity-pa-s X] [options]",
                       help="before filming: predicted v_t, Re, run-in, frame rate needed",
                       description="Predict what a rig will give before filming: terminal "
                                   "velocity (wall and inertia corrected), Re, wall factor, "
                                   "transit time between the marks, the run-in distance to "
                                   "within 0.1 % of terminal speed, the frame rate and resolution "
                                   "for a velocity uncertainty, and the zones to keep clear.")
    p.add_argument("--rig", required=True, metavar="RIG.toml", help="rig file")
    p.add_argument("--viscosity-pa-s", type=float, default=None, metavar="X",
                   help="expected viscosity, Pa·s (default: the rig's liquid model)")
    p.add_argument("--target-u-percent", type=float, default=0.1, metavar="P",
                   help="wanted statistical velocity uncertainty, %% (default 0.1)")
    _add_common(p)
    if full("plan"):
        _add_overrides(p)
    p.set_defaults(func=_cmd_plan)

    p = sub.add_parser("fluid", usage="%(prog)s NAME [--temperature-c T] [--glycerol-mass-fraction W] [options]",
                       help="density and viscosity of a reference liquid model",
                       description="Density, viscosity and d ln μ/dT of a reference liquid from "
                                   "the published models, with their validity range and source.")
    if full("fluid"):
        from physics.fluids import FLUID_NAMES

        p.add_argument("name", choices=FLUID_NAMES, metavar="NAME",
                       help=f"liquid model: {', '.join(FLUID_NAMES)}")
    else:
        p.add_argument("name", metavar="NAME", help="liquid model")
    p.add_argument("--temperature-c", type=float, default=20.0, metavar="T",
                   help="temperature, °C (default 20)")
    p.add_argument("--glycerol-mass-fraction", type=float, default=None, metavar="W",
                   help="glycerol mass fraction 0…1 (glycerol-water)")
    _add_common(p)
    p.set_defaults(func=_cmd_fluid)

    p = sub.add_parser("demo", usage="%(prog)s --out DIR [options]",
                       help="render a demo clip of our own scenario and analyse it",
                       description="Render a demo clip (our own scenario) and run analyze on it, "
                                   "so a newcomer sees the whole job.")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created if needed)")
    _add_common(p)
    p.set_defaults(func=_cmd_demo)

    p = sub.add_parser("lens", usage="%(prog)s CLIP --board COLSxROWS --square-mm S [--out LENS.toml] [options]",
                       help="calibrate lens distortion from a clip of a checkerboard",
                       description="Calibrate the camera's lens distortion (Brown–Conrady model, "
                                   "Zhang's method with OpenCV) from a clip of a printed "
                                   "checkerboard moved around the view: tilt it, and bring it "
                                   "to every part of the frame, the corners too. Film at the "
                                   "same resolution and zoom as the fall clips. Prints the RMS "
                                   "reprojection error, the views used, how much of the frame "
                                   "the corners covered, and the [lens] table to paste into the "
                                   "rig file (or write it with --out).",
                       epilog="COLSxROWS counts the INNER corners (where four squares meet), e.g. "
                              "9x6 for a board of 10 × 7 squares. Exit codes: 2 bad arguments, "
                              "3 clip missing or unreadable, 4 board found in fewer than 5 frames "
                              "or a calibration that does not fit (RMS reprojection error above "
                              "1 px).")
    p.add_argument("clip", metavar="CLIP", help="the video file of the checkerboard")
    p.add_argument("--board", required=True, metavar="COLSxROWS",
                   help="inner corners per row and per column, e.g. 9x6")
    p.add_argument("--square-mm", required=True, type=float, metavar="S",
                   help="side of one square, mm (as printed; measure it)")
    p.add_argument("--out", default=None, metavar="LENS.toml",
                   help="also write the [lens] table to this file (written atomically)")
    _add_common(p)
    p.set_defaults(func=_cmd_lens)
    return parser


# ---------------------------------------------------------------------------------------------
# Printing helpers


def _print_json(obj: Any, out: TextIO) -> None:
    from fallcam.atomic import json_ready

    out.write(json.dumps(json_ready(obj), indent=2, ensure_ascii=False, allow_nan=False) + "\n")


def format_pm(value: float | None, u: float | None, unit: str = "", scale: float = 1.0) -> str:
    """Format ``value ± u unit`` with the uncertainty rounded to two significant digits.

    Parameters
    ----------
    value : float or None
        The value (None → ``"n/a"``).
    u : float or None
        Its uncertainty (None or 0 → the value alone, 4 significant digits).
    unit : str
        Unit text appended after a space.
    scale : float
        Multiplier applied to both (e.g. 1000 for m/s → mm/s).

    Returns
    -------
    str
    """
    from fallcam.report import format_measurement

    if value is None or not math.isfinite(value):
        return "n/a"
    v = value * scale
    suffix = f" {unit}" if unit else ""
    if u is None or not math.isfinite(u) or u <= 0:
        return f"{v:.4g}{suffix}"
    return f"{format_measurement(v, u * scale)}{suffix}"


def _fmt(value: Any, spec: str = ".4g", unit: str = "") -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "n/a"
    return f"{value:{spec}}{f' {unit}' if unit else ''}"


def _print_warnings(warnings: Sequence[str], out: TextIO, indent: str = "") -> None:
    for text in warnings:
        out.write(f"{indent}warning: {text}\n")


def _print_summary(summary: Mapping[str, Any], out_dir: Path, out: TextIO) -> None:
    """Short human summary of one analysed clip."""
    timing = summary.get("timestamps") or "?"
    out.write(f"{summary.get('clip', '?')}: {_fmt(summary.get('capture_fps'), '.5g')} frames/s "
              f"({timing} timestamps), {_fmt(summary.get('px_per_mm'), '.4g')} px/mm\n")
    tracks = summary.get("tracks") or []
    if not tracks:
        out.write("no sphere passage found\n")
    for track in tracks:
        reached = "terminal speed reached" if track.get("terminal_reached") else \
            "terminal speed NOT shown to be reached"
        v_t = format_pm(track.get("terminal_velocity_m_s"), track.get("terminal_velocity_u_m_s"),
                        "mm/s", 1e3)
        out.write(f"track {track.get('id', '?')} ({track.get('direction', '?')}): v_t = {v_t} "
                  f"(u, k = 1; {reached})\n")
        viscosity = track.get("viscosity_pa_s")
        if viscosity is not None:
            big_u = track.get("viscosity_U_pa_s")
            if big_u is None and track.get("viscosity_u_pa_s") is not None:
                big_u = 2.0 * track["viscosity_u_pa_s"]
            out.write(f"  viscosity = {format_pm(viscosity, big_u, 'Pa·s')} (U, k = 2)\n")
        else:
            out.write("  viscosity: not computed (the rig lacks what it needs)\n")
        out.write(f"  Re = {_fmt(track.get('reynolds_number'), '.3g')}, "
                  f"wall factor = {_fmt(track.get('wall_factor'), '.4f')}\n")
        _print_warnings(track.get("warnings") or [], out, "  ")
    _print_warnings(summary.get("warnings") or [], out)
    out.write(f"results in {out_dir}\n")


def require_clip(clip: str | os.PathLike[str]) -> Path:
    """Check that a clip path names a file, before any work or output starts.

    Parameters
    ----------
    clip : str or path-like
        The clip as given.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    fallcam.errors.ClipUnusableError
        The path does not exist or is not a file (exit 3).
    """
    from fallcam.errors import ClipUnusableError

    path = Path(clip)
    if not path.exists():
        raise ClipUnusableError(f"{clip}: clip not found", hint="check the path")
    if not path.is_file():
        raise ClipUnusableError(f"{clip}: is not a file; expected a video file")
    return path


def _check_out_dir(out: str) -> None:
    """An existing --out must be a folder (exit 2 otherwise, before any work starts)."""
    path = Path(out)
    if path.exists() and not path.is_dir():
        raise UsageError(f"--out {out}: exists and is not a folder; expected a folder for the results")


# ---------------------------------------------------------------------------------------------
# Subcommands


def _cmd_analyze(args: argparse.Namespace, out: TextIO) -> int:
    from fallcam.atomic import atomic_output_dir
    from fallcam.progress import progress_bar
    from fallcam.rig import load_rig

    _check_out_dir(args.out)
    rig = load_rig(args.rig, _overrides(args))
    clip = require_clip(args.clip)
    from fallcam.analyze import analyze_clip

    with progress_bar(clip.name, quiet=args.quiet) as bar, atomic_output_dir(args.out) as staging:
        summary = analyze_clip(args.clip, rig, staging, overlay=args.overlay, progress=bar,
                               command=args.command_line)
    if args.json:
        _print_json(summary, out)
    elif not args.quiet:
        _print_summary(summary, Path(args.out), out)
    _require_plateau(summary, args.clip, Path(args.out))
    return 0


def _require_plateau(summary: dict, clip: str, out_dir: Path) -> None:
    """Exit 4 (after the results are written) when no passage reached a terminal-speed plateau."""
    tracks = summary.get("tracks") or []
    if any(tr.get("terminal_velocity_m_s") is not None for tr in tracks):
        return
    from fallcam.errors import NoResultError

    reasons = "; ".join(f"track {tr.get('id')}: {(tr.get('plateau') or {}).get('reason') or 'no plateau'}"
                        for tr in tracks) or "no passage"
    raise NoResultError(f"{clip}: no terminal-speed plateau ({reasons})",
                        hint=f"the transient estimate and the figures are in {out_dir}")


def _cmd_track(args: argparse.Namespace, out: TextIO) -> int:
    from fallcam.atomic import atomic_output_dir
    from fallcam.progress import progress_bar
    from fallcam.rig import load_rig

    _check_out_dir(args.out)
    rig = load_rig(args.rig, _overrides(args))
    clip = require_clip(args.clip)
    from fallcam.analyze import track_clip_to_dir

    with progress_bar(clip.name, quiet=args.quiet) as bar, atomic_output_dir(args.out) as staging:
        result = track_clip_to_dir(args.clip, rig, staging, progress=bar, command=args.command_line)
    if args.json:
        _print_json(result, out)
    elif not args.quiet:
        tracks = result.get("tracks") or []
        out.write(f"{args.clip}: {result.get('n_points', '?')} detections in {len(tracks)} "
                  f"passage(s), {_fmt(result.get('px_per_mm'), '.4g')} px/mm\n")
        _print_warnings(result.get("warnings") or [], out)
        out.write(f"results in {args.out}\n")
    return 0


def _print_series(result: Mapping[str, Any], manifest: str, out_dir: str, out: TextIO) -> None:
    """Short human summary of a series (``series.json`` of :func:`fallcam.series.run_series`)."""
    balls = result.get("balls") or []
    failures = result.get("failures") or []
    out.write(f"{manifest}: {len(result.get('clips') or [])} clip(s) analysed, {len(balls)} "
              f"ball size(s), {len(failures)} failure(s)\n")
    for ball in balls:
        out.write(f"  {ball.get('ball', '?')}: {ball.get('n', '?')} drop(s), viscosity = "
                  f"{format_pm(ball.get('mu_pa_s'), ball.get('u_mu_pa_s'), 'Pa·s')} (u, k = 1), "
                  f"Re = {_fmt(ball.get('reynolds_number'), '.3g')}\n")
    pooled = result.get("pooled") or {}
    budget = result.get("budget") or {}
    mu = pooled.get("value")
    big_u = (budget["expanded_U_rel"] * mu if mu is not None and budget.get("expanded_U_rel") is not None
             else None)
    k = budget.get("k", result.get("coverage_factor_k"))
    out.write(f"pooled viscosity = {format_pm(mu, big_u, 'Pa·s')} (U, k = {_fmt(k, 'g')})")
    if budget.get("dominant"):
        out.write(f"; largest term: {budget['dominant']}")
    out.write("\n")
    for failure in failures:
        out.write(f"  failed: {failure.get('label', failure.get('clip', '?'))}: {failure.get('message', '')}\n")
    _print_warnings(result.get("warnings") or [], out)
    out.write(f"results in {out_dir}\n")


def _cmd_series(args: argparse.Namespace, out: TextIO) -> int:
    from fallcam.atomic import atomic_output_dir
    from fallcam.progress import progress_bar
    from fallcam.series import run_series

    _check_out_dir(args.out)
    with progress_bar(Path(args.manifest).name, unit="clip", quiet=args.quiet) as bar, \
            atomic_output_dir(args.out) as staging:
        result = run_series(args.manifest, args.rig, staging, overrides=_overrides(args), progress=bar,
                            command=args.command_line)
    if args.json:
        _print_json(result, out)
    elif not args.quiet:
        _print_series(result, args.manifest, args.out, out)
    return 0


def _cmd_batch(args: argparse.Namespace, out: TextIO) -> int:
    from fallcam.batch import run_batch
    from fallcam.progress import progress_bar

    _check_out_dir(args.out)
    with progress_bar(Path(args.source).name, unit="clip", quiet=args.quiet) as bar:
        result = run_batch(args.source, args.rig, args.out, jobs=args.jobs,
                           overrides=_overrides(args), scheduler=args.scheduler, progress=bar)
    if args.json:
        _print_json(result.to_dict(), out)
    elif not args.quiet:
        out.write(f"{len(result.outcomes)} clip(s): {result.n_ok} analysed, {result.n_reused} "
                  f"reused (unchanged), {result.n_failed} failed\n")
        for o in result.outcomes:
            if o.status == "failed":
                out.write(f"  failed (exit {o.exit_code}): {o.label}: {o.message}\n")
        out.write(f"tables: {result.summary_csv}, {result.failures_csv}\n")
    if result.n_failed and (args.json or args.quiet):
        sys.stderr.write(f"fallcam: {result.n_failed} of {len(result.outcomes)} clip(s) failed; "
                         f"see {result.failures_csv}\n")
    return result.exit_code


def _cmd_plan(args: argparse.Namespace, out: TextIO) -> int:
    from fallcam.plan import plan
    from fallcam.rig import load_rig

    if not (math.isfinite(args.target_u_percent) and 0 < args.target_u_percent < 100):
        raise UsageError(f"--target-u-percent {args.target_u_percent:g}: expected a percentage "
                         "between 0 and 100")
    rig = load_rig(args.rig, _overrides(args))
    result = plan(rig, args.viscosity_pa_s, target_u_rel=args.target_u_percent / 100.0)
    if args.json:
        _print_json(result.to_dict(), out)
    else:
        out.write(result.to_text())
    return 0


def _cmd_fluid(args: argparse.Namespace, out: TextIO) -> int:
    from physics.fluids import fluid_state

    try:
        state = fluid_state(args.name, args.temperature_c, args.glycerol_mass_fraction)
    except ValueError as exc:
        raise UsageError(f"fluid {args.name}: {exc}") from None
    if args.json:
        _print_json(state.to_dict(), out)
        return 0
    composition = (f", glycerol mass fraction {state.glycerol_mass_fraction:g}"
                   if state.model != "water" else "")
    out.write(f"{state.model} at {state.temperature_c:g} °C{composition}\n"
              f"  density    {state.density_kg_m3:.2f} kg/m³ (u {state.density_u_rel * 100:.2g} %)\n"
              f"  viscosity  {state.viscosity_pa_s:.5g} Pa·s (model u {state.reference_u_rel * 100:.2g} %)\n"
              f"  d ln μ/dT  {state.dlnmu_dT_per_K:+.4f} per K "
              f"({state.dlnmu_dT_per_K * 100:+.2f} % per K)\n"
              f"  source     {state.source}\n"
              f"  model u    {state.reference_u_note}\n")
    if state.warnings:
        _print_warnings(state.warnings, out, "  ")
    else:
        out.write("  validity   inside the model's stated range\n")
    return 0


def _cmd_demo(args: argparse.Namespace, out: TextIO) -> int:
    from fallcam.atomic import atomic_output_dir
    from fallcam.demo import run_demo
    from fallcam.progress import progress_bar

    _check_out_dir(args.out)
    with progress_bar("demo", quiet=args.quiet) as bar, atomic_output_dir(args.out) as staging:
        summary = run_demo(staging, progress=bar)
    if args.json:
        _print_json(summary, out)
    elif not args.quiet:
        _print_summary(summary, Path(args.out), out)
    return 0


def _board(text: str) -> tuple[int, int]:
    """``"9x6"`` → (9, 6); UsageError otherwise."""
    parts = text.lower().replace("×", "x").split("x")
    try:
        cols, rows = (int(p) for p in parts)
    except ValueError:
        raise UsageError(f"--board {text!r}: expected COLSxROWS, the inner corners per row and "
                         "column, e.g. 9x6") from None
    if cols < 2 or rows < 2:
        raise UsageError(f"--board {text!r}: expected at least 2 inner corners each way, e.g. 9x6")
    return cols, rows


def _cmd_lens(args: argparse.Namespace, out: TextIO) -> int:
    from fallcam.atomic import atomic_write_text
    from fallcam.progress import progress_bar

    board = _board(args.board)
    if not (math.isfinite(args.square_mm) and args.square_mm > 0):
        raise UsageError(f"--square-mm {args.square_mm:g}: expected the side of a square > 0 mm")
    if args.out is not None and Path(args.out).is_dir():
        raise UsageError(f"--out {args.out}: is a folder; expected a file name for the [lens] table")
    if args.out is not None and not Path(args.out).resolve().parent.is_dir():
        raise UsageError(f"--out {args.out}: folder {Path(args.out).parent} does not exist; expected "
                         "a file name in an existing folder")
    clip = require_clip(args.clip)
    from tracker.lens import calibrate_clip

    with progress_bar(clip.name, quiet=args.quiet) as bar:
        cal = calibrate_clip(clip, board, args.square_mm, progress=bar)
    table = cal.to_toml(clip.name)
    if args.out is not None:
        atomic_write_text(args.out, table)
    if args.json:
        result = cal.to_dict()
        result["toml"] = table
        result["out"] = args.out
        _print_json(result, out)
        return 0
    if not args.quiet:
        out.write(f"{clip.name}: {cal.lens.image_size_px[0]}×{cal.lens.image_size_px[1]} px, "
                  f"board {board[0]}×{board[1]} inner corners found in {cal.n_found} of "
                  f"{cal.n_tried} frames searched; {cal.n_views} views used\n"
                  f"  RMS reprojection error {cal.rms_px:.3f} px (worst view "
                  f"{max(cal.per_view_rms_px):.3f} px)\n"
                  f"  corners covered {100 * cal.coverage_fraction:.0f} % of the frame "
                  f"({100 * cal.outer_coverage_fraction:.0f} % of its outer border) and reached "
                  f"{100 * cal.reach_fraction:.0f} % of the way to the corners\n")
        _print_warnings(cal.warnings, out)
        out.write("\n" + table)
        if args.out is not None:
            out.write(f"\n[lens] table written to {args.out}; paste it into the rig file\n")
    elif args.out is None:  # --quiet: the table still goes to stdout when it is written nowhere
        out.write(table)
    return 0


# ---------------------------------------------------------------------------------------------
# Entry point


def _save_traceback(exc: BaseException, out_dir: str | None) -> Path:
    from fallcam.atomic import atomic_write_text

    stamp = datetime.datetime.now(datetime.timezone.utc).strftime("%Y%m%dT%H%M%S")
    name = f"fallcam-traceback-{stamp}-{os.getpid()}.txt"
    text = "".join(traceback.format_exception(exc))
    if out_dir:
        try:
            Path(out_dir).mkdir(parents=True, exist_ok=True)
            return atomic_write_text(Path(out_dir) / name, text)
        except OSError:
            pass
    return atomic_write_text(Path(tempfile.gettempdir()) / name, text)


def _report_error(exc: BaseException, args: argparse.Namespace | None, err: TextIO) -> int:
    code = exit_code_for(exc)
    debug = bool(args is not None and getattr(args, "debug", False))
    if debug:
        err.write("".join(traceback.format_exception(exc)))
    if code == EXIT_INTERRUPTED:
        if getattr(args, "command", None) == "batch":
            err.write(f"{_PROG}: error: interrupted; clips that finished are kept, the others left "
                      "nothing behind\nhint: run the same command again to continue\n")
        else:
            err.write(f"{_PROG}: error: interrupted; no partial results were written\n")
        return code
    message = error_line(exc)
    if code == EXIT_INTERNAL and not debug:
        out_dir = getattr(args, "out", None)
        if getattr(args, "command", None) == "lens":  # its --out is a file: keep the traceback beside it
            out_dir = str(Path(out_dir).parent) if out_dir and Path(out_dir).parent.is_dir() else None
        saved = _save_traceback(exc, out_dir)
        message += f" (traceback saved to {saved})"
    err.write(f"{_PROG}: error: {message}\n")
    hint = getattr(exc, "hint", None)
    if code == EXIT_INTERNAL:
        hint = "this is a bug in fallcam; please report it with the traceback file"
    if hint:
        err.write(f"hint: {' '.join(str(hint).split())}\n")
    return code


def main(argv: Sequence[str] | None = None) -> int:
    """Run the ``fallcam`` command line.

    Parameters
    ----------
    argv : sequence of str, optional
        Arguments without the program name; ``sys.argv[1:]`` when None.

    Returns
    -------
    int
        The exit status (INTERFACE.md): 0 ok, 1 internal error, 2 usage, 3 clip unusable,
        4 no usable track, 130 interrupted, 141 stdout closed by its reader. The console script
        passes it to ``sys.exit``.
    """
    out, err = sys.stdout, sys.stderr
    args: argparse.Namespace | None = None
    try:
        words = list(sys.argv[1:] if argv is None else argv)
        command = next((w for w in words if not w.startswith("-")), None)
        args = build_parser(command if command in COMMANDS else "").parse_args(words)
        args.command_line = shlex.join([_PROG, *words])  # recorded in summary.json
        func: Callable[[argparse.Namespace, TextIO], int] = args.func
        return func(args, out)
    except SystemExit as exc:  # --help, --version
        return exc.code if isinstance(exc.code, int) else (0 if exc.code is None else EXIT_USAGE)
    except BrokenPipeError as exc:
        if not _stdout_gone(out):
            return _report_error(exc, args, err)
        return EXIT_BROKEN_PIPE
    except BaseException as exc:  # noqa: BLE001 — every failure becomes one line and a code
        return _report_error(exc, args, err)


def _stdout_gone(out: TextIO) -> bool:
    """True when stdout is a pipe whose reader went away (a broken pipe elsewhere, a socket of a
    cluster, is a real error); stdout is then pointed at /dev/null so that the interpreter's own
    final flush stays quiet."""
    try:
        fd = out.fileno()
    except (AttributeError, OSError, ValueError):  # not a real file (in-process callers)
        fd = None
    if fd is None:
        try:
            out.flush()
        except BrokenPipeError:
            return True
        return False
    import select

    if not hasattr(select, "poll"):  # no poll (Windows): a broken pipe is then taken as stdout's
        return True
    poller = select.poll()
    poller.register(fd, select.POLLOUT)
    if not any(event & select.POLLERR for _, event in poller.poll(0)):
        return False
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, fd)
    os.close(devnull)
    return True
