"""The measure job: analyse a clip into its per-frame motion and shake figures; the record a
job's motion log is assembled from, and the assembling.

The analysis is one streaming pass over a reduced grey copy of the clip (ffmpeg scales and
converts it), or several segments of it on workers; nothing holds the whole clip.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Callable
from contextlib import closing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .. import shake
from ..brightness import drift_px
from ..config import Settings, resolve_settings
from ..io import VideoInfo, iter_frames, probe
from ..io.decode import DecodeStats, analysis_size, looks_truncated
from ..motion import fit_motion, measurable
from ..motion_log import MotionLog, RowBands, frame_reasons, reason_codes
from ..motion_track import LOG_COLUMNS, MotionTrack
from ..rolling import RollingShutter, analyse_rolling, rolling_figures
from ..segments import fit_in_segments, single_pass_options
from ..steady_path import CorrectionPlan
from .figures import shake_summary, warn_if_irregular
from .outputs import Outputs, check_job_outputs, plan_outputs

__all__ = [
    "FrameMotion", "ProgressFactory", "measure_motion", "motion_from_track", "assemble_log",
    "excluded_regions", "measure", "measure_clip", "measure_to_file", "progress_bar", "source_dict",
]

_log = logging.getLogger("stabilize")

ProgressFactory = Callable[[str, int | None], Any]


class _NoBar:
    def update(self, n: int = 1) -> None:
        pass

    def close(self) -> None:
        pass


def progress_bar(progress: ProgressFactory | None, desc: str, total: int | None):
    """A bar from the caller's factory, or one that shows nothing."""
    return progress(desc, total) if progress else _NoBar()


@dataclass(frozen=True)
class FrameMotion:
    """Per-frame motion of a clip, as its analysis (or a saved log) gives it: the part of a
    motion log every job starts from.

    Arrays have one row per decoded frame (see :class:`stabilize.motion_log.MotionLog`);
    ``reasons`` holds each weak or failed frame's reason code ('' for none); ``source`` is the
    log's ``source`` block and ``extra`` its analysis keys (``excluded``, ``frame_reasons``);
    ``rolling`` the rolling-shutter analysis (None for a global shutter, readout 0);
    ``brightness_drift_px`` how far changes of brightness alone may have moved the logged
    path (:func:`stabilize.brightness.drift_px`; None when not known, as for a saved log).
    """

    time_s: np.ndarray
    matrices: np.ndarray
    tracked: np.ndarray
    inliers: np.ndarray
    inlier_ratio: np.ndarray
    rms_px: np.ndarray
    rounds: np.ndarray
    status: np.ndarray
    reasons: np.ndarray
    source: dict[str, Any]
    extra: dict[str, Any] = field(default_factory=dict)
    rolling: RollingShutter | None = None
    brightness_drift_px: float | None = None

    @property
    def frames(self) -> int:
        """Number of frames."""
        return len(self.time_s)

    def log_columns(self) -> dict[str, np.ndarray]:
        """The per-frame arrays a motion log takes over as they are, by field name."""
        return {name: getattr(self, name) for name in LOG_COLUMNS}

    @property
    def cuts(self) -> np.ndarray:
        """(frames,) bool, scene cuts."""
        return self.status == "cut"

    def figures(self, settings: Settings, fps_nominal: float, *,
                plan: CorrectionPlan | None = None,
                checks: tuple[np.ndarray, np.ndarray] | None = None) -> dict[str, Any]:
        """The log's summary: the shake figures, the plan's keys, then the verdict, which
        reads keys of all of them (:func:`stabilize.shake.trust_verdict`)."""
        w, h = int(self.source["width"]), int(self.source["height"])
        out_check, src_check = checks if checks is not None else (None, None)
        summary = shake_summary(
            matrices=self.matrices, status=self.status, time_s=self.time_s,
            rms_px=self.rms_px, inliers=self.inliers, reasons=self.reasons, width=w, height=h,
            fps_nominal=fps_nominal, above_hz=settings.shake_above_hz,
            fov_deg=settings.fov_deg,
            smooth_values=None if plan is None else plan.smooth_values,
            corrections=None if plan is None else plan.corrections,
            output_check=out_check, source_check=src_check, steadiness=plan is not None)
        summary = summary | ({} if plan is None else plan.figures())
        summary["brightness_drift_px"] = self.brightness_drift_px
        if self.rolling is not None:
            summary.update(rolling_figures(self.rolling))
        summary.update(shake.trust_verdict(summary))
        warn_if_irregular(self.source.get("path", "clip"), summary, fps_nominal)
        return summary


def assemble_log(motion: FrameMotion, settings: Settings, summary: dict[str, Any], *,
                 plan: CorrectionPlan | None = None,
                 checks: tuple[np.ndarray, np.ndarray] | None = None,
                 outputs: Outputs | None = None, source_extra: dict[str, Any] | None = None,
                 extra: dict[str, Any] | None = None) -> MotionLog:
    """The job's motion log, assembled once from the records of its stages.

    ``source_extra`` and ``extra`` are keys a calling job adds to the ``source`` block and to
    the top level of the JSON (after ``outputs``).
    """
    more = dict(motion.extra)
    if outputs is not None:
        more["outputs"] = outputs.by_role()
    more.update(extra or {})
    out_check, src_check = checks if checks is not None else (None, None)
    return MotionLog(
        **motion.log_columns(), source={**motion.source, **(source_extra or {})},
        settings=settings.to_dict(),
        summary=summary, smooth_values=None if plan is None else plan.smooth_values,
        corrections=None if plan is None else plan.corrections, extra=more,
        output_check=out_check, source_check=src_check,
        row_bands=None if motion.rolling is None else RowBands(
            motion.rolling.band_shift_px, motion.rolling.band_support,
            motion.rolling.readout_s),
    )


def excluded_regions(extra: dict[str, Any]) -> list[list[float]]:
    """Rectangles (x, y, w, h) left out of tracking, full-resolution pixels, from a log's
    ``excluded`` key (anything but four finite numbers is passed over: a log is data)."""
    found = extra.get("excluded")
    out: list[list[float]] = []
    if isinstance(found, dict):
        for rects in found.values():
            for r in rects if isinstance(rects, list) else ():
                try:
                    vals = [float(v) for v in r]
                except (TypeError, ValueError):
                    continue
                if len(vals) == 4 and all(np.isfinite(vals)) and vals[2] > 0 and vals[3] > 0:
                    out.append(vals)
    return out


def source_dict(info: VideoInfo, frames: int, time_s: np.ndarray,
                truncated: bool = False) -> dict[str, Any]:
    """The log's ``source``: the header's figures, the frames really decoded, and whether the
    clip ended early (then ``frames_expected`` is what its header announced)."""
    d = info.to_dict()
    d["frames"] = int(frames)
    if len(time_s) > 1:
        d["duration_s"] = float(time_s[-1] - time_s[0] + 1.0 / info.fps)
    d["truncated"] = bool(truncated)
    if truncated:
        d["frames_expected"] = int(info.frames_estimate)
    return d


def measure_motion(clip: Path, info: VideoInfo, settings: Settings,
                 progress: ProgressFactory | None,
                 parallel: dict[str, Any] | None = None) -> FrameMotion:
    """Analyse a clip (one pass, or segments on workers when ``parallel`` says how) and warn
    about what the log will show: an early end, unmeasurable clips, failed and weak frames."""
    size = analysis_size(info, settings.analysis_width)
    bar = progress_bar(progress, "analyse", info.frames_estimate)
    stats = DecodeStats()
    try:
        if parallel:
            track = fit_in_segments(clip, info, size, settings, on_frame=bar.update,
                                    stats=stats, **parallel)
        else:
            # closing(): should the analysis stop early (an error, an interruption), ffmpeg
            # is stopped there and then, not whenever the generator is collected.
            with closing(iter_frames(clip, size=size, gray=True, info=info,
                                     stats=stats)) as frames:
                track = fit_motion(
                    frames, full_size=(info.width, info.height), analysis_size=size,
                    settings=settings, on_frame=bar.update, **single_pass_options(info),
                )
    finally:
        bar.close()
    return motion_from_track(clip, info, track, stats, settings)


def motion_from_track(clip: Path, info: VideoInfo, track: MotionTrack,
                      stats: DecodeStats, settings: Settings) -> FrameMotion:
    """The analysis's record of a clip from its fitted track and what decoding saw, with
    warnings about what the log will show: an early end, unmeasurable clips, failed and weak
    frames."""
    n = len(track.time_s)
    status = track.status
    truncated = looks_truncated(info, stats)
    if truncated:
        why = f" ({stats.last_error})" if stats.last_error else ""
        _log.warning("%s: the clip ends early: %d of about %d frames could be decoded%s; "
                     "working on those, and the log says so (source.truncated)", clip, n,
                     info.frames_estimate, why)
    elif stats.errors:
        # Damaged data: the decoder conceals it, and a run started after a seek may conceal
        # it differently from one pass, so a segmented log can differ there.
        _log.warning("%s: the decoder reported damaged data %d time%s (last: %s); frames "
                     "near it may be damaged, and an analysis on several workers can differ "
                     "there from one pass", clip, stats.errors,
                     "" if stats.errors == 1 else "s", stats.last_error)
    if not measurable(info.width, info.height) or n < 2:
        status = np.full_like(status, "failed")
        _log.warning("%s: too short or too small to measure (%d frame%s of %dx%d); passed "
                     "through unchanged, frames marked failed", clip, n, "" if n == 1 else "s",
                     info.width, info.height)
    n_failed = int(np.count_nonzero(status == "failed"))
    if n_failed and n >= 2 and measurable(info.width, info.height):
        _log.warning("%s: %d of %d frames had no trustworthy motion fit (status failed)",
                     clip, n_failed, n)
    reasons = track.reason if track.reason is not None else np.full(n, "", "<U12")
    n_fore = int(np.count_nonzero(reasons == "foreground"))
    n_held = int(np.count_nonzero(reasons == "held_still"))
    n_unconfirmed = int(np.count_nonzero(reasons == "unconfirmed"))
    n_weak = int(np.count_nonzero(status == "weak")) - n_fore - n_held - n_unconfirmed
    if n_weak:
        _log.warning("%s: %d frames have weak fits (few or bunched inliers)", clip, n_weak)
    if n_fore:
        _log.warning("%s: %d frames: the camera's motion could not be told apart from an "
                     "object moving in front of it; their motion is a stand-in (status weak)",
                     clip, n_fore)
    if n_held:
        _log.warning("%s: %d frames: the tracks moved but faint detail away from them stayed "
                     "put, so they were taken for an object in front of a still camera; "
                     "their motion is held at none (status weak)", clip, n_held)
    if n_unconfirmed:
        held = settings.plain_surround == "hold"
        _log.warning("%s: %d frames: the tracks moved but covered only part of the picture, "
                     "and nothing in the plain rest told an object moving before a still "
                     "camera from a moving camera; %s (status weak)", clip, n_unconfirmed,
                     "their motion is held at none (if the camera was moving, as before a "
                     "clear sky, run again with plain_surround 'follow')" if held else
                     "their motion is the tracks' (plain_surround 'follow')")
    drift = None
    if track.gain_shift_px is not None:
        counted = (status == "ok") | (reasons == "few_inliers")
        drift = round(drift_px(track.gain_shift_px, counted, status == "cut"), 3)
        if drift > shake.BRIGHTNESS_DRIFT_PX[0]:
            _log.warning("%s: the picture's brightness changed (automatic exposure, or the "
                         "light) while the tracked detail was faint; tracking reads such a "
                         "change as motion, and the logged path may be off by about %.1f px "
                         "or more from that alone", clip, drift)
    by_reason = frame_reasons(reasons)
    rolling = None
    if track.band_shift_px is not None and n >= 2:
        rolling = analyse_rolling(track.band_shift_px, track.band_support, fps=info.fps,
                                  width=info.width, height=info.height,
                                  readout_ms=settings.readout_ms, fov_deg=settings.fov_deg)
        if rolling.readout_source == "not_found":
            _log.warning("%s: no rolling-shutter readout could be estimated from the footage "
                         "(a global shutter, or no motion faster than a frame); treated as a "
                         "global shutter", clip)
    return FrameMotion(
        **{**track.log_columns(), "status": status}, reasons=reason_codes(by_reason, n),
        source=source_dict(info, n, track.time_s, truncated),
        extra={"excluded": track.excluded, "frame_reasons": by_reason}, rolling=rolling,
        brightness_drift_px=drift,
    )


def measure(clip: str | os.PathLike, *, config: str | None = None,
            progress: ProgressFactory | None = None, workers: int | None = None,
            scheduler: str | None = None, keyframe_every: int | None = None,
            **options: Any) -> MotionLog:
    """Analyse a clip: per-frame motion, raw path and shake summary; nothing is written.

    Keyword options are those of the command line (``model``, ``inlier_px``, ``seed`` …);
    ``config`` names a TOML file or preset. Save the result with ``log.save(path)``.

    ``workers`` or ``scheduler`` split the clip into segments analysed in parallel (see
    :mod:`stabilize.segments`): ``workers`` local processes, or a Dask cluster
    (``scheduler="local"`` starts one here, else ``"tcp://host:port"``). The analysis then
    restarts its state every ``keyframe_every`` frames (default: 10 s of frames), so the log
    is the same for any number of workers.
    """
    settings = resolve_settings(config, options)
    return measure_clip(Path(clip), settings, progress, workers, scheduler, keyframe_every)


def measure_clip(clip: Path, settings: Settings, progress: ProgressFactory | None,
             workers: int | None = None, scheduler: str | None = None,
             keyframe_every: int | None = None, source_extra: dict[str, Any] | None = None,
             extra: dict[str, Any] | None = None) -> MotionLog:
    info = probe(clip)
    parallel = None
    if workers is not None or scheduler is not None or keyframe_every is not None:
        parallel = dict(workers=workers, scheduler=scheduler, keyframe_every=keyframe_every)
    motion = measure_motion(clip, info, settings, progress, parallel)
    return assemble_log(motion, settings, motion.figures(settings, info.fps),
                        source_extra=source_extra, extra=extra)


def measure_to_file(clip: str | os.PathLike, log_path: str | os.PathLike | None = None, *,
                    config: str | None = None, progress: ProgressFactory | None = None,
                    workers: int | None = None, scheduler: str | None = None,
                    **options: Any) -> tuple[MotionLog, Outputs]:
    """Measure a clip and write its motion log (default ``NAME.motion.csv`` beside it).

    The outputs are checked before any work. Returns the log and where it was written.
    """
    clip = Path(clip)
    settings = resolve_settings(config, options)
    outputs = plan_outputs(clip, video_out=None, log_out=log_path, with_video=False,
                           compare=False)
    check_job_outputs(clip, outputs, settings.force)
    motion = measure_clip(clip, settings, progress, workers, scheduler)
    motion.save(outputs.log_csv)
    return motion, outputs
