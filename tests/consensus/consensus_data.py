"""Synthetic ground truth for the consensus tests and benchmark (invented data)."""

from __future__ import annotations

import numpy as np

WIDTH, HEIGHT = 1920, 1080


def random_motion(rng: np.random.Generator, model: str, width: float = WIDTH,
                  height: float = HEIGHT) -> np.ndarray:
    """A plausible frame-to-frame motion of the given family, 3x3, about the frame centre."""
    shift = rng.uniform(-40, 40, 2)
    if model == "translation":
        m = np.eye(3)
    else:
        ang = np.radians(rng.uniform(-3, 3))
        sc = rng.uniform(0.95, 1.05)
        m = np.eye(3)
        m[:2, :2] = sc * np.array([[np.cos(ang), -np.sin(ang)], [np.sin(ang), np.cos(ang)]])
        if model in ("affine", "homography"):
            m[:2, :2] = m[:2, :2] @ (np.eye(2) + rng.uniform(-0.03, 0.03, (2, 2)))
        if model == "homography":
            m[2, :2] = rng.uniform(-2e-5, 2e-5, 2)
    m[:2, 2] = shift
    c = np.array([[1, 0, (width - 1) / 2], [0, 1, (height - 1) / 2], [0, 0, 1.0]])
    h = c @ m @ np.linalg.inv(c)
    return h / h[2, 2]


def apply(h: np.ndarray, pts: np.ndarray) -> np.ndarray:
    """Map (n, 2) points by a 3x3 model."""
    q = pts @ h[:, :2].T + h[:, 2]
    return q[:, :2] / q[:, 2:]


def make_matches(rng: np.random.Generator, model: str, n: int = 500, outliers: float = 0.5,
                 sigma: float = 0.5, width: float = WIDTH, height: float = HEIGHT):
    """Correspondences: inliers follow a random motion plus Gaussian noise on dst
    (sigma px per axis); outliers have dst uniform over the frame.

    Returns (h_true, src, dst, is_inlier).
    """
    h = random_motion(rng, model, width, height)
    src = rng.uniform((0, 0), (width - 1, height - 1), (n, 2))
    dst = apply(h, src) + rng.normal(0.0, sigma, (n, 2))
    n_out = int(round(outliers * n))
    is_in = np.ones(n, dtype=bool)
    out = rng.choice(n, n_out, replace=False)
    is_in[out] = False
    dst[out] = rng.uniform((0, 0), (width - 1, height - 1), (n_out, 2))
    return h, src, dst, is_in
