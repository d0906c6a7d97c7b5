"""Per-frame motion: tracking plus consensus fitting -> inter-frame transforms with diagnostics.

Every transform is in full-resolution pixels (the analysis copy's points are mapped back before
fitting, so ``inlier_px`` is a full-resolution distance). Frames with no trustworthy fit get a
stand-in interpolated from their neighbours and status ``failed``, so they never throw the path.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass

import numpy as np

from .config import Settings
from .consensus import estimate
from .log import frame_centre
from .path import from_similarity, to_similarity
from .track import Tracker, TrackSettings, ignore_mask, to_full_resolution
from .video import Frame

MIN_SIDE_PX = 24


@dataclass
class MotionTrack:
    """Per-frame arrays of one analysis pass (see :class:`stabilize.log.MotionLog`)."""

    time_s: np.ndarray
    matrices: np.ndarray
    tracked: np.ndarray
    inliers: np.ndarray
    inlier_ratio: np.ndarray
    rms_px: np.ndarray
    rounds: np.ndarray
    status: np.ndarray


def measurable(width: int, height: int) -> bool:
    """Whether frames of this size carry enough picture to track at all."""
    return min(width, height) >= MIN_SIDE_PX


def analyse(
    frames: Iterable[Frame],
    *,
    full_size: tuple[int, int],
    analysis_size: tuple[int, int],
    settings: Settings,
    on_frame: Callable[[int], None] | None = None,
    track_settings: TrackSettings | None = None,
) -> MotionTrack:
    """Fit the inter-frame motion of a stream of grey analysis frames.

    Parameters
    ----------
    frames : grey frames of the analysis copy, in order, with their timestamps.
    full_size, analysis_size : (width, height) of the source and of the analysis copy, pixels.
    settings : model, consensus threshold (full-resolution pixels), confidence, rounds, seed,
        ignored regions.
    on_frame : called with 1 after each frame (progress).
    """
    fw, fh = full_size
    aw, ah = analysis_size
    scale = (aw / fw, ah / fh)
    tracker = Tracker(track_settings, ignore_mask(analysis_size, settings.ignore, scale))
    can_track = measurable(fw, fh) and measurable(aw, ah)
    times: list[float] = []
    mats: list[np.ndarray] = []
    diag: list[tuple[int, int, float, float, int]] = []
    status: list[str] = []
    prior: np.ndarray | None = None
    for frame in frames:
        t = len(times)
        times.append(frame.time_s)
        if t == 0:
            mats.append(np.eye(3))
            diag.append((0, 0, 0.0, 0.0, 0))
            status.append("ok" if can_track else "failed")
            if can_track:
                tracker.step(frame.image)
            if on_frame:
                on_frame(1)
            continue
        if not can_track:
            mats.append(np.eye(3))
            diag.append((0, 0, 0.0, 0.0, 0))
            status.append("failed")
            if on_frame:
                on_frame(1)
            continue
        src_a, dst_a = tracker.step(frame.image)
        src = to_full_resolution(src_a, scale)
        dst = to_full_resolution(dst_a, scale)
        fit = estimate(
            src, dst, model=settings.model, inlier_px=settings.inlier_px,
            confidence=settings.confidence, max_rounds=settings.max_rounds,
            seed=[settings.seed, t], prior=prior, frame_size=(fw, fh),
        )
        n_in = int(np.count_nonzero(fit.inliers))
        ratio = n_in / len(src) if len(src) else 0.0
        mats.append(np.asarray(fit.matrix, dtype=np.float64))
        diag.append((len(src), n_in, ratio, float(fit.rms_px) if fit.ok else 0.0,
                     int(fit.rounds)))
        if not fit.ok:
            status.append("failed")
            prior = None
        else:
            status.append("weak" if fit.weak else "ok")
            prior = mats[-1]
        if on_frame:
            on_frame(1)
    n = len(times)
    d = np.array(diag, dtype=np.float64).reshape(n, 5)
    track = MotionTrack(
        time_s=np.array(times, dtype=np.float64),
        matrices=np.array(mats, dtype=np.float64).reshape(n, 3, 3),
        tracked=d[:, 0].astype(int), inliers=d[:, 1].astype(int), inlier_ratio=d[:, 2],
        rms_px=d[:, 3], rounds=d[:, 4].astype(int), status=np.array(status, dtype="<U6"),
    )
    track.matrices = fill_failed(track.matrices, track.status, full_size)
    return track


def fill_failed(matrices: np.ndarray, status: np.ndarray,
                size: tuple[int, int]) -> np.ndarray:
    """Stand-ins for failed frames: the similarity motion interpolated linearly between the
    nearest trustworthy neighbours (or the identity with none), never a wild jump."""
    failed = status == "failed"
    failed[0] = False
    good = np.flatnonzero(~failed & (status != "cut"))
    good = good[good > 0]
    if not failed.any():
        return matrices
    out = matrices.copy()
    idx = np.flatnonzero(failed)
    if len(good) == 0:
        out[idx] = np.eye(3)
        return out
    centre = frame_centre(*size)
    q = to_similarity(matrices[good], centre)
    q[:, 2] = np.angle(np.exp(1j * q[:, 2]))
    stand_in = np.stack([np.interp(idx, good, q[:, j]) for j in range(4)], axis=1)
    out[idx] = from_similarity(stand_in, centre)
    return out
