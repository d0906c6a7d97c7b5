"""Accuracy metrics for estimated motion, and quick order statistics of residuals."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["grid_transfer_error", "median", "quantile"]


def grid_transfer_error(
    h_true: ArrayLike, h_est: ArrayLike, width: float, height: float, n: int = 10
) -> float:
    """Mean distance between a point grid mapped by two models.

    Parameters
    ----------
    h_true, h_est : array_like, shape (3, 3)
        Reference and estimated models (src to dst pixels).
    width, height : float
        Frame size, pixels; the grid spans pixel centres ``[0, width-1] x [0, height-1]``.
    n : int
        Grid points per side (``n * n`` in all).

    Returns
    -------
    float
        Mean Euclidean distance, pixels.

    Examples
    --------
    >>> shift = np.array([[1.0, 0, 0.5], [0, 1, 0], [0, 0, 1]])
    >>> grid_transfer_error(np.eye(3), shift, 1920, 1080)
    0.5
    """
    xs = np.linspace(0.0, width - 1.0, n)
    ys = np.linspace(0.0, height - 1.0, n)
    gx, gy = np.meshgrid(xs, ys)
    p = np.stack((gx.ravel(), gy.ravel(), np.ones(n * n)))
    a = np.asarray(h_true, dtype=np.float64) @ p
    b = np.asarray(h_est, dtype=np.float64) @ p
    d = a[:2] / a[2] - b[:2] / b[2]
    return float(np.mean(np.hypot(d[0], d[1])))


def median(a: np.ndarray) -> float:
    """Median of a 1-D float array without NaN, equal to ``numpy.median`` (the mean of the
    two middle values for an even count) at a tenth of its overhead on small arrays (NaN
    for an empty array)."""
    n = len(a)
    if n == 0:
        return float("nan")
    k = n // 2
    if n % 2:
        return float(np.partition(a, k)[k])
    part = np.partition(a, (k - 1, k))
    return float((part[k - 1] + part[k]) / 2.0)


def quantile(a: np.ndarray, q: float) -> float:
    """The ``q`` quantile (0 to 1) of a 1-D float array without NaN, interpolated linearly
    between order statistics exactly as ``numpy.percentile(a, 100 q)`` does by default, at a
    fraction of its overhead (NaN for an empty array)."""
    n = len(a)
    if n == 0:
        return float("nan")
    pos = q * (n - 1)
    lo = int(np.floor(pos))
    hi = min(lo + 1, n - 1)
    part = np.partition(a, (lo, hi)) if hi != lo else np.partition(a, lo)
    t = pos - lo
    below, above = float(part[lo]), float(part[hi])
    diff = above - below
    # numpy's lerp: from the lower value below the midpoint, from the upper one above it.
    return above - diff * (1.0 - t) if t >= 0.5 else below + diff * t
