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
from ..io.process import usable_cores
from ..motion import measurable
from ..motion_log import MotionLog
from ..motion_track import LOG_COLUMNS
from ..pinning import pin_regions, pinned_list
from ..render import compare_size
from ..render import render as render_frames
from ..rolling import analyse_rolling, within_frame
from ..row_check import RowShiftCheck, row_spread_figures
from ..steady_path import CorrectionPlan, plan_corrections, unchanged_plan
from .analysis import (
    FrameMotion,
    ProgressFactory,
    assemble_log,
    excluded_regions,
    measure_motion,
    progress_bar,
    source_dict,
)
from .outputs import Outputs, check_job_outputs, keep_read_log, plan_outputs
from .single_decode import frames_to_hold, steady_single_decode

__all__ = [
    "RENDER_DECODE_THREADS", "SINGLE_DECODE", "excluded_regions", "render", "render_decode_threads",
    "steady", "steady_clip",
]

_log = logging.getLogger("stabilize")

# One decoding thread for the render pass per six cores it is given, at most four: on two
# cores the encoder, not the decoder, sets the pace, and every extra frame-decoding thread
# holds pictures of its own (at 4K, 30–50 MiB measured on two cores). At 1080p the render
# costs about 46 ms of processor time per frame (decode 6.6, warp 5.4, pipes 2.9, x264
# veryfast 30.8; measured), so one decoding thread (6.6 ms per frame) would pace a render
# spread over more than 46 / 6.6 ≈ 7 cores (docs/performance.md).
RENDER_DECODE_THREADS = 1
_CORES_PER_DECODE_THREAD = 6
_MAX_DECODE_THREADS = 4


def render_decode_threads(cores: int | None = None) -> int:
    """Decoding threads of the render pass for ``cores`` cores (None: those this process may
    run on): :data:`RENDER_DECODE_THREADS` per six cores, at most four."""
    if cores is None:
        cores = usable_cores()
    return min(_MAX_DECODE_THREADS,
               RENDER_DECODE_THREADS * max(1, -(-int(cores) // _CORES_PER_DECODE_THREAD)))

#: Whether ``steady`` may analyse and render from one decoding pass where the smoother allows
#: it (:func:`~stabilize.jobs.single_decode.frames_to_hold`); the video and the log are the
#: same either way, bit for bit.
SINGLE_DECODE = True


def _render_video(clip: Path, info: VideoInfo, motion: FrameMotion, plan: CorrectionPlan,
                  settings: Settings, outputs: Outputs, progress: ProgressFactory | None,
                  excluded: list[list[float]], pinned: list[tuple[int, int, int, int]],
                  ) -> tuple[tuple[np.ndarray, np.ndarray], dict[str, Any]]:
    """Render the steadied video (and the comparison) with the ``pinned`` rectangles copied
    from the source frames; returns the motion measured on the output and on the source
    frames while rendering, each (frames, 3), and the row_spread figures of a rolling-shutter
    render (empty otherwise)."""
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
    scene = residual.logged_scene(motion.matrices, motion.status, motion.reasons)
    check = residual.RenderCheck(motion.frames, (info.width, info.height), cuts=motion.cuts,
                                 excluded=excluded, scene=scene, seed=settings.seed)
    # A rolling shutter: each frame's rows are put back where the middle row's instant saw
    # them, in the same resampling as the correction, and the row spread is measured as it goes.
    rows = None if motion.rolling is None else within_frame(motion.rolling)
    rolling: dict[str, Any] = {}
    row_spread = None
    if rows is not None:
        row_spread = RowShiftCheck(motion.frames)
        last = len(rows.frames) - 1

        def both(i: int, src: object, out: object, c: np.ndarray) -> None:
            check(i, src, out, c)
            row_spread(i, src, out, c)

        rolling = dict(check=both, within_frame=lambda i: (rows.rows_px,
                                                           rows.shift_px[min(i, last)]))
    bar = progress_bar(progress, "render", motion.frames)
    try:
        with video, closing(iter_frames(clip, info=info, yuv=yuv,
                                        decode_threads=render_decode_threads())) as frames:
            if compare is None:
                n = render_frames(frames, plan.corrections, video,
                                  fill=settings.fill, on_frame=bar.update, pinned=pinned,
                                  **({"check": check} | rolling))
            else:
                with compare:
                    n = render_frames(frames, plan.corrections, video,
                                      fill=settings.fill, compare=compare, on_frame=bar.update,
                                      pinned=pinned, **({"check": check} | rolling))
    finally:
        bar.close()
    if n != motion.frames:
        _log.warning("%s: rendered %d frames but the log has %d", clip, n, motion.frames)
    if check.checked:
        _log.debug("output check: %.2f ms per frame (%.2f ms of processor time)",
                   1000.0 * check.seconds / check.checked,
                   1000.0 * check.cpu_seconds / check.checked)
    spread = {} if row_spread is None else row_spread_figures(row_spread)
    return (check.output, check.source), spread


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
    its source, is steadier but keeps over a tenth of its shake (``output_keeps_shake``), or
    could not be measured."""
    s = summary

    def rms(key: str) -> str:
        v = s.get(key)
        return "?" if v is None else f"{v:.2f}"

    if s.get("output_steadier") is None:
        share = s.get("output_pairs_measured")
        weak = s.get("output_unchecked_weak_frames")
        gaps = (f"; {weak} frames the log found weak have an output pair that nothing "
                "measured, where a jump could hide" if weak else "")
        _log.warning("%s: the steadied video could not be checked (%s of its frame pairs "
                     "measured%s); its figures after steadying are not given, and it may not "
                     "be steadier than the source: look at it", clip,
                     "none" if not share else f"{share:.0%}", gaps)
    elif s["output_steadier"] and s.get("output_keeps_shake"):
        kept = [f"{a} {1.0 - s[f'shake_reduction_{a}']:.0%}" for a in "xy"
                if s.get(f"shake_reduction_{a}") is not None]
        _log.warning("%s: the steadied video is steadier than the source but not steady: it "
                     "keeps %s of the source's shake (measured on the frames of both: x %s "
                     "px, y %s px against x %s px, y %s px); a light smoothing keeps shake, "
                     "and so do frames the log got wrong: look at it", clip,
                     ", ".join(kept) or "some", rms("jitter_rms_x_px_out"),
                     rms("jitter_rms_y_px_out"), rms("jitter_rms_x_px_src_check"),
                     rms("jitter_rms_y_px_src_check"))
    if s.get("output_steadier") is False:
        if shake.unlogged_source_shake(s):
            why = (f"; the motion log gives the source x {rms('jitter_rms_x_px')} px, "
                   f"y {rms('jitter_rms_y_px')} px: either the log missed the camera's motion "
                   "or the measurement on the frames followed something moving in front of "
                   "a still camera; look at the footage")
        else:
            why = "; check the motion log and the settings"
        _log.warning("%s: the steadied video is not steadier than the source: shake RMS "
                     "measured on its frames x %s px, y %s px, against x %s px, y %s px on "
                     "the source's%s", clip,
                     rms("jitter_rms_x_px_out"), rms("jitter_rms_y_px_out"),
                     rms("jitter_rms_x_px_src_check"), rms("jitter_rms_y_px_src_check"), why)


def _correct_and_write(clip: Path, info: VideoInfo, motion: FrameMotion, settings: Settings,
                       outputs: Outputs, progress: ProgressFactory | None,
                       excluded: list[list[float]], source_extra: dict[str, Any] | None = None,
                       extra: dict[str, Any] | None = None,
                       rendered: tuple[CorrectionPlan, Any] | None = None,
                       pin_from: dict[str, Any] | None = None) -> MotionLog:
    """Plan the corrections and render them (or pass a clip too short or small to steady
    through unchanged), then summarise, assemble the log and write it. ``rendered`` is the
    plan and output check of a video already written from a single decoding pass.
    ``pin_from`` is the ``excluded`` mapping (regions by source, pixels of this clip) the
    pinned overlays are chosen from (:func:`stabilize.pinning.pin_regions`); None for
    ``motion.extra``'s."""
    fps = shake.frame_rate(motion.time_s, info.fps)  # real time for the smoothing window
    w, h = int(motion.source["width"]), int(motion.source["height"])
    pinned = pin_regions(motion.extra.get("excluded") if pin_from is None else pin_from,
                         settings.pin_overlays, w, h)
    checks = None
    row_spread: dict[str, Any] = {}
    if rendered is not None:
        plan, checks = rendered
    elif motion.frames < 2 or not measurable(info.width, info.height):
        plan = unchanged_plan(motion.matrices, motion.cuts, w, h)
        _copy_unchanged(clip, outputs.video)
        if outputs.compare is not None:
            _copy_unchanged(clip, outputs.compare)
    else:
        plan = plan_corrections(motion.matrices, motion.cuts, fps=fps,
                                window_s=settings.window_s, model=settings.model,
                                smoother=settings.smoother, margin=settings.margin, width=w,
                                height=h, auto_cap=AUTO_MARGIN_CAP,
                                missing=shake.missing_before(motion.time_s, motion.frames))
        checks, row_spread = _render_video(clip, info, motion, plan, settings, outputs, progress,
                                           excluded, pinned_list(pinned))
    summary = motion.figures(settings, info.fps, plan=plan, checks=checks) | row_spread
    if checks is not None and checks[0] is not None:
        _warn_if_not_steadier(clip, summary)
    kept = {"pinned_overlays": {"setting": settings.pin_overlays, **pinned}}
    log = assemble_log(motion, settings, summary, plan=plan, checks=checks, outputs=outputs,
                       source_extra=source_extra, extra=kept | (extra or {}))
    save_log(log, outputs.log_csv)
    return log


def steady_clip(clip: Path, outputs: Outputs, settings: Settings,
                progress: ProgressFactory | None = None, *,
                source_extra: dict[str, Any] | None = None,
                extra: dict[str, Any] | None = None) -> MotionLog:
    """Measure, smooth and render one clip into ``outputs`` (already checked) and write its
    log, with ``source_extra`` and ``extra`` keys added to it; returns the log."""
    info = probe(clip)
    hold = frames_to_hold(info, settings) if SINGLE_DECODE else None
    rendered = None
    if hold is not None:
        # One decoding pass feeds the analysis and the render (two when it cannot give the
        # same video; see stabilize.jobs.single_decode).
        motion, plan, checks = steady_single_decode(clip, info, settings, outputs, progress,
                                                    hold)
        rendered = None if plan is None else (plan, checks)
    else:
        motion = measure_motion(clip, info, settings, progress)
    return _correct_and_write(clip, info, motion, settings, outputs, progress,
                              excluded_regions(motion.extra), source_extra, extra, rendered)


# Every output of one job appears together when the job succeeds, or none does.
@all_or_nothing()
def steady(clip: str | os.PathLike, out: str | os.PathLike | None = None, *,
           log_path: str | os.PathLike | None = None, config: str | None = None,
           progress: ProgressFactory | None = None, **options: Any) -> MotionLog:
    """The main job: measure, smooth, render the steadied video and write the motion log.

    ``out`` defaults to ``NAME.steady.mp4`` beside the input; the log goes beside the video,
    named after it (``take2.mp4`` → ``take2.motion.csv`` and ``.json``; a ``.steady`` ending
    is dropped), unless ``log_path`` is given. Missing output folders are created.
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
    clip is scaled to the clip's resolution. Writes the video and a new log beside it, named
    after the video (``NAME.render.motion.csv`` when that name is the log read)."""
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
    pin_from = _regions_by_source(saved.extra.get("excluded"))
    if saved.size != (info.width, info.height):
        _log.info("log made at %dx%d, rendering at %dx%d", *saved.size, info.width,
                  info.height)
        matrices = rescale(matrices, (info.width / saved.size[0], info.height / saved.size[1]))
        fx, fy = info.width / saved.size[0], info.height / saved.size[1]
        excluded = [[x * fx, y * fy, w * fx, h * fy] for x, y, w, h in excluded]
        pin_from = {k: [[x * fx, y * fy, w * fx, h * fy] for x, y, w, h in rects]
                    for k, rects in pin_from.items()}
    # The new log keeps the saved per-frame diagnostics but not the saved analysis's keys
    # (its frame reasons and left-out regions belong to that log).
    rolling = None
    rb = saved.row_bands
    if rb is not None and rb.readout_s > 0 and saved.size == (info.width, info.height):
        # The log's readout and band shifts, as measured (a log of another size is not
        # rescaled: its frames are rendered without the within-frame correction).
        rolling = analyse_rolling(rb.shift_px, rb.support, fps=info.fps, width=info.width,
                                  height=info.height, readout_ms=1000.0 * rb.readout_s,
                                  fov_deg=settings.fov_deg)
    motion = FrameMotion(
        **{**{k: getattr(saved, k) for k in LOG_COLUMNS}, "matrices": matrices},
        reasons=np.full(saved.frames, "", "<U12"),
        source=source_dict(info, saved.frames, saved.time_s), rolling=rolling)
    return _correct_and_write(clip, info, motion, settings, outputs, progress, excluded,
                              pin_from=pin_from)


def _regions_by_source(found: Any) -> dict[str, list[list[float]]]:
    """A saved log's ``excluded`` mapping with only well-formed rectangles (a log is data)."""
    return {k: excluded_regions({"excluded": {k: v}})
            for k, v in (found.items() if isinstance(found, dict) else ())}
