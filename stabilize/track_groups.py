"""Split tracks into the scene and a rival rigid group by their motion over a baseline.

Also where that group was (a coarse mask of full-resolution cells), and whether either group
is a still band along a frame edge (a static overlay).
"""

from __future__ import annotations

import cv2
import numpy as np

from .anchors import BaselineSettings, Grouping, hull_share
from .config import Settings
from .consensus.metrics import median, quantile
from .frame_fit import TIGHT_K
from .motion_models import MotionModel, transfer_error
from .overlays import OverlaySettings, still_band
from .still_detail import patch_contrast

__all__ = ["GROUP_SHARE", "MASK_CELL_PX", "SEPARATION", "band_overlay_tracks", "group_tracks",
           "in_mask", "mask_cells", "object_mask", "outshone_band"]

# A second rigid group counts only when its motion over the baseline is at least this many
# grouping thresholds away from the first (median over its tracks); this project's choice.
SEPARATION = 2.0


# The grouping's consensus threshold, as a share of the user's inlier threshold.
GROUP_SHARE = 0.5


def group_tracks(dst: np.ndarray, memo: np.ndarray, slot: int | None, background: np.ndarray,
                 ages: np.ndarray, *, model: MotionModel, settings: Settings,
                 base: BaselineSettings, seed: list[int],
                 frame_size: tuple[int, int]) -> Grouping | None:
    """Split the tracks into the scene and a rival rigid group by their motion over a
    baseline of several frames (see :mod:`stabilize.anchors`).

    The largest rigid group over the baseline and, among the rest, a second one are found by
    consensus (the user's model and threshold). The scene is the group with the larger
    score: the share of the frame its hull covers now, plus half its mean track age (older
    tracks: objects turn, leave and are lost more often than the scene), plus half its
    history of moving with the camera. Returns None when no baseline is at hand or no single
    group could be found.

    Parameters
    ----------
    dst : (n, 2) track positions now, full-resolution pixels.
    memo : (n, k) the tracks' remembered positions (:mod:`stabilize.anchors`); ``slot``
        picks the baseline's pair of columns (None: no baseline yet).
    background : (n,) history of moving with the camera, 0-1. ages : (n,) age share, 0-1.
    model : the motion model; settings : its threshold (full-resolution pixels), confidence
        and rounds. base : baseline settings. seed : the frame's seed.
    frame_size : (width, height), full-resolution pixels.
    """
    if slot is None:
        return None
    start = memo[:, 2 * slot:2 * slot + 2]
    has = np.isfinite(start[:, 0])
    if has.sum() < 2 * base.min_group:
        return None
    idx = np.flatnonzero(has)
    kw = dict(confidence=settings.confidence,
              max_rounds=settings.max_rounds)
    first = model.estimate(start[has], dst[has], seed=[*seed, 20], inlier_px=settings.inlier_px,
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
    sigma = quantile(err[first.inliers], 0.25) / 0.7585
    group_px = min(settings.inlier_px, max(GROUP_SHARE * settings.inlier_px,
                                           2.0 * TIGHT_K * sigma))
    if group_px < settings.inlier_px:
        again = model.estimate(start[has], dst[has], seed=[*seed, 22], inlier_px=group_px,
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
    second = model.estimate(start[rest], dst[rest], seed=[*seed, 21], **kw)
    if not second.ok or second.inliers.sum() < base.min_group:
        return Grouping(a, none, spread_a, 0.0)
    b = np.zeros(len(dst), bool)
    b[np.flatnonzero(rest)[second.inliers]] = True
    # Only a motion clearly apart from the first is a second group; one just past the
    # threshold is the same scene seen through tracking noise or lens distortion.
    apart = transfer_error(np.asarray(first.matrix, float), start[b], dst[b])
    if median(apart) < SEPARATION * group_px:
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


def outshone_band(gray: np.ndarray, pts: np.ndarray, band: np.ndarray,
                  grouping: Grouping, settings: OverlaySettings | None = None) -> bool:
    """Whether a still band (``band``, (k,) bool, from :func:`band_overlay_tracks`) is far
    fainter than the group moving beside it, and so no burnt-in overlay but the scene: the
    median standard deviation of the 9×9 patches of ``gray`` (the analysis frame, (h, w))
    at its tracks ``pts`` (k, 2, analysis pixels) is under ``band_contrast`` times that of
    the other group of ``grouping`` (:class:`stabilize.overlays.OverlaySettings`)."""
    s = settings or OverlaySettings()
    other = grouping.moved if (band & grouping.scene).any() else grouping.scene
    if not band.any() or not other.any():
        return False
    return bool(median(patch_contrast(gray, pts[band]))
                < s.band_contrast * median(patch_contrast(gray, pts[other])))


#: Cell size (full-resolution pixels) of the coarse mask of where a moving group was.
MASK_CELL_PX = 8


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


def mask_cells(pts: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """Flat index (k,) of the cell of a coarse mask of ``shape`` (rows, columns; cells of
    :data:`MASK_CELL_PX`, as :func:`object_mask` makes them) that holds each point (k, 2),
    full-resolution pixels; points off the mask take its nearest edge cell."""
    rows, cols = shape
    xi = np.clip((pts[:, 0] / MASK_CELL_PX).astype(int), 0, cols - 1)
    yi = np.clip((pts[:, 1] / MASK_CELL_PX).astype(int), 0, rows - 1)
    return yi * cols + xi


def in_mask(mask: np.ndarray, pts: np.ndarray) -> np.ndarray:
    """Whether each point (k, 2) full-resolution pixels falls in a cell set in ``mask``."""
    return mask.ravel()[mask_cells(pts, mask.shape)] > 0
