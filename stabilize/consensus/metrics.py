"""Accuracy metrics for estimated motion."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["grid_transfer_error"]


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
