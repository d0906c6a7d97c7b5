"""Geometry every stage shares: the pixel convention, matrix readouts and parameterisations.

This module is the ground floor of the package: it imports nothing of ours, and any stage may
use it.

Coordinate convention (stated here once; every stage uses it)
--------------------------------------------------------------
Pixel coordinates are (x, y) in full-resolution source pixels, x to the right and y down, with
the origin at the *centre* of the top-left pixel: pixel column j, row i has its centre at
(j, i). This is OpenCV's convention for ``warpPerspective`` and ``remap``.

A 3×3 matrix M acts on homogeneous column vectors (x, y, 1) and is normalised so m33 = 1. The
meaning of the matrices in the motion log (``H_t``, ``P_t``, ``S_t``, ``C_t``) is given in
:mod:`stabilize.motion_log`.

Any such matrix is read as a similarity about the frame centre c = ((w−1)/2, (h−1)/2):
``dx, dy`` = M(c) − c, rotation ``atan2(m21 − m12, m11 + m22)`` in degrees, and scale
``sqrt(|m11·m22 − m12·m21|)`` (see :func:`similarity_readout`).

Camera paths are smoothed in a well-conditioned parameterisation: the similarity about the frame
centre (:func:`to_similarity`) or the trajectories of the four frame corners
(:func:`to_corners`), so no matrix entry can blow up.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "apply", "frame_centre", "frame_corners", "from_corners", "from_similarity", "normalise",
    "rescale", "similarity_readout", "to_corners", "to_similarity",
]


def frame_centre(width: int, height: int) -> np.ndarray:
    """Centre of a width × height frame under the pixel-centre convention.

    Parameters
    ----------
    width, height : frame size, pixels.

    Returns
    -------
    (2,) the centre (x, y) = ((w−1)/2, (h−1)/2), pixels, in the convention of this module.
    """
    return np.array([(width - 1) / 2.0, (height - 1) / 2.0])


def similarity_readout(m: np.ndarray, centre: np.ndarray) -> np.ndarray:
    """Read 3×3 matrices as similarities about ``centre``.

    Parameters
    ----------
    m : (..., 3, 3) matrices.
    centre : (2,) the frame centre in pixels.

    Returns
    -------
    (..., 4) array of dx, dy (pixels: where the centre moves to, minus the centre),
    rotation in degrees, and scale (sqrt of |det| of the 2×2 part).
    """
    dx, dy, angle, det = _about_centre(np.asarray(m, dtype=np.float64), centre)
    return np.stack([dx, dy, np.degrees(angle), np.sqrt(np.abs(det))], axis=-1)


def _about_centre(m: np.ndarray, centre: np.ndarray) -> tuple[np.ndarray, ...]:
    """The similarity reading shared by :func:`similarity_readout` and :func:`to_similarity`:
    where the centre moves (dx, dy, pixels), the angle (radians, in (−π, π]) and the
    determinant of the 2×2 part, each of shape ``m.shape[:-2]``."""
    cx, cy = float(centre[0]), float(centre[1])
    w = m[..., 2, 0] * cx + m[..., 2, 1] * cy + m[..., 2, 2]
    x = (m[..., 0, 0] * cx + m[..., 0, 1] * cy + m[..., 0, 2]) / w
    y = (m[..., 1, 0] * cx + m[..., 1, 1] * cy + m[..., 1, 2]) / w
    a, b, c, d = m[..., 0, 0], m[..., 0, 1], m[..., 1, 0], m[..., 1, 1]
    return x - cx, y - cy, np.arctan2(c - b, a + d), a * d - b * c


def normalise(m: np.ndarray) -> np.ndarray:
    """Scale 3×3 matrices so their bottom-right element is 1.

    Parameters
    ----------
    m : (..., 3, 3) matrices (any units; m33 must be non-zero).

    Returns
    -------
    (..., 3, 3) float64 copies divided by their own m33.
    """
    m = np.asarray(m, dtype=np.float64)
    return m / m[..., 2:3, 2:3]


def to_similarity(p: np.ndarray, centre: np.ndarray) -> np.ndarray:
    """Read path matrices as similarities about ``centre``: (n, 3, 3) -> (n, 4).

    Parameters
    ----------
    p : (n, 3, 3) matrices in pixels (convention of this module).
    centre : (2,) the frame centre (x, y), pixels (:func:`frame_centre`).

    Returns
    -------
    (n, 4) x, y (pixels, where the centre goes minus the centre), angle (radians, unwrapped
    along the n frames) and log-scale (natural log of sqrt |det| of the 2×2 part).
    """
    x, y, angle, det = _about_centre(p, centre)
    log_s = 0.5 * np.log(np.maximum(np.abs(det), 1e-12))
    return np.stack([x, y, np.unwrap(angle), log_s], axis=1)


def from_similarity(q: np.ndarray, centre: np.ndarray) -> np.ndarray:
    """Inverse of :func:`to_similarity`: (n, 4) -> (n, 3, 3) similarities about ``centre``.

    Parameters
    ----------
    q : (n, 4) x, y (pixels), angle (radians) and log-scale, as :func:`to_similarity` gives.
    centre : (2,) the frame centre (x, y), pixels.

    Returns
    -------
    (n, 3, 3) similarity matrices with m33 = 1 (perspective terms zero).
    """
    cx, cy = centre
    s = np.exp(q[:, 3])
    cos, sin = s * np.cos(q[:, 2]), s * np.sin(q[:, 2])
    m = np.zeros((len(q), 3, 3))
    m[:, 0, 0], m[:, 0, 1], m[:, 1, 0], m[:, 1, 1] = cos, -sin, sin, cos
    m[:, 0, 2] = cx + q[:, 0] - (cos * cx - sin * cy)
    m[:, 1, 2] = cy + q[:, 1] - (sin * cx + cos * cy)
    m[:, 2, 2] = 1.0
    return m


def frame_corners(width: int, height: int) -> np.ndarray:
    """The four corner pixel centres, clockwise on screen from the top-left.

    Parameters
    ----------
    width, height : frame size, pixels.

    Returns
    -------
    (4, 2) corners (x, y) in pixels under the pixel-centre convention: top-left (0, 0),
    top-right, bottom-right (w−1, h−1), bottom-left.
    """
    return np.array([[0.0, 0.0], [width - 1.0, 0.0], [width - 1.0, height - 1.0],
                     [0.0, height - 1.0]])


def apply(m: np.ndarray, pts: np.ndarray) -> np.ndarray:
    """Map points by each of several matrices, with perspective division.

    Parameters
    ----------
    m : (n, 3, 3) matrices acting on homogeneous column vectors (x, y, 1).
    pts : (k, 2) points (x, y), pixels.

    Returns
    -------
    (n, k, 2) the mapped points, pixels.
    """
    h = np.einsum("nij,kj->nki", m[:, :, :2], pts) + m[:, None, :, 2]
    return h[..., :2] / h[..., 2:3]


def to_corners(p: np.ndarray, width: int, height: int) -> np.ndarray:
    """Where the frame corners land under each matrix: (n, 3, 3) -> (n, 8).

    Parameters
    ----------
    p : (n, 3, 3) matrices in pixels.
    width, height : frame size, pixels.

    Returns
    -------
    (n, 8) x0, y0, … x3, y3 (pixels) of the corners of :func:`frame_corners`, in that order.
    """
    return apply(p, frame_corners(width, height)).reshape(len(p), 8)


def from_corners(corners: np.ndarray, width: int, height: int) -> np.ndarray:
    """The homographies taking the frame corners to ``corners``: (n, 8) -> (n, 3, 3).

    Parameters
    ----------
    corners : (n, 8) x0, y0, … x3, y3, pixels, in the order of :func:`frame_corners`.
    width, height : frame size, pixels.

    Returns
    -------
    (n, 3, 3) homographies with m33 = 1 (inverse of :func:`to_corners`).
    """
    src = frame_corners(width, height)
    dst = corners.reshape(-1, 4, 2)
    n = len(dst)
    a = np.zeros((n, 8, 8))
    b = np.zeros((n, 8))
    for i in range(4):
        x, y = src[i]
        u, v = dst[:, i, 0], dst[:, i, 1]
        a[:, 2 * i, :3] = (x, y, 1.0)
        a[:, 2 * i, 6] = -u * x
        a[:, 2 * i, 7] = -u * y
        a[:, 2 * i + 1, 3:6] = (x, y, 1.0)
        a[:, 2 * i + 1, 6] = -v * x
        a[:, 2 * i + 1, 7] = -v * y
        b[:, 2 * i], b[:, 2 * i + 1] = u, v
    h = np.linalg.solve(a, b[..., None])[..., 0]
    return np.concatenate([h, np.ones((n, 1))], axis=1).reshape(n, 3, 3)


def rescale(matrices: np.ndarray, scale: tuple[float, float], *,
            normalised: bool = True) -> np.ndarray:
    """Transforms expressed in pixels of a grid resized by ``scale``: D · M · D⁻¹.

    Parameters
    ----------
    matrices : (..., 3, 3) transforms between frames in the original pixels.
    scale : (sx, sy), new pixels per original pixel along x and y.
    normalised : divide the result by its m33 (default True).

    Returns
    -------
    (..., 3, 3) the same transforms in the new pixels, normalised so m33 = 1 unless
    ``normalised`` is False (for a warp, which ignores the overall scale). ``D`` maps an
    original pixel position to the new grid under the pixel-centre convention:
    ``x' = sx · (x + 0.5) − 0.5`` (and the same for y).
    """
    sx, sy = float(scale[0]), float(scale[1])
    d = np.array([[sx, 0.0, 0.5 * sx - 0.5], [0.0, sy, 0.5 * sy - 0.5], [0.0, 0.0, 1.0]])
    m = d @ np.asarray(matrices, dtype=np.float64) @ np.linalg.inv(d)
    return m / m[..., 2:3, 2:3] if normalised else m
