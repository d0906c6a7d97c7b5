"""The batch job: many clips, on local worker processes or a Dask cluster, resumable.

Every video under a folder (or matching a glob) is steadied or measured, with its report; a
summary CSV and an HTML page link each clip's report.

Outputs mirror the input tree under the output folder: ``ROOT/a/b/flight.mp4`` gives
``OUT/a/b/flight.steady.mp4``, ``flight.motion.csv`` / ``.json`` and the report files, so clips
of equal names in different folders never collide; clips of equal names in the same folder
(``flight.mp4``, ``flight.mov``) keep their extension in NAME (``flight.mov.steady.mp4``).

A clip is done when its motion log JSON records the source's size and modification time
(``source.size_bytes``, ``source.mtime_ns``), the same kind of job (``batch.job``) and the
same settings, and every output is there. A clip's outputs (video, log, report) are published
together, so a log that records the source never stands without the rest. Such a clip is
skipped; ``force`` redoes it. One clip's failure never stops the others.

A clip measured again with ``measure_only`` where an earlier run steadied it loses that
steadied video (and its side-by-side comparison) once the new log and report are written: the
new log no longer describes it, and the batch owns its output folder. A warning names each
file removed.
"""

from __future__ import annotations

import csv
import fnmatch
import glob
import io
import json
import logging
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import cv2

from ..config import Settings, setting_label
from ..errors import StabilizeError
from ..io import all_or_nothing, write_text_atomic
from ..io.motion_log_files import save_log
from ..runner import default_workers, parallel_map
from .analysis import measure_clip
from .batch_page import summary_html
from .outputs import (
    check_job_outputs,
    check_outputs,
    clip_files,
    compare_video,
    plan_outputs,
    report_files,
    steady_video,
)
from .rendering import steady_clip
from .report import find_videos, report_for_log

__all__ = [
    "COLUMNS", "FIGURES", "VIDEO_EXTENSIONS", "BatchResult", "ClipJob", "ClipResult",
    "done_before", "find_clips", "fingerprint", "output_names", "process_clip", "run_batch",
    "spreadsheet_safe", "summary_csv", "summary_html",
]

_log = logging.getLogger("stabilize")

#: File endings taken as video (compared case-insensitively).
VIDEO_EXTENSIONS = frozenset({
    ".mp4", ".m4v", ".mov", ".mkv", ".avi", ".mts", ".m2ts", ".ts", ".webm", ".mpg",
    ".mpeg", ".wmv", ".flv", ".3gp", ".mxf", ".dv", ".ogv", ".insv", ".lrv",
})

FIGURES = ("jitter_rms_x_px", "jitter_rms_y_px", "jitter_rms_rot_deg", "jitter_rms_x_deg",
           "jitter_rms_y_deg", "dominant_hz_x", "dominant_hz_y", "dominant_hz_rot",
           "stability_translation", "stability_rotation", "cropping_ratio", "distortion",
           "frames_weak", "frames_failed", "cuts")
COLUMNS = ("clip", "status", "error", "frames", *FIGURES, "trust", "trust_reasons", "video",
           "log", "report", "warnings")
#: Settings that do not change the outputs, left out when deciding whether a clip is done.
_NOT_OUTPUT = ("force", "quiet")

ProgressFactory = Callable[[str, int | None], Any]


# ------------------------------------------------------------------- finding
def find_clips(spec: str | os.PathLike, out_dir: Path | None = None) -> tuple[Path, list[Path]]:
    """The root the outputs mirror, and the video files under a folder (recursively) or
    matching a glob (``**`` allowed), sorted. Hidden files and anything inside ``out_dir``
    are left out (a batch never takes its own outputs as inputs)."""
    spec = str(spec)
    p = Path(spec)
    if p.is_dir():
        root, found = p, _walk(p)
    elif glob.has_magic(spec):
        parts = p.parts
        plain = [q for q in parts[: next(i for i, q in enumerate(parts) if glob.has_magic(q))]]
        root = Path(*plain) if plain else Path(".")
        if "**" in parts:
            # glob's own "**" follows links with no guard against a loop: walk instead.
            pattern = parts[len(plain):]
            found = [q for q in (_walk(root) if root.is_dir() else [])
                     if _matches(q.relative_to(root).parts, pattern)]
        else:
            found = [Path(q) for q in glob.glob(spec) if Path(q).is_file()]
    elif p.is_file():
        root, found = p.parent, [p]
    else:
        raise StabilizeError(f"{spec}: no such folder or file, and not a glob pattern")
    out = out_dir.resolve() if out_dir else None
    clips = []
    seen: set[tuple[int, int]] = set()
    # Shortest spelling first, so a file reached through links keeps its plainest name.
    for q in sorted(found, key=lambda q: (len(q.parts), str(q))):
        if q.suffix.lower() not in VIDEO_EXTENSIONS or q.name.startswith("."):
            continue
        try:
            st = q.stat()
        except OSError:
            continue
        if (st.st_dev, st.st_ino) in seen:  # the same file again, through a link
            continue
        seen.add((st.st_dev, st.st_ino))
        if not _utf8(str(q)):
            _log.warning("%s: the file name is not valid UTF-8; skipped (rename it to "
                         "process it)", _printable(str(q)))
            continue
        rq = q.resolve()
        if out is not None and (rq == out or out in rq.parents):
            continue
        clips.append(q)
    if not clips:
        raise StabilizeError(f"{spec}: no video files found (looked for "
                             f"{', '.join(sorted(VIDEO_EXTENSIONS))})")
    return root, sorted(clips)


def _walk(top: Path) -> list[Path]:
    """Every file under ``top``, following links to folders but entering each real folder
    once (a link that loops back is not followed again)."""
    found: list[Path] = []
    visited: set[tuple[int, int]] = set()
    for folder, dirs, files in os.walk(top, followlinks=True):
        try:
            st = os.stat(folder)
        except OSError:
            dirs[:] = []
            continue
        if (st.st_dev, st.st_ino) in visited:
            dirs[:] = []
            continue
        visited.add((st.st_dev, st.st_ino))
        dirs.sort()
        found += [Path(folder, f) for f in files if os.path.isfile(os.path.join(folder, f))]
    return found


def _matches(parts: tuple[str, ...], pattern: tuple[str, ...]) -> bool:
    """Whether a relative path matches a glob pattern, part by part; ``**`` stands for any
    number of folders and a wildcard does not match a leading dot, as in :mod:`glob`."""
    if not pattern:
        return not parts
    head, rest = pattern[0], pattern[1:]
    if head == "**":
        return any(_matches(parts[i:], rest) for i in range(len(parts) + 1)
                   if not any(p.startswith(".") for p in parts[:i]))
    if not parts:
        return False
    if parts[0].startswith(".") and not head.startswith("."):
        return False
    return fnmatch.fnmatchcase(parts[0], head) and _matches(parts[1:], rest)


def _utf8(text: str) -> bool:
    """Whether a path as the system gave it is valid UTF-8 (no undecodable bytes)."""
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        return False
    return True


def _printable(text: str) -> str:
    """A path with undecodable bytes shown as ``\\xNN``, for a message."""
    return os.fsencode(text).decode("utf-8", "backslashreplace")


def output_names(root: Path, clips: list[Path]) -> dict[Path, tuple[Path, str]]:
    """Each clip's output folder relative to the out dir, and its NAME."""
    rroot = root.resolve()
    out: dict[Path, tuple[Path, str]] = {}
    stems: dict[tuple[Path, str], int] = {}
    for c in clips:
        try:
            rel = c.resolve().parent.relative_to(rroot)
        except ValueError:  # a glob that climbs out of its plain prefix
            rel = Path(*[q for q in c.resolve().parent.parts[1:]])
        key = (rel, c.stem.lower())
        stems[key] = stems.get(key, 0) + 1
        out[c] = (rel, c.stem)
    for c, (rel, stem) in out.items():
        if stems[(rel, stem.lower())] > 1:
            out[c] = (rel, c.name)
    return out


# ------------------------------------------------------------------ one clip
@dataclass(frozen=True)
class ClipJob:
    """One clip and where its outputs go; plain data for a worker process or a cluster."""

    clip: str
    label: str
    folder: str
    name: str
    settings: Settings
    measure_only: bool

    @property
    def job(self) -> str:
        return "measure" if self.measure_only else "steady"

    def outputs(self) -> dict[str, Path]:
        """The clip's files by role (:func:`stabilize.jobs.outputs.clip_files`)."""
        return clip_files(Path(self.folder), self.name, with_video=not self.measure_only)


@dataclass
class ClipResult:
    """One row of the summary."""

    clip: str
    status: str
    error: str = ""
    summary: dict[str, Any] = field(default_factory=dict)
    outputs: dict[str, str] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)

    def row(self, out_dir: Path) -> dict[str, Any]:
        def rel(key: str) -> str:
            p = self.outputs.get(key)
            return os.path.relpath(p, out_dir) if p else ""

        row = {"clip": self.clip, "status": self.status, "error": self.error,
               "frames": self.summary.get("frames", "")}
        for k in FIGURES:
            v = self.summary.get(k)
            row[k] = "" if v is None else (repr(float(v)) if isinstance(v, float) else v)
        trust = self.summary.get("trust")
        row.update(trust=trust if isinstance(trust, str) else "",
                   trust_reasons="; ".join(str(r) for r in self.summary.get("trust_reasons")
                                           or []),
                   video=rel("video"), log=rel("log"), report=rel("report"),
                   warnings=" | ".join(self.warnings))
        return row


def fingerprint(clip: Path) -> dict[str, int]:
    """What identifies a source's content cheaply: its size and modification time."""
    st = clip.stat()
    return {"size_bytes": int(st.st_size), "mtime_ns": int(st.st_mtime_ns)}


def _comparable(settings: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in settings.items() if k not in _NOT_OUTPUT}


def done_before(job: ClipJob) -> ClipResult | None:
    """The earlier result when the clip's outputs are complete and match the source and the
    settings, else None."""
    outs = job.outputs()
    if not all(p.is_file() for p in outs.values()):
        return None
    try:
        doc = json.loads(outs["log_json"].read_text(encoding="utf-8"))
        fp = fingerprint(Path(job.clip))
    except (OSError, ValueError):
        return None
    src = doc.get("source") or {}
    if any(src.get(k) != v for k, v in fp.items()):
        return None
    if (doc.get("batch") or {}).get("job") not in (job.job, "steady"):
        return None
    if _comparable(doc.get("settings") or {}) != _comparable(job.settings.to_dict()):
        return None
    return ClipResult(job.label, "skipped", summary=doc.get("summary") or {},
                      outputs={k: str(v) for k, v in outs.items()})


class _Collect(logging.Handler):
    def __init__(self) -> None:
        super().__init__(logging.WARNING)
        self.messages: list[str] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.messages.append(record.getMessage())


def _do_clip(job: ClipJob, clip: Path, settings: Settings) -> dict:
    """The clip's log and report, published together; returns the log's summary. The log
    records the source's fingerprint, which marks the clip as done (:func:`done_before`)."""
    outs = job.outputs()
    stamp = dict(source_extra=fingerprint(clip), extra={"batch": {"job": job.job}})
    with all_or_nothing():
        if job.measure_only:
            motion = measure_clip(clip, settings, None, **stamp)
            save_log(motion, outs["log"])
        else:
            outputs = plan_outputs(clip, video_out=outs["video"], log_out=outs["log"],
                                   with_video=True, compare=settings.compare)
            check_job_outputs(clip, outputs, settings.force)
            motion = steady_clip(clip, outputs, settings, **stamp)
        folder = Path(job.folder)
        videos = find_videos(motion, None, outs["log"], job.name)
        files = report_files(folder, job.name, frames=videos[0] is not None, log=False)
        check_outputs([p for p in (outs["log"], outs["log_json"], *videos) if p is not None],
                      files, settings.force)
        report_for_log(motion, settings, files, name=job.name, log_csv=outs["log"],
                       clip=videos[0], steadied=videos[1])
    if job.measure_only:
        _remove_stale_video(Path(job.folder), job.name)
    return motion.summary


def _remove_stale_video(folder: Path, name: str) -> None:
    """Remove the steadied video (and its comparison) an earlier steady run left beside a log
    just replaced by a measurement: the new log does not describe it."""
    video = steady_video(folder, name)
    for p in (video, compare_video(video)):
        if p.is_file():
            p.unlink()
            _log.warning("%s: removed: an earlier steadied video, which the new motion log "
                         "(measured only) no longer describes", p)


def process_clip(job: ClipJob) -> ClipResult:
    """Do one clip (``steady`` or ``measure``, then its report); never raises: a failure is a
    ``failed`` result with a one-line error. Warnings are returned, not printed, so the
    caller reports them (a worker process has no terminal of its own)."""
    logger = logging.getLogger("stabilize")
    collect = _Collect()
    # Only the collector hears the clip's messages: the caller reports them once. (Run in
    # the batch's own process, the command line's handler printed each one twice.)
    printing = logger.handlers[:]
    for handler in printing:
        logger.removeHandler(handler)
    logger.addHandler(collect)
    old_propagate, old_level = logger.propagate, logger.level
    logger.propagate = False
    if logger.level == logging.NOTSET or logger.level > logging.WARNING:
        logger.setLevel(logging.WARNING)
    clip = Path(job.clip)
    outs = job.outputs()
    try:
        Path(job.folder).mkdir(parents=True, exist_ok=True)
        # The batch owns its out dir: stale or partial outputs of its own are replaced.
        settings = job.settings.replace(force=True, quiet=True)
        summary = _do_clip(job, clip, settings)
        return ClipResult(job.label, "done", summary=summary,
                          outputs={k: str(v) for k, v in outs.items()},
                          warnings=collect.messages)
    except StabilizeError as exc:
        return ClipResult(job.label, "failed", error=str(exc), warnings=collect.messages)
    except FileNotFoundError as exc:
        gone = exc.filename or job.clip
        return ClipResult(job.label, "failed", error=f"{gone}: no longer there (deleted or "
                          "moved during the batch)", warnings=collect.messages)
    except OSError as exc:  # the system refused a file operation: name the file
        return ClipResult(job.label, "failed", error=f"{exc.filename or job.clip}: "
                          f"{exc.strerror or exc}", warnings=collect.messages)
    except Exception as exc:  # one bad clip must not stop the others
        return ClipResult(job.label, "failed", error=f"internal error: {type(exc).__name__}: "
                          f"{exc}", warnings=collect.messages)
    finally:
        logger.removeHandler(collect)
        for handler in printing:
            logger.addHandler(handler)
        logger.propagate, logger.level = old_propagate, old_level


def _process_in_worker(job: ClipJob) -> ClipResult:
    # Workers share the cores: one OpenCV thread each, or they oversubscribe.
    cv2.setNumThreads(1)
    return process_clip(job)


# --------------------------------------------------------------------- batch
@dataclass
class BatchResult:
    """Rows in input order, and the summary files."""

    results: list[ClipResult]
    summary_csv: Path
    summary_html: Path

    def count(self, status: str) -> int:
        return sum(r.status == status for r in self.results)


def run_batch(inputs: str | os.PathLike, out_dir: str | os.PathLike, *,
              settings: Settings, measure_only: bool = False, workers: int | None = None,
              scheduler: str | None = None,
              progress: ProgressFactory | None = None) -> BatchResult:
    """Process every clip of ``inputs`` into ``out_dir``; see the module docstring."""
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise StabilizeError(f"{out}: not a folder (the batch's outputs need one)")
    workers = default_workers() if workers is None else int(workers)
    if workers < 1:
        raise StabilizeError(f"{setting_label('workers')}: {workers} is not a positive number")
    root, clips = find_clips(inputs, out)
    out.mkdir(parents=True, exist_ok=True)
    names = output_names(root, clips)
    jobs = []
    for c in clips:
        rel, name = names[c]
        label = str(Path(rel, c.name)) if str(rel) != "." else c.name
        jobs.append(ClipJob(str(c.resolve()), label, str((out / rel).resolve()), name,
                            settings, measure_only))
    results: list[ClipResult | None] = [None] * len(jobs)
    todo = []
    for i, job in enumerate(jobs):
        earlier = None if settings.force else done_before(job)
        if earlier is None:
            todo.append(i)
        else:
            results[i] = earlier
    bar = progress("clips", len(jobs)) if progress else None
    if bar is not None:
        bar.update(len(jobs) - len(todo))
    try:
        if todo and workers == 1 and scheduler is None:
            outcomes = ((k, process_clip(jobs[i])) for k, i in enumerate(todo))
        else:
            outcomes = parallel_map(_process_in_worker, [jobs[i] for i in todo],
                                    workers=workers, scheduler=scheduler)
        for k, outcome in outcomes:
            i = todo[k]
            if isinstance(outcome, BaseException):  # the worker itself died
                outcome = ClipResult(jobs[i].label, "failed", error=f"worker failed: "
                                     f"{type(outcome).__name__}: {outcome}")
            for message in outcome.warnings:
                _log.warning("%s", message)
            if outcome.status == "failed":
                _log.warning("%s: failed: %s", jobs[i].label, outcome.error)
            results[i] = outcome
            if bar is not None:
                bar.update(1)
    finally:
        if bar is not None:
            bar.close()
    done = [r for r in results if r is not None]
    csv_path, html_path = out / "summary.csv", out / "summary.html"
    write_text_atomic(csv_path, summary_csv(done, out))
    write_text_atomic(html_path, summary_html(done, out))
    return BatchResult(done, csv_path, html_path)


# ------------------------------------------------------------------- summary
def summary_csv(results: list[ClipResult], out_dir: Path) -> str:
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=COLUMNS, lineterminator="\n")
    writer.writeheader()
    for r in results:
        writer.writerow({k: spreadsheet_safe(v) if k in _TEXT_COLUMNS else v
                         for k, v in r.row(out_dir).items()})
    return buf.getvalue()


# Columns holding text from outside (file names, messages); the figures are numbers.
_TEXT_COLUMNS = ("clip", "status", "error", "trust", "trust_reasons", "video", "log", "report",
                 "warnings")
# What makes a spreadsheet read a cell as a formula (OWASP, "CSV Injection"; common practice).
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def spreadsheet_safe(cell: Any) -> Any:
    """A text cell a spreadsheet will show as text: one starting with ``= + - @``, a tab or a
    carriage return gets a leading apostrophe (``=1+1`` → ``'=1+1``); other cells unchanged.

    Parameters
    ----------
    cell : a cell's value.

    Returns
    -------
    The value to write.
    """
    if isinstance(cell, str) and cell.startswith(_FORMULA_START):
        return "'" + cell
    return cell

