"""Fit one frame's motion from its track pairs so that the scene, not a moving object, wins.

All positions and thresholds are in full-resolution pixels. The plain consensus fit is
refitted to the measured tracking noise, and rival fits (the consensus among the pairs it left
out, and among the tracks that so far moved with the camera) compete on how much they look like
the camera's own motion (:func:`background_score`).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from .anchors import hull_share
from .config import Settings
from .consensus import Fit
from .consensus.degeneracy import WEAK_MIN_CELLS, cell_index, count_cells, frame_box
from .consensus.metrics import median
from .motion_models import MotionModel, transfer_error

__all__ = ["BACKGROUND_HISTORY", "REFIT_PASSES", "TIGHT_K", "FrameFit", "background_score",
           "bunched", "corner_shift", "fit_frame", "refit"]

# A track whose history says it moved with the camera at least this often is "background".
BACKGROUND_HISTORY = 0.65


# Passes of the noise-adaptive refit by analysis level: the first two settle the noise scale
# on clean footage (at ``balanced`` the 720p accuracy clip's median error is 0.0153 px with
# two, 0.0154 with three, and bikes.mp4's steadied jitter about the same), but hard real
# footage needs the third: on Megamind.avi (a figure before a defocused set, camera mostly
# still, no reference) the logged path strayed up to 32.8 px with two passes and 12.9 px
# with three (measured). It costs about a twentieth of the analysis.
REFIT_PASSES = {"fast": 2, "balanced": 3, "thorough": 3}


# Tight threshold in units of the tracking noise σ: sqrt(5.99), the 95% point of a χ² with
# two degrees of freedom, the usual choice for a transfer error (Hartley and Zisserman,
# Multiple View Geometry, 2nd ed., 2004, Sec. 4.7.1, t² = 5.99 σ²; value from memory, equal to
# scipy.stats.chi2.ppf(0.95, 2)).
TIGHT_K = 2.447


@dataclass(frozen=True)
class FrameFit:
    """One frame's chosen motion and its diagnostics (full-resolution pixels).

    ``inliers`` are the pairs within the user's threshold; ``tight`` those within the
    measured tracking noise, on which the matrix was finally fitted. ``weak`` is the
    consensus's judgement of its inliers (few, or bunched); ``bunched``: the pairs the matrix
    was finally fitted on lie in a small part of the frame (:func:`bunched`), whether or not
    the inliers spread further.
    """

    matrix: np.ndarray
    inliers: np.ndarray
    rms_px: float
    rounds: int
    ok: bool
    weak: bool
    tight: np.ndarray | None = None
    bunched: bool = False

    @property
    def support(self) -> np.ndarray:
        """(n,) bool: the pairs the matrix was finally fitted on."""
        return self.inliers if self.tight is None else self.tight


def _candidate(fit: Fit, src: np.ndarray, dst: np.ndarray, inlier_px: float) -> FrameFit | None:
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


def bunched(pts: np.ndarray, frame_size: tuple[int, int]) -> bool:
    """Whether points (n, 2), full-resolution pixels, occupy fewer grid cells of the frame
    than a fit needs not to be weak (the consensus's own spread test,
    :func:`stabilize.consensus.degeneracy.weakness`).

    The consensus judges the pairs within the user's threshold; the noise-adaptive refit
    may then keep only a part of them. Over a scene at the noise level, a burnt-in strip's
    still tracks are the only ones within the tracking noise of each other: the loose
    inliers took in a few noise tracks elsewhere, the refit kept the strip, and 26 frames of
    the drawn hazy truss at contrast 0.05 were logged `ok` with the strip's motion (off by
    0.9–2.4 px, measured)."""
    if len(pts) == 0:
        return True
    cells = cell_index(np.ascontiguousarray(pts.T, dtype=float), frame_box(frame_size, None))
    return count_cells(cells) < WEAK_MIN_CELLS


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
              model: MotionModel, settings: Settings, seed: list[int],
              prior: np.ndarray | None, frame_size: tuple[int, int]) -> FrameFit:
    """Fit one frame's motion so that the background wins over a large moving object.

    The plain consensus fit, refitted to the measured tracking noise, is one candidate. A
    slow object can sit inside the user's threshold of the camera motion (and the camera
    motion inside the object's), so rivals are looked for among the pairs outside the *tight*
    set: the consensus among those, and the consensus among the tracks that so far moved with
    the camera when most of them disagree. The candidate with the best
    :func:`background_score` wins.

    Parameters
    ----------
    src, dst : (n, 2) track positions in the previous and this frame, full-resolution pixels.
    background : (n,) each track's history of moving with the camera, 0-1.
    model : the motion model (looked up once by the caller from ``settings.model``).
    settings : consensus threshold (full-resolution pixels), confidence, rounds.
    seed : the frame's seed; prior : (3, 3) the previous frame's motion, or None.
    frame_size : (width, height), full-resolution pixels.

    Returns
    -------
    FrameFit : the chosen (3, 3) motion and its inliers (n,).
    """
    best, kw = _consensus(model, src, dst, settings=settings, seed=seed, prior=prior,
                          frame_size=frame_size)
    if not best.ok:
        return best
    # Two motions less than the threshold apart are both inliers of a compromise between
    # them, and a least-squares refit settles on that compromise. A second consensus at a
    # third of the threshold finds the dominant one of the two instead.
    mode = model.estimate(src, dst, seed=[*seed, 5], prior=best.matrix,
                    **{**kw, "inlier_px": settings.inlier_px / 3.0})
    if mode.ok and mode.inliers.sum() >= 0.3 * best.inliers.sum():
        found = _candidate(mode, src, dst, settings.inlier_px)
        if found is not None:
            best = dataclasses.replace(found, rounds=best.rounds + found.rounds,
                                       weak=best.weak or found.weak)
    passes = REFIT_PASSES[settings.analysis]
    best, err = _refit_to_noise(model, src, dst, best, kw, seed, passes)
    n = len(src)
    # Rivals are sought at the noise scale of the first fit: two motions a pixel apart both
    # pass a 1.5 px threshold, but not a threshold of a few tenths.
    noise_px = min(settings.inlier_px, max(0.05, TIGHT_K * median(err[best.support])
                                           / 1.1774))
    kw_rival = {**kw, "inlier_px": noise_px}
    rivals: list[FrameFit | None] = []
    rest = ~best.support
    if rest.sum() >= max(20, 0.15 * n):
        alt = model.estimate(src[rest], dst[rest], seed=[*seed, 1], **kw_rival)
        rivals.append(_candidate(alt, src, dst, noise_px))
    known = background >= BACKGROUND_HISTORY
    if known.sum() >= 12 and (known & ~best.support).sum() > 0.5 * known.sum():
        alt = model.estimate(src[known], dst[known], seed=[*seed, 2], prior=prior, **kw_rival)
        rivals.append(_candidate(alt, src, dst, noise_px))
    rounds = best.rounds
    score = background_score(best, src, background, frame_size)
    for i, r in enumerate(rivals):
        if r is None:
            continue
        r, err = _refit_to_noise(model, src, dst, r, kw_rival, [*seed, 10 + i], passes)
        rounds += r.rounds
        s = background_score(r, src, background, frame_size)
        if s > score:
            inl = err < settings.inlier_px
            best, score = dataclasses.replace(r, inliers=inl, rms_px=float(
                np.sqrt(np.mean(err[inl] ** 2)))), s
    return dataclasses.replace(best, rounds=rounds,
                               bunched=bunched(src[best.support], frame_size))


def refit(src: np.ndarray, dst: np.ndarray, *, model: MotionModel, settings: Settings,
          seed: list[int], prior: np.ndarray, frame_size: tuple[int, int]) -> FrameFit:
    """A plain consensus fit from a starting guess, refitted to the tracking noise: the fit
    of a frame whose pairs are already known to be the scene's (arguments as for
    :func:`fit_frame`)."""
    first, kw = _consensus(model, src, dst, settings=settings, seed=seed, prior=prior,
                           frame_size=frame_size)
    if not first.ok:
        return first
    fit = _noise_adaptive_refit(model, src, dst, first, kw, seed, REFIT_PASSES[settings.analysis])
    return dataclasses.replace(fit, bunched=bunched(src[fit.support], frame_size))


def _consensus(model: MotionModel, src: np.ndarray, dst: np.ndarray, *, settings: Settings,
               seed: list[int], prior: np.ndarray | None,
               frame_size: tuple[int, int]) -> tuple[FrameFit, dict]:
    """The consensus fit at the user's settings, and those settings as keywords."""
    kw = dict(inlier_px=settings.inlier_px,
              confidence=settings.confidence, max_rounds=settings.max_rounds,
              frame_size=frame_size)
    fit = model.estimate(src, dst, seed=seed, prior=prior, **kw)
    return FrameFit(np.asarray(fit.matrix, float), np.asarray(fit.inliers, bool),
                    float(fit.rms_px), int(fit.rounds), bool(fit.ok), bool(fit.weak)), kw


def _noise_adaptive_refit(model: MotionModel, src: np.ndarray, dst: np.ndarray, fit: FrameFit,
                          kw: dict, seed: list[int], passes: int = 3) -> FrameFit:
    """:func:`_refit_to_noise` without the transfer errors."""
    return _refit_to_noise(model, src, dst, fit, kw, seed, passes)[0]


def _refit_to_noise(model: MotionModel, src: np.ndarray, dst: np.ndarray, fit: FrameFit,
                    kw: dict, seed: list[int], passes: int = 3) -> tuple[FrameFit, np.ndarray]:
    """Refit on the inliers that agree with the fit to within the measured tracking noise.

    The user's threshold must be wide enough for every frame, so it lets in matches with
    errors several times the real tracking noise (edges of moving objects, compression
    artefacts); they bias the least-squares refit. The noise σ is estimated from the median
    residual of the current tight set (for 2-D Gaussian errors the median distance is
    1.1774 σ), and the refit keeps residuals below ``TIGHT_K`` σ. A few passes let σ settle
    once the worst matches are gone.

    Returns the fit and the transfer errors (n,) of its matrix on all pairs, pixels.
    """
    if fit.inliers.sum() < 12:
        return fit, transfer_error(fit.matrix, src, dst)
    m = fit.matrix
    tight_set = fit.inliers
    rounds = fit.rounds
    err = None
    for k in range(passes):
        err = transfer_error(m, src, dst)
        sigma = median(err[tight_set]) / 1.1774
        tight = min(kw["inlier_px"], max(TIGHT_K * sigma, 0.05))
        if tight >= kw["inlier_px"] * 0.999:
            break
        again = model.estimate(src, dst, seed=[*seed, 2, k], prior=m,
                         **{**kw, "inlier_px": tight, "max_rounds": 0})
        if not again.ok or again.inliers.sum() < 12:
            break
        m = np.asarray(again.matrix, float)
        tight_set = np.asarray(again.inliers, bool)
        rounds += int(again.rounds)
        err = None
    if err is None:
        err = transfer_error(m, src, dst)
    full = err < kw["inlier_px"]
    if full.sum() < 0.9 * fit.inliers.sum():
        return fit, (err if m is fit.matrix else transfer_error(fit.matrix, src, dst))
    return FrameFit(m, full, float(np.sqrt(np.mean(err[full] ** 2))), rounds, True, fit.weak,
                    tight_set), err


def corner_shift(a: np.ndarray, b: np.ndarray, frame_size: tuple[int, int]) -> float:
    """Largest distance (pixels) between where two 3×3 motions put the frame's corners."""
    w, h = frame_size
    corners = np.array([[0.0, 0.0], [w - 1.0, 0.0], [0.0, h - 1.0], [w - 1.0, h - 1.0]])
    h = np.c_[corners, np.ones(4)] @ b.T
    return float(np.max(transfer_error(a, corners, h[:, :2] / h[:, 2:3])))
