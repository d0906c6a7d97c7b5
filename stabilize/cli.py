"""Command line: argument parsing and error reporting only; the work is in the jobs.

The only module that knows the flags: library messages name a setting (``setting 'margin'``),
and the errors printed here word it as its flag (``option --margin``). Errors a user can cause
print one line and exit with status 2; an interruption exits with 130.
"""

from __future__ import annotations

import argparse
import logging
import re
import signal
import sys
import threading
from typing import Any

from .config import (
    ANALYSIS_LEVELS,
    CODECS,
    FILLS,
    MODELS,
    OPTION_NAMES,
    PIN_OVERLAYS,
    SMOOTHERS,
    resolve_settings,
)
from .errors import StabilizeError
from .io import remove_temporaries, stop_children
from .jobs import make_report, measure_to_file, render, run_batch, run_demo, steady
from .report_page import dominant_text, fmt_sig
from .version import __version__

__all__ = ["EXIT_INTERRUPTED", "EXIT_OK", "EXIT_SOME_FAILED", "EXIT_USAGE", "build_parser",
           "flag_wording", "main", "run"]

EXIT_OK, EXIT_USAGE, EXIT_SOME_FAILED, EXIT_INTERRUPTED = 0, 2, 3, 130


class _Parser(argparse.ArgumentParser):
    """argparse that reports a usage error in one line (status 2), not a usage block."""

    def error(self, message: str) -> None:  # type: ignore[override]
        # Same prefix as every other error, so scripts can look for one pattern.
        text = " ".join(message.split())
        self.exit(EXIT_USAGE, f"stabilize: error: {text} (see '{self.prog} --help')\n")


def _add_common(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("options (also settable in a TOML config)")
    g.add_argument("--config", metavar="FILE_OR_PRESET",
                   help="TOML settings file, or the name of a preset in configs/")
    g.add_argument("--model", choices=MODELS, help="motion model fitted per frame")
    g.add_argument("--smoother", choices=SMOOTHERS, help="camera-path smoother")
    g.add_argument("--window-s", metavar="SECONDS", help="smoothing time scale in seconds")
    g.add_argument("--margin", metavar="auto|FRACTION",
                   help="fraction cut from each side to hide moved-in borders")
    g.add_argument("--fill", choices=FILLS, help="fill for uncovered pixels")
    g.add_argument("--pin-overlays", choices=PIN_OVERLAYS,
                   help="keep still regions unwarped where they are in the frame: found = "
                   "the burnt-in overlays the analysis found (default), all = those and the "
                   "--ignore regions, off = warp everything with the picture")
    g.add_argument("--analysis-width", metavar="PX",
                   help="width frames are reduced to for tracking (0 = full resolution)")
    g.add_argument("--analysis", choices=ANALYSIS_LEVELS,
                   help="effort spent tracking each frame: fast, balanced (default) or "
                        "thorough (most accurate, about twice the analysis time)")
    g.add_argument("--ignore", metavar="X,Y,W,H", action="append",
                   help="region excluded from tracking, full-resolution pixels (repeatable)")
    g.add_argument("--inlier-px", metavar="PX", help="consensus inlier threshold in pixels")
    g.add_argument("--confidence", metavar="P",
                   help="probability of drawing at least one all-inlier sample")
    g.add_argument("--max-rounds", metavar="N", help="cap on hypotheses per frame")
    g.add_argument("--seed", metavar="N", help="random seed (equal seeds, identical logs)")
    g.add_argument("--fov-deg", metavar="DEG", help="horizontal field of view in degrees")
    g.add_argument("--readout-ms", metavar="MS|auto",
                   help="rolling-shutter readout time, first row to last, in ms: 0 = global "
                   "shutter (default), auto = estimate it from the footage")
    g.add_argument("--shake-above-hz", metavar="HZ",
                   help="path motion above this frequency counts as shake")
    g.add_argument("--crf", metavar="N", help="encoder quality (lower is better)")
    g.add_argument("--preset", metavar="NAME", help="encoder speed preset")
    g.add_argument("--codec", choices=CODECS, help="output video codec")
    g.add_argument("--compare", action="store_const", const=True,
                   help="also write a side-by-side before/after video")
    g.add_argument("--force", action="store_const", const=True,
                   help="allow overwriting existing outputs (never the input)")
    g.add_argument("--quiet", action="store_const", const=True, help="no progress bars")
    g.add_argument("--debug", action="store_true", help="show a traceback on errors")


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

    p = sub.add_parser("steady", help="steady a clip and write its motion log")
    p.add_argument("clip")
    p.add_argument("-o", "--output", metavar="OUT", help="steadied video path")
    p.add_argument("--log", metavar="PATH.csv", help="motion log path")
    _add_common(p)

    p = sub.add_parser("measure", help="motion log and shake summary only, no video")
    p.add_argument("clip")
    p.add_argument("--log", metavar="OUT.csv", help="motion log path")
    p.add_argument("--workers", metavar="N",
                   help="analyse a long clip in segments on N single-core workers (same log "
                   "as one pass; 1 keeps the job to one core)")
    p.add_argument("--scheduler", metavar="ADDR",
                   help="run the segments on a Dask cluster: 'local' or tcp://HOST:PORT")
    _add_common(p)

    p = sub.add_parser("render", help="render a clip from an existing motion log")
    p.add_argument("clip")
    p.add_argument("--log", metavar="LOG", required=True, help="motion log (.csv) to use")
    p.add_argument("-o", "--output", metavar="OUT", help="steadied video path")
    _add_common(p)

    p = sub.add_parser("report", help="shake report: figures JSON, PNG plots, one HTML page")
    p.add_argument("clip_or_log", help="a motion log (.csv or its .json), or a clip")
    p.add_argument("--out", metavar="DIR", help="folder for the report (default: beside "
                   "the input)")
    _add_common(p)

    p = sub.add_parser("batch", help="many clips: outputs, summary.csv and summary.html")
    p.add_argument("inputs", metavar="DIR_OR_GLOB",
                   help="a folder (searched recursively) or a glob pattern such as "
                   "'flights/**/*.mp4' (quote it)")
    p.add_argument("--out-dir", metavar="DIR", required=True,
                   help="folder for every output; the input tree is mirrored inside it")
    p.add_argument("--workers", metavar="N",
                   help="clips done at once (default: the cores of this machine)")
    p.add_argument("--scheduler", metavar="ADDR",
                   help="run on Dask: 'local' starts a cluster here, tcp://HOST:PORT uses a "
                   "running one (its workers must see the same paths)")
    p.add_argument("--measure-only", action="store_true",
                   help="motion log and report only, no steadied video")
    _add_common(p)

    p = sub.add_parser("demo", help="steady the bundled demo clip")
    p.add_argument("--out", metavar="DIR", help="folder for the demo outputs "
                   "(default: ./stabilize-demo)")
    _add_common(p)
    return parser


_SETTING = re.compile(r"setting '([a-z_]+)'")


def flag_wording(message: str) -> str:
    """A library message with each ``setting 'name'`` worded as its flag, ``option --name``."""
    return _SETTING.sub(lambda m: "option --" + m.group(1).replace("_", "-"), message)


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


def _options(args: argparse.Namespace) -> dict[str, Any]:
    return {name: getattr(args, name) for name in OPTION_NAMES
            if getattr(args, name, None) is not None}


def _progress(quiet: bool):
    if quiet:
        return None
    from tqdm import tqdm  # lazy: progress bars only when they are shown

    def make(desc: str, total: int | None):
        return tqdm(desc=desc, total=total, unit="frame", file=sys.stderr, leave=False,
                    dynamic_ncols=True)

    return make


class _OneLine(logging.Formatter):
    def format(self, record: logging.LogRecord) -> str:
        level = "warning" if record.levelno >= logging.WARNING else "info"
        return f"stabilize: {level}: {record.getMessage()}"


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
                     dominant_text(summary, axis, lambda hz: cell(hz, "Hz"))))
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
        report = make_report(args.clip_or_log, args.out, config=args.config,
                             progress=progress, **opts)
        _print_summary(report.summary)
        _report_files(report)
    elif args.command == "batch":
        workers = _whole_number("--workers", args.workers)
        clip_bar = None
        if progress is not None:
            from tqdm import tqdm  # lazy: progress bars only when they are shown

            def clip_bar(desc: str, total: int | None):
                return tqdm(desc=desc, total=total, unit="clip", file=sys.stderr,
                            leave=False, dynamic_ncols=True)
        settings = resolve_settings(args.config, opts)
        result = run_batch(args.inputs, args.out_dir, settings=settings,
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
        motion, report = run_demo(args.out, config=args.config, progress=progress, **opts)
        _report_written(motion)
        _report_files(report)
        print("demo done: the clip is an invented, procedurally drawn scene")
    return EXIT_OK


def _report_files(report) -> None:
    for note in report.notes:
        print(f"note: {note}")
    labels = {"json": "figures", "html": "report", "log_csv": "motion log",
              "log_json": "motion log"}
    for role, path in report.outputs.items():
        print(f"{labels.get(role, 'plot')}: {path}")


def _report_written(motion) -> None:
    labels = {"video": "video", "compare": "compare", "log_csv": "motion log",
              "log_json": "motion log"}
    for key, path in motion.extra.get("outputs", {}).items():
        print(f"{labels.get(key, key)}: {path}")


def _on_signal(signum, frame) -> None:
    # SIGINT and SIGTERM alike unwind the stack as an interruption, so every ``finally`` and
    # context manager on the way out stops its ffmpeg and removes its temporaries. Further
    # ones are ignored from here on (main puts the handlers back): a second Ctrl-C would cut
    # that clean-up short and print a traceback.
    for sig in (signal.SIGINT, signal.SIGTERM):
        signal.signal(sig, signal.SIG_IGN)
    raise KeyboardInterrupt


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
        stop_children()
        remove_temporaries()
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
    if threading.current_thread() is threading.main_thread():  # only it may set handlers
        previous = {sig: signal.signal(sig, _on_signal) for sig in (signal.SIGINT, signal.SIGTERM)}
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
        print("stabilize: interrupted; no partial outputs were left", file=sys.stderr)
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
