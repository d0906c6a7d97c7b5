"""The estimator: USAC-style hypothesise-and-verify loop over the stage modules.

References
----------
.. [1] R. Raguram, O. Chum, M. Pollefeys, J. Matas and J.-M. Frahm, "USAC: A Universal
   Framework for Random Sample Consensus", IEEE TPAMI, 2013.
.. [2] D. Nister, "Preemptive RANSAC for live structure and motion estimation", ICCV,
   2003 (scoring hypotheses on a subset of the data first; here one preemption step).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .degeneracy import (
    DEFAULT_BOUNDS,
    WEAK_MIN_CELLS,
    Frame,
    MotionBounds,
    cell_index,
    count_cells,
    frame_box,
    plausible,
    point_set_problem,
    to_frame_centred,
    weakness,
)
from .local_opt import Candidate, evaluate, local_optimise
from .models import MODELS, Model, Normalisation, normalise_in_place
from .sampling import canonical_order, draw_samples, generator, sort_key
from .scoring import inlier_mask, msac_costs
from .termination import FIRST_GUESS_OUTLIERS, next_batch_size, rounds_needed

__all__ = ["Fit", "estimate"]

#: Point sets at least this large preview every batch of hypotheses on about
#: PREVIEW_POINTS evenly spread points and verify on all points only the hypotheses
#: with at least PREVIEW_SHARE of the best support seen on that subset: a one-step form
#: of preemptive scoring (Nister 2003). All-inlier hypotheses have about the inlier
#: share of support on the subset, contaminated ones a few per cent, so the rule skips
#: the full scoring of most contaminated hypotheses without risking the good ones.
PREVIEW_MIN_POINTS = 400
PREVIEW_POINTS = 100
PREVIEW_SHARE = 0.5
#: Batches of at most this many samples are verified on all points without a preview: for
#: so few hypotheses the preview costs about as much as the full verification it saves
#: (measured with tests/benchmarks/bench_consensus.py on 1000 points).
PREVIEW_MIN_BATCH = 16


@dataclass(frozen=True, eq=False)
class Fit:
    """Result of :func:`estimate`.

    Attributes
    ----------
    matrix : ndarray, shape (3, 3)
        Model mapping src to dst pixels, ``h33 = 1``; identity on failure.
    inliers : ndarray of bool, shape (n,)
        Correspondences with transfer error below the threshold (input order).
    rounds : int
        Hypotheses tried: random minimal samples drawn plus the prior if given.
    rms_px : float
        RMS transfer error of the inliers, pixels (nan when there are none).
    score : float
        MSAC cost ``sum_i min(r_i^2, t^2)`` over all correspondences, pixels^2; lower
        is better (inf on failure).
    ok : bool
        A trustworthy fit was found: a plausible model supported by at least
        ``2 * sample_size + 2`` inliers.
    weak : bool
        Few inliers (< 12 or < 20 % of n) or inliers bunched in about a quarter of
        the frame or less.
    reason : str
        Why the fit failed or is weak; "" when fine.
    model : str
        Model name.
    """

    matrix: NDArray[np.float64]
    inliers: NDArray[np.bool_]
    rounds: int
    rms_px: float
    score: float
    ok: bool
    weak: bool
    reason: str
    model: str = field(default="")

    @property
    def n_inliers(self) -> int:
        """Number of inliers."""
        return int(np.count_nonzero(self.inliers))


def _failure(n: int, rounds: int, reason: str, model: str) -> Fit:
    return Fit(np.eye(3), np.zeros(n, dtype=bool), rounds, float("nan"), float("inf"),
               False, True, reason, model)


def _det3(m: NDArray[np.float64]) -> float:
    """Determinant of a 3x3 matrix, written out (a tenth of the cost of numpy's LU)."""
    (a, b, c), (d, e, f), (g, h, i) = m.tolist()
    return a * (e * i - f * h) - b * (d * i - f * g) + c * (d * h - e * g)


def _check(
    src: ArrayLike, dst: ArrayLike, model: str | Model, inlier_px: float, confidence: float,
    max_rounds: int, prior: ArrayLike | None,
) -> tuple[Model, NDArray[np.float64], NDArray[np.float64], NDArray[np.float64] | None]:
    # The name is looked up here, at the edge; everything after works on the model itself.
    spec = model if isinstance(model, Model) else MODELS.get(model)
    if spec is None:
        raise ValueError(f"unknown model {model!r}; expected one of {sorted(MODELS)}")
    s = np.asarray(src, dtype=np.float64)
    d = np.asarray(dst, dtype=np.float64)
    if s.ndim != 2 or s.shape[1] != 2 or d.shape != s.shape:
        raise ValueError(f"src and dst must both have shape (n, 2), got {s.shape} and {d.shape}")
    if not inlier_px > 0:
        raise ValueError(f"inlier_px must be > 0, got {inlier_px!r}")
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must be in (0, 1), got {confidence!r}")
    if int(max_rounds) != max_rounds or max_rounds < 0:
        raise ValueError(f"max_rounds must be a non-negative integer, got {max_rounds!r}")
    p = None
    if prior is not None:
        p = np.asarray(prior, dtype=np.float64)
        if p.shape != (3, 3):
            raise ValueError(f"prior must be a 3x3 matrix, got shape {p.shape}")
    return spec, s, d, p


def estimate(
    src: ArrayLike,
    dst: ArrayLike,
    model: str | Model = "homography",
    inlier_px: float = 1.5,
    confidence: float = 0.999,
    max_rounds: int = 2000,
    seed: int | Sequence[int] | np.random.Generator | None = 0,
    prior: ArrayLike | None = None,
    bounds: MotionBounds | None = None,
    frame_size: tuple[float, float] | None = None,
) -> Fit:
    """Robustly fit a 2-D motion model to matched points.

    Hypothesise-and-verify along the USAC stages: uniform minimal samples drawn in
    batches, closed-form minimal solvers with sample degeneracy and orientation
    checks, MSAC scoring, motion-bounds verification, LO-RANSAC refinement of each
    new best model, adaptive termination, then a final least-squares (and, for
    homographies, Levenberg-Marquardt) refit on the inliers.

    Parameters
    ----------
    src, dst : array_like, shape (n, 2)
        Matched points ``(x, y)`` in pixels, origin at the centre of the top-left pixel.
        Rows with non-finite values are ignored (never inliers).
    model : {"translation", "similarity", "affine", "homography"} or Model
        Motion model, by name or as the model itself (:data:`MODELS`); minimal samples of
        1, 2, 3 and 4 correspondences.
    inlier_px : float
        Inlier threshold on the transfer error ``|dst - H(src)|``, pixels (> 0).
    confidence : float
        Probability in (0, 1) of having drawn at least one outlier-free sample.
    max_rounds : int
        Cap on random hypotheses (>= 0; 0 tries the prior alone).
    seed : int, sequence of int, numpy.random.Generator or None
        Randomness; passed to :func:`numpy.random.default_rng`. A fixed seed gives an
        identical result bit for bit, whatever the order of the correspondences.
    prior : array_like, shape (3, 3), optional
        A likely model (e.g. the previous frame's motion), scored first as a free
        hypothesis; projected onto ``model``'s family.
    bounds : MotionBounds, optional
        Plausible frame-to-frame motion; defaults to ``MotionBounds()``. Use
        ``MotionBounds.unbounded()`` to keep only the always-on sanity checks.
    frame_size : (width, height), optional
        Frame size in pixels for the bounds and the spread check; without it the
        bounding box of the src points stands in for the frame.

    Returns
    -------
    Fit
        Never raises for too few or degenerate points: returns ``ok=False``, the
        identity and all-False inliers with a ``reason``.

    Raises
    ------
    ValueError
        Unknown model, wrong shapes, ``inlier_px <= 0``, confidence outside (0, 1),
        negative ``max_rounds``.

    References
    ----------
    .. [1] Raguram et al., "USAC: A Universal Framework for Random Sample Consensus",
       IEEE TPAMI, 2013.
    .. [2] M. A. Fischler and R. C. Bolles, "Random sample consensus", CACM, 1981.
    .. [3] P. H. S. Torr and A. Zisserman, "MLESAC: A new robust estimator with
       application to estimating image geometry", CVIU, 2000.
    .. [4] O. Chum, J. Matas and J. Kittler, "Locally optimized RANSAC", DAGM, 2003.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> src = rng.uniform(0, [1920, 1080], size=(200, 2))
    >>> dst = src + (12.0, -3.0)
    >>> dst[:50] = rng.uniform(0, [1920, 1080], size=(50, 2))  # outliers
    >>> fit = estimate(src, dst, model="translation", frame_size=(1920, 1080))
    >>> fit.ok, fit.weak, int(fit.inliers.sum())
    (True, False, 150)
    >>> np.round(fit.matrix[:2, 2], 6)
    array([12., -3.])
    """
    spec, src_a, dst_a, prior_a = _check(src, dst, model, inlier_px, confidence,
                                         max_rounds, prior)
    with np.errstate(all="ignore"):
        return _estimate(spec, src_a, dst_a, float(inlier_px), float(confidence),
                         int(max_rounds), seed, prior_a, bounds or DEFAULT_BOUNDS, frame_size)


class _Prepared(NamedTuple):
    """The point set of one call made ready for a model: the finite rows kept (None: all),
    their count, canonical order, the kept points in the order given (4, n), the
    normalisation, the normalised points in canonical order (5, n), why no model of the
    family fits them ("" when one may) and the model's features and those of an evenly
    spread subset of the points (None when there are too few points for a preview); then
    what later calls on the same points reuse, made on first use (:func:`_memo`): the
    normalisation's 3x3 matrices and, per frame rectangle, the spread grid's cell of
    every src point (in the order given) and of an evenly spread subset of them."""

    keep: NDArray[np.intp] | None
    n: int
    order: NDArray[np.intp] | None
    pts: NDArray[np.float64]
    norm: Normalisation | None
    z: NDArray[np.float64] | None
    problem: str
    feat: NDArray[np.float64] | None
    feat_sub: NDArray[np.float64] | None
    memo: dict[str | Frame | tuple[Frame, int], NDArray] | None = None


def _memo(ready: _Prepared, key: str | Frame | tuple[Frame, int]) -> NDArray:
    """``ready``'s normalisation matrix ``key`` ("t_src", "t_src_inv", "t_dst",
    "t_dst_inv", see :class:`Normalisation`), for a :class:`Frame` the spread grid's cell
    of every src point in the order given (:func:`cell_index`) and for ``(frame, step)``
    that of every ``step``-th point in canonical order; made on first use, read-only."""
    got = ready.memo.get(key)
    if got is None:
        if isinstance(key, Frame):
            got = cell_index(ready.pts[:2], key)
        elif isinstance(key, tuple):
            got = cell_index(ready.pts[:2].take(ready.order[::key[1]], axis=1), key[0])
        else:
            got = getattr(ready.norm, key)()
        got.setflags(write=False)
        ready.memo[key] = got
    return got


def _spread(ready: _Prepared, frame: Frame, mask: NDArray[np.bool_],
            inl: NDArray[np.bool_]) -> int:
    """Grid cells holding an inlier (:func:`count_cells`), or any count of at least
    WEAK_MIN_CELLS when that many hold one: then the spread is no weakness and the exact
    count is not needed. ``mask`` marks the inliers in canonical order, ``inl`` the same
    in the order given."""
    if ready.n >= PREVIEW_MIN_POINTS:
        # Every step-th point in canonical order is spread over the whole frame; enough
        # cells among its inliers settle the check without the cell of every inlier (for
        # smaller sets the two passes cost more than they save).
        step = ready.n // PREVIEW_POINTS
        cells = count_cells(_memo(ready, (frame, step)).compress(mask[::step]))
        if cells >= WEAK_MIN_CELLS:
            return cells
    return count_cells(_memo(ready, frame).compress(inl))


# The last few point sets made ready, keyed by the bytes of the arrays they came from: a
# frame's fit calls the estimator several times on the same pairs (a consensus, then refits
# at other thresholds), often as fresh copies of them, and getting them ready costs as much
# as a refit. Equal bytes give the same preparation bit for bit.
_RECENT: list[tuple[Model, bytes, bytes, _Prepared]] = []
_RECENT_SIZE = 4


def _prepared(spec: Model, src: NDArray[np.float64], dst: NDArray[np.float64]) -> _Prepared:
    """The point set made ready (:class:`_Prepared`), reused when arrays with the same
    values were given for the same model lately (its arrays are read-only)."""
    s_key, d_key = src.tobytes(), dst.tobytes()
    for m, s_ref, d_ref, ready in tuple(_RECENT):
        if m is spec and s_ref == s_key and d_ref == d_key:
            return ready
    ready = _prepare(spec, src, dst)
    _RECENT.insert(0, (spec, s_key, d_key, ready))
    del _RECENT[_RECENT_SIZE:]
    return ready


def _prepare(spec: Model, src: NDArray[np.float64], dst: NDArray[np.float64]) -> _Prepared:
    n_all = len(src)
    pts = np.empty((4, n_all))
    pts[:2] = src.T
    pts[2:] = dst.T
    key = sort_key(pts)
    keep = None
    # The key is a positive combination of the coordinates: finite for finite rows unless it
    # overflows, which only sends the check down the exact path.
    if not math.isfinite(float(np.add.reduce(key))):
        fin = np.isfinite(pts).all(axis=0)
        if not fin.all():
            keep = np.flatnonzero(fin)
            pts = np.take(pts, keep, axis=1)
            key = np.take(key, keep)
    n = pts.shape[1]
    if n < spec.sample_size:
        return _Prepared(keep, n, None, pts, None, None, "", None, None)
    order = canonical_order(pts, key)
    z = np.empty((5, n))
    # Indices are in range; "wrap" spares the buffered copy that "raise" makes with out=.
    pts.take(order, axis=1, out=z[:4], mode="wrap")
    z[4] = 1.0
    norm, gram = normalise_in_place(z)
    problem = point_set_problem(gram, n, spec.spread_rank)
    feat = None if problem else spec.features(z)
    feat_sub = None
    if feat is not None and n >= PREVIEW_MIN_POINTS:
        # Every k-th point in canonical order (which runs along a slanted line across the
        # frame) spreads the subset over the whole frame.
        feat_sub = np.ascontiguousarray(feat[:, ::n // PREVIEW_POINTS])
    for a in (keep, order, pts, z, feat, feat_sub):
        if a is not None:
            a.setflags(write=False)
    return _Prepared(keep, n, order, pts, norm, z, problem, feat, feat_sub, {})


def _estimate(
    spec: Model, src: NDArray[np.float64], dst: NDArray[np.float64], t_px: float,
    confidence: float, max_rounds: int, seed: int | Sequence[int] | np.random.Generator | None,
    prior: NDArray[np.float64] | None, bounds: MotionBounds,
    frame_size: tuple[float, float] | None,
) -> Fit:
    n_all = len(src)
    s = spec.sample_size
    prepared = _prepared(spec, src, dst)
    keep, n, order, pts, norm, z, problem, feat, feat_sub = prepared[:9]
    if n < s:
        return _failure(n_all, 0, f"too few points ({n} < {s})", spec.name)
    if problem:
        return _failure(n_all, 0, problem, spec.name)

    frame = frame_box(frame_size, pts)
    t2 = (t_px * norm.scale) ** 2
    cx, cy = frame.centre
    src_off = (cx - norm.src_centre[0], cy - norm.src_centre[1])
    dst_off = (norm.dst_centre[0] - cx, norm.dst_centre[1] - cy)
    scale = norm.scale

    def ok_motion(h: NDArray[np.float64]) -> bool:
        m = to_frame_centred(h.ravel().tolist(), scale, src_off, dst_off)
        return plausible(m, bounds, frame)

    zs = z[:4]
    # Made on first use: a refit from a prior alone draws nothing, and seeding costs as
    # much as scoring a batch.
    rng: np.random.Generator | None = None

    best: Candidate | None = None
    # The inliers of the best model and their count, kept for the end.
    best_mask: NDArray[np.bool_] | None = None
    best_k = 0
    rounds = 0
    n_valid = 0
    n_implausible = 0
    needed: int | float = max_rounds

    def adopt(c: Candidate) -> None:
        nonlocal best, best_mask, best_k, needed
        lo = local_optimise(spec, feat, z, c, t2)
        if lo is not c and not ok_motion(lo.h):
            lo = c
        best = lo
        best_mask = inlier_mask(lo.sq_res, t2)
        best_k = np.count_nonzero(best_mask)
        needed = min(rounds_needed(1.0 - best_k / n, s, confidence), max_rounds)

    if prior is not None:
        rounds += 1
        hp = None
        if all(map(math.isfinite, prior.ravel().tolist())) and abs(_det3(prior)) > 1e-300:
            hp = spec.project(_memo(prepared, "t_dst") @ prior @ _memo(prepared, "t_src_inv"))
        if hp is not None and ok_motion(hp):
            n_valid += 1
            adopt(evaluate(spec, feat, hp, t2))

    first = rounds_needed(FIRST_GUESS_OUTLIERS, s, confidence)
    while True:
        if best is None:
            batch = next_batch_size(rounds, first, max_rounds, False)
        else:
            batch = next_batch_size(rounds, needed, max_rounds, True)
        if batch <= 0:
            break
        if rng is None:
            rng = generator(seed)
        idx = draw_samples(rng, n, s, batch)
        rounds += batch
        hyp, valid = spec.solve(zs.take(idx, axis=1))
        nv = int(np.count_nonzero(valid))
        if nv == 0:
            continue
        n_valid += nv
        if nv < batch:
            hyp = hyp[valid]
        if feat_sub is not None and batch > PREVIEW_MIN_BATCH and len(hyp) > 1:
            # Preview: support of every hypothesis on the subset; only those with at least
            # PREVIEW_SHARE of the best support seen there (the current best's included)
            # are verified on all points.
            support = (spec.sq_residuals(feat_sub, hyp) < t2).sum(axis=1)
            top = int(support.max())
            if best is not None:
                top = max(top, int(np.count_nonzero(best.sq_res[::n // PREVIEW_POINTS] < t2)))
            sel = np.flatnonzero(support >= PREVIEW_SHARE * top)
            if len(sel) == 0:
                continue
            if len(sel) < len(hyp):
                hyp = hyp[sel]
        r2 = spec.sq_residuals(feat, hyp)
        costs = msac_costs(r2, t2)
        bound = np.inf if best is None else best.cost
        # Best first; a candidate is verified against the motion bounds only when it
        # would become the new best, which is equivalent to rejecting every
        # implausible hypothesis before scoring but far cheaper.
        for j in costs.argsort().tolist():
            cj = float(costs[j])
            if not cj < bound:
                break
            if ok_motion(hyp[j]):
                adopt(Candidate(hyp[j], r2[j], cj))
                break
            n_implausible += 1

    if best is None:
        if n_valid == 0:
            reason = "degenerate: no valid minimal sample (coincident or collinear points)"
        elif n_implausible:
            reason = "no hypothesis within the motion bounds"
        else:
            reason = "no hypothesis found"
        return _failure(n_all, rounds, reason, spec.name)

    final = best
    if spec.polish is not None:
        hp = spec.polish(z, final.h, inlier_mask(final.sq_res, t2))
        cand = evaluate(spec, feat, hp, t2)
        if cand.cost <= final.cost and ok_motion(hp):
            final = cand

    if final is best:
        mask, k = best_mask, int(best_k)
    else:
        mask = inlier_mask(final.sq_res, t2)
        k = int(np.count_nonzero(mask))
    h_px = _memo(prepared, "t_dst_inv") @ final.h @ _memo(prepared, "t_src")
    h_px /= h_px[2, 2]
    inl = np.empty(n, dtype=bool)
    inl[order] = mask
    weak_reason = weakness(k, n, _spread(prepared, frame, mask, inl))
    if keep is not None:
        full = np.zeros(n_all, dtype=bool)
        full[keep] = inl
        inl = full
    scale2 = norm.scale * norm.scale
    # The quadratic-form residuals can come out a hair below zero: nan then, as numpy's sqrt.
    ms = float(final.sq_res @ mask) / (k * scale2) if k else float("nan")
    rms = math.sqrt(ms) if ms >= 0.0 else float("nan")
    min_support = 2 * s + 2
    ok = k >= min_support
    reason = "" if ok else f"too few inliers ({k}, need {min_support})"
    reason = reason or weak_reason
    return Fit(h_px, inl, rounds, rms, final.cost / scale2, ok, bool(weak_reason) or not ok,
               reason, spec.name)
