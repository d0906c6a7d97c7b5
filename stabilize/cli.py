"""Command line: argument parsing and error reporting only; the work is in the jobs.

The only module that knows the flags: library messages name a setting (``setting 'margin'``),
and the errors printed here word it as its flag (``option --margin``). Errors a user can cause
print one line and exit with status 2; an interruption exits with 130.
"""

from __future__ import annotations

import argparse
import faulthandler
import logging
import os
import re
import signal
import sys
import threading
from typing import Any

from . import jobs
from .config import (
    ANALYSIS_LEVELS,
    CODECS,
    FILLS,
    MODELS,
    OPTION_NAMES,
    PIN_OVERLAYS,
    PLAIN_SURROUND,
    SMOOTHERS,
    resolve_settings,
)
from .errors import StabilizeError
from .io import remove_temporaries, stop_children
from .jobs import measure_to_file, render, steady
from .report_page import dominant_text, fmt_sig, hz_text
from .version import __version__

__all__ = ["EXIT_INTERRUPTED", "EXIT_OK", "EXIT_SOME_FAILED", "EXIT_USAGE", "STOP_GRACE_S",
           "build_parser", "flag_wording", "main", "run"]

EXIT_OK, EXIT_USAGE, EXIT_SOME_FAILED, EXIT_INTERRUPTED = 0, 2, 3, 130


class _Parser(argparse.ArgumentParser):
    """argparse that reports a usage error in one line (status 2), not a usage block."""

    def error(self, message: str) -> None:  # type: ignore[override]
        # Same prefix as every other error, so scripts can look for one pattern.
        text = " ".join(message.split())
        self.exit(EXIT_USAGE, f"stabilize: error: {text} (see '{self.prog} --help')\n")

    def parse_args(self, args=None, namespace=None):  # type: ignore[override]
        # An option the command does not use is named with the command, whose help lists
        # what it does use.
        ns, extras = self.parse_known_args(args, namespace)
        if extras:
            command = getattr(ns, "command", None)
            where = f"{self.prog} {command}" if command else self.prog
            self.exit(EXIT_USAGE, f"stabilize: error: unrecognized arguments: "
                      f"{' '.join(extras)[:200]} (not used by '{where}'; see '{where} --help')"
                      "\n")
        return ns


# ----------------------------------------------------------------- the options
# Each setting's flag and help, once. A command lists the settings it uses, by group
# (_COMMANDS); a setting it does not use is not accepted there. Every setting can also be
# given in a settings file (--settings).
_OPT: dict[str, tuple[tuple[str, ...], dict[str, Any]]] = {
    # analysis
    "model": (("--model",), dict(choices=MODELS, help="motion model fitted per frame")),
    "analysis": (("--analysis",), dict(
        choices=ANALYSIS_LEVELS, help="effort spent tracking each frame: fast, balanced "
        "(default) or thorough (most accurate, about twice the analysis time)")),
    "analysis_width": (("--analysis-width",), dict(
        metavar="PX", help="width frames are reduced to for tracking (0 = full resolution)")),
    "ignore": (("--ignore",), dict(
        metavar="X,Y,W,H", action="append",
        help="region excluded from tracking, full-resolution pixels (repeatable)")),
    "inlier_px": (("--inlier-px",), dict(metavar="PX",
                                         help="consensus inlier threshold in pixels")),
    "confidence": (("--confidence",), dict(
        metavar="P", help="probability of drawing at least one all-inlier sample")),
    "max_rounds": (("--max-rounds",), dict(metavar="N", help="cap on hypotheses per frame")),
    "seed": (("--seed",), dict(metavar="N",
                               help="random seed (equal seeds, identical logs)")),
    "readout_ms": (("--readout-ms",), dict(
        metavar="MS|auto", help="rolling-shutter readout time, first row to last, in ms: "
        "0 = global shutter (default), auto = estimate it from the footage")),
    "plain_surround": (("--plain-surround",), dict(
        choices=PLAIN_SURROUND, help="where the tracks cover only part of the picture and "
        "the rest is plain (a bare wall, a clear sky): hold = log no motion (default: the "
        "tracks may be an object before a still camera), follow = log the tracks' motion "
        "(a moving camera before a clear sky)")),
    "fov_deg": (("--fov-deg",), dict(metavar="DEG",
                                     help="horizontal field of view in degrees")),
    "shake_above_hz": (("--shake-above-hz",), dict(
        metavar="HZ", help="path motion above this frequency counts as shake")),
    # smoothing and framing
    "smoother": (("--smoother",), dict(choices=SMOOTHERS, help="camera-path smoother")),
    "window_s": (("--window-s",), dict(metavar="SECONDS",
                                       help="smoothing time scale in seconds")),
    "margin": (("--margin",), dict(
        metavar="auto|FRACTION", help="fraction cut from each side to hide moved-in borders")),
    "fill": (("--fill",), dict(choices=FILLS, help="fill for uncovered pixels")),
    "pin_overlays": (("--pin-overlays",), dict(
        choices=PIN_OVERLAYS, help="keep still regions unwarped where they are in the frame: "
        "found = the burnt-in overlays the analysis found (default), all = those and the "
        "--ignore regions, off = warp everything with the picture")),
    # output encoding
    "crf": (("--crf",), dict(metavar="N", help="encoder quality (lower is better)")),
    "preset": (("--preset",), dict(
        metavar="SPEED", help="encoder speed: ultrafast … veryslow (slower = smaller file)")),
    "codec": (("--codec",), dict(choices=CODECS, help="output video codec")),
    "compare": (("--compare",), dict(
        action="store_const", const=True,
        help="also write a before/after video, each half labelled "
        "(NAME.steady.compare.mp4)")),
    # run
    "settings": (("--settings",), dict(
        dest="config", metavar="FILE|NAME", help="settings file (TOML), or the name of one "
        "in configs/ such as drone-inspection; flags win over it")),
    "force": (("--force",), dict(action="store_const", const=True,
                                 help="allow overwriting existing outputs (never the input)")),
    "quiet": (("--quiet",), dict(
        action="store_const", const=True, help="no progress bars and no info or note lines "
        "(warnings and errors still print; results on stdout are unchanged)")),
    "debug": (("--debug",), dict(action="store_true", help="show a traceback on errors")),
}

_ANALYSIS = ("model", "analysis", "analysis_width", "ignore", "inlier_px", "confidence",
             "max_rounds", "seed", "readout_ms", "plain_surround", "fov_deg",
             "shake_above_hz")
_SMOOTHING = ("smoother", "window_s", "margin", "fill", "pin_overlays")
_ENCODING = ("crf", "preset", "codec", "compare")
_RUN = ("settings", "force", "quiet", "debug")

#: The option groups of each command: (group title, its settings). The files each command
#: reads and writes are added by :func:`_files`; ``--workers`` and ``--scheduler`` by
#: :func:`_run_extra`.
_COMMANDS: dict[str, tuple[tuple[str, tuple[str, ...]], ...]] = {
    "steady": (("analysis", _ANALYSIS), ("smoothing and framing", _SMOOTHING),
               ("output encoding", _ENCODING), ("run", _RUN)),
    "measure": (("analysis", _ANALYSIS), ("run", _RUN)),
    # A render re-uses the log's motion: only the settings that act after the analysis.
    "render": (("smoothing and framing", ("model", *_SMOOTHING)),
               ("figures", ("fov_deg", "shake_above_hz")), ("output encoding", _ENCODING),
               ("run", _RUN)),
    "report": (("analysis", _ANALYSIS), ("run", _RUN)),
    "batch": (("analysis", _ANALYSIS), ("smoothing and framing", _SMOOTHING),
              ("output encoding", _ENCODING), ("run", _RUN)),
    # The demo replaces its own earlier outputs: no --force.
    "demo": (("analysis", _ANALYSIS), ("smoothing and framing", _SMOOTHING),
             ("output encoding", _ENCODING), ("run", ("settings", "quiet", "debug"))),
}

#: Help worded for one command where the common wording would mislead.
_HELP_FOR = {
    ("render", "model"): "motion model the path is smoothed in (default: the log's)",
}

#: A group's note for one command.
_GROUP_NOTE = {
    ("report", "analysis"): "Used when the input is a clip with no motion log beside it, "
                            "measured first; --fov-deg and --shake-above-hz also override "
                            "a log's own.",
    ("render", "smoothing and framing"): "The log's own settings unless given here.",
}

_HELP = {
    "steady": "steady a clip and write its motion log",
    "measure": "motion log and shake summary only, no video",
    "render": "render a clip from an existing motion log",
    "report": "shake report: figures JSON, PNG plots, one HTML page",
    "batch": "many clips: outputs, summary.csv and summary.html",
    "demo": "steady the bundled demo clip and write its report",
}


def _hidden(group: argparse._ArgumentGroup, *flags: str, dest: str) -> None:
    """An old spelling of an option, still accepted, not shown in the help."""
    group.add_argument(*flags, dest=dest, help=argparse.SUPPRESS)


def _files(name: str, p: argparse.ArgumentParser) -> None:
    """The files a command reads (input) and writes (output)."""
    g_in = p.add_argument_group("input")
    g_out = p.add_argument_group("output")
    if name in ("steady", "measure", "render"):
        g_in.add_argument("clip", help="the video clip")
    if name == "render":
        g_in.add_argument("--log", metavar="LOG.csv", required=True,
                          help="motion log to render from (read, never changed; the new "
                          "log is written beside the video)")
    if name in ("steady", "render"):
        g_out.add_argument("-o", "--output", metavar="VIDEO", help="steadied video path "
                           "(default NAME.steady.mp4 beside the input); the motion log goes "
                           "beside it, named after it")
    if name in ("steady", "measure"):
        g_out.add_argument("--log", metavar="OUT.csv", help="where to write the motion log "
                           "(default NAME.motion.csv; its .json beside it)")
    if name == "report":
        g_in.add_argument("clip_or_log", help="a motion log (.csv or its .json), or a clip")
    if name == "batch":
        g_in.add_argument("inputs", metavar="DIR_OR_GLOB",
                          help="a folder (searched recursively) or a glob pattern such as "
                          "'flights/**/*.mp4' (quote it)")
    folder_help = {
        "report": "folder for the report (default: beside the input; created when missing)",
        "batch": "folder for every output (required); the input tree is mirrored inside it "
                 "(created when missing)",
        "demo": "folder for the demo outputs (default: ./stabilize-demo; earlier demo "
                "outputs there are replaced)",
    }
    if name in folder_help:
        # Required for batch, checked in run(): the old spelling --out may give it too.
        g_out.add_argument("--out-dir", metavar="DIR", help=folder_help[name])
        _hidden(g_out, "--out", dest="out_dir")
    if name == "batch":
        g_out.add_argument("--measure-only", action="store_true",
                           help="motion log and report only, no steadied video (an earlier "
                           "steadied video of a clip measured again is removed)")


def _run_extra(name: str, g: argparse._ArgumentGroup) -> None:
    """``--workers`` and ``--scheduler``, worded for the command."""
    if name == "measure":
        g.add_argument("--workers", metavar="N",
                       help="analyse a long clip in segments on N single-core workers (same "
                       "log as one pass; 1 keeps the job to one core)")
        g.add_argument("--scheduler", metavar="ADDR",
                       help="run the segments on a Dask cluster: 'local' or tcp://HOST:PORT")
    elif name == "batch":
        g.add_argument("--workers", metavar="N",
                       help="clips done at once (default: the cores of this machine)")
        g.add_argument("--scheduler", metavar="ADDR",
                       help="run on Dask: 'local' starts a cluster here, tcp://HOST:PORT uses "
                       "a running one (its workers must see the same paths)")


def _add_command(sub: Any, name: str) -> argparse.ArgumentParser:
    p = sub.add_parser(name, help=_HELP[name], description=_HELP[name] + ".")
    _files(name, p)
    for title, settings in _COMMANDS[name]:
        g = p.add_argument_group(title, _GROUP_NOTE.get((name, title)))
        for setting in settings:
            flags, kwargs = _OPT[setting]
            if (name, setting) in _HELP_FOR:
                kwargs = kwargs | {"help": _HELP_FOR[name, setting]}
            g.add_argument(*flags, **kwargs)
        if title == "run":
            _run_extra(name, g)
            if "settings" in settings:
                _hidden(g, "--config", dest="config")
    return p


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="stabilize",
        description="Steady shaky video, measure the camera shake, write a per-frame motion log.",
        epilog="Steadied footage is warped footage: it can hide or invent motion and is no "
               "substitute for inspection by qualified people or for calibrated measurement. "
               "Shake faster than half the frame rate cannot be measured from video. Flying is "
               "governed by local aviation rules.",
    )
    parser.add_argument("--version", action="version", version=f"stabilize {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    for name in _COMMANDS:
        _add_command(sub, name)
    return parser


_SETTING = re.compile(r"setting '([a-z_]+)'")


def flag_wording(message: str) -> str:
    """A library message with each ``setting 'name'`` worded as its flag, ``option --name``."""
    return _SETTING.sub(lambda m: "option --" + _FLAG_NAMES.get(m.group(1), m.group(1))
                        .replace("_", "-"), message)


#: Settings whose flag is not their name spelt with dashes.
_FLAG_NAMES = {"config": "settings"}


#: Most workers a run may ask for: each is a process of its own.
MAX_WORKERS = 256


def _whole_number(flag: str, text: str | None, most: int = MAX_WORKERS) -> int | None:
    if text is None:
        return None
    try:
        value = int(text)
    except ValueError:
        value = 0
    if not 1 <= value <= most:
        raise StabilizeError(f"option {flag}: {text[:40]!r} is not allowed; use a whole number "
                             f"of at least 1 and at most {most}")
    return value


_SCHEDULER = re.compile(r"[a-z][a-z0-9+.-]*://\S+")


def _check_scheduler_form(address: str | None) -> None:
    """Refuse a ``--scheduler`` that is neither ``local`` nor an address, before any output is
    looked at (whether the address answers is checked when the work starts)."""
    if address is not None and address != "local" and not _SCHEDULER.fullmatch(address):
        raise StabilizeError(f"option --scheduler: {address[:60]!r} is not allowed; use "
                             "'local' or an address such as tcp://HOST:PORT")


def _options(args: argparse.Namespace) -> dict[str, Any]:
    return {name: getattr(args, name) for name in OPTION_NAMES
            if getattr(args, name, None) is not None}


def _progress(quiet: bool):
    """A progress-bar factory, or None: bars are drawn only on a terminal, never into a
    file or a pipe that stderr was sent to, and never with ``--quiet``."""
    if quiet or not _is_terminal(sys.stderr):
        return None
    from tqdm import tqdm  # lazy: progress bars only when they are shown

    def make(desc: str, total: int | None):
        return tqdm(desc=desc, total=total, unit="frame", file=sys.stderr, leave=False,
                    dynamic_ncols=True)

    return make


def _is_terminal(stream: Any) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):  # no isatty, or closed
        return False


class _OneLine(logging.Formatter):
    def format(self, record: logging.LogRecord) -> str:
        level = "warning" if record.levelno >= logging.WARNING else \
            "note" if getattr(record, "note", False) else "info"
        # Library messages name settings; on the command line they are options.
        return f"stabilize: {level}: {flag_wording(record.getMessage())}"


def _setup_logging(quiet: bool) -> None:
    logger = logging.getLogger("stabilize")
    logger.handlers.clear()
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(_OneLine())
    logger.addHandler(handler)
    logger.setLevel(logging.WARNING if quiet else logging.INFO)
    logger.propagate = False


def _print_summary(summary: dict) -> None:
    """The shake figures as a short table, three significant digits (no false precision)."""
    def cell(v: Any, unit: str) -> str:
        text = fmt_sig(v)
        return text if text == "n/a" else f"{text} {unit}"

    n = summary.get("frames", 0)
    weak, failed = summary.get("frames_weak", 0), summary.get("frames_failed", 0)
    fps, nyquist = summary.get("fps"), summary.get("nyquist_hz")
    rate = "" if fps is None else f" at {fmt_sig(fps)} fps"
    nominal = summary.get("fps_nominal")
    if fps is not None and summary.get("timestamps_irregular"):
        rate += f" on average, irregular times (container: {fmt_sig(nominal)} fps)"
    elif fps is not None and nominal and abs(nominal - fps) > 1e-3 * nominal:
        rate += f" (container: {fmt_sig(nominal)} fps)"
    missing = summary.get("frames_missing") or 0
    if missing:
        rate += f", {missing} missing"
    share = "" if not n else f", {100.0 * (weak + failed) / n:.1f} % weak or failed"
    print(f"frames: {n}{rate} (weak {weak}, failed {failed}, cuts {summary.get('cuts', 0)}"
          f"{share})")
    above = summary.get("shake_above_hz")
    if above is not None and nyquist is not None:
        print(f"shake: motion above {fmt_sig(above)} Hz; nothing faster than "
              f"{fmt_sig(nyquist)} Hz (Nyquist) can be measured")
    rows = [("", "rms", "angle", "peak-to-peak", "dominant")]
    for axis, label in (("x", "shake x"), ("y", "shake y"), ("rot", "shake rotation")):
        unit = "deg" if axis == "rot" else "px"
        angle = "" if axis == "rot" else cell(summary.get(f"jitter_rms_{axis}_deg"), "deg")
        rows.append((label, cell(summary.get(f"jitter_rms_{axis}_{unit}"), unit), angle,
                     cell(summary.get(f"jitter_p2p_{axis}_{unit}"), unit),
                     dominant_text(summary, axis, lambda hz: hz_text(
                         hz, summary.get("spectrum_resolution_hz")).replace("\u00a0", " "))))
    widths = [max(len(r[k]) for r in rows) for k in range(5)]
    for r in rows:
        print("  ".join([r[0].ljust(widths[0])] + [c.rjust(w) for c, w in
                                                     zip(r[1:], widths[1:], strict=True)])
              .rstrip())
    for suffix, label in (("", "as shot"), ("_in", "as shot"), ("_out", "steadied")):
        tr = summary.get(f"stability_translation{suffix}")
        rot = summary.get(f"stability_rotation{suffix}")
        if tr is not None or rot is not None:
            print(f"stability ({label}, 1 = steady): translation {fmt_sig(tr)}, "
                  f"rotation {fmt_sig(rot)}")
    if summary.get("trust") is not None:
        print(f"verdict: {summary['trust']}")
        for reason in summary.get("trust_reasons") or []:
            print(f"  - {reason}")


def run(args: argparse.Namespace) -> int:
    """Run one parsed command; returns the exit status."""
    opts = _options(args)
    progress = _progress(bool(args.quiet))
    if args.command == "steady":
        motion = steady(args.clip, args.output, log_path=args.log, config=args.config,
                        progress=progress, **opts)
        _report_written(motion)
    elif args.command == "measure":
        workers = _whole_number("--workers", args.workers)
        _check_scheduler_form(args.scheduler)
        motion, outputs = measure_to_file(args.clip, args.log, config=args.config,
                                          progress=progress, workers=workers,
                                          scheduler=args.scheduler, **opts)
        _print_summary(motion.summary)
        print(f"motion log: {outputs.log_csv}")
        print(f"motion log: {outputs.log_json}")
    elif args.command == "render":
        motion = render(args.clip, args.log, args.output, config=args.config,
                        progress=progress, **opts)
        _report_written(motion)
    elif args.command == "report":
        report = jobs.make_report(args.clip_or_log, args.out_dir, config=args.config,
                             progress=progress, **opts)
        _print_summary(report.summary)
        _report_files(report)
    elif args.command == "batch":
        if not args.out_dir:
            raise StabilizeError("option --out-dir is required: the folder for every output")
        workers = _whole_number("--workers", args.workers)
        _check_scheduler_form(args.scheduler)
        clip_bar = None
        if progress is not None:
            from tqdm import tqdm  # lazy: progress bars only when they are shown

            def clip_bar(desc: str, total: int | None):
                return tqdm(desc=desc, total=total, unit="clip", file=sys.stderr,
                            leave=False, dynamic_ncols=True)
        settings = resolve_settings(args.config, opts)
        result = jobs.run_batch(args.inputs, args.out_dir, settings=settings,
                           measure_only=args.measure_only, workers=workers,
                           scheduler=args.scheduler, progress=clip_bar)
        for r in result.results:
            print(f"{r.status}: {r.clip}" + (f": {r.error}" if r.error else ""))
        print(f"clips: {len(result.results)} ({result.count('done')} done, "
              f"{result.count('skipped')} skipped, {result.count('failed')} failed)")
        print(f"summary: {result.summary_csv}")
        print(f"summary: {result.summary_html}")
        if result.count("failed"):
            return EXIT_SOME_FAILED
    elif args.command == "demo":
        motion, report = jobs.run_demo(args.out_dir, config=args.config, progress=progress, **opts)
        _report_written(motion)
        _report_files(report)
        print("demo done: the clip is an invented, procedurally drawn scene")
    return EXIT_OK


def _report_files(report) -> None:
    # Notes are remarks on how far the figures can be trusted, for people: on stderr with the
    # info lines (and silenced with them by --quiet); stdout lists only the files written.
    for note in report.notes:
        logging.getLogger("stabilize").info("%s", note, extra={"note": True})
    labels = {"json": "figures", "html": "report", "log_csv": "motion log",
              "log_json": "motion log"}
    for role, path in report.outputs.items():
        print(f"{labels.get(role, 'plot')}: {path}")


def _report_written(motion) -> None:
    labels = {"video": "video", "compare": "compare", "log_csv": "motion log",
              "log_json": "motion log"}
    for key, path in motion.extra.get("outputs", {}).items():
        print(f"{labels.get(key, key)}: {path}")


#: Seconds an interrupted run may take to stop its ffmpeg children and remove its temporaries
#: on the way out (normally well under one) before the process ends itself outright.
STOP_GRACE_S = 10.0
_INTERRUPTED_LINE = "stabilize: interrupted; no partial outputs were left"


class _Interruption:
    """The SIGINT and SIGTERM handler :func:`main` installs.

    The first signal unwinds the stack as an interruption (``KeyboardInterrupt``), so every
    ``finally`` and context manager on the way out stops its ffmpeg and removes its
    temporaries. Further ones are ignored from here on (main puts the handlers back): a
    second Ctrl-C would cut that clean-up short and print a traceback.

    Run as the program (not :func:`main` called in-process), the first signal also starts a
    deadline: should the unwinding not end within :data:`STOP_GRACE_S` seconds (a thread or
    a child that no longer answers), a timer thread stops the children, removes the
    temporaries, prints the usual line and ends the process with status 130 itself. With
    ``debug`` it first prints every thread's stack, to show where the run was held up.
    """

    def __init__(self, *, program: bool, debug: bool) -> None:
        self.program, self.debug = program, debug
        self._said = threading.Lock()

    def __call__(self, signum, frame) -> None:
        for sig in (signal.SIGINT, signal.SIGTERM):
            signal.signal(sig, signal.SIG_IGN)
        if self.program:
            timer = threading.Timer(STOP_GRACE_S, self._end_outright)
            timer.daemon = True
            timer.start()
        raise KeyboardInterrupt

    def report(self, *, raw: bool = False) -> None:
        """Print the one line saying the run was interrupted (once, whoever asks first);
        ``raw`` writes it straight to the descriptor, past ``sys.stderr``'s lock, which a
        stuck main thread may hold."""
        if not self._said.acquire(blocking=False):
            return
        if raw:
            os.write(sys.stderr.fileno(), (_INTERRUPTED_LINE + "\n").encode())
        else:
            print(_INTERRUPTED_LINE, file=sys.stderr, flush=True)

    def _end_outright(self) -> None:
        if self.debug:
            faulthandler.dump_traceback(file=sys.stderr.fileno(), all_threads=True)
        # The clean-up runs in a thread of its own, so a lock a stuck thread holds cannot
        # hold up the exit too.
        last = threading.Thread(target=_stop_and_remove, daemon=True)
        last.start()
        last.join(timeout=5.0)
        self.report(raw=True)
        os._exit(EXIT_INTERRUPTED)


def _stop_and_remove() -> None:
    stop_children()
    remove_temporaries()


def _one_line(text: object) -> str:
    return " ".join(str(text).split())


def _clean_up() -> None:
    """Stop any ffmpeg still running and remove temporaries a failed run left behind.

    A no-op after a clean run. Signals are ignored meanwhile, so a second Ctrl-C cannot cut
    the clean-up short.
    """
    held = {}
    if threading.current_thread() is threading.main_thread():
        held = {sig: signal.signal(sig, signal.SIG_IGN) for sig in (signal.SIGINT, signal.SIGTERM)}
    try:
        _stop_and_remove()
    finally:
        for sig, handler in held.items():
            signal.signal(sig, handler)


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit status (0, 1, 2 or 130, as the contract says)."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # usage errors (status 2, one line), --help and --version (0)
        return exc.code if isinstance(exc.code, int) else EXIT_USAGE
    # Called in-process (tests, notebooks), main must leave the logger and the signal
    # handlers as it found them.
    logger = logging.getLogger("stabilize")
    saved_logging = (list(logger.handlers), logger.level, logger.propagate)
    _setup_logging(bool(getattr(args, "quiet", False)))
    debug = bool(getattr(args, "debug", False))
    previous = {}
    interruption = _Interruption(program=argv is None, debug=debug)
    if threading.current_thread() is threading.main_thread():  # only it may set handlers
        previous = {sig: signal.signal(sig, interruption)
                    for sig in (signal.SIGINT, signal.SIGTERM)}
    status = 1
    try:
        status = run(args)
    except StabilizeError as exc:
        status = EXIT_USAGE
        if debug:
            raise
        print(f"stabilize: error: {flag_wording(_one_line(exc))}", file=sys.stderr)
    except KeyboardInterrupt:
        status = EXIT_INTERRUPTED
        _clean_up()
        interruption.report()
    except BrokenPipeError:  # stdout closed early (``| head``): not a failure of the work
        status = EXIT_OK
    except OSError as exc:  # the system refused a file operation: name the file, status 2
        status = EXIT_USAGE
        if debug:
            raise
        where = f"{exc.filename}: " if exc.filename else ""
        print(f"stabilize: error: {where}{_one_line(exc.strerror or exc)}", file=sys.stderr)
    except Exception as exc:  # an unexpected fault: still one line unless --debug
        status = 1
        if debug:
            raise
        print(f"stabilize: internal error: {type(exc).__name__}: {_one_line(exc)} "
              "(run again with --debug for details)", file=sys.stderr)
    finally:
        if status != EXIT_OK:
            _clean_up()
        # Interrupted as the program itself (argv from the system), the process is about to
        # exit: more Ctrl-C's stay ignored, or one would land in the interpreter's exit.
        keep_ignoring = status == EXIT_INTERRUPTED and argv is None
        for sig, handler in previous.items():
            signal.signal(sig, signal.SIG_IGN if keep_ignoring else handler)
        logger.handlers[:] = saved_logging[0]
        logger.setLevel(saved_logging[1])  # setLevel, not .level: it also clears the cache
        logger.propagate = saved_logging[2]
    return status


if __name__ == "__main__":
    sys.exit(main())
