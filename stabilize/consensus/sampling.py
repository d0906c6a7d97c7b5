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

from collections.abc import Sequence

import numpy as np
from numpy.typing import NDArray

__all__ = ["canonical_order", "draw_samples", "generator", "sort_key"]

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
    order = key.argsort()
    k = key.take(order)
    if (k[1:] == k[:-1]).any():
        # Equal keys: sort exactly by (x, y, u, v) so that only identical columns tie.
        order = np.lexsort(pts[::-1])
    return order


def generator(seed: int | Sequence[int] | np.random.Generator | None) -> np.random.Generator:
    """``numpy.random.default_rng(seed)``: the same generator, in the same state.

    Seeds made of integers in ``[0, 2**32)`` - an int or a sequence of them - are handed
    to :class:`numpy.random.SeedSequence` as the array of 32-bit words it would make of
    them itself, which spares its per-element conversion (about a third of the cost of
    seeding from a list of three ints, numpy 2.4).
    """
    words = None
    if type(seed) is int:
        if 0 <= seed < _WORD:
            words = (seed,)
    elif type(seed) in (list, tuple) and seed and all(
            type(v) is int and 0 <= v < _WORD for v in seed):
        words = seed
    if words is None:
        return np.random.default_rng(seed)
    entropy = np.array(words, dtype=np.uint32)
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(entropy)))


_WORD = 1 << 32


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
    if n > _EXACT:
        # U <= 1 - 2**-53, so n U stays below n when n < 2**52; beyond, it can round up
        # to n: keep indices in range.
        np.minimum(idx, n - 1, out=idx)
    return idx


_EXACT = 1 << 52
