"""The steady and render jobs: plan the corrections, render the steadied video at full
resolution, and write the motion log once, at the end.

The render pass streams the clip in the encoder's own planar YUV; nothing holds the whole clip.
"""

from __future__ import annotations

import logging
import os
import shutil
from contextlib import closing
from pathlib import Path
from typing import Any

import numpy as np

from .. import residual, shake
from ..config import AUTO_MARGIN_CAP, Settings, logged_settings, resolve_settings
from ..geometry import rescale
from ..io import (
    VideoInfo,
    VideoWriter,
    all_or_nothing,
    discard,
    iter_frames,
    probe,
    publish,
    temp_path_for,
)
from ..io.encode import output_colour, output_pix_fmt
from ..io.motion_log_files import check_log_fits, read_log, save_log
from ..io.probing import constant_rate
from ..motion import measurable
from ..motion_log import MotionLog
from ..motion_track import LOG_COLUMNS
from ..render import compare_size
from ..render import render as render_frames
from ..steady_path import CorrectionPlan, plan_corrections, unchanged_plan
from .analysis import (
    FrameMotion,
    ProgressFactory,
    assemble_log,
    measure_motion,
    progress_bar,
    source_dict,
)
from .outputs import Outputs, check_job_outputs, keep_read_log, plan_outputs

__all__ = ["RENDER_DECODE_THREADS", "excluded_regions", "render", "steady", "steady_clip"]

_log = logging.getLogger("stabilize")

# One decoding thread for the render pass: the encoder, not the decoder, sets its pace, and
# every extra frame-decoding thread holds pictures of its own (at 4K, 30–50 MiB measured on
# two cores, more where ffmpeg would start one thread per core).
RENDER_DECODE_THREADS = 1


def _render_video(clip: Path, info: VideoInfo, motion: FrameMotion, plan: CorrectionPlan,
                  settings: Settings, outputs: Outputs, progress: ProgressFactory | None,
                  excluded: list[list[float]]) -> tuple[np.ndarray, np.ndarray]:
    """Render the steadied video (and the comparison); returns the motion measured on the
    output and on the source frames while rendering, each (frames, 3)."""
    # Frames stay in the encoder's own planar YUV from decoder to encoder: no colour
    # conversion on either side, half the bytes of RGB per frame.
    yuv = output_pix_fmt(settings.codec, info.width, info.height)
    writer_args = dict(codec=settings.codec, crf=settings.crf, preset=settings.preset,
                       input_pix_fmt=yuv, colour=output_colour(info), sar=info.sar)
    # A variable frame rate clip keeps its own frame times; a constant rate one is written
    # at its nominal rate, as before.
    times = None if constant_rate(motion.time_s, info.fps) else motion.time_s
    video = VideoWriter(outputs.video, info.width, info.height, info.fps_text,
                        audio_from=clip if info.has_audio else None,
                        audio_codec=info.audio_codec, times_s=times,
                        time_base=info.time_base, **writer_args)
    compare = None
    if outputs.compare is not None:
        cw, ch = compare_size(info.width, info.height)
        compare = VideoWriter(outputs.compare, cw, ch, info.fps_text, times_s=times,
                              time_base=info.time_base, **writer_args)
    # The written frames' own motion, and the source's measured alike, for the figures
    # after steadying (see stabilize.residual).
    check = residual.RenderCheck(motion.frames, (info.width, info.height), cuts=motion.cuts,
                                 excluded=excluded, seed=settings.seed)
    bar = progress_bar(progress, "render", motion.frames)
    try:
        with video, closing(iter_frames(clip, info=info, yuv=yuv,
                                        decode_threads=RENDER_DECODE_THREADS)) as frames:
            if compare is None:
                n = render_frames(frames, plan.corrections, video,
                                  fill=settings.fill, on_frame=bar.update, check=check)
            else:
                with compare:
                    n = render_frames(frames, plan.corrections, video,
                                      fill=settings.fill, compare=compare, on_frame=bar.update,
                                      check=check)
    finally:
        bar.close()
    if n != motion.frames:
        _log.warning("%s: rendered %d frames but the log has %d", clip, n, motion.frames)
    if check.checked:
        _log.debug("output check: %.2f ms per frame (%.2f ms of processor time)",
                   1000.0 * check.seconds / check.checked,
                   1000.0 * check.cpu_seconds / check.checked)
    return check.output, check.source


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


def _copy_unchanged(clip: Path, dest: Path) -> None:
    """The input's bytes, unchanged, as ``dest`` (for clips too short or small to steady)."""
    tmp = temp_path_for(dest)
    try:
        shutil.copyfile(clip, tmp)
        publish(tmp, dest)
    finally:
        if tmp.exists():
            discard(tmp)


def _warn_if_not_steadier(clip: Path, summary: dict[str, Any]) -> None:
    """Say so on stderr when the written video, measured on its frames, is not steadier than
    its source (or could not be measured)."""
    s = summary
    if s.get("output_steadier") is None:
        share = s.get("output_pairs_measured")
        _log.warning("%s: the steadied video could not be checked (%s of its frame pairs "
                     "measured); its figures after steadying are not given", clip,
                     "none" if not share else f"{share:.0%}")
    elif not s["output_steadier"]:
        def rms(key: str) -> str:
            v = s.get(key)
            return "?" if v is None else f"{v:.2f}"

        _log.warning("%s: the steadied video is not steadier than the source: shake RMS "
                     "measured on its frames x %s px, y %s px, against x %s px, y %s px on "
                     "the source's; check the motion log and the settings", clip,
                     rms("jitter_rms_x_px_out"), rms("jitter_rms_y_px_out"),
                     rms("jitter_rms_x_px_src_check"), rms("jitter_rms_y_px_src_check"))


def _correct_and_write(clip: Path, info: VideoInfo, motion: FrameMotion, settings: Settings,
                       outputs: Outputs, progress: ProgressFactory | None,
                       excluded: list[list[float]], source_extra: dict[str, Any] | None = None,
                       extra: dict[str, Any] | None = None) -> MotionLog:
    """Plan the corrections and render them (or pass a clip too short or small to steady
    through unchanged), then summarise, assemble the log and write it."""
    fps = shake.frame_rate(motion.time_s, info.fps)  # real time for the smoothing window
    w, h = int(motion.source["width"]), int(motion.source["height"])
    checks = None
    if motion.frames < 2 or not measurable(info.width, info.height):
        plan = unchanged_plan(motion.matrices, motion.cuts, w, h)
        _copy_unchanged(clip, outputs.video)
        if outputs.compare is not None:
            _copy_unchanged(clip, outputs.compare)
    else:
        plan = plan_corrections(motion.matrices, motion.cuts, fps=fps,
                                window_s=settings.window_s, model=settings.model,
                                smoother=settings.smoother, margin=settings.margin, width=w,
                                height=h, auto_cap=AUTO_MARGIN_CAP)
        checks = _render_video(clip, info, motion, plan, settings, outputs, progress, excluded)
    summary = motion.figures(settings, info.fps, plan=plan, checks=checks)
    if checks is not None and checks[0] is not None:
        _warn_if_not_steadier(clip, summary)
    log = assemble_log(motion, settings, summary, plan=plan, checks=checks, outputs=outputs,
                       source_extra=source_extra, extra=extra)
    save_log(log, outputs.log_csv)
    return log


def steady_clip(clip: Path, outputs: Outputs, settings: Settings,
                progress: ProgressFactory | None = None, *,
                source_extra: dict[str, Any] | None = None,
                extra: dict[str, Any] | None = None) -> MotionLog:
    """Measure, smooth and render one clip into ``outputs`` (already checked) and write its
    log, with ``source_extra`` and ``extra`` keys added to it; returns the log."""
    info = probe(clip)
    motion = measure_motion(clip, info, settings, progress)
    return _correct_and_write(clip, info, motion, settings, outputs, progress,
                              excluded_regions(motion.extra), source_extra, extra)


# Every output of one job appears together when the job succeeds, or none does.
@all_or_nothing()
def steady(clip: str | os.PathLike, out: str | os.PathLike | None = None, *,
           log_path: str | os.PathLike | None = None, config: str | None = None,
           progress: ProgressFactory | None = None, **options: Any) -> MotionLog:
    """The main job: measure, smooth, render the steadied video and write the motion log.

    ``out`` defaults to ``NAME.steady.mp4`` beside the input; the log goes to
    ``NAME.motion.csv`` (and ``.json``) in the video's folder unless ``log_path`` is given.
    Returns the saved log; ``log.extra["outputs"]`` lists the files written.
    """
    clip = Path(clip)
    settings = resolve_settings(config, options)
    outputs = plan_outputs(clip, video_out=out, log_out=log_path, with_video=True,
                           compare=settings.compare)
    check_job_outputs(clip, outputs, settings.force)
    return steady_clip(clip, outputs, settings, progress)


@all_or_nothing()
def render(clip: str | os.PathLike, log_file: str | os.PathLike | MotionLog,
           out: str | os.PathLike | None = None, *, config: str | None = None,
           progress: ProgressFactory | None = None, **options: Any) -> MotionLog:
    """Render a clip from an existing motion log: the path is smoothed again with the given
    settings (smoother, window, margin, fill, encoding). A log made on a smaller proxy of the
    clip is scaled to the clip's resolution. Writes the video and a new log beside it."""
    clip = Path(clip)
    saved = log_file if isinstance(log_file, MotionLog) else read_log(log_file)
    settings = logged_settings(saved.settings, config, options)
    outputs = plan_outputs(clip, video_out=out, log_out=None, with_video=True,
                           compare=settings.compare)
    if not isinstance(log_file, MotionLog):
        outputs = keep_read_log(Path(log_file), outputs)
    check_job_outputs(clip, outputs, settings.force)
    info = probe(clip)
    check_log_fits(saved, info, log_file if not isinstance(log_file, MotionLog) else "the log")
    matrices = saved.matrices
    excluded = excluded_regions(saved.extra)
    if saved.size != (info.width, info.height):
        _log.info("log made at %dx%d, rendering at %dx%d", *saved.size, info.width,
                  info.height)
        matrices = rescale(matrices, (info.width / saved.size[0], info.height / saved.size[1]))
        fx, fy = info.width / saved.size[0], info.height / saved.size[1]
        excluded = [[x * fx, y * fy, w * fx, h * fy] for x, y, w, h in excluded]
    # The new log keeps the saved per-frame diagnostics but not the saved analysis's keys
    # (its frame reasons and left-out regions belong to that log).
    motion = FrameMotion(
        **{**{k: getattr(saved, k) for k in LOG_COLUMNS}, "matrices": matrices},
        reasons=np.full(saved.frames, "", "<U12"),
        source=source_dict(info, saved.frames, saved.time_s))
    return _correct_and_write(clip, info, motion, settings, outputs, progress, excluded)
