"""Sampling stage: canonical ordering of the correspondences and minimal samples.

Sampling is uniform (plain RANSAC, Fischler and Bolles 1981). The data are first put
in a canonical order that depends only on the coordinate values, so that the whole
estimate - samples, sums, refits - is identical bit for bit whatever order the caller
passed the correspondences in.

References
----------
.. [1] M. A. Fischler and R. C. Bolles, "Random sample consensus", CACM, 1981.
.. [2] Raguram et al., "USAC: A Universal Framework for Random Sample Consensus",
   IEEE TPAMI, 2013 (sampling stage).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

__all__ = ["canonical_order", "draw_samples", "sort_key"]

# Weights of a scalar sort key; irrational-looking so that distinct rows tie only by
# accident (ties fall back to an exact lexicographic sort).
_KEY = np.array([1.0, 0.7548776662466927, 0.5698402909980532, 0.4301597090019468])


def sort_key(pts: NDArray[np.float64]) -> NDArray[np.float64]:
    """Scalar sort key of each correspondence (column of ``pts``, shape (4, n)); not finite
    exactly when the column holds a non-finite value or overflows."""
    return _KEY @ pts


def canonical_order(
    pts: NDArray[np.float64], key: NDArray[np.float64] | None = None
) -> NDArray[np.intp]:
    """Order of rows that depends only on their values.

    Parameters
    ----------
    pts : ndarray, shape (4, n)
        Rows ``x, y, u, v``: src and dst coordinates of each correspondence (column).
    key : ndarray, shape (n,), optional
        ``sort_key(pts)`` when already computed.

    Returns
    -------
    ndarray of intp, shape (n,)
        Permutation sorting the columns; identical columns are interchangeable.
    """
    if key is None:
        key = _KEY @ pts
    order = np.argsort(key)
    k = np.take(key, order)
    if (k[1:] == k[:-1]).any():
        # Equal keys: sort exactly by (x, y, u, v) so that only identical columns tie.
        order = np.lexsort(pts[::-1])
    return order


def draw_samples(
    rng: np.random.Generator, n: int, sample_size: int, batch: int
) -> NDArray[np.int64]:
    """Draw ``batch`` minimal samples of ``sample_size`` indices from ``range(n)``.

    Indices are drawn with replacement: a repeated index is a pair of coincident
    points, which every minimal solver already rejects as degenerate, so no per-sample
    rejection loop is needed. Repeats are rare unless ``n`` is tiny. ``floor(n U)``
    of uniform doubles is used as it is several times cheaper per call than
    ``Generator.integers``; its bias (about ``n / 2**53``) is immaterial.
    """
    idx = (rng.random((batch, sample_size)) * n).astype(np.intp)
    # U < 1 but n * U can round up to n for huge n; keep indices in range.
    return np.minimum(idx, n - 1, out=idx)
