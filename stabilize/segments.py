"""The keyframe scheme: one long clip's analysis split at keyframes, run over workers, merged.

The per-frame analysis carries state from frame to frame (live tracks and their history of
moving with the camera, static-overlay evidence, the previous frame's motion as a prior, the
texture reference), so a segment started in the middle of a clip would not see what a single
pass saw there. The scheme that makes segments exact: the analysis restarts that state at
fixed *keyframes*, every ``keyframe_every`` frames counted from frame 0, exactly as if a new
analysis began a short lead-in before each keyframe (:func:`stabilize.motion.warm_up_frames`
frames before the frame before it, so that its tracks arrive with a history of what moved
with the scene). A single pass runs that second analysis alongside over the lead-in and hands
over at the keyframe (:func:`single_pass_options`); a segment simply starts there and drops
the lead-in's frames. The motion from frame k−1 to keyframe k is still measured, and every
keyframe interval depends on its own frames, its lead-in and the next interval's first
:func:`stabilize.motion.follow_through_frames` frames only (the analysis that hands over at
a keyframe runs on over them to revise its own last frames, in a single pass as in a
segment). Any grouping of intervals into segments, analysed in any order on any worker,
gives the same log; so does one process going through them in turn.

Per-frame random seeds are ``[seed, frame index in the clip]``, so a segment draws what a
single pass draws at the same frames.

The runs are handed to workers by :mod:`stabilize.runner` (local processes or a Dask
cluster). A worker is one core: OpenCV runs single-threaded in it, so ``workers=1`` is one
single-threaded pass (in this process) and ``workers=N`` asks for N cores. Without workers,
:func:`stabilize.measure` runs one pass that spreads its tracking over every core
through OpenCV's own threads.
"""

from __future__ import annotations

import itertools
import math
import os
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .config import Settings
from .errors import StabilizeError
from .io import VideoInfo, iter_frame_range
from .io.decode import DecodeStats
from .motion import fit_motion, follow_through_frames, warm_up_frames
from .motion_track import MotionTrack, anchor_frames, fill_failed, stand_ins
from .runner import ProgressCounter, default_workers, opencv_threads, parallel_map

__all__ = [
    "KEYFRAME_S",
    "MIN_KEYFRAME_FRAMES",
    "SegmentResult",
    "SegmentTask",
    "fit_in_segments",
    "fit_segment",
    "keyframe_frames",
    "lead_in_start",
    "merge",
    "plan_segments",
    "single_pass_options",
]

#: Keyframe spacing in seconds of nominal frame rate. Each restart costs what the first frames
#: of a clip cost (fresh tracks with no history, no prior, overlays to be found again), so it
#: is kept long; common practice, not a measured optimum.
KEYFRAME_S = 10.0
MIN_KEYFRAME_FRAMES = 30


def keyframe_frames(fps: float, keyframe_s: float = KEYFRAME_S) -> int:
    """Keyframe spacing in frames for a clip of nominal frame rate ``fps``.

    Parameters
    ----------
    fps : nominal frame rate, frames per second.
    keyframe_s : spacing, seconds.

    Returns
    -------
    int : frames between keyframes, at least :data:`MIN_KEYFRAME_FRAMES`.
    """
    return max(MIN_KEYFRAME_FRAMES, int(round(keyframe_s * fps)))


def single_pass_options(info: VideoInfo) -> dict[str, Any]:
    """Keyword options that make a single pass restart at the keyframes a segmented pass
    uses, so both give the same log.

    Parameters
    ----------
    info : the clip's probe; its nominal ``fps`` (frames per second) sets the spacing.

    Returns
    -------
    dict : ``{"keyframe_every": frames}`` for :func:`stabilize.motion.fit_motion`.
    """
    return {"keyframe_every": keyframe_frames(info.fps)}


# ------------------------------------------------------------------- one range
@dataclass(frozen=True)
class SegmentTask:
    """Frames ``[start, stop)`` of a clip (``stop`` None: to the end) to analyse; plain data
    so it can travel to a worker process or a cluster."""

    clip: str
    info: VideoInfo
    analysis_size: tuple[int, int]
    settings: Settings
    start: int
    stop: int | None
    keyframe_every: int


@dataclass
class SegmentResult:
    """Per-frame arrays of frames ``start`` onwards, as :class:`MotionTrack` holds them."""

    start: int
    track: MotionTrack
    overlays: list[list[int]] = field(default_factory=list)
    #: the decoders' complaints about damaged data while reading this run, and the last one
    decode_errors: int = 0
    last_error: str | None = None
    #: whether the clip's end was reached in this run
    reached_end: bool = False


def fit_segment(task: SegmentTask, on_frame: Callable[[int], None] | None = None,
                  single_thread: bool = False) -> SegmentResult:
    """Analyse frames ``[task.start, task.stop)`` with restarts at every keyframe.

    Parameters
    ----------
    task : the range; ``task.start`` must be a keyframe (a multiple of ``keyframe_every``)
        or 0.
    on_frame : called with the count of frames analysed as they go (lead-in included).
    single_thread : keep OpenCV and the decoder to one thread each, for worker processes
        sharing the cores.

    Returns
    -------
    SegmentResult : the per-frame arrays of frames ``task.start`` onwards.
    """
    if task.start % task.keyframe_every:
        raise ValueError("a segment must start at a keyframe")
    with opencv_threads(1 if single_thread else None):
        return _fit_segment_frames(task, on_frame, decode_threads=1 if single_thread else None)


def _fit_segment_frames(task: SegmentTask, on_frame: Callable[[int], None] | None,
                   decode_threads: int | None) -> SegmentResult:
    info = task.info
    read_from = lead_in_start(task.start, task.keyframe_every)
    # Past the end, the frames the last analysis follows through on (their records dropped).
    read_to = None if task.stop is None else \
        task.stop + follow_through_frames(task.keyframe_every)
    stats = DecodeStats()
    frames = iter_frame_range(task.clip, read_from, read_to, size=task.analysis_size,
                              gray=True, info=info, decode_threads=decode_threads, stats=stats)
    common = dict(full_size=(info.width, info.height), analysis_size=task.analysis_size,
                  settings=task.settings)
    parts: list[MotionTrack] = []
    regions: list[list[int]] = []
    try:
        # A header may promise more frames than the file holds (a clip cut short): a run
        # planned past the real end decodes nothing and keeps nothing.
        first = next(frames, None)
        if first is not None:
            track = fit_motion(itertools.chain([first], frames), on_frame=on_frame,
                               keyframe_every=task.keyframe_every, first_index=read_from,
                               **common)
            stop = None if task.stop is None else task.stop - read_from
            if (task.start > read_from or stop is not None) and len(track.time_s):
                track = track.select(slice(task.start - read_from, stop))
            parts.append(track)
            regions += track.excluded.get("static_overlay", [])
    finally:
        frames.close()
    ignored = {"ignore": [list(r) for r in task.settings.ignore]}
    return SegmentResult(task.start, MotionTrack.concatenate(parts, ignored), _unique(regions),
                         stats.errors, stats.last_error,
                         stats.finished or task.stop is None)


def lead_in_start(start: int, keyframe_every: int) -> int:
    """First frame a run starting at keyframe ``start`` reads: the analysis starts
    :func:`~stabilize.motion.warm_up_frames` frames before the frame before the keyframe,
    as a single pass's second analysis does, and its frames before ``start`` are dropped.

    Parameters
    ----------
    start : the run's first kept frame, a keyframe or 0.
    keyframe_every : keyframe spacing, frames.

    Returns
    -------
    int : the frame index to start decoding at (0 for ``start`` 0).
    """
    if start <= 0:
        return 0
    return max(0, start - 1 - warm_up_frames(keyframe_every))


def _unique(regions: Iterable[list[int]]) -> list[list[int]]:
    seen: list[list[int]] = []
    for r in regions:
        if list(r) not in seen:
            seen.append(list(r))
    return seen


# ------------------------------------------------------------------ the clip
def plan_segments(frames_estimate: int, keyframe_every: int,
                  workers: int) -> list[tuple[int, int | None]]:
    """Runs of frames ``(start, stop)`` to hand out: one per keyframe interval when several
    workers share them, the whole clip for one worker. The last runs to the end (the real
    count is known only after decoding).

    Workers take the next run as they come free, so many short runs keep them all busy to
    the end even when the clip is not a whole number of intervals long or some intervals
    cost more than others; a run costs one seek and a fresh decoder, small beside an
    interval's analysis.

    Parameters
    ----------
    frames_estimate : the clip's frame count as probed (may be off).
    keyframe_every : keyframe spacing, frames.
    workers : workers that will share the runs.

    Returns
    -------
    list of (start, stop) : frame ranges ``[start, stop)``; the last ``stop`` is None.
    """
    intervals = max(1, math.ceil(frames_estimate / keyframe_every))
    if workers <= 1:
        return [(0, None)]
    starts = [i * keyframe_every for i in range(intervals)]
    return [(s, starts[i + 1] if i + 1 < len(starts) else None) for i, s in enumerate(starts)]


def fit_in_segments(clip: str | os.PathLike, info: VideoInfo, analysis_size: tuple[int, int],
                     settings: Settings, *, workers: int | None = None,
                     scheduler: str | None = None, keyframe_every: int | None = None,
                     on_frame: Callable[[int], None] | None = None,
                     stats: DecodeStats | None = None) -> MotionTrack:
    """Analyse a clip in keyframe segments over ``workers``; the same result for any number
    of workers. Without a ``scheduler``, one worker or a clip of one keyframe interval is
    analysed in this process.

    Parameters
    ----------
    clip : the video file.
    info : its probe.
    analysis_size : (width, height) of the analysed frames, pixels.
    settings : the analysis settings.
    workers : cores to use (default: every core this process may use).
    scheduler : None, ``"local"`` or a Dask scheduler address (:func:`parallel_map`).
    keyframe_every : keyframe spacing, frames; default :func:`keyframe_frames` of the
        clip's nominal frame rate.
    on_frame : called in this process with counts of frames analysed.
    stats : when given, filled in as one decoding pass would fill it (frames, last time, the
        decoders' complaints summed over the runs, whether the end was reached), so an early
        end or damaged data is found as in one pass.

    Returns
    -------
    MotionTrack : the whole clip's per-frame motion, as one pass gives it.
    """
    workers = default_workers() if workers is None else int(workers)
    if workers < 1:
        raise StabilizeError(f"setting 'workers': {workers} is not a positive number")
    k = int(keyframe_every or keyframe_frames(info.fps))
    if k < 2:
        raise StabilizeError(f"keyframe spacing {k} frames is too short (at least 2)")
    plan = plan_segments(info.frames_estimate, k, workers)
    tasks = [SegmentTask(str(Path(clip).resolve()), info, tuple(analysis_size), settings,
                         s, e, k) for s, e in plan]
    if (workers == 1 or len(tasks) == 1) and scheduler is None:
        # One worker is one core, here as in a pool: the same work a pool's worker does.
        # A clip of one keyframe interval is one run, which a pool would only delay.
        results = [fit_segment(t, on_frame, single_thread=True) for t in tasks]
    else:
        results = [None] * len(tasks)
        # Frames each run reported while under way (local workers report as they go; Dask
        # workers only finish), so a finished run adds just what it had not reported yet.
        told = [0] * len(tasks)

        def under_way(i: int, n: int) -> None:
            if results[i] is None and on_frame:
                told[i] += n
                on_frame(n)

        for i, outcome in parallel_map(_fit_segment_in_worker, tasks, workers=workers,
                                       scheduler=scheduler,
                                       on_progress=under_way if on_frame else None):
            if isinstance(outcome, BaseException):
                raise outcome
            results[i] = outcome
            if on_frame:
                on_frame(max(0, len(outcome.track.time_s) - told[i]))
    track = merge(results, settings, (info.width, info.height))
    if stats is not None:
        stats.frames = len(track.time_s)
        stats.last_time_s = float(track.time_s[-1]) if len(track.time_s) else None
        stats.errors = sum(r.decode_errors for r in results)
        stats.last_error = next((r.last_error for r in reversed(sorted(
            results, key=lambda r: r.start)) if r.last_error), None)
        stats.finished = any(r.reached_end for r in results)
    return track


def _fit_segment_in_worker(task: SegmentTask) -> SegmentResult:
    # A run after the first re-reads the frames before it (the lead-in), and a run before
    # the last reads on past its end (the follow-through), which it does not keep and so
    # does not count.
    counter = ProgressCounter(skip=task.start - lead_in_start(task.start, task.keyframe_every),
                              cap=None if task.stop is None else task.stop - task.start)
    try:
        return fit_segment(task, counter, single_thread=True)
    finally:
        counter.flush()


def merge(results: list[SegmentResult], settings: Settings,
          full_size: tuple[int, int]) -> MotionTrack:
    """Join segment results in frame order. Stand-ins for failed frames are worked out again
    over the whole clip: near a join they depend on neighbours in the next segment.

    Parameters
    ----------
    results : the segments' results, in any order.
    settings : the analysis settings.
    full_size : (width, height) of the clip, full-resolution pixels.

    Returns
    -------
    MotionTrack : the joined track.
    """
    results = sorted(results, key=lambda r: r.start)
    kept: list[MotionTrack] = []
    expected = 0
    for r in results:
        n = len(r.track.time_s)
        if n == 0:
            continue
        if r.start != expected:
            raise StabilizeError(f"segment at frame {r.start} does not follow frame "
                                 f"{expected - 1}: the clip decodes inconsistently")
        kept.append(r.track)
        expected += n
    track = MotionTrack.concatenate(kept, {"ignore": [list(r) for r in settings.ignore]})
    track.excluded["static_overlay"] = _unique(reg for r in results for reg in r.overlays)
    if len(track.status):
        track.matrices = fill_failed(track.matrices, track.status, full_size,
                                     stand_in=stand_ins(track.status, track.reason),
                                     anchor=anchor_frames(track.status, track.reason))
    return track
