"""Local optimisation stage (LO-RANSAC).

Each new best hypothesis is refined by iterated least-squares refits on its inliers
with a threshold shrinking from ``k t`` to ``t``: the wide first threshold recovers
inliers that a model fitted to a noisy minimal sample misses, and the final passes
at ``t`` settle on the least-squares fit of its own consensus set. A refit is kept
only when it lowers the MSAC cost.

References
----------
.. [1] O. Chum, J. Matas and J. Kittler, "Locally optimized RANSAC", DAGM, 2003.
.. [2] K. Lebeda, J. Matas and O. Chum, "Fixing the locally optimized RANSAC", BMVC,
   2012 (iterated least squares with a shrinking threshold).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray

from .models import Model
from .scoring import inlier_mask, msac_costs

__all__ = ["LO_FACTORS", "Candidate", "local_optimise"]

#: Threshold multipliers of the successive refits (last ones at the inlier threshold).
LO_FACTORS = (2.0, 1.0, 1.0)


class Candidate(NamedTuple):
    """A model with its squared residuals (n,) and MSAC cost (normalised units)."""

    h: NDArray[np.float64]
    sq_res: NDArray[np.float64]
    cost: float


def evaluate(
    model: Model, feat: NDArray[np.float64], h: NDArray[np.float64], t2: float
) -> Candidate:
    """Score one model."""
    r2 = model.sq_residuals_one(feat, h)
    return Candidate(h, r2, float(msac_costs(r2, t2)))


def local_optimise(
    model: Model,
    feat: NDArray[np.float64],
    z: NDArray[np.float64],
    start: Candidate,
    t2: float,
    factors: tuple[float, ...] = LO_FACTORS,
) -> Candidate:
    """Refine ``start`` by least-squares refits with a shrinking threshold.

    Parameters
    ----------
    model : Model
    feat : ndarray, shape (n, k)
        Model features of the normalised points.
    z : ndarray, shape (5, n)
        Normalised points, rows (x, y, u, v, 1).
    start : Candidate
        Hypothesis to refine.
    t2 : float
        Squared inlier threshold (normalised units).
    factors : tuple of float
        Threshold multipliers, one refit each.

    Returns
    -------
    Candidate
        The lowest-cost model seen (``start`` if no refit improved it).
    """
    best = cur = start
    prev = None
    last = factors[-1]
    for k in factors:
        mask = inlier_mask(cur.sq_res, k * k * t2)
        if prev is not None and not (mask ^ prev).any():
            break  # converged: the same inliers would give the same refit
        prev = mask if k == last else None
        # None also when fewer inliers than a minimal sample remain.
        h = model.refit(feat, z, mask)
        if h is None:
            break
        cur = evaluate(model, feat, h, t2)
        if cur.cost < best.cost:
            best = cur
    return best
