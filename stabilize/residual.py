"""A check of the motion left in frames: the output's own inter-frame motion, measured.

The figures "after steadying" must describe the video that was written, not the plan. While
rendering, both the source frame and the output frame are in memory; this module measures
the inter-frame motion of each stream the same way, sparsely and cheaply, independent of the
motion log (which may itself be wrong):

1. the luma plane is reduced to 320–640 pixels wide by block averages (:func:`reduce_luma`);
2. Shi–Tomasi corners (Shi and Tomasi, "Good features to track", CVPR 1994) are found there,
   again every few frames or when they thin out, only where the frame shows the scene (the
   output's fill, and regions left out of tracking, are masked);
3. they are followed from the previous frame with pyramidal Lucas–Kanade (Lucas and Kanade,
   "An iterative image registration technique with an application to stereo vision", IJCAI
   1981, in Bouguet's pyramidal form, "Pyramidal implementation of the Lucas Kanade feature
   tracker", Intel technical report, 2000, as OpenCV implements it) and kept when tracking
   back returns them where they started (Kalal, Mikolajczyk and Matas, "Forward-backward
   error: automatic detection of tracking failures", ICPR 2010);
4. a similarity is fitted robustly with the project's own estimator
   (:func:`stabilize.consensus.estimate`) in full-resolution pixels.

Which corners are the scene, where groups move apart (a large object before a still camera),
is the one thing the check takes from outside: on frames the log measured (status ``ok``, or
``weak`` for few inliers; :func:`logged_scene`), the source stream fits the corners that bear
out the log's motion, and the output stream those that bear out the source's measured motion
carried through the correction. A log the frames do not bear out is not followed. The check
thus measures, in the written video, the part of the picture the log took for the scene: it
catches a plan or render that failed to steady it, not a log that followed an object with
confidence.

The result of a pair is read as a similarity about the frame centre (``dx``, ``dy`` pixels,
degrees; :func:`stabilize.geometry.similarity_readout`): the motion from frame t−1 to frame t of
that stream, in the direction of the log's ``H_t``. Pixel coordinates follow the convention of
:mod:`stabilize.motion_log` (origin at the centre of the top-left pixel); the reduced copy maps to
full resolution as in :func:`stabilize.track.to_full_resolution`.

:func:`pair_motion` is the pure per-pair step; :class:`MotionCheck` keeps one stream's corners
from frame to frame; :class:`RenderCheck` runs one of each on the source and the output frames
of a render pass; :func:`steadiness` compares the two.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import dataclass

import cv2
import numpy as np

from .geometry import frame_centre, similarity_readout
from .motion_models import SIMILARITY
from .track import to_analysis_resolution, to_full_resolution

__all__ = [
    "CheckSettings",
    "MotionCheck",
    "PairMotion",
    "Region",
    "RenderCheck",
    "inherited_labels",
    "logged_scene",
    "pair_motion",
    "reduce_luma",
    "usable",
]


@dataclass(frozen=True)
class CheckSettings:
    """Settings of the motion check; lengths in pixels of the reduced copy unless named.

    ``min_width_px``: the luma plane is halved while it stays at least this wide
    (:func:`reduce_luma`: 1080p and 4K are measured 480 wide);
    ``max_corners``: corners looked for at each detection; ``min_corners``: below this many
    surviving tracks the corners are found again at once, else every ``redetect_frames``;
    ``quality``: weakest corner kept, as a share of the strongest; ``sparse_quality``: when
    that finds fewer than ``min_corners``, weaker corners down to this share are looked for
    too, but none whose smaller eigenvalue is under ``noise_factor`` times the picture's
    median (the picture's own noise: a plain wall's grain). Drawn flat colour patterns give
    25–35 corners a frame at 0.003 and 50–100 at 0.0003: over 14 such clips with movers, the
    output's check then measured 76–100 % of the pairs instead of 45–100 %, and its figures
    came within 0.94–1.02 of the truth where that is over 0.1 px (measured 2026-12-05); the
    real clips of ``tests/real`` read as before; ``min_distance_px``:
    spacing of corners; ``win_px``, ``levels``: Lucas–Kanade window and coarsest pyramid
    level (3 levels follow about 40 px of the reduced copy per frame, 160 px of a 1080p
    frame); ``fb_max_px``: largest forward–backward error kept; ``edge_px``: corners closer
    than this to the edge of what the frame shows are left out (the reduction and the
    window would mix fill into them); ``inlier_px``: the estimator's inlier threshold;
    ``max_rounds``: its cap on hypotheses; ``min_inliers``: fewer and the pair is not
    measured; ``fb_max_px`` None leaves the backward check out; ``suspect_frames``: a corner
    that left a fit's consensus stays suspect for this many pairs spent among the inliers
    again; ``scene_px``: with an expected scene motion, corners within this of it are the
    scene (both in :func:`pair_motion`; 0.25 px, not the inlier threshold: on ``box.mp4`` a
    box creeping 0.3 px a frame over half of a still view sat within 0.5 px of the scene,
    and the fit on both read a blend of the two); ``scene_wide_px``: where too few corners
    lie that close, those within this are tried next (drawn flat patterns give the check
    25–35 corners a frame, and a few pairs less measured there leave the output's figures
    unreported under the 90 % rule of :mod:`stabilize.shake`). The values are this
    project's own choices, for the least time at about the same error on a 1080p synthetic
    truss clip through H.264 (median 0.03 px, 95th percentile 0.09 px against the exact
    motion), checked on the pairs of ``tests/test_residual.py`` and the clips of
    ``tests/test_output_check.py``. The width and the corner counts were then raised (from
    320 px, 80 and 30): the per-frame noise of the check adds up along the measured path,
    and on a real 640-px clip (``bikes.mp4``) 80 corners at 320 px left 0.27 px of apparent
    shake in a steady output where 300 at full width leave 0.13 px.
    """

    min_width_px: int = 480
    max_corners: int = 300
    min_corners: int = 100
    redetect_frames: int = 10
    quality: float = 0.003
    sparse_quality: float = 0.0003
    noise_factor: float = 5.0
    min_distance_px: float = 6.0
    block_px: int = 5
    win_px: int = 11
    levels: int = 3
    fb_max_px: float | None = 0.5
    edge_px: float = 6.0
    inlier_px: float = 0.5
    max_rounds: int = 300
    min_inliers: int = 8
    suspect_frames: int = 15
    scene_px: float = 0.25
    scene_wide_px: float = 1.0


@dataclass(frozen=True)
class Region:
    """Where a frame shows the scene, in full-resolution pixels of that frame.

    ``quad`` (4, 2): a convex quadrilateral (the frame itself, or the source frame's outline
    carried into the output by the correction), corner order either way round.
    ``excluded`` (k, 4, 2): quadrilaterals to leave out (regions left out of tracking, such
    as burnt-in text, carried the same way). Everything outside the frame is left out too.
    """

    quad: np.ndarray
    excluded: np.ndarray

    @classmethod
    def whole(cls, width: int, height: int, excluded: np.ndarray | None = None) -> Region:
        """The whole frame (its outer pixel edges), less ``excluded``.

        Parameters
        ----------
        width, height : frame size, pixels; the quad runs from (−0.5, −0.5) to
            (w − 0.5, h − 0.5) under the pixel-centre convention of :mod:`stabilize.geometry`.
        excluded : (k, 4, 2) quadrilaterals to leave out, pixels; None for none.

        Returns
        -------
        Region
        """
        return cls(_rect_quad(-0.5, -0.5, width, height),
                   np.zeros((0, 4, 2)) if excluded is None else excluded)

    def mapped(self, m: np.ndarray) -> Region:
        """The region carried by a 3×3 matrix (pixels of one frame to another's).

        Parameters
        ----------
        m : (3, 3) matrix, pixels of this region's frame to pixels of the other.

        Returns
        -------
        Region : a new region, quad and excluded quads mapped with perspective division.
        """
        return Region(_apply(m, self.quad), _apply(m, self.excluded.reshape(-1, 2))
                      .reshape(self.excluded.shape))


def _rect_quad(x: float, y: float, w: float, h: float) -> np.ndarray:
    return np.array([[x, y], [x + w, y], [x + w, y + h], [x, y + h]], np.float64)


def _apply(m: np.ndarray, pts: np.ndarray) -> np.ndarray:
    if len(pts) == 0:
        return np.asarray(pts, np.float64).reshape(0, 2)
    q = pts @ m[:2, :2].T + m[:2, 2]
    w = pts @ m[2, :2] + m[2, 2]
    return q / w[:, None]


def _inside(pts: np.ndarray, quads: np.ndarray, margin: float) -> np.ndarray:
    """(n, k) bool: point i lies inside convex quad j by at least ``margin`` pixels (a
    negative margin grows the quads). ``quads`` is (k, 4, 2), either winding."""
    a = quads
    b = np.roll(quads, -1, axis=1)
    edge = b - a                                                         # (k, 4, 2)
    length = np.maximum(np.hypot(edge[..., 0], edge[..., 1]), 1e-12)
    # Signed area picks the winding, so "inside" is the positive side of every edge.
    area = np.sum(a[..., 0] * b[..., 1] - b[..., 0] * a[..., 1], axis=1)  # (k,)
    sign = np.where(area >= 0, 1.0, -1.0)
    rel = pts[:, None, None, :] - a[None]                                 # (n, k, 4, 2)
    cross = edge[None, ..., 0] * rel[..., 1] - edge[None, ..., 1] * rel[..., 0]
    dist = sign[None, :, None] * cross / length[None]
    return np.all(dist >= margin, axis=2)


def usable(pts: np.ndarray, region: Region, width: int, height: int,
           margin_px: float) -> np.ndarray:
    """(n,) bool: full-resolution points inside the frame and the region by ``margin_px``,
    and at least that far from every excluded quad.

    Parameters
    ----------
    pts : (n, 2) points (x, y), full-resolution pixels.
    region : where the frame shows the scene.
    width, height : frame size, pixels.
    margin_px : distance the points must keep from the edges, pixels.

    Returns
    -------
    (n,) bool, True for usable points.
    """
    if len(pts) == 0:
        return np.zeros(0, bool)
    quads = np.stack([_rect_quad(-0.5, -0.5, width, height), region.quad])
    ok = np.all(_inside(pts, quads, margin_px), axis=1)
    if len(region.excluded):
        ok &= ~np.any(_inside(pts, region.excluded, -margin_px), axis=1)
    return ok


def reduce_luma(luma: np.ndarray, min_width_px: int) -> tuple[np.ndarray, tuple[float, float]]:
    """The luma plane (h, w) uint8 reduced by the largest power of two k that leaves it at
    least ``min_width_px`` wide (so between that and twice that, unless the height stops it
    first: it is kept at least 8 rows high), by k × k block averages.

    The last w mod k columns and h mod k rows are left out, so every reduced pixel averages
    one whole block. The averaging is done as repeated halvings with bilinear resizing at
    exactly half the size, which samples midway between each pair of pixels: a 2 × 2 mean
    per step, and in all a k × k mean within half a grey level per halving (one rounding
    each), in a tenth of the time of OpenCV's area resizing by 4 at 1080p (measured).
    Returns the reduced copy and the scale (1/k, 1/k) from full resolution to it, as
    :func:`stabilize.track.to_full_resolution` takes it: reduced pixel (j, i) is centred on
    full-resolution ((j + 0.5)·k − 0.5, (i + 0.5)·k − 0.5). With k = 1 the plane itself is
    returned.

    Parameters
    ----------
    luma : (h, w) uint8 luma plane, full resolution.
    min_width_px : smallest width of the reduced copy, pixels.

    Returns
    -------
    small : (h // k, w // k) uint8 reduced copy (``luma`` itself when k = 1).
    scale : (1/k, 1/k), reduced pixels per full-resolution pixel.
    """
    h, w = luma.shape[:2]
    k = 1
    while w // (2 * k) >= min_width_px and h // (2 * k) >= 8:
        k *= 2
    if k == 1:
        return luma, (1.0, 1.0)
    small = luma[:h // k * k, :w // k * k]
    while small.shape[1] > w // k:
        small = cv2.resize(small, (small.shape[1] // 2, small.shape[0] // 2),
                           interpolation=cv2.INTER_LINEAR)
    return small, (1.0 / k, 1.0 / k)


@dataclass(frozen=True)
class PairMotion:
    """One measured pair of frames.

    ``matrix`` (3, 3): the similarity from frame t−1 to frame t, full-resolution pixels
    (identity when not ``ok``); ``readout`` (3,): dx, dy (pixels) and degrees about the frame
    centre, nan when not ``ok``; ``tracked``: corners followed and kept; ``inliers``: of
    them, inliers of the fit; ``points`` (k, 2) float32: the kept corners where they lie in
    frame t, pixels of the reduced copy (to follow on to the next frame); ``suspect`` (k,)
    int: for each kept corner, the pairs it must still spend among the inliers before it is
    trusted again (0: trusted).
    """

    matrix: np.ndarray
    readout: np.ndarray
    ok: bool
    tracked: int
    inliers: int
    points: np.ndarray
    suspect: np.ndarray


def pair_motion(
    prev: np.ndarray,
    cur: np.ndarray,
    points: np.ndarray,
    *,
    scale: tuple[float, float],
    full_size: tuple[int, int],
    region: Region,
    settings: CheckSettings = CheckSettings(),
    seed: int | Sequence[int] = 0,
    suspect: np.ndarray | None = None,
    scene: np.ndarray | None = None,
) -> PairMotion:
    """Measure the motion from ``prev`` to ``cur``, two reduced luma frames.

    Corners keep a label over time, so a large object moving on its own is not taken for
    the scene when, for a pair or two, it holds as many corners as the scene does: a corner
    that left the fit's consensus is *suspect* for ``settings.suspect_frames`` pairs spent
    among the inliers again. The fit is made on the trusted corners when there are at least
    ``min_inliers`` of them and they are at least a quarter of the corners kept, even when
    the suspect ones are more (an object close to the lens can hold most of the corners of
    a flat scene; a smaller trusted remnant is more likely one depth layer of a parallax
    shot than the scene); all corners are then scored against it, and the labels updated.
    After a reset (the first frame, a cut) every corner starts trusted, so the first pair's
    consensus decides which group is the scene. (The labels are this project's own rule;
    the principle, that a group which moved on its own stays suspect until it has moved
    with the rest for a while, is common practice with no source.)

    Parameters
    ----------
    prev, cur : reduced frames (h, w) uint8.
    points : (k, 2) corners in ``prev``, pixels of the reduced copy.
    scale : (sx, sy) from full resolution to the reduced copy (:func:`reduce_luma`).
    full_size : (width, height) of the full-resolution frame, pixels.
    region : where ``cur`` shows the scene (:class:`Region`, full-resolution pixels); corners
        landing elsewhere, or within ``settings.edge_px`` of its edge, are dropped.
    settings : :class:`CheckSettings`.
    seed : the estimator's seed (the project seeds per frame with ``[seed, frame]``).
    suspect : (k,) int labels of ``points`` (see :class:`PairMotion`); None: all trusted.
    scene : (3, 3) the motion, full-resolution pixels, that the scene is expected to have
        here (the render's check passes the log's motion to the source stream on frames the
        log measured, and the source stream's measured motion carried through the corrections
        to the output stream); corners within ``settings.scene_px`` of it are the ones
        fitted when there are at least ``min_inliers`` of them (trusted ones first) and at
        least ``min_inliers`` of those agree on a fit; failing that, those within
        ``settings.scene_wide_px``, the same way; otherwise the pair is fitted as without
        it. The fit is still made on this pair's own corners: the expectation only
        says which group is the scene.

    Returns
    -------
    PairMotion
        The similarity fitted to the kept corners in full-resolution pixels, and its readout.
    """
    s = settings
    w, h = full_size
    empty = PairMotion(np.eye(3), np.full(3, np.nan), False, 0, 0,
                       np.empty((0, 2), np.float32), np.zeros(0, np.int32))
    if len(points) < s.min_inliers:
        return empty
    src = np.ascontiguousarray(points, np.float32).reshape(-1, 1, 2)
    criteria = (cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, 20, 0.01)
    dst, st, _ = cv2.calcOpticalFlowPyrLK(prev, cur, src, None, winSize=(s.win_px, s.win_px),
                                          maxLevel=s.levels, criteria=criteria)
    keep = st.ravel() == 1
    if s.fb_max_px is not None:
        # Tracking back, started at the origin, needs no coarser level: a point that slid
        # away does not come back, and is dropped.
        back, st_back, _ = cv2.calcOpticalFlowPyrLK(
            cur, prev, dst, src.copy(), winSize=(s.win_px, s.win_px), maxLevel=0,
            criteria=criteria, flags=cv2.OPTFLOW_USE_INITIAL_FLOW)
        keep &= st_back.ravel() == 1
        keep &= np.linalg.norm(back.reshape(-1, 2) - src.reshape(-1, 2), axis=1) < s.fb_max_px
    src, dst = src.reshape(-1, 2), dst.reshape(-1, 2)
    src_f = to_full_resolution(src, scale)
    dst_f = to_full_resolution(dst, scale)
    edge_full = s.edge_px / min(scale)
    keep &= usable(dst_f, region, w, h, edge_full)
    n = int(np.count_nonzero(keep))
    labels = (np.zeros(len(keep), np.int32) if suspect is None
              else np.asarray(suspect, np.int32).reshape(-1))[keep]
    if n < s.min_inliers:
        return PairMotion(np.eye(3), np.full(3, np.nan), False, n, 0, dst[keep], labels)
    a, b = src_f[keep], dst_f[keep]
    trusted = labels == 0
    n_trusted = int(np.count_nonzero(trusted))
    use = trusted if n_trusted >= max(s.min_inliers, 0.25 * n) else np.ones(n, bool)
    inlier_px = s.inlier_px / min(scale)

    def fit_on(chosen: np.ndarray):
        return SIMILARITY.estimate(a[chosen], b[chosen], inlier_px=inlier_px,
                                   max_rounds=s.max_rounds, seed=seed,
                                   frame_size=(float(w), float(h)))

    fit = None
    if scene is not None:
        off = SIMILARITY.residuals(scene, a, b)
        for band_px in (s.scene_px, s.scene_wide_px):
            near = off < band_px / min(scale)
            expected = (near & trusted if np.count_nonzero(near & trusted) >= s.min_inliers
                        else near)
            if np.count_nonzero(expected) < s.min_inliers:
                continue
            fit = fit_on(expected)
            if fit.ok and fit.n_inliers >= s.min_inliers:
                break
            fit = None    # too few of them agree: a wider band, then the pair's own consensus
    if fit is None:
        fit = fit_on(use)
    ok = bool(fit.ok) and fit.n_inliers >= s.min_inliers
    if not ok:
        return PairMotion(np.eye(3), np.full(3, np.nan), False, n, fit.n_inliers, dst[keep],
                          labels)
    inl = SIMILARITY.residuals(fit.matrix, a, b) < inlier_px
    labels = np.where(inl, np.maximum(labels - 1, 0), s.suspect_frames).astype(np.int32)
    readout = similarity_readout(fit.matrix, frame_centre(w, h))[:3]
    return PairMotion(fit.matrix, readout, True, n, fit.n_inliers, dst[keep], labels)


class MotionCheck:
    """Measures one stream's inter-frame motion, frame after frame (see :func:`pair_motion`).

    Holds the previous reduced frame and the corners followed from it: memory of a
    few reduced frames, nothing per clip.

    Parameters
    ----------
    full_size : (width, height) of the frames, pixels.
    settings : :class:`CheckSettings`.
    seed : estimator seed; frame t's pair is seeded with ``[seed, t]``.
    """

    def __init__(self, full_size: tuple[int, int], settings: CheckSettings = CheckSettings(),
                 seed: int = 0) -> None:
        self.full_size = (int(full_size[0]), int(full_size[1]))
        self.settings = settings
        self.seed = int(seed)
        self.reset()

    def reset(self) -> None:
        """Forget the previous frame (at a scene cut: motion across it is not real)."""
        self._prev = None
        self._points = np.empty((0, 2), np.float32)
        self._suspect = np.zeros(0, np.int32)
        self._age = 0
        self.last: np.ndarray | None = None   # the last pair's matrix, None if not measured

    def step(self, index: int, luma: np.ndarray, region: Region | None = None,
             scene: np.ndarray | None = None) -> np.ndarray:
        """Take frame ``index`` (its full-resolution luma plane, (h, w) uint8) and return the
        motion from the previous frame: (3,) dx, dy (full-resolution pixels) and degrees,
        nan when it could not be measured (the first frame, too few corners).

        ``region`` says where this frame shows the scene; None: the whole frame.

        Parameters
        ----------
        index : the frame's index in the clip (seeds the estimator).
        luma : (h, w) uint8 luma plane, full resolution (copied if kept).
        region : where the frame shows the scene, full-resolution pixels; None for all of it.
        scene : (3, 3) expected motion of the scene from the previous frame, or None
            (:func:`pair_motion`).

        Returns
        -------
        (3,) dx, dy (full-resolution pixels, about the frame centre; convention of
        :mod:`stabilize.geometry`) and rotation (degrees), frame ``index`` − 1 to ``index``;
        nan where not measured.
        """
        s = self.settings
        w, h = self.full_size
        region = Region.whole(w, h) if region is None else region
        small, scale = reduce_luma(luma, s.min_width_px)
        if small is luma:  # keep our own copy: the caller may reuse its buffer
            small = luma.copy()
        out = np.full(3, np.nan)
        self.last = None
        if self._prev is not None:
            pair = pair_motion(self._prev, small, self._points, scale=scale, full_size=(w, h),
                               region=region, settings=s, seed=[self.seed, int(index)],
                               suspect=self._suspect, scene=scene)
            out = pair.readout
            self.last = pair.matrix if pair.ok else None
            self._points, self._suspect = pair.points, pair.suspect
        self._age += 1
        if len(self._points) < s.min_corners or self._age >= s.redetect_frames:
            fresh = self._detect(small, scale, region)
            self._suspect = inherited_labels(fresh, self._points, self._suspect,
                                             s.min_distance_px)
            self._points = fresh
            self._age = 0
        self._prev = small
        return out

    def _detect(self, small: np.ndarray, scale: tuple[float, float],
                region: Region) -> np.ndarray:
        s = self.settings
        mask = _mask(small.shape, scale, region, s.edge_px)
        pts = _corners(small, mask, s, s.quality)
        if len(pts) < s.min_corners and s.sparse_quality < s.quality:
            # A sparse picture (flat colours, a plain wall): weaker corners too, but none at
            # the picture's own noise level.
            more = _corners(small, mask, s, s.sparse_quality)
            if len(more):
                eig = cv2.cornerMinEigenVal(small, s.block_px)
                floor = s.noise_factor * float(np.median(eig[mask > 0])) if np.any(mask) else 0.0
                xi = np.clip(np.round(more[:, 0]).astype(int), 0, small.shape[1] - 1)
                yi = np.clip(np.round(more[:, 1]).astype(int), 0, small.shape[0] - 1)
                more = more[eig[yi, xi] >= floor]
            if len(more) > len(pts):
                pts = more
        return pts


def _corners(small: np.ndarray, mask: np.ndarray, s: CheckSettings,
             quality: float) -> np.ndarray:
    """Shi–Tomasi corners (k, 2) float32 of ``small`` within ``mask`` at ``quality``."""
    pts = cv2.goodFeaturesToTrack(small, maxCorners=s.max_corners, qualityLevel=quality,
                                  minDistance=s.min_distance_px, mask=mask,
                                  blockSize=s.block_px)
    if pts is None:
        return np.empty((0, 2), np.float32)
    return pts.reshape(-1, 2).astype(np.float32)


def inherited_labels(fresh: np.ndarray, old: np.ndarray, labels: np.ndarray,
                     radius_px: float) -> np.ndarray:
    """Labels for corners found afresh: each takes the label of the nearest corner followed
    so far when that lies within ``radius_px`` (the same feature found again), else 0.

    Parameters
    ----------
    fresh : (k, 2) new corners, pixels of the reduced copy.
    old : (m, 2) corners followed so far, same pixels; labels : (m,) their labels.
    radius_px : largest distance at which a new corner is the same as an old one, pixels.

    Returns
    -------
    (k,) int32 labels of ``fresh``.
    """
    out = np.zeros(len(fresh), np.int32)
    if len(fresh) == 0 or len(old) == 0 or not np.any(labels):
        return out
    d2 = np.sum((fresh[:, None, :] - old[None, :, :]) ** 2, axis=2)   # (k, m), m ≤ a few hundred
    near = np.argmin(d2, axis=1)
    close = d2[np.arange(len(fresh)), near] <= radius_px ** 2
    out[close] = labels[near[close]]
    return out


def _mask(shape: tuple[int, int], scale: tuple[float, float], region: Region,
          edge_px: float) -> np.ndarray:
    """uint8 mask (255 = usable) of the reduced frame: the region, less the excluded quads,
    drawn and then shrunk by ``edge_px`` so corners keep clear of every edge."""
    mask = np.zeros(shape[:2], np.uint8)
    quad = to_analysis_resolution(region.quad, scale)
    cv2.fillConvexPoly(mask, np.round(quad * 16).astype(np.int32), 255, cv2.LINE_8, 4)
    for q in region.excluded:
        reduced = np.round(to_analysis_resolution(q, scale) * 16).astype(np.int32)
        cv2.fillConvexPoly(mask, reduced, 0, cv2.LINE_8, 4)
    k = 2 * int(math.ceil(edge_px)) + 1
    mask = cv2.erode(mask, cv2.getStructuringElement(cv2.MORPH_RECT, (k, k)),
                     borderType=cv2.BORDER_CONSTANT, borderValue=0)
    return mask


def _luma(image) -> np.ndarray:
    """The luma plane of a planar YUV frame, the grey of an RGB array, or a grey array."""
    y = getattr(image, "y", None)
    if y is not None:
        return y
    if image.ndim == 2:
        return image
    return cv2.cvtColor(image, cv2.COLOR_RGB2GRAY)


class RenderCheck:
    """The motion check of a render pass: the source and the output frames, measured alike.

    Called once per rendered frame with the source frame, the output frame and the
    correction C_t (source -> output pixels); keeps per frame the measured motion of each
    stream, (frames, 3) arrays of dx, dy (full-resolution pixels) and degrees, nan where not
    measured. The output's usable region is the source frame's outline carried by C_t, so
    its fill (black, reflected or replicated border) is never measured; regions left out of
    tracking (``excluded``, (x, y, w, h) full-resolution rectangles of the source) are left
    out of both streams, carried into the output by C_t. At a scene cut both restart.

    Parameters
    ----------
    frames : frames in the log (frames beyond are rendered but not checked).
    full_size : (width, height), pixels.
    cuts : (frames,) bool, scene cuts.
    excluded : rectangles (x, y, w, h) left out, full-resolution pixels.
    scene : (frames, 3, 3) the log's motion of each frame (frame t−1 to t, source pixels),
        nan where the log did not measure it (:func:`logged_scene`); the source stream takes
        it as the scene it expects (:func:`pair_motion`). None: the check chooses the scene
        on its own.
    settings : :class:`CheckSettings`. seed : estimator seed.
    """

    def __init__(self, frames: int, full_size: tuple[int, int], *,
                 cuts: np.ndarray | None = None,
                 excluded: Sequence[Sequence[float]] = (),
                 scene: np.ndarray | None = None,
                 settings: CheckSettings = CheckSettings(), seed: int = 0) -> None:
        self.frames = int(frames)
        self.full_size = (int(full_size[0]), int(full_size[1]))
        self.cuts = np.zeros(frames, bool) if cuts is None else np.asarray(cuts, bool)
        rects = np.array([_rect_quad(*map(float, r)) for r in excluded]).reshape(-1, 4, 2)
        self._source_region = Region.whole(*self.full_size, rects)
        self.scene = scene
        self.source = np.full((self.frames, 3), np.nan)
        self.output = np.full((self.frames, 3), np.nan)
        self._src = MotionCheck(self.full_size, settings, seed)
        self._out = MotionCheck(self.full_size, settings, seed)
        self._correction: np.ndarray | None = None
        self.seconds = 0.0       # wall-clock time spent in the check, s
        self.cpu_seconds = 0.0   # processor time of the calling thread in the check, s
        self.checked = 0

    def __call__(self, index: int, source, output, correction: np.ndarray) -> None:
        if not 0 <= index < self.frames:
            return
        t0, c0 = time.perf_counter(), time.thread_time()
        if self.cuts[index]:
            self._src.reset()
            self._out.reset()
            self._correction = None
        logged = None
        if self.scene is not None and np.all(np.isfinite(self.scene[index])):
            logged = self.scene[index]
        self.source[index] = self._src.step(index, _luma(source), self._source_region, logged)
        # The scene is what the source stream measured, carried into the output by the
        # corrections actually applied: C_t · S_t · C_{t−1}⁻¹. It only picks which of the
        # output's corners are the scene; their motion is measured on the output.
        scene = None
        if self._src.last is not None and self._correction is not None:
            scene = correction @ self._src.last @ np.linalg.inv(self._correction)
        self.output[index] = self._out.step(index, _luma(output),
                                            self._source_region.mapped(correction), scene)
        self._correction = np.asarray(correction, np.float64)
        self.seconds += time.perf_counter() - t0
        self.cpu_seconds += time.thread_time() - c0
        self.checked += 1


def logged_scene(matrices: np.ndarray, status: np.ndarray,
                 reasons: np.ndarray | None = None) -> np.ndarray:
    """The log's motion as the scene the source stream expects: (frames, 3, 3), the log's
    matrices (frame t−1 to t, source pixels) where the log measured the frame (status
    ``ok``, or ``weak`` for its few or bunched inliers, reason ``few_inliers``), nan
    elsewhere (frames held still or left unconfirmed, stand-ins, failed frames, cuts, the
    first frame): there the check chooses the scene on its own."""
    out = np.array(matrices, np.float64, copy=True).reshape(-1, 3, 3)
    status = np.asarray(status)
    measured = status == "ok"
    if reasons is not None:
        measured |= (status == "weak") & (np.asarray(reasons) == "few_inliers")
    out[~measured] = np.nan
    return out
