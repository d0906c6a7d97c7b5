"""Segment-parallel analysis of one long clip, and the worker pools both it and batch use.

The per-frame analysis carries state from frame to frame (live tracks and their history of
moving with the camera, static-overlay evidence, the previous frame's motion as a prior, the
texture reference), so a segment started in the middle of a clip would not see what a single
pass saw there. The scheme that makes segments exact: the analysis restarts that state at
fixed *keyframes*, every ``keyframe_every`` frames counted from frame 0, exactly as if a new
analysis began a short lead-in before each keyframe (:func:`stabilize.motion.warm_up_frames`
frames before the frame before it, so that its tracks arrive with a history of what moved
with the scene). A single pass runs that second analysis alongside over the lead-in and hands
over at the keyframe; a segment simply starts there and drops the lead-in's frames. The
motion from frame k−1 to keyframe k is still measured, and every keyframe interval depends on
its own frames and its lead-in only. Any grouping of intervals into segments,
analysed in any order on any worker, gives the same log; so does one process going through
them in turn.

Per-frame random seeds are ``[seed, frame index in the clip]``, so a segment draws what a
single pass draws at the same frames.

Workers: local processes (``concurrent.futures`` with the forkserver or spawn start method,
never fork: the parent may hold threads and ffmpeg pipes), a Dask ``LocalCluster``
(``scheduler="local"``) or an existing Dask cluster (``scheduler="tcp://host:port"``), whose
workers must see the same paths and have stabilize installed. A worker is one core: OpenCV
runs single-threaded in it, so ``workers=1`` is one single-threaded pass (in this process)
and ``workers=N`` asks for N cores. Without workers, :func:`stabilize.measure` runs
one pass that spreads its tracking over every core through OpenCV's own threads.
"""

from __future__ import annotations

import math
import multiprocessing
import os
import time
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from queue import Empty
from typing import Any

import numpy as np

from .config import Settings
from .errors import StabilizeError
from .motion import MotionTrack, analyse, fill_failed, stand_ins, warm_up_frames
from .video import VideoInfo, iter_frame_range

#: Keyframe spacing in seconds of nominal frame rate. Each restart costs what the first frames
#: of a clip cost (fresh tracks with no history, no prior, overlays to be found again), so it
#: is kept long; common practice, not a measured optimum.
KEYFRAME_S = 10.0
MIN_KEYFRAME_FRAMES = 30


def keyframe_frames(fps: float, keyframe_s: float = KEYFRAME_S) -> int:
    """Keyframe spacing in frames for a clip of nominal frame rate ``fps`` (frames/second)."""
    return max(MIN_KEYFRAME_FRAMES, int(round(keyframe_s * fps)))


def single_pass_options(info: VideoInfo) -> dict[str, Any]:
    """Keyword options that make a single pass restart at the keyframes a segmented pass
    uses, so both give the same log."""
    return {"keyframe_every": keyframe_frames(info.fps)}


def default_workers() -> int:
    """The cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


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


def analyse_range(task: SegmentTask, on_frame: Callable[[int], None] | None = None,
                  single_thread: bool = False) -> SegmentResult:
    """Analyse frames ``[task.start, task.stop)`` with restarts at every keyframe.

    ``task.start`` must be a keyframe (a multiple of ``keyframe_every``) or 0.
    ``single_thread`` keeps OpenCV and the decoder to one thread each, for worker processes
    sharing the cores.
    """
    if task.start % task.keyframe_every:
        raise ValueError("a segment must start at a keyframe")
    with opencv_threads(1 if single_thread else None):
        return _analyse_range(task, on_frame, decode_threads=1 if single_thread else None)


@contextmanager
def opencv_threads(count: int | None) -> Iterator[None]:
    """Run the block with OpenCV limited to ``count`` threads (None: leave it as it is),
    and restore the previous setting afterwards."""
    if count is None:
        yield
        return
    import cv2

    before = cv2.getNumThreads()
    cv2.setNumThreads(count)
    try:
        yield
    finally:
        cv2.setNumThreads(before)


def _analyse_range(task: SegmentTask, on_frame: Callable[[int], None] | None,
                   decode_threads: int | None) -> SegmentResult:
    info = task.info
    read_from = lead_in_start(task.start, task.keyframe_every)
    frames = iter_frame_range(task.clip, read_from, task.stop, size=task.analysis_size,
                              gray=True, info=info, decode_threads=decode_threads)
    common = dict(full_size=(info.width, info.height), analysis_size=task.analysis_size,
                  settings=task.settings)
    parts: list[MotionTrack] = []
    regions: list[list[int]] = []
    try:
        track = analyse(frames, on_frame=on_frame, keyframe_every=task.keyframe_every,
                        first_index=read_from, **common)
        if task.start > read_from and len(track.time_s):
            track = _drop_first(track, task.start - read_from)
        parts.append(track)
        regions += track.excluded.get("static_overlay", [])
    finally:
        frames.close()
    return SegmentResult(task.start, _concat(parts, task.settings), _unique(regions))


def lead_in_start(start: int, keyframe_every: int) -> int:
    """First frame a run starting at keyframe ``start`` reads: the analysis starts
    :func:`~stabilize.motion.warm_up_frames` frames before the frame before the keyframe,
    as a single pass's second analysis does, and its frames before ``start`` are dropped."""
    if start <= 0:
        return 0
    return max(0, start - 1 - warm_up_frames(keyframe_every))


def _drop_first(track: MotionTrack, k: int) -> MotionTrack:
    return MotionTrack(time_s=track.time_s[k:], matrices=track.matrices[k:],
                       tracked=track.tracked[k:], inliers=track.inliers[k:],
                       inlier_ratio=track.inlier_ratio[k:], rms_px=track.rms_px[k:],
                       rounds=track.rounds[k:], status=track.status[k:],
                       excluded=track.excluded,
                       reason=None if track.reason is None else track.reason[k:])


def _concat(parts: list[MotionTrack], settings: Settings) -> MotionTrack:
    def cat(name: str, empty: np.ndarray) -> np.ndarray:
        arrays = [getattr(p, name) for p in parts]
        return np.concatenate(arrays) if arrays else empty

    return MotionTrack(
        time_s=cat("time_s", np.empty(0)), matrices=cat("matrices", np.empty((0, 3, 3))),
        tracked=cat("tracked", np.empty(0, int)), inliers=cat("inliers", np.empty(0, int)),
        inlier_ratio=cat("inlier_ratio", np.empty(0)), rms_px=cat("rms_px", np.empty(0)),
        rounds=cat("rounds", np.empty(0, int)), status=cat("status", np.empty(0, "<U6")),
        excluded={"ignore": [list(r) for r in settings.ignore]},
        reason=np.concatenate([p.reason if p.reason is not None
                               else np.full(len(p.status), "", "<U12") for p in parts])
        if parts else np.empty(0, "<U12"),
    )


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
    """
    intervals = max(1, math.ceil(frames_estimate / keyframe_every))
    if workers <= 1:
        return [(0, None)]
    starts = [i * keyframe_every for i in range(intervals)]
    return [(s, starts[i + 1] if i + 1 < len(starts) else None) for i, s in enumerate(starts)]


def analyse_segments(clip: str | os.PathLike, info: VideoInfo, analysis_size: tuple[int, int],
                     settings: Settings, *, workers: int | None = None,
                     scheduler: str | None = None, keyframe_every: int | None = None,
                     on_frame: Callable[[int], None] | None = None) -> MotionTrack:
    """Analyse a clip in keyframe segments over ``workers``; the same result for any number
    of workers. Without a ``scheduler``, one worker or a clip of one keyframe interval is
    analysed in this process.

    ``keyframe_every`` defaults to :func:`keyframe_frames` of the clip's nominal frame rate.
    """
    workers = default_workers() if workers is None else int(workers)
    if workers < 1:
        raise StabilizeError(f"option --workers: {workers} is not a positive number")
    k = int(keyframe_every or keyframe_frames(info.fps))
    if k < 2:
        raise StabilizeError(f"keyframe spacing {k} frames is too short (at least 2)")
    plan = plan_segments(info.frames_estimate, k, workers)
    tasks = [SegmentTask(str(Path(clip).resolve()), info, tuple(analysis_size), settings,
                         s, e, k) for s, e in plan]
    if (workers == 1 or len(tasks) == 1) and scheduler is None:
        # One worker is one core, here as in a pool: the same work a pool's worker does.
        # A clip of one keyframe interval is one run, which a pool would only delay.
        results = [analyse_range(t, on_frame, single_thread=True) for t in tasks]
    else:
        results = [None] * len(tasks)
        # Frames each run reported while under way (local workers report as they go; Dask
        # workers only finish), so a finished run adds just what it had not reported yet.
        told = [0] * len(tasks)

        def under_way(i: int, n: int) -> None:
            if results[i] is None and on_frame:
                told[i] += n
                on_frame(n)

        for i, outcome in parallel_map(_analyse_in_worker, tasks, workers=workers,
                                       scheduler=scheduler,
                                       on_progress=under_way if on_frame else None):
            if isinstance(outcome, BaseException):
                raise outcome
            results[i] = outcome
            if on_frame:
                on_frame(max(0, len(outcome.track.time_s) - told[i]))
    return merge(results, settings, (info.width, info.height))


def _analyse_in_worker(task: SegmentTask) -> SegmentResult:
    # A run after the first re-reads the frames before it (the lead-in), which it does not
    # keep and so does not count.
    counter = _ProgressCounter(skip=task.start - lead_in_start(task.start, task.keyframe_every))
    try:
        return analyse_range(task, counter, single_thread=True)
    finally:
        counter.flush()


def merge(results: list[SegmentResult], settings: Settings,
          full_size: tuple[int, int]) -> MotionTrack:
    """Join segment results in frame order. Stand-ins for failed frames are worked out again
    over the whole clip: near a join they depend on neighbours in the next segment."""
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
    track = _concat(kept, settings)
    track.excluded["static_overlay"] = _unique(reg for r in results for reg in r.overlays)
    if len(track.status):
        track.matrices = fill_failed(track.matrices, track.status, full_size,
                                     stand_in=stand_ins(track.status, track.reason))
    return track


# ------------------------------------------------------------------ workers
def _context() -> multiprocessing.context.BaseContext:
    methods = multiprocessing.get_all_start_methods()
    return multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")


def parallel_map(fn: Callable[[Any], Any], items: list[Any], *, workers: int,
                 scheduler: str | None = None,
                 on_progress: Callable[[int, int], None] | None = None,
                 ) -> Iterator[tuple[int, Any]]:
    """Run ``fn`` on every item on local processes or a Dask cluster; yield (index, result)
    as each finishes, the result being the exception when the call (or its worker) failed.

    ``scheduler``: None for a local process pool of ``workers`` processes, ``"local"`` for a
    Dask LocalCluster of ``workers`` single-threaded processes started here, or the address of
    a running Dask scheduler (``tcp://host:port``).

    ``on_progress(index, n)`` is called in this process, between results, with the counts
    that ``fn`` reported through :class:`_ProgressCounter` while working on item ``index``;
    local processes only (Dask workers report nothing before they finish). Counts for an
    item may still arrive after its result.
    """
    if not items:
        return
    if scheduler is None:
        yield from _pool_map(fn, items, workers, on_progress)
    else:
        yield from _dask_map(fn, items, workers, scheduler)


# ------------------------------------------------------------------ progress
#: In a local pool's worker: where progress goes (set by the pool's initializer), and the
#: item the worker is on. None elsewhere (this process, Dask workers).
_progress_queue: Any = None
_current_item: list[int] = [-1]

#: A worker sends its count at most this often (seconds): a bar needs no more, and each
#: message costs a pickle and a pipe write.
PROGRESS_EVERY_S = 0.5


def _init_pool_worker(queue: Any) -> None:
    global _progress_queue
    _progress_queue = queue


class _ProgressCounter:
    """An ``on_frame`` for work inside a pool worker: adds up the counts (after skipping the
    first ``skip``) and sends them to the pool's owner every :data:`PROGRESS_EVERY_S`; a
    no-op where there is no pool."""

    def __init__(self, skip: int = 0) -> None:
        self.skip, self.pending, self.sent_at = skip, 0, time.monotonic()

    def __call__(self, n: int) -> None:
        if self.skip:
            used = min(self.skip, n)
            self.skip, n = self.skip - used, n - used
        self.pending += n
        if time.monotonic() - self.sent_at >= PROGRESS_EVERY_S:
            self.flush()

    def flush(self) -> None:
        if _progress_queue is not None and self.pending:
            _progress_queue.put((_current_item[0], self.pending))
        self.pending, self.sent_at = 0, time.monotonic()


def _run_item(fn: Callable[[Any], Any], index: int, item: Any) -> Any:
    _current_item[0] = index
    return fn(item)


# A worker is one core: numerical libraries in it must not start threads of their own, or
# the workers oversubscribe the cores they share (common practice; here it gained about 8%).
_ONE_THREAD_ENV = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


@contextmanager
def _worker_environment() -> Iterator[None]:
    """Start worker processes with :data:`_ONE_THREAD_ENV` (settings the user made win),
    leaving this process's environment as it was."""
    saved = {k: os.environ.get(k) for k in _ONE_THREAD_ENV}
    for k, v in _ONE_THREAD_ENV.items():
        os.environ.setdefault(k, v)
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def _pool_map(fn, items, workers, on_progress=None):
    ctx = _context()
    queue = ctx.Queue() if on_progress else None
    with _worker_environment(), ProcessPoolExecutor(
            max_workers=min(workers, len(items)), mp_context=ctx,
            initializer=_init_pool_worker, initargs=(queue,)) as pool:
        futures = {pool.submit(_run_item, fn, i, item): i for i, item in enumerate(items)}
        pending = set(futures)
        try:
            while pending:
                done, pending = wait(pending, timeout=PROGRESS_EVERY_S if queue else None,
                                     return_when=FIRST_COMPLETED)
                _drain(queue, on_progress)
                for fut in done:
                    exc = fut.exception()
                    yield futures[fut], exc if exc is not None else fut.result()
        finally:
            for fut in pending:
                fut.cancel()
    if queue is not None:
        _drain(queue, on_progress)
        queue.close()


def _drain(queue, on_progress) -> None:
    while queue is not None:
        try:
            index, n = queue.get_nowait()
        except Empty:
            return
        on_progress(index, n)


def _dask_map(fn, items, workers, scheduler):
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise StabilizeError("option --scheduler needs Dask: pip install "
                             "'stabilize[cluster]'") from None
    cluster = None
    try:
        if scheduler == "local":
            with _worker_environment():
                cluster = LocalCluster(n_workers=workers, threads_per_worker=1,
                                       processes=True, dashboard_address=None)
            client = Client(cluster)
        else:
            try:
                client = Client(scheduler, timeout="10s")
            except (OSError, TimeoutError, ValueError) as exc:
                raise StabilizeError(f"option --scheduler: cannot reach a Dask scheduler at "
                                     f"{scheduler} ({exc})") from None
        with client:
            futures = [client.submit(fn, item, pure=False) for item in items]
            index = {f.key: i for i, f in enumerate(futures)}
            try:
                for fut in as_completed(futures):
                    if fut.status == "error":
                        yield index[fut.key], fut.exception()
                    else:
                        yield index[fut.key], fut.result()
            finally:
                client.cancel([f for f in futures if not f.done()])
    finally:
        if cluster is not None:
            cluster.close()
