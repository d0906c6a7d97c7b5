"""The steady job from one decoding pass: the render follows the analysis a fixed look-ahead
behind, and gives way to a second pass whenever it could differ from the two-pass result.

One ffmpeg process decodes the clip once (:class:`stabilize.io.twin_decode.TwinDecoder`):
the analysis fits each frame's motion from the grey copy while the full-size frames wait in
a bounded queue; a frame is warped and encoded once its correction can no longer change
(the analysis no longer revises its fit, and the Gaussian plan has seen
:func:`stabilize.steady_path.look_ahead_frames` frames past it). At the end the whole clip is
planned as the two-pass route plans it; the video written is kept only when every correction
used, the frame rate, the cuts and the regions the output check left out are the same, bit for
bit. Otherwise (the margin bound somewhere, an overlay was found after the render began, a
variable frame rate, the queue filled up) the video is dropped and rendered again from a
second decoding pass, so the result is always the two-pass one.
"""

from __future__ import annotations

import logging
import math
import threading
from collections import deque
from collections.abc import Callable, Iterator
from contextlib import ExitStack
from pathlib import Path
from typing import Any

import numpy as np

from .. import residual, shake
from ..anchors import BaselineSettings
from ..config import AUTO_MARGIN_CAP, Settings
from ..io import VideoInfo, VideoWriter
from ..io.decode import DecodeStats, analysis_size
from ..io.encode import output_colour, output_pix_fmt
from ..io.frames import Frame, frame_bytes
from ..io.probing import constant_rate
from ..io.twin_decode import TwinDecoder
from ..motion import fit_motion, measurable
from ..motion_pass import FrameRecord
from ..motion_track import anchor_frames, fill_failed, stand_ins
from ..pinning import pin_regions, pinned_list
from ..render import compare_size
from ..render import render as render_frames
from ..segments import single_pass_options
from ..steady_path import CorrectionPlan, FixedLagPlanner, look_ahead_frames, plan_corrections
from .analysis import (
    FrameMotion,
    ProgressFactory,
    excluded_regions,
    motion_from_track,
    progress_bar,
)
from .outputs import Outputs

__all__ = ["HOLD_BUDGET_MIB", "frames_to_hold", "steady_single_decode"]

_log = logging.getLogger("stabilize")

#: Memory the full-size frames waiting for their corrections may take, MiB. A frame of
#: 1080p yuv420p is 3.0 MiB, of 4K 11.9 MiB (see docs/performance.md for the arithmetic).
HOLD_BUDGET_MIB = 256.0
# Frames the analysis settles at a time (each settling plans a window of the path).
_STEP = 8
# Frames in flight beyond the look-ahead: ffmpeg's queues, the read-ahead, the warp.
_SLACK = 12


def frames_to_hold(info: VideoInfo, settings: Settings) -> int | None:
    """Full-size frames the render must hold behind the analysis, or None when the clip takes
    two decoding passes (a whole-path smoother or ``margin="auto"``, a rolling-shutter
    readout, whose per-row correction needs the whole clip's band samples, a clip too small
    to steady, or more than :data:`HOLD_BUDGET_MIB` of frames).

    The hold is the plan's look-ahead plus the analysis's revision window, which over the
    first 6 ``baseline_s`` of a pass keeps every fit open (:mod:`stabilize.motion_pass`).
    """
    if not (math.isfinite(info.fps) and info.fps > 0) or settings.readout_ms != 0:
        return None
    lag = look_ahead_frames(settings.smoother, settings.margin, info.fps, settings.window_s)
    if lag is None or not measurable(info.width, info.height):
        return None
    revise = int(math.ceil(6.0 * BaselineSettings().baseline_s * info.fps))
    hold = lag + revise + _STEP + _SLACK
    yuv = output_pix_fmt(settings.codec, info.width, info.height)
    if hold * frame_bytes(yuv, info.width, info.height) > HOLD_BUDGET_MIB * 2**20:
        return None
    return hold


class _GiveUp(Exception):
    """The single pass cannot give the two-pass result; render from a second pass."""


class _Shared:
    """What the analysis, the frame reader and the render share, under one condition."""

    def __init__(self, hold: int) -> None:
        self.cond = threading.Condition()
        self.hold = hold
        self.frames: deque[Frame] = deque()
        self.corrections: list[np.ndarray] = []
        self.reader_done = False
        self.analysis_done = False
        self.give_up: str | None = None

    def stop(self, why: str) -> None:
        with self.cond:
            if self.give_up is None:
                self.give_up = why
            self.frames.clear()
            self.cond.notify_all()

    def _render_can_go(self) -> bool:
        return bool(self.frames) and self.frames[0].index < len(self.corrections)

    def put(self, frame: Frame) -> None:
        """Queue a full-size frame (reader thread); full and stuck means give up."""
        with self.cond:
            while (len(self.frames) >= self.hold and self.give_up is None
                   and not self.analysis_done):
                if not self._render_can_go():
                    self.give_up = "the look-ahead outgrew its queue"
                    self.frames.clear()
                    self.cond.notify_all()
                    break
                self.cond.wait(0.5)
            if self.give_up is None:
                self.frames.append(frame)
                self.cond.notify_all()

    def ready_frames(self) -> Iterator[Frame]:
        """Frames whose correction is final, in order (the render's input)."""
        while True:
            with self.cond:
                self.cond.wait_for(lambda: self.give_up is not None or self._render_can_go()
                                   or (self.reader_done and not self.frames
                                       and self.analysis_done))
                if self.give_up is not None:
                    raise _GiveUp(self.give_up)
                if not self.frames:
                    return
                frame = self.frames.popleft()
                self.cond.notify_all()
            yield frame


class _Corrections:
    """The corrections planned so far, indexed like an array (the render asks only for
    frames already planned)."""

    def __init__(self, shared: _Shared) -> None:
        self._shared = shared

    def __len__(self) -> int:
        return 2**62

    def __getitem__(self, t: int) -> np.ndarray:
        return self._shared.corrections[t]


class _Settler:
    """Turns the analysis's settled records into corrections (analysis thread)."""

    def __init__(self, shared: _Shared, planner: FixedLagPlanner, full_size: tuple[int, int],
                 cuts: np.ndarray, scene: np.ndarray) -> None:
        self.shared, self.planner, self.size = shared, planner, full_size
        self.cuts = cuts                # the output check's cut flags, filled as frames settle
        self.scene = scene              # and the log's motion it expects (nan: not measured)
        # Settled frames from frame `base` on (older ones are no longer needed).
        self.base = 0
        self.matrices: list[np.ndarray] = []
        self.status: list[str] = []
        self.reason: list[str] = []
        self.stand: list[bool] = []
        self.anchor: list[bool] = []
        self.last_good = -1
        self.excluded: dict | None = None

    def __call__(self, settled: int, records: list[FrameRecord],
                 excluded_now: Callable[[], dict]) -> None:
        known = self.base + len(self.matrices)
        if self.shared.give_up is not None or settled < known + _STEP:
            return
        for r in records[known:settled]:
            self.matrices.append(r.matrix)
            self.status.append(r.status)
            self.reason.append(r.reason)
            self.stand.append(bool(stand_ins(np.array([r.status]), np.array([r.reason]))[0]))
            self.anchor.append(bool(anchor_frames(np.array([r.status]),
                                                  np.array([r.reason]))[0]))
        # A stand-in is interpolated between trustworthy neighbours (frame 0, cuts and weak
        # fits on few tracks are not among them, :func:`anchor_frames`): those after the
        # last trustworthy frame wait for the next one.
        first, n, o = self.planner.frames, settled, self.base
        good = [t for t in range(max(1, first), n) if self.anchor[t - o]]
        if any(self.stand[first - o:n - o]):
            if not good:
                return
            upto = good[-1] + 1
        else:
            upto = n
        b = max(0, self.last_good - 1)
        status = np.array(self.status[b - o:upto - o])
        filled = fill_failed(np.array(self.matrices[b - o:upto - o]), status, self.size,
                             stand_in=np.array(self.stand[b - o:upto - o]),
                             anchor=np.array(self.anchor[b - o:upto - o]))[first - b:]
        if good:
            self.last_good = good[-1]
        self._add(filled, status[first - b:], np.array(self.reason[first - o:upto - o]),
                  excluded_now, final=False)
        drop = max(0, self.last_good - 1) - self.base
        del self.matrices[:drop], self.status[:drop], self.reason[:drop], self.stand[:drop]
        del self.anchor[:drop]
        self.base += drop

    def finish(self, matrices: np.ndarray, status: np.ndarray, reasons: np.ndarray,
               excluded_now: Callable[[], dict]) -> None:
        """The analysis ended: plan every frame left, from its final transforms."""
        first = self.planner.frames
        self._add(matrices[first:], status[first:], reasons[first:], excluded_now, final=True)

    def _add(self, matrices: np.ndarray, status: np.ndarray, reasons: np.ndarray,
             excluded_now: Callable[[], dict], final: bool) -> None:
        first = self.planner.frames
        if first + len(status) > len(self.cuts):
            self.shared.stop("more frames than the output check was sized for")
            return
        cuts = status == "cut"
        self.cuts[first:first + len(cuts)] = cuts
        self.scene[first:first + len(cuts)] = residual.logged_scene(matrices, status, reasons)
        self.planner.extend(matrices, cuts)
        new = self.planner.plan(len(self.shared.corrections), final=final)
        if self.planner.eased:
            self.shared.stop("the margin binds somewhere")
            return
        if len(new) and self.excluded is None:
            self.excluded = excluded_now()
        with self.shared.cond:
            self.shared.corrections.extend(new)
            self.shared.cond.notify_all()


def _reasons(track: Any) -> np.ndarray:
    """The track's per-frame reason codes ('' for none)."""
    if track.reason is None:
        return np.full(len(track.status), "", "<U12")
    return np.asarray(track.reason)


def _excluded_list(excluded: dict) -> list[list[float]]:
    return excluded_regions({"excluded": excluded})


def steady_single_decode(clip: Path, info: VideoInfo, settings: Settings, outputs: Outputs,
                         progress: ProgressFactory | None, hold: int,
                         ) -> tuple[FrameMotion, CorrectionPlan | None, Any]:
    """Analyse and render a clip from one decoding pass.

    Returns the analysis's record and, when the video written is the two-pass one bit for
    bit, the plan and the output check's (output, source) motion; (motion, None, None) when
    the video was dropped and must be rendered from a second pass.
    """
    size = analysis_size(info, settings.analysis_width)
    yuv = output_pix_fmt(settings.codec, info.width, info.height)
    w, h = info.width, info.height
    shared = _Shared(hold)
    bound = max(2 * int(info.frames_estimate) + 100, 1000)
    cuts = np.zeros(bound, bool)
    scene = np.full((bound, 3, 3), np.nan)
    planner = FixedLagPlanner(fps=info.fps, window_s=settings.window_s, model=settings.model,
                              margin=float(settings.margin), width=w, height=h)
    settler = _Settler(shared, planner, (w, h), cuts, scene)
    stats = DecodeStats()
    result: dict[str, Any] = {}
    abar = progress_bar(progress, "analyse", info.frames_estimate)
    rbar = progress_bar(progress, "render", info.frames_estimate)

    def analyse(tw: TwinDecoder) -> None:
        try:
            track = fit_motion(tw.analysis(), full_size=(w, h), analysis_size=size,
                               settings=settings, on_frame=abar.update, on_settled=settler,
                               **single_pass_options(info))
            result["track"] = track
            if shared.give_up is None:
                settler.finish(track.matrices, track.status, _reasons(track),
                               lambda: track.excluded)
        except BaseException as exc:  # handed to the main thread
            result["error"] = exc
            shared.stop("the analysis stopped")
        finally:
            with shared.cond:
                shared.analysis_done = True
                shared.cond.notify_all()

    def read(tw: TwinDecoder) -> None:
        for frame in tw.render():
            shared.put(frame)
        with shared.cond:
            shared.reader_done = True
            shared.cond.notify_all()

    check: list[residual.RenderCheck] = []

    def check_frame(index, source, output, correction) -> None:
        if not check:
            check.append(residual.RenderCheck(
                bound, (w, h), cuts=cuts, excluded=_excluded_list(settler.excluded or {}),
                scene=scene, seed=settings.seed))
        check[0](index, source, output, correction)

    writer_args = dict(codec=settings.codec, crf=settings.crf, preset=settings.preset,
                       input_pix_fmt=yuv, colour=output_colour(info), sar=info.sar)
    rendered = 0
    kept: tuple[CorrectionPlan, Any] | None = None
    motion: FrameMotion | None = None
    with TwinDecoder(clip, info, size, yuv=yuv, stats=stats) as tw:
        threads = [threading.Thread(target=analyse, args=(tw,), daemon=True),
                   threading.Thread(target=read, args=(tw,), daemon=True)]
        for t in threads:
            t.start()
        try:
            with ExitStack() as stack:
                video = stack.enter_context(VideoWriter(
                    outputs.video, w, h, info.fps_text,
                    audio_from=clip if info.has_audio else None, audio_codec=info.audio_codec,
                    time_base=info.time_base, **writer_args))
                compare = None
                if outputs.compare is not None:
                    cw, ch = compare_size(w, h)
                    compare = stack.enter_context(VideoWriter(
                        outputs.compare, cw, ch, info.fps_text, time_base=info.time_base,
                        **writer_args))
                # The regions pinned are those known when the first frame is rendered; the
                # video is kept only if they are the whole clip's (see _verify).
                rendered = render_frames(shared.ready_frames(), _Corrections(shared), video,
                                         fill=settings.fill, compare=compare,
                                         on_frame=rbar.update, check=check_frame,
                                         pinned=lambda: pinned_list(pin_regions(
                                             settler.excluded, settings.pin_overlays, w, h)))
                for t in threads:
                    t.join()
                if "error" in result:
                    raise result["error"]
                tw.close()  # both streams ended: the decoder's complaints are all in
                motion = motion_from_track(clip, info, result["track"], stats, settings)
                kept = _verify(motion, info, settings, shared, settler, check, rendered)
                if kept is None:
                    raise _GiveUp("the whole clip's plan differs")
                _log.debug("%s: analysed and rendered from one decoding pass", clip)
        except _GiveUp as why:
            _log.debug("%s: single decoding pass given up (%s); rendering from a second "
                       "pass", clip, shared.give_up or why)
            shared.stop(str(why))
            threads[0].join()
            if "error" in result:
                raise result["error"] from None
        finally:
            shared.stop("the job ended")
            abar.close()
            rbar.close()
            tw.close()
            for t in threads:
                t.join()
    if "track" not in result:
        raise result.get("error") or RuntimeError("the analysis gave no result")
    if motion is None:
        motion = motion_from_track(clip, info, result["track"], stats, settings)
    if kept is None:
        return motion, None, None
    return motion, kept[0], kept[1]


def _verify(motion: FrameMotion, info: VideoInfo, settings: Settings, shared: _Shared,
            settler: _Settler, check: list, rendered: int,
            ) -> tuple[CorrectionPlan, Any] | None:
    """The plan and checks when the render equals the two-pass one bit for bit, else None."""
    n = motion.frames
    if (n < 2 or rendered != n or len(shared.corrections) != n or not check
            or not constant_rate(motion.time_s, info.fps)):
        return None
    fps = shake.frame_rate(motion.time_s, info.fps)
    if fps != info.fps:
        return None
    w, h = int(motion.source["width"]), int(motion.source["height"])
    plan = plan_corrections(motion.matrices, motion.cuts, fps=fps, window_s=settings.window_s,
                            model=settings.model, smoother=settings.smoother,
                            margin=settings.margin, width=w, height=h,
                            auto_cap=AUTO_MARGIN_CAP)
    used = np.array(shared.corrections)
    if not np.array_equal(used, plan.corrections):
        return None
    rc = check[0]
    if (not np.array_equal(rc.cuts[:n], motion.cuts) or rc.cuts[n:].any()
            or not np.array_equal(rc.scene[:n], residual.logged_scene(
                motion.matrices, motion.status, motion.reasons), equal_nan=True)
            or _excluded_list(settler.excluded or {}) != _excluded_list(
                motion.extra.get("excluded", {}))):
        return None
    return plan, (rc.output[:n], rc.source[:n])
