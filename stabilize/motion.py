"""Per-frame motion: tracking plus consensus fitting -> inter-frame transforms with diagnostics.

Every transform is in full-resolution pixels (the analysis copy's points are mapped back before
fitting, so ``inlier_px`` is a full-resolution distance). What video offers beyond one frame is
used: the previous frame's motion predicts where tracks go and is scored first; each track's
history of moving with the camera decides between rival fits when a large moving object
competes with the background; static overlays are found and left out; scene cuts restart the
path. Frames with no trustworthy fit get a stand-in interpolated from their neighbours and
status ``failed``, so they never throw the path.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field

import cv2
import numpy as np

from .config import Settings
from .consensus import estimate
from .cuts import (
    CutSettings,
    collapsed,
    corner_strength,
    grey_histogram,
    histogram_distance,
    is_cut,
    is_textureless,
)
from .log import frame_centre
from .overlap import read_ahead
from .overlays import OverlayFinder
from .path import from_similarity, to_similarity
from .track import (
    Pairs,
    Tracker,
    TrackSettings,
    global_shift,
    ignore_mask,
    to_analysis,
    to_full_resolution,
)
from .video import Frame

MIN_SIDE_PX = 24
# A track whose history says it moved with the camera at least this often is "background".
BACKGROUND_HISTORY = 0.65
# Tight threshold in units of the tracking noise σ: sqrt(5.99), the 95% point of a χ² with
# two degrees of freedom, the usual choice for a transfer error (Hartley and Zisserman,
# Multiple View Geometry, 2nd ed., 2004, Sec. 4.7.1, t² = 5.99 σ²; value from memory, equal to
# scipy.stats.chi2.ppf(0.95, 2)).
TIGHT_K = 2.447


@dataclass
class MotionTrack:
    """Per-frame arrays of one analysis pass (see :class:`stabilize.log.MotionLog`), and what
    was left out of tracking (``excluded``: full-resolution (x, y, w, h) rectangles)."""

    time_s: np.ndarray
    matrices: np.ndarray
    tracked: np.ndarray
    inliers: np.ndarray
    inlier_ratio: np.ndarray
    rms_px: np.ndarray
    rounds: np.ndarray
    status: np.ndarray
    excluded: dict[str, list[list[int]]] = field(default_factory=dict)


@dataclass(frozen=True)
class FrameFit:
    """One frame's chosen motion and its diagnostics (full-resolution pixels).

    ``inliers`` are the pairs within the user's threshold; ``tight`` those within the
    measured tracking noise, on which the matrix was finally fitted.
    """

    matrix: np.ndarray
    inliers: np.ndarray
    rms_px: float
    rounds: int
    ok: bool
    weak: bool
    tight: np.ndarray | None = None

    @property
    def support(self) -> np.ndarray:
        return self.inliers if self.tight is None else self.tight


def measurable(width: int, height: int) -> bool:
    """Whether frames of this size carry enough picture to track at all."""
    return min(width, height) >= MIN_SIDE_PX


def transfer_error(m: np.ndarray, src: np.ndarray, dst: np.ndarray) -> np.ndarray:
    """Distance (pixels) between ``m`` applied to ``src`` and ``dst``, per point."""
    h = np.c_[src, np.ones(len(src))] @ m.T
    return np.linalg.norm(h[:, :2] / h[:, 2:3] - dst, axis=1)


def hull_share(pts: np.ndarray, frame_size: tuple[int, int]) -> float:
    """Area of the convex hull of ``pts`` as a share of the frame area (0 to 1)."""
    if len(pts) < 3:
        return 0.0
    hull = cv2.convexHull(pts.astype(np.float32).reshape(-1, 1, 2))
    return float(cv2.contourArea(hull)) / float(frame_size[0] * frame_size[1])


def _candidate(fit, src: np.ndarray, dst: np.ndarray, inlier_px: float) -> FrameFit | None:
    """A fit made on a subset of the pairs, with its inliers counted over all pairs."""
    if not fit.ok:
        return None
    m = np.asarray(fit.matrix, float)
    err = transfer_error(m, src, dst)
    inl = err < inlier_px
    if inl.sum() < 8:
        return None
    return FrameFit(m, inl, float(np.sqrt(np.mean(err[inl] ** 2))), int(fit.rounds), True,
                    bool(fit.weak))


def background_score(fit: FrameFit, src: np.ndarray, background: np.ndarray,
                     frame_size: tuple[int, int]) -> float:
    """How much a fit looks like the camera's own motion rather than an object's.

    The background is what surrounds everything else, so its inliers spread over the frame
    (the share of the frame their convex hull covers); and it is what the tracks followed
    before (their history of fitting the camera motion, weighted by inlier membership).
    """
    spread = hull_share(src[fit.support], frame_size)
    total = float(background.sum())
    history = float((background * fit.support).sum()) / total if total > 0 else 0.0
    return spread + 0.5 * history


def fit_frame(src: np.ndarray, dst: np.ndarray, background: np.ndarray, *,
              settings: Settings, seed: list[int], prior: np.ndarray | None,
              frame_size: tuple[int, int]) -> FrameFit:
    """Fit one frame's motion so that the background wins over a large moving object.

    The plain consensus fit, refitted to the measured tracking noise, is one candidate. A
    slow object can sit inside the user's threshold of the camera motion (and the camera
    motion inside the object's), so rivals are looked for among the pairs outside the *tight*
    set: the consensus among those, and the consensus among the tracks that so far moved with
    the camera when most of them disagree. The candidate with the best
    :func:`background_score` wins.
    """
    kw = dict(model=settings.model, inlier_px=settings.inlier_px,
              confidence=settings.confidence, max_rounds=settings.max_rounds,
              frame_size=frame_size)
    fit = estimate(src, dst, seed=seed, prior=prior, **kw)
    best = FrameFit(np.asarray(fit.matrix, float), np.asarray(fit.inliers, bool),
                    float(fit.rms_px), int(fit.rounds), bool(fit.ok), bool(fit.weak))
    if not best.ok:
        return best
    # Two motions less than the threshold apart are both inliers of a compromise between
    # them, and a least-squares refit settles on that compromise. A second consensus at a
    # third of the threshold finds the dominant one of the two instead.
    mode = estimate(src, dst, seed=[*seed, 5], prior=best.matrix,
                    **{**kw, "inlier_px": settings.inlier_px / 3.0})
    if mode.ok and mode.inliers.sum() >= 0.3 * best.inliers.sum():
        found = _candidate(mode, src, dst, settings.inlier_px)
        if found is not None:
            best = dataclasses.replace(found, rounds=best.rounds + found.rounds,
                                       weak=best.weak or found.weak)
    best = _noise_adaptive_refit(src, dst, best, kw, seed)
    n = len(src)
    # Rivals are sought at the noise scale of the first fit: two motions a pixel apart both
    # pass a 1.5 px threshold, but not a threshold of a few tenths.
    err = transfer_error(best.matrix, src, dst)
    noise_px = min(settings.inlier_px, max(0.05, TIGHT_K * float(np.median(err[best.support]))
                                           / 1.1774))
    kw_rival = {**kw, "inlier_px": noise_px}
    rivals: list[FrameFit | None] = []
    rest = ~best.support
    if rest.sum() >= max(20, 0.15 * n):
        alt = estimate(src[rest], dst[rest], seed=[*seed, 1], **kw_rival)
        rivals.append(_candidate(alt, src, dst, noise_px))
    known = background >= BACKGROUND_HISTORY
    if known.sum() >= 12 and (known & ~best.support).sum() > 0.5 * known.sum():
        alt = estimate(src[known], dst[known], seed=[*seed, 2], prior=prior, **kw_rival)
        rivals.append(_candidate(alt, src, dst, noise_px))
    rounds = best.rounds
    score = background_score(best, src, background, frame_size)
    for i, r in enumerate(rivals):
        if r is None:
            continue
        r = _noise_adaptive_refit(src, dst, r, kw_rival, [*seed, 10 + i])
        rounds += r.rounds
        s = background_score(r, src, background, frame_size)
        if s > score:
            err = transfer_error(r.matrix, src, dst)
            inl = err < settings.inlier_px
            best, score = dataclasses.replace(r, inliers=inl, rms_px=float(
                np.sqrt(np.mean(err[inl] ** 2)))), s
    return dataclasses.replace(best, rounds=rounds)


def _noise_adaptive_refit(src: np.ndarray, dst: np.ndarray, fit: FrameFit, kw: dict,
                          seed: list[int], passes: int = 3) -> FrameFit:
    """Refit on the inliers that agree with the fit to within the measured tracking noise.

    The user's threshold must be wide enough for every frame, so it lets in matches with
    errors several times the real tracking noise (edges of moving objects, compression
    artefacts); they bias the least-squares refit. The noise σ is estimated from the median
    residual of the current tight set (for 2-D Gaussian errors the median distance is
    1.1774 σ), and the refit keeps residuals below ``TIGHT_K`` σ. A few passes let σ settle
    once the worst matches are gone.
    """
    if fit.inliers.sum() < 12:
        return fit
    m = fit.matrix
    tight_set = fit.inliers
    rounds = fit.rounds
    for k in range(passes):
        err = transfer_error(m, src, dst)
        sigma = float(np.median(err[tight_set])) / 1.1774
        tight = min(kw["inlier_px"], max(TIGHT_K * sigma, 0.05))
        if tight >= kw["inlier_px"] * 0.999:
            break
        again = estimate(src, dst, seed=[*seed, 2, k], prior=m,
                         **{**kw, "inlier_px": tight, "max_rounds": 0})
        if not again.ok or again.inliers.sum() < 12:
            break
        m = np.asarray(again.matrix, float)
        tight_set = np.asarray(again.inliers, bool)
        rounds += int(again.rounds)
    err = transfer_error(m, src, dst)
    full = err < kw["inlier_px"]
    if full.sum() < 0.9 * fit.inliers.sum():
        return fit
    return FrameFit(m, full, float(np.sqrt(np.mean(err[full] ** 2))), rounds, True, fit.weak,
                    tight_set)


def analyse(
    frames: Iterable[Frame],
    *,
    full_size: tuple[int, int],
    analysis_size: tuple[int, int],
    settings: Settings,
    on_frame: Callable[[int], None] | None = None,
    track_settings: TrackSettings | None = None,
    cut_settings: CutSettings | None = None,
    first_index: int = 0,
    keyframe_every: int | None = None,
) -> MotionTrack:
    """Fit the inter-frame motion of a stream of grey analysis frames.

    Parameters
    ----------
    frames : grey frames of the analysis copy, in order, with their timestamps.
    full_size, analysis_size : (width, height) of the source and of the analysis copy, pixels.
    settings : model, consensus threshold (full-resolution pixels), confidence, rounds, seed,
        ignored regions.
    on_frame : called with 1 after each frame (progress).
    first_index : index in the clip of the first frame given; per-frame seeds are
        ``[seed, first_index + t]``, so a segment of a clip draws what a single pass draws.
    keyframe_every : restart every ``keyframe_every`` frames of the clip (at indices that are
        multiples of it): tracks, track history, overlay evidence, the prior and the texture
        reference start afresh, exactly as if a new analysis began at the frame before the
        keyframe. A segment that starts one frame before a keyframe then reproduces a single
        pass exactly (see :mod:`stabilize.segments`). None: never restart.
    """
    fw, fh = full_size
    aw, ah = analysis_size
    scale = (aw / fw, ah / fh)
    cuts_cfg = cut_settings or CutSettings()
    user_mask = ignore_mask(analysis_size, settings.ignore, scale)
    tracker = Tracker(track_settings, user_mask)
    overlays = OverlayFinder(analysis_size)
    can_track = measurable(fw, fh) and measurable(aw, ah)
    times: list[float] = []
    mats: list[np.ndarray] = []
    diag: list[tuple[int, int, float, float, int]] = []
    status: list[str] = []
    prior: np.ndarray | None = None
    texture_ref: float | None = None
    origin = 0  # local index of the frame the current state started from
    overlay_regions: list[list[int]] = []
    # Decoding keeps a few frames ahead while this frame is tracked and fitted.
    for frame in read_ahead(frames):
        t = len(times)
        g = first_index + t
        if keyframe_every and t > 0 and g % keyframe_every == 0 and can_track:
            # As a fresh analysis whose first frame is the previous one (still in the tracker).
            overlay_regions += overlays.regions(scale)
            last = tracker.frames[1]
            tracker = Tracker(track_settings, user_mask)
            tracker.step(last)
            overlays = OverlayFinder(analysis_size)
            prior = None
            texture_ref = None
            origin = t - 1
        times.append(frame.time_s)
        if not can_track or t == 0:
            mats.append(np.eye(3))
            diag.append((0, 0, 0.0, 0.0, 0))
            status.append("ok" if can_track else "failed")
            if can_track:
                tracker.step(frame.image)
            if on_frame:
                on_frame(1)
            continue
        predicted = None if prior is None else to_analysis(prior, scale)
        pairs = tracker.step(frame.image, predicted)
        offered = tracker.live
        strength = None
        if (t - origin) % 15 == 1:
            strength = corner_strength(frame.image)
            if texture_ref is None or not is_textureless(strength, texture_ref, cuts_cfg):
                texture_ref = strength if texture_ref is None else (
                    0.8 * texture_ref + 0.2 * strength)
        if collapsed(len(pairs), offered, cuts_cfg):
            response = None
            if offered:
                pairs, response = _restart_fast_motion(tracker, pairs)
            if collapsed(len(pairs), offered, cuts_cfg) and is_cut(
                    _frame_distance(tracker, cuts_cfg), response, cuts_cfg):
                mats.append(np.eye(3))
                diag.append((len(pairs), 0, 0.0, 0.0, 0))
                status.append("cut")
                tracker.update(None)
                tracker.reset()
                prior = None
                if on_frame:
                    on_frame(1)
                continue
        if len(pairs) < 0.3 * tracker.settings.max_corners:
            strength = corner_strength(frame.image) if strength is None else strength
            if is_textureless(strength, texture_ref, cuts_cfg):
                mats.append(np.eye(3))
                diag.append((len(pairs), 0, 0.0, 0.0, 0))
                status.append("failed")
                tracker.update(None)
                prior = None
                if on_frame:
                    on_frame(1)
                continue
        src = to_full_resolution(pairs.src, scale)
        dst = to_full_resolution(pairs.dst, scale)
        fit = fit_frame(src, dst, pairs.background, settings=settings,
                        seed=[settings.seed, g], prior=prior, frame_size=(fw, fh))
        n_in = int(np.count_nonzero(fit.inliers))
        mats.append(fit.matrix)
        diag.append((len(src), n_in, n_in / len(src) if len(src) else 0.0,
                     fit.rms_px if fit.ok else 0.0, fit.rounds))
        if fit.ok:
            status.append("weak" if fit.weak else "ok")
            prior = fit.matrix
            tracker.update(fit.support)
            if overlays.observe(pairs.src, pairs.dst, to_analysis(fit.matrix, scale)):
                tracker.set_mask(overlays.mask(user_mask))
        else:
            status.append("failed")
            prior = None
            tracker.update(None)
        if on_frame:
            on_frame(1)
    n = len(times)
    d = np.array(diag, dtype=np.float64).reshape(n, 5)
    track = MotionTrack(
        time_s=np.array(times, dtype=np.float64),
        matrices=np.array(mats, dtype=np.float64).reshape(n, 3, 3),
        tracked=d[:, 0].astype(int), inliers=d[:, 1].astype(int), inlier_ratio=d[:, 2],
        rms_px=d[:, 3], rounds=d[:, 4].astype(int), status=np.array(status, dtype="<U6"),
        excluded={"ignore": [list(r) for r in settings.ignore],
                  "static_overlay": _unique_regions(overlay_regions
                                                    + overlays.regions(scale))},
    )
    track.matrices = fill_failed(track.matrices, track.status, full_size)
    return track


def _unique_regions(regions: list[list[int]]) -> list[list[int]]:
    out: list[list[int]] = []
    for r in regions:
        if r not in out:
            out.append(r)
    return out


def _frame_distance(tracker: Tracker, cfg: CutSettings) -> float:
    """Histogram distance between the tracker's previous and current frames (only needed
    when tracking collapsed, so not worked out for every frame)."""
    prev, cur = tracker.frames
    return histogram_distance(grey_histogram(prev, cfg.bins), grey_histogram(cur, cfg.bins))


def _restart_fast_motion(tracker: Tracker, pairs: Pairs) -> tuple[Pairs, float]:
    """Most tracks were lost: guess the whole-frame shift by phase correlation and track
    again from there, keeping whichever attempt kept more tracks. Also returns the phase
    correlation's peak response (near 0 when the two frames share no picture)."""
    prev, cur = tracker.frames
    dx, dy, response = global_shift(prev, cur)
    if response < 0.05:
        return pairs, response
    guess = np.array([[1.0, 0.0, dx], [0.0, 1.0, dy], [0.0, 0.0, 1.0]])
    again = tracker.retry(guess)
    if len(again) >= len(pairs):
        return again, response
    return tracker.retry(None), response


def fill_failed(matrices: np.ndarray, status: np.ndarray,
                size: tuple[int, int]) -> np.ndarray:
    """Stand-ins for failed frames: the similarity motion interpolated linearly between the
    nearest trustworthy neighbours (or the identity with none), never a wild jump."""
    failed = status == "failed"
    failed[0] = False
    if not failed.any():
        return matrices
    good = np.flatnonzero(~failed & (status != "cut"))
    good = good[good > 0]
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
