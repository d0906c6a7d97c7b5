"""Per-frame motion: tracking plus consensus fitting -> inter-frame transforms with diagnostics.

Every transform is in full-resolution pixels (the analysis copy's points are mapped back before
fitting, so ``inlier_px`` is a full-resolution distance). What video offers beyond one frame is
used: the previous frame's motion predicts where tracks go and is scored first; tracks are
grouped by how they moved over the last half second, so an object that moves on its own,
however slowly, is told from the scene (the group that spreads over the frame with the older
tracks) and left out, and the last second's fits are redone without it once it gives itself
away (:mod:`stabilize.anchors`); each track's history of moving with the camera decides
between rival fits; static overlays are found and left out; scene cuts restart the path.
Frames with no trustworthy fit get a stand-in interpolated from their neighbours and status
``failed``; frames where camera and object cannot be told apart get one too, with status
``weak`` and reason ``foreground``. So they never throw the path.
"""

from __future__ import annotations

import dataclasses
import math
from collections import deque
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field

import cv2
import numpy as np

from . import anchors
from .anchors import BaselineSettings, Grouping, hull_share
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
from .geometry import frame_centre, from_similarity, rescale, to_similarity
from .overlap import read_ahead
from .overlays import OverlayFinder, still_band
from .track import (
    Pairs,
    Tracker,
    TrackSettings,
    global_shift,
    ignore_mask,
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

# A second rigid group counts only when its motion over the baseline is at least this many
# grouping thresholds away from the first (median over its tracks); this project's choice.
SEPARATION = 2.0
# The grouping's consensus threshold, as a share of the user's inlier threshold.
GROUP_SHARE = 0.5
# A revised fit replaces the first one only when they differ by more than this much at the
# frame's corners (full-resolution pixels): below it the revision is noise, and it was
# fitted on fewer tracks. This project's choice.
REVISE_PX = 0.05
# ... and only when the tracks it keeps fit it with at most this share of the median
# residual they had under the first fit (this project's choice).
REVISE_GAIN = 0.7
# A frame is refitted at most this many times while objects go on moving (cost).
REVISE_ATTEMPTS = 8

#: Why a frame is weak or failed, as listed in the log's JSON (``frame_reasons``).
REASONS = {
    "foreground": "the motion could not be told apart from an object moving in front of the "
                  "scene; the frame's motion is a stand-in from its neighbours",
    "few_inliers": "few inliers, or inliers bunched in a small part of the frame",
    "textureless": "too little texture to measure motion (plain sky, water, fog, blur)",
    "no_fit": "no trustworthy motion fit",
    "unmeasurable": "the frame is too small to track",
}


@dataclass
class MotionTrack:
    """Per-frame arrays of one analysis pass (see :class:`stabilize.motion_log.MotionLog`), what
    was left out of tracking (``excluded``: full-resolution (x, y, w, h) rectangles), and why
    a frame is weak or failed (``reason``: '' or a short code, see :data:`REASONS`)."""

    time_s: np.ndarray
    matrices: np.ndarray
    tracked: np.ndarray
    inliers: np.ndarray
    inlier_ratio: np.ndarray
    rms_px: np.ndarray
    rounds: np.ndarray
    status: np.ndarray
    excluded: dict[str, list[list[int]]] = field(default_factory=dict)
    reason: np.ndarray | None = None


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
    best, kw = _consensus(src, dst, settings=settings, seed=seed, prior=prior,
                          frame_size=frame_size)
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


def refit(src: np.ndarray, dst: np.ndarray, *, settings: Settings, seed: list[int],
          prior: np.ndarray, frame_size: tuple[int, int]) -> FrameFit:
    """A plain consensus fit from a starting guess, refitted to the tracking noise: the fit
    of a frame whose pairs are already known to be the scene's."""
    first, kw = _consensus(src, dst, settings=settings, seed=seed, prior=prior,
                           frame_size=frame_size)
    return _noise_adaptive_refit(src, dst, first, kw, seed) if first.ok else first


def _consensus(src: np.ndarray, dst: np.ndarray, *, settings: Settings, seed: list[int],
               prior: np.ndarray | None, frame_size: tuple[int, int]) -> tuple[FrameFit, dict]:
    """The consensus fit at the user's settings, and those settings as keywords."""
    kw = dict(model=settings.model, inlier_px=settings.inlier_px,
              confidence=settings.confidence, max_rounds=settings.max_rounds,
              frame_size=frame_size)
    fit = estimate(src, dst, seed=seed, prior=prior, **kw)
    return FrameFit(np.asarray(fit.matrix, float), np.asarray(fit.inliers, bool),
                    float(fit.rms_px), int(fit.rounds), bool(fit.ok), bool(fit.weak)), kw


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


def warm_up_frames(keyframe_every: int) -> int:
    """Frames a fresh analysis runs before a keyframe so that it takes over there with
    tracks that have a history (about a sixteenth of the interval: 0.6 s of a 10-s one)."""
    return max(2, keyframe_every // 16)


def group_tracks(dst: np.ndarray, memo: np.ndarray, slot: int | None, background: np.ndarray,
                 ages: np.ndarray, *, settings: Settings, base: BaselineSettings,
                 seed: list[int], frame_size: tuple[int, int]) -> Grouping | None:
    """Split the tracks into the scene and a rival rigid group by their motion over a
    baseline of several frames (see :mod:`stabilize.anchors`).

    The largest rigid group over the baseline and, among the rest, a second one are found by
    consensus (the user's model and threshold). The scene is the group with the larger
    score: the share of the frame its hull covers now, plus half its mean track age (older
    tracks: objects turn, leave and are lost more often than the scene), plus half its
    history of moving with the camera. Returns None when no baseline is at hand or no single
    group could be found.
    """
    if slot is None:
        return None
    start = memo[:, 2 * slot:2 * slot + 2]
    has = np.isfinite(start[:, 0])
    if has.sum() < 2 * base.min_group:
        return None
    idx = np.flatnonzero(has)
    kw = dict(model=settings.model, confidence=settings.confidence,
              max_rounds=settings.max_rounds)
    first = estimate(start[has], dst[has], seed=[*seed, 20], inlier_px=settings.inlier_px,
                     **kw)
    if not first.ok:
        return None
    # Over a baseline of a few frames the scene's tracks agree to well within the per-frame
    # threshold on sharp footage, so the groups are split at a threshold set by the scene's
    # own spread (twice the tight threshold of the noise-adaptive refit), between
    # GROUP_SHARE of the user's threshold and all of it: a slow object parts from the scene
    # sooner, and small noisy frames do not fall apart into groups.
    err = transfer_error(np.asarray(first.matrix, float), start[has], dst[has])
    # The lower quartile: a compromise between two groups inflates the median. For 2-D
    # Gaussian errors the quartile distance is sqrt(2 ln(4/3)) σ = 0.7585 σ.
    sigma = float(np.percentile(err[first.inliers], 25)) / 0.7585
    group_px = min(settings.inlier_px, max(GROUP_SHARE * settings.inlier_px,
                                           2.0 * TIGHT_K * sigma))
    if group_px < settings.inlier_px:
        again = estimate(start[has], dst[has], seed=[*seed, 22], inlier_px=group_px,
                         prior=first.matrix, **kw)
        if again.ok:
            first = again
    kw["inlier_px"] = group_px
    a = np.zeros(len(dst), bool)
    a[idx[first.inliers]] = True
    rest = has & ~a
    none = np.zeros(len(dst), bool)
    spread_a = hull_share(dst[a], frame_size)
    if rest.sum() < base.min_group:
        return Grouping(a, none, spread_a, 0.0)
    second = estimate(start[rest], dst[rest], seed=[*seed, 21], **kw)
    if not second.ok or second.inliers.sum() < base.min_group:
        return Grouping(a, none, spread_a, 0.0)
    b = np.zeros(len(dst), bool)
    b[np.flatnonzero(rest)[second.inliers]] = True
    # Only a motion clearly apart from the first is a second group; one just past the
    # threshold is the same scene seen through tracking noise or lens distortion.
    apart = transfer_error(np.asarray(first.matrix, float), start[b], dst[b])
    if float(np.median(apart)) < SEPARATION * group_px:
        return Grouping(a, none, spread_a, 0.0)
    spread_b = hull_share(dst[b], frame_size)

    def score(m: np.ndarray, spread: float) -> float:
        return spread + 0.5 * float(ages[m].mean()) + 0.5 * float(background[m].mean())

    if score(b, spread_b) > score(a, spread_a):
        return Grouping(b, a, spread_b, spread_a)
    return Grouping(a, b, spread_a, spread_b)


def band_overlay_tracks(grouping: Grouping, start: np.ndarray, now: np.ndarray,
                        frame_size: tuple[int, int]) -> np.ndarray:
    """The tracks (k,) bool of whichever of the grouping's two groups is a still band along a
    frame edge while the other moves over the frame (:func:`stabilize.overlays.still_band`),
    whether the grouping took it for the scene or not; none when neither is. ``start`` and
    ``now``: positions at the baseline and now (k, 2), full-resolution pixels."""
    for still, moving, spread in ((grouping.scene, grouping.moved, grouping.moved_spread),
                                  (grouping.moved, grouping.scene, grouping.scene_spread)):
        if still_band(start, now, still, moving, spread, frame_size):
            return still
    return np.zeros(len(now), bool)


#: Cell size (full-resolution pixels) of the coarse mask of where a moving group was.
MASK_CELL_PX = 8


def corner_shift(a: np.ndarray, b: np.ndarray, frame_size: tuple[int, int]) -> float:
    """Largest distance (pixels) between where two 3×3 motions put the frame's corners."""
    w, h = frame_size
    corners = np.array([[0.0, 0.0], [w - 1.0, 0.0], [0.0, h - 1.0], [w - 1.0, h - 1.0]])
    h = np.c_[corners, np.ones(4)] @ b.T
    return float(np.max(transfer_error(a, corners, h[:, :2] / h[:, 2:3])))


def object_mask(pts: np.ndarray, frame_size: tuple[int, int]) -> np.ndarray:
    """Coarse uint8 mask (cells of :data:`MASK_CELL_PX`) of the convex hull of ``pts``
    (full-resolution pixels), grown by one cell."""
    w, h = frame_size
    mask = np.zeros((h // MASK_CELL_PX + 1, w // MASK_CELL_PX + 1), np.uint8)
    if len(pts) >= 3:
        hull = cv2.convexHull(np.rint(pts / MASK_CELL_PX).astype(np.int32).reshape(-1, 1, 2))
        cv2.fillConvexPoly(mask, hull, 1)
        mask = cv2.dilate(mask, np.ones((3, 3), np.uint8))
    return mask


def in_mask(mask: np.ndarray, pts: np.ndarray) -> np.ndarray:
    """Whether each point (k, 2) full-resolution pixels falls in a cell set in ``mask``."""
    xi = np.clip((pts[:, 0] / MASK_CELL_PX).astype(int), 0, mask.shape[1] - 1)
    yi = np.clip((pts[:, 1] / MASK_CELL_PX).astype(int), 0, mask.shape[0] - 1)
    return mask[yi, xi] > 0


@dataclass
class _Record:
    matrix: np.ndarray
    diag: tuple[int, int, float, float, int]
    status: str
    reason: str = ""


@dataclass
class _Recent:
    """A recent frame's pairs, kept for a second (from the start of a pass, three) so its
    fit can be revised when tracks it used turn out to have been moving on their own."""

    index: int
    time_s: float
    src: np.ndarray
    dst: np.ndarray
    ids: np.ndarray
    background: np.ndarray
    used: np.ndarray
    record: _Record
    attempts: int = 0


@dataclass(frozen=True)
class _Context:
    """What every pass of one analysis shares: the settings, the sizes (full resolution and
    analysis copy, pixels) and the scale between them, and the mask of ignored regions."""

    settings: Settings
    scale: tuple[float, float]
    cuts: CutSettings
    baseline: BaselineSettings
    full_size: tuple[int, int]
    analysis_size: tuple[int, int]
    track_settings: TrackSettings | None
    user_mask: np.ndarray | None


class _Pass:
    """The analysis state since its last (re)start: tracks, overlay evidence, the previous
    motion, the texture reference and the baselines. :meth:`begin` takes the first frame;
    :meth:`step` each next one."""

    def __init__(self, ctx: _Context) -> None:
        self.ctx = ctx
        self.tracker = Tracker(ctx.track_settings, ctx.user_mask)
        self.overlays = OverlayFinder(ctx.analysis_size)
        self.overlays_grew = False
        self.prior: np.ndarray | None = None
        self.texture_ref: float | None = None
        self.steps = 0
        self.prev_s = 0.0
        self.started_at = 0
        # Frames from this index on are this pass's own to revise (see _hindsight).
        self.owned_from = 0
        self.recent: deque[_Recent] = deque()
        self.begin_s = 0.0
        # Baseline slot times (seconds; NaN: not based yet) and the slot to re-base next.
        self.slot_s = [math.nan, math.nan]

    def begin(self, image: np.ndarray, time_s: float, index: int) -> None:
        self.tracker.step(image)
        self.prev_s = time_s
        self.begin_s = time_s
        self.started_at = index
        self.steps = 0

    def _older_slot(self) -> int | None:
        ready = [j for j in (0, 1) if math.isfinite(self.slot_s[j])]
        if not ready:
            return None
        return min(ready, key=lambda j: self.slot_s[j])

    def step(self, image: np.ndarray, time_s: float, index: int) -> _Record:
        ctx = self.ctx
        settings, scale, cuts_cfg = ctx.settings, ctx.scale, ctx.cuts
        base = ctx.baseline
        fw, fh = ctx.full_size
        tracker = self.tracker
        self.steps += 1
        prev_s, self.prev_s = self.prev_s, time_s
        predicted = None if self.prior is None else rescale(self.prior, scale)
        if self.overlays_grew:
            self.overlays_grew = False
            tracker.set_mask(self.overlays.mask(ctx.user_mask))
        pairs = tracker.step(image, predicted)
        offered = tracker.live
        strength = None
        if self.steps % 15 == 1:
            strength = corner_strength(image)
            if self.texture_ref is None or not is_textureless(strength, self.texture_ref,
                                                              cuts_cfg):
                self.texture_ref = strength if self.texture_ref is None else (
                    0.8 * self.texture_ref + 0.2 * strength)
        if collapsed(len(pairs), offered, cuts_cfg):
            response = None
            if offered:
                pairs, response = _restart_fast_motion(tracker, pairs)
            if collapsed(len(pairs), offered, cuts_cfg) and is_cut(
                    _frame_distance(tracker, cuts_cfg), response, cuts_cfg):
                tracker.update(None)
                tracker.reset()
                self.prior = None
                self.slot_s = [math.nan, math.nan]
                return _Record(np.eye(3), (len(pairs), 0, 0.0, 0.0, 0), "cut")
        if len(pairs) < 0.3 * tracker.settings.max_corners:
            strength = corner_strength(image) if strength is None else strength
            if is_textureless(strength, self.texture_ref, cuts_cfg):
                tracker.update(None)
                self.prior = None
                return _Record(np.eye(3), (len(pairs), 0, 0.0, 0.0, 0), "failed",
                               "textureless")
        src = to_full_resolution(pairs.src, scale)
        dst = to_full_resolution(pairs.dst, scale)
        memo = anchors.first_seen(pairs.memo, prev_s)
        seed = [settings.seed, index]
        grouping = group_tracks(dst, memo, self._older_slot(), pairs.background,
                                anchors.age_share(memo, time_s, base), settings=settings,
                                base=base, seed=seed, frame_size=(fw, fh))
        # Tracks that moved on their own, now or lately, do not speak for the camera.
        suspect = ~anchors.trust(memo, time_s, base)
        if grouping is not None:
            suspect |= grouping.moved
            memo = anchors.prove(memo, grouping.scene)
        if grouping is not None and grouping.split:
            slot = self._older_slot()
            band = band_overlay_tracks(grouping, memo[:, 2 * slot:2 * slot + 2], dst, (fw, fh))
            self.overlays_grew |= self.overlays.observe_band(pairs.src[band])
        use = ~suspect
        if suspect.any():
            # Objects are about: tracks new to the picture wait until the scene's group
            # takes them in, if enough of the scene is left without them.
            sure = use & anchors.proven(memo)
            if sure.sum() >= base.min_group and hull_share(dst[sure], (fw, fh)) >= 0.1:
                use = sure
        ambiguous = False
        if suspect.any() and (use.sum() < base.min_group
                              or hull_share(dst[use], (fw, fh)) < 0.02):
            # What is left is too little to be the scene: camera and object cannot be told
            # apart on this frame.
            ambiguous = grouping is not None and grouping.split
            use = np.ones(len(dst), bool)
        fit = fit_frame(src[use], dst[use], pairs.background[use], settings=settings,
                        seed=seed, prior=self.prior, frame_size=(fw, fh))
        support = np.zeros(len(dst), bool)
        support[np.flatnonzero(use)[fit.support]] = True
        n_in = int(np.count_nonzero(transfer_error(fit.matrix, src, dst) < settings.inlier_px)
                   ) if fit.ok else 0
        d = (len(src), n_in, n_in / len(src) if len(src) else 0.0,
             fit.rms_px if fit.ok else 0.0, fit.rounds)
        if grouping is not None and grouping.split:
            memo = anchors.strike(memo, grouping.moved, time_s)
            slot = self._older_slot()
            then = memo[grouping.moved, 2 * slot:2 * slot + 2]
            where = np.concatenate([dst[grouping.moved], then[np.isfinite(then[:, 0])]])
            self._hindsight(pairs.ids[grouping.scene], pairs.ids[grouping.moved],
                            object_mask(where, (fw, fh)))
        # Re-base a baseline slot every half baseline: the older one goes.
        half = 0.5 * base.baseline_s
        newest = max((s for s in self.slot_s if math.isfinite(s)), default=-math.inf)
        if time_s - newest >= half or not math.isfinite(newest):
            old = self._older_slot()
            slot = old
            if old is None:
                slot = 0
            elif not math.isfinite(self.slot_s[1 - old]):
                slot = 1 - old
            memo = anchors.rebase(memo, slot, dst)
            self.slot_s[slot] = time_s
        if not fit.ok:
            self.prior = None
            tracker.update(None, memo)
            return _Record(fit.matrix, d, "failed", "no_fit")
        if ambiguous:
            tracker.update(None, memo)
            return _Record(fit.matrix, d, "weak", "foreground")
        self.prior = fit.matrix
        tracker.update(support, memo)
        if self.overlays.observe(pairs.src, pairs.dst, rescale(fit.matrix, scale)):
            tracker.set_mask(self.overlays.mask(ctx.user_mask))
        record = _Record(fit.matrix, d, "weak" if fit.weak else "ok",
                         "few_inliers" if fit.weak else "")
        self.recent.append(_Recent(index, time_s, src, dst, pairs.ids, pairs.background,
                                   use, record))
        # The last second's fits are kept for revision; over the first three seconds of a
        # pass, all of them (its first frames have no baseline at all).
        if time_s - self.begin_s > 6.0 * base.baseline_s:
            while self.recent and self.recent[0].time_s < time_s - 2.0 * base.baseline_s:
                self.recent.popleft()
        return record

    def _hindsight(self, scene_ids: np.ndarray, moved_ids: np.ndarray,
                   region: np.ndarray) -> None:
        """Fit again, on the tracks now known to be the scene (``scene_ids``) alone, the
        recent frames that used tracks now found to move on their own, or tracks inside the
        region the moving group covered (``region``, from :func:`object_mask`: tracks on an
        object are lost and found again under new names).

        An object that starts to move drags the first frames' fits a little before its
        motion over the baseline gives it away; those frames are refitted without it.
        """
        ctx = self.ctx
        base = ctx.baseline
        fw, fh = ctx.full_size
        settings = ctx.settings
        for r in self.recent:
            if r.index < self.owned_from or r.record.status != "ok":
                continue
            hit = r.used & (np.isin(r.ids, moved_ids) | in_mask(region, r.dst))
            # A few tracks more or less hardly move a fit; and a frame is refitted a few times
            # at most while the same object goes on moving.
            if hit.sum() < max(3, 0.05 * r.used.sum()) or r.attempts >= REVISE_ATTEMPTS:
                continue
            r.attempts += 1
            keep = r.used & ~hit & np.isin(r.ids, scene_ids)
            if keep.sum() < base.min_group or hull_share(r.dst[keep], (fw, fh)) < 0.02:
                continue
            fit = refit(r.src[keep], r.dst[keep], settings=settings,
                        seed=[settings.seed, r.index, 1], prior=r.record.matrix,
                        frame_size=(fw, fh))
            # A slow object drags a fit by a fraction of the threshold; a faster one was
            # parted from the scene by the frame's own consensus already.
            shift = corner_shift(fit.matrix, r.record.matrix, (fw, fh))
            if not fit.ok or fit.weak or not REVISE_PX < shift <= 2.0 * settings.inlier_px:
                continue
            # The tracks kept must fit the revision clearly better than the first fit (which
            # a moving object dragged away from them); otherwise what is left is another
            # motion of its own, not the scene.
            before = np.median(transfer_error(r.record.matrix, r.src[keep], r.dst[keep]))
            after = np.median(transfer_error(fit.matrix, r.src[keep], r.dst[keep]))
            if after <= REVISE_GAIN * before:
                r.record.matrix = fit.matrix
                r.used = keep


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
        reference start afresh, exactly as if a new analysis began :func:`warm_up_frames`
        frames before the frame before the keyframe (a second analysis runs alongside over
        those frames, and takes over at the keyframe). A segment that starts that many
        frames before a keyframe then reproduces a single pass exactly (see
        :mod:`stabilize.segments`). None: never restart.
    """
    fw, fh = full_size
    aw, ah = analysis_size
    scale = (aw / fw, ah / fh)
    user_mask = ignore_mask(analysis_size, settings.ignore, scale)
    ctx = _Context(settings=settings, scale=scale, cuts=cut_settings or CutSettings(),
                   baseline=BaselineSettings(), full_size=full_size,
                   analysis_size=analysis_size, track_settings=track_settings,
                   user_mask=user_mask)
    can_track = measurable(fw, fh) and measurable(aw, ah)
    warm = warm_up_frames(keyframe_every) if keyframe_every else 0
    main = _Pass(ctx)
    shadow: _Pass | None = None
    times: list[float] = []
    records: list[_Record] = []
    overlay_regions: list[list[int]] = []
    last: np.ndarray | None = None
    # Decoding keeps a few frames ahead while this frame is tracked and fitted.
    for frame in read_ahead(frames):
        t = len(times)
        g = first_index + t
        if keyframe_every and t > 0 and can_track:
            if (g + warm) % keyframe_every == 0 and main.started_at != g - 1:
                shadow = _Pass(ctx)
                shadow.begin(last, times[-1], g - 1)
            if g % keyframe_every == 0 and main.started_at != g - warm - 1:
                overlay_regions += main.overlays.regions(scale)
                if shadow is None:
                    shadow = _Pass(ctx)
                    shadow.begin(last, times[-1], g - 1)
                main, shadow = shadow, None
            if g % keyframe_every == 0:
                main.owned_from = g
        times.append(frame.time_s)
        if not can_track or t == 0:
            if can_track:
                main.begin(frame.image, frame.time_s, g)
            records.append(_Record(np.eye(3), (0, 0, 0.0, 0.0, 0),
                                   "ok" if can_track else "failed",
                                   "" if can_track else "unmeasurable"))
        else:
            records.append(main.step(frame.image, frame.time_s, g))
            if shadow is not None:
                shadow.step(frame.image, frame.time_s, g)
        last = frame.image
        if on_frame:
            on_frame(1)
    n = len(times)
    d = np.array([r.diag for r in records], dtype=np.float64).reshape(n, 5)
    why = np.array([r.reason for r in records], dtype="<U12")
    status = np.array([r.status for r in records], dtype="<U6")
    track = MotionTrack(
        time_s=np.array(times, dtype=np.float64),
        matrices=np.array([r.matrix for r in records], dtype=np.float64).reshape(n, 3, 3),
        tracked=d[:, 0].astype(int), inliers=d[:, 1].astype(int), inlier_ratio=d[:, 2],
        rms_px=d[:, 3], rounds=d[:, 4].astype(int), status=status,
        excluded={"ignore": [list(r) for r in settings.ignore],
                  "static_overlay": _unique_regions(overlay_regions
                                                    + main.overlays.regions(scale))},
        reason=why,
    )
    track.matrices = fill_failed(track.matrices, track.status, full_size,
                                 stand_in=stand_ins(track.status, why))
    return track


def stand_ins(status: np.ndarray, reason: np.ndarray | None) -> np.ndarray:
    """Frames whose logged motion is a stand-in: failed ones, and weak ones whose motion
    could not be told apart from an object's."""
    out = status == "failed"
    if reason is not None:
        out = out | (reason == "foreground")
    return out


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


def fill_failed(matrices: np.ndarray, status: np.ndarray, size: tuple[int, int],
                stand_in: np.ndarray | None = None) -> np.ndarray:
    """Stand-ins for failed frames (or the frames marked in ``stand_in``): the similarity
    motion interpolated linearly between the nearest trustworthy neighbours (or the identity
    with none), never a wild jump."""
    failed = (status == "failed") if stand_in is None else np.array(stand_in, bool)
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
