"""Scoring stage: MSAC truncated quadratic cost.

Each correspondence contributes ``min(r^2, t^2)``: inliers by their squared transfer
error, outliers by a constant. Unlike bare inlier counting (RANSAC) this prefers,
among models with similar support, the one that fits its inliers best.

References
----------
.. [1] P. H. S. Torr and A. Zisserman, "MLESAC: A new robust estimator with application
   to estimating image geometry", Computer Vision and Image Understanding, 2000.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

__all__ = ["msac_costs", "inlier_mask"]

# ndarray.sum without its Python wrapper (the same reduction).
_sum = np.add.reduce


def msac_costs(sq_res: NDArray[np.float64], t2: float) -> NDArray[np.float64]:
    """MSAC cost of each hypothesis.

    Parameters
    ----------
    sq_res : ndarray, shape (B, n)
        Squared transfer errors.
    t2 : float
        Squared inlier threshold, same units.

    Returns
    -------
    ndarray, shape (B,)
        ``sum_i min(r_i^2, t^2)``; lower is better.
    """
    if sq_res.size > 4000 and sq_res.ndim == 2:
        # Same values; on large batches numpy (2.4) takes the minimum against a row of t2
        # broadcast down the batch up to twice as fast as against the scalar (on small
        # ones making the row costs more than it saves).
        return _sum(np.minimum(sq_res, np.full(sq_res.shape[1], t2)), axis=-1)
    return _sum(np.minimum(sq_res, t2), axis=-1)


def inlier_mask(sq_res: NDArray[np.float64], t2: float) -> NDArray[np.bool_]:
    """Inliers are strictly below the threshold (a truncated cost equals ``t2``)."""
    return sq_res < t2
