"""The jobs: measure a clip, steady it, render from a saved log. The Python API lives here.

Two streaming passes over the clip: an analysis pass over a reduced grey copy (ffmpeg scales
and converts it), then a render pass at full resolution. Nothing holds the whole clip.
"""

from __future__ import annotations

import logging
import os
import shutil
from collections.abc import Callable
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from . import framing, residual, shake
from .config import AUTO_MARGIN_CAP, Settings, build_settings
from .errors import StabilizeError
from .geometry import rescale, similarity_readout
from .io import (
    VideoInfo,
    VideoWriter,
    all_or_nothing,
    check_writable_folder,
    discard,
    iter_frames,
    probe,
    publish,
    temp_path_for,
)
from .io.decode import DecodeStats, analysis_size, looks_truncated
from .io.encode import output_colour, output_pix_fmt
from .io.probing import check_input, constant_rate
from .log import MotionLog, frame_reasons, json_path_for, read_log, reasons_of
from .motion import fit_motion, measurable
from .path import smooth_path
from .render import compare_size
from .render import render as render_frames

log = logging.getLogger("stabilize")

ProgressFactory = Callable[[str, int | None], Any]


class _NoBar:
    def update(self, n: int = 1) -> None:
        pass

    def close(self) -> None:
        pass


def _bar(progress: ProgressFactory | None, desc: str, total: int | None):
    return progress(desc, total) if progress else _NoBar()


def _settings(config: str | None, options: dict[str, Any]) -> Settings:
    if isinstance(options.get("settings"), Settings):
        base = options.pop("settings")
        return base.replace(**{k: v for k, v in options.items() if v is not None})
    return build_settings(config, options)


# ------------------------------------------------------------------ outputs
@dataclass(frozen=True)
class Outputs:
    """Where a job writes: the video (None for measure) and the log CSV (its JSON beside it)."""

    video: Path | None
    log_csv: Path
    compare: Path | None = None

    @property
    def log_json(self) -> Path:
        return json_path_for(self.log_csv)

    def all(self) -> list[Path]:
        return [p for p in (self.video, self.log_csv, self.log_json, self.compare) if p]


def clip_name(clip: Path) -> str:
    """NAME of the outputs: the input's file name without its extension."""
    return clip.stem


def plan_outputs(clip: Path, *, video_out: str | Path | None, log_out: str | Path | None,
                 with_video: bool, compare: bool) -> Outputs:
    """Default outputs sit beside the input; ``-o OUT`` moves the logs to OUT's folder."""
    name = clip_name(clip)
    video = None
    if with_video:
        video = Path(video_out) if video_out else clip.with_name(f"{name}.steady.mp4")
    if log_out:
        log_csv = Path(log_out)
        if log_csv.suffix.lower() != ".csv":
            raise StabilizeError(f"{log_csv}: the motion log must be named *.csv")
    elif video is not None:
        log_csv = video.parent / f"{name}.motion.csv"
    else:
        log_csv = clip.with_name(f"{name}.motion.csv")
    comp = None
    if compare and video is not None:
        comp = video.with_name(f"{video.stem}.compare{video.suffix or '.mp4'}")
    return Outputs(video, log_csv, comp)


def check_outputs(clip: Path, outputs: Outputs, force: bool) -> None:
    """Refuse, before any work, outputs that equal the input, exist (without --force) or
    cannot be written. A missing input is named first: that is the problem to fix."""
    check_input(clip)
    src = clip.resolve()
    seen: set[Path] = set()
    for p in outputs.all():
        rp = p.resolve()
        if rp == src or (p.exists() and clip.exists() and os.path.samefile(p, clip)):
            raise StabilizeError(f"{p}: output would overwrite the input clip; choose another name")
        if rp in seen:
            raise StabilizeError(f"{p}: two outputs would share this name")
        seen.add(rp)
        if p.is_dir():
            raise StabilizeError(f"{p}: output name is an existing folder")
        if p.exists() and not force:
            raise StabilizeError(f"{p}: already exists (use --force to overwrite)")
        check_writable_folder(p)


# ------------------------------------------------------------------ passes
def _source_dict(info: VideoInfo, frames: int, time_s: np.ndarray,
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


def _measure_motion(clip: Path, info: VideoInfo, settings: Settings,
             progress: ProgressFactory | None, parallel: dict[str, Any] | None = None
             ) -> MotionLog:
    size = analysis_size(info, settings.analysis_width)
    bar = _bar(progress, "analyse", info.frames_estimate)
    stats = DecodeStats()
    try:
        if parallel:
            from .segments import fit_in_segments

            track = fit_in_segments(clip, info, size, settings, on_frame=bar.update,
                                     **parallel)
        else:
            from .segments import single_pass_options

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
    n = len(track.time_s)
    truncated = looks_truncated(info, stats)
    if truncated:
        why = f" ({stats.last_error})" if stats.last_error else ""
        log.warning("%s: the clip ends early: %d of about %d frames could be decoded%s; "
                    "working on those, and the log says so (source.truncated)", clip, n,
                    info.frames_estimate, why)
    if not measurable(info.width, info.height) or n < 2:
        track.status[:] = "failed"
        log.warning("%s: too short or too small to measure (%d frame%s of %dx%d); passed "
                    "through unchanged, frames marked failed", clip, n, "" if n == 1 else "s",
                    info.width, info.height)
    n_failed = int(np.count_nonzero(track.status == "failed"))
    if n_failed and len(track.time_s) >= 2 and measurable(info.width, info.height):
        log.warning("%s: %d of %d frames had no trustworthy motion fit (status failed)",
                    clip, n_failed, len(track.time_s))
    reasons = track.reason if track.reason is not None else np.full(n, "", "<U12")
    n_fore = int(np.count_nonzero(reasons == "foreground"))
    n_weak = int(np.count_nonzero(track.status == "weak")) - n_fore
    if n_weak:
        log.warning("%s: %d frames have weak fits (few or bunched inliers)", clip, n_weak)
    if n_fore:
        log.warning("%s: %d frames: the camera's motion could not be told apart from an "
                    "object moving in front of it; their motion is a stand-in (status weak)",
                    clip, n_fore)
    return MotionLog(
        **track.log_columns(),
        source=_source_dict(info, n, track.time_s, truncated),
        settings=settings.to_dict(),
        extra={"excluded": track.excluded, "frame_reasons": frame_reasons(reasons)},
    )


def _summarise(motion: MotionLog, settings: Settings, nominal_fps: float) -> None:
    """The shake summary, in real time (the frames' own timestamps; ``nominal_fps`` is the
    container's rate), with the figures measured on the written video when there is one,
    merged with what the job has put in ``motion.summary``; then the verdict again, which
    reads keys of all of them."""
    w, h = motion.size
    summary = shake.summarise(
        matrices=motion.matrices, path=motion.path, status=motion.status, fps=nominal_fps,
        width=w, height=h, above_hz=settings.shake_above_hz, fov_deg=settings.fov_deg,
        smooth_readout=motion.smooth_values, corrections=motion.corrections,
        time_s=motion.time_s, rms_px=motion.rms_px, inliers=motion.inliers,
        reasons=reasons_of(motion), output_motion_readout=motion.output_check,
    )
    if motion.corrections is not None:
        summary |= residual.steadiness(
            motion.output_check, motion.source_check, cuts=motion.status == "cut",
            fps=summary["fps"], above_hz=settings.shake_above_hz, width=w, height=h)
    motion.summary = summary | motion.summary
    motion.summary.update(shake.trust_verdict(motion.summary))
    if motion.summary.get("timestamps_irregular"):
        log.warning("%s: the frame times are irregular; the figures and the smoothing use "
                    "their real mean rate of %.3g fps, not the container's %.3g fps",
                    motion.source.get("path", "clip"), motion.summary["fps"], nominal_fps)


def _warn_if_not_steadier(clip: Path, motion: MotionLog) -> None:
    """Say so on stderr when the written video, measured on its frames, is not steadier than
    its source (or could not be measured)."""
    s = motion.summary
    if motion.output_check is None:
        return
    if s.get("output_steadier") is None:
        share = s.get("output_pairs_measured")
        log.warning("%s: the steadied video could not be checked (%s of its frame pairs "
                    "measured); its figures after steadying are not given", clip,
                    "none" if not share else f"{share:.0%}")
    elif not s["output_steadier"]:
        def rms(key: str) -> str:
            v = s.get(key)
            return "?" if v is None else f"{v:.2f}"

        log.warning("%s: the steadied video is not steadier than the source: shake RMS "
                    "measured on its frames x %s px, y %s px, against x %s px, y %s px on "
                    "the source's; check the motion log and the settings", clip,
                    rms("jitter_rms_x_px_out"), rms("jitter_rms_y_px_out"),
                    rms("jitter_rms_x_px_src_check"), rms("jitter_rms_y_px_src_check"))


def plan_corrections(motion: MotionLog, settings: Settings, fps: float) -> None:
    """Smooth the path, settle the margin, and store S_t and C_t in the log.

    ``--margin auto`` takes the smallest constant margin, up to the cap, that the smoother's
    unconstrained path needs: its own path for ``gaussian``, ``kalman`` and ``lockoff`` (the
    held pose), and the Gaussian path at the same time scale for ``l1`` (whose path, being
    constrained by the margin, would otherwise fit any margin by doing nothing). The budget is
    then enforced on every smoother by :func:`framing.fit_to_margin`.
    """
    w, h = motion.size
    p = motion.path
    cuts = motion.status == "cut"
    common = dict(fps=fps, window_s=settings.window_s, model=settings.model, width=w, height=h,
                  cuts=cuts)
    smoother = settings.smoother
    s = None
    if settings.margin == "auto":
        reference = "gaussian" if smoother == "l1" else smoother
        s_ref = smooth_path(p, smoother=reference, margin=None, **common)
        margin = framing.choose_margin(p, s_ref, w, h, AUTO_MARGIN_CAP)
        log.info("margin: auto chose %.4f (%.1f%% cut from each side)", margin, 100.0 * margin)
        if smoother in ("gaussian", "kalman"):
            s = s_ref
    else:
        margin = float(settings.margin)
    if s is None:
        s = smooth_path(p, smoother=smoother, margin=margin, **common)
    s, kept = framing.fit_to_margin(p, s, margin, model=settings.model, width=w, height=h,
                                    fps=fps, window_s=settings.window_s,
                                    min_distortion=framing.MIN_DISTORTION)
    if np.any(kept < 1.0):
        log.warning("margin %.3f too small for the full correction in %d frames; the "
                    "correction was eased there", margin, int(np.count_nonzero(kept < 1.0)))
    motion.corrections = framing.corrections(p, s, margin, w, h)
    motion.smooth_values = similarity_readout(s, motion.centre)
    motion.summary = {"margin": margin,
                      "frames_correction_eased": int(np.count_nonzero(kept < 1.0))}


# One decoding thread for the render pass: the encoder, not the decoder, sets its pace, and
# every extra frame-decoding thread holds pictures of its own (at 4K, 30–50 MiB measured on
# two cores, more where ffmpeg would start one thread per core).
RENDER_DECODE_THREADS = 1


def _render_video(clip: Path, info: VideoInfo, motion: MotionLog, settings: Settings,
                  outputs: Outputs, progress: ProgressFactory | None,
                  excluded: list[list[float]] | None = None) -> None:
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
    check = residual.RenderCheck(
        motion.frames, (info.width, info.height), cuts=motion.status == "cut",
        excluded=_excluded_regions(motion) if excluded is None else excluded,
        seed=settings.seed)
    bar = _bar(progress, "render", motion.frames)
    try:
        with video, closing(iter_frames(clip, info=info, yuv=yuv,
                                        decode_threads=RENDER_DECODE_THREADS)) as frames:
            if compare is None:
                n = render_frames(frames, motion.corrections, video,
                                  fill=settings.fill, on_frame=bar.update, check=check)
            else:
                with compare:
                    n = render_frames(frames, motion.corrections, video,
                                      fill=settings.fill, compare=compare, on_frame=bar.update,
                                      check=check)
    finally:
        bar.close()
    if n != motion.frames:
        log.warning("%s: rendered %d frames but the log has %d", clip, n, motion.frames)
    motion.output_check, motion.source_check = check.output, check.source
    if check.checked:
        log.debug("output check: %.2f ms per frame (%.2f ms of processor time)",
                  1000.0 * check.seconds / check.checked,
                  1000.0 * check.cpu_seconds / check.checked)


def _excluded_regions(motion: MotionLog) -> list[list[float]]:
    """Rectangles (x, y, w, h) left out of tracking, full-resolution pixels of the log."""
    found = motion.extra.get("excluded")
    out: list[list[float]] = []
    if isinstance(found, dict):
        for rects in found.values():
            # A log is data: anything but four finite numbers is passed over.
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


def _record_outputs(motion: MotionLog, outputs: Outputs) -> None:
    pairs = (("video", outputs.video), ("compare", outputs.compare),
             ("log_csv", outputs.log_csv), ("log_json", outputs.log_json))
    motion.extra["outputs"] = {k: str(v) for k, v in pairs if v is not None}


def _correct_and_write(clip: Path, info: VideoInfo, motion: MotionLog, settings: Settings,
                       outputs: Outputs, progress: ProgressFactory | None,
                       excluded: list[list[float]] | None = None) -> MotionLog:
    """Plan the corrections and render them (or pass a clip too short or small to steady
    through unchanged), then summarise and save the log."""
    fps = shake.frame_rate(motion.time_s, info.fps)  # real time for the smoothing window
    if motion.frames < 2 or not measurable(info.width, info.height):
        motion.corrections = np.repeat(np.eye(3)[None], motion.frames, axis=0)
        motion.smooth_values = similarity_readout(motion.path, motion.centre)
        _copy_unchanged(clip, outputs.video)
        if outputs.compare is not None:
            _copy_unchanged(clip, outputs.compare)
    else:
        plan_corrections(motion, settings, fps)
        _render_video(clip, info, motion, settings, outputs, progress, excluded)
    _summarise(motion, settings, info.fps)
    _warn_if_not_steadier(clip, motion)
    _record_outputs(motion, outputs)
    motion.save(outputs.log_csv)
    return motion


# --------------------------------------------------------------------- API
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
    clip = Path(clip)
    settings = _settings(config, options)
    info = probe(clip)
    parallel = None
    if workers is not None or scheduler is not None or keyframe_every is not None:
        parallel = dict(workers=workers, scheduler=scheduler, keyframe_every=keyframe_every)
        if scheduler is not None or workers != 1:
            # This process only waits on the workers: the summary's import is done by then
            # (1.2–1.5 s less after the analysis, measured; a single pass gained nothing).
            shake.prefetch()
    motion = _measure_motion(clip, info, settings, progress, parallel)
    _summarise(motion, settings, info.fps)
    return motion


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
    settings = _settings(config, options)
    outputs = plan_outputs(clip, video_out=out, log_out=log_path, with_video=True,
                           compare=settings.compare)
    check_outputs(clip, outputs, settings.force)
    info = probe(clip)
    motion = _measure_motion(clip, info, settings, progress)
    return _correct_and_write(clip, info, motion, settings, outputs, progress)


@all_or_nothing()
def render(clip: str | os.PathLike, log_file: str | os.PathLike | MotionLog,
           out: str | os.PathLike | None = None, *, config: str | None = None,
           progress: ProgressFactory | None = None, **options: Any) -> MotionLog:
    """Render a clip from an existing motion log: the path is smoothed again with the given
    settings (smoother, window, margin, fill, encoding). A log made on a smaller proxy of the
    clip is scaled to the clip's resolution. Writes the video and a new log beside it."""
    clip = Path(clip)
    saved = log_file if isinstance(log_file, MotionLog) else read_log(log_file)
    base = {k: v for k, v in saved.settings.items() if k in Settings.__dataclass_fields__}
    try:
        # A log is data: settings it holds that are no longer valid fall back to defaults.
        base["ignore"] = tuple(tuple(r) for r in base.get("ignore", ()))
        logged = Settings(**base)
    except (TypeError, ValueError, StabilizeError):
        logged = Settings()
    settings = (_settings(config, options) if config
                else logged.replace(**{k: v for k, v in options.items() if v is not None}))
    outputs = plan_outputs(clip, video_out=out, log_out=None, with_video=True,
                           compare=settings.compare)
    if not isinstance(log_file, MotionLog) and Path(log_file).resolve() == \
            outputs.log_csv.resolve():
        outputs = Outputs(outputs.video, outputs.log_csv.with_name(
            f"{clip_name(clip)}.render.motion.csv"), outputs.compare)
    check_outputs(clip, outputs, settings.force)
    info = probe(clip)
    matrices = saved.matrices
    excluded = _excluded_regions(saved)
    if saved.size != (info.width, info.height):
        log.info("log made at %dx%d, rendering at %dx%d", *saved.size, info.width, info.height)
        matrices = rescale(matrices, (info.width / saved.size[0], info.height / saved.size[1]))
        fx, fy = info.width / saved.size[0], info.height / saved.size[1]
        excluded = [[x * fx, y * fy, w * fx, h * fy] for x, y, w, h in excluded]
    motion = MotionLog(
        time_s=saved.time_s, matrices=matrices, tracked=saved.tracked, inliers=saved.inliers,
        inlier_ratio=saved.inlier_ratio, rms_px=saved.rms_px, rounds=saved.rounds,
        status=saved.status, source=_source_dict(info, saved.frames, saved.time_s),
        settings=settings.to_dict(),
    )
    return _correct_and_write(clip, info, motion, settings, outputs, progress, excluded)
