"""Motion models in normalised coordinates: the solver protocol, features and batched residuals.

Every model follows one protocol (:class:`Model`); its minimal solver, refit and projection
live in :mod:`.solvers`. Models are 3x3 matrices acting on
normalised coordinates (see :func:`normalisation`); a batch of ``B`` hypotheses is a
``(B, 3, 3)`` array. Squared transfer errors for a batch come back as ``(B, n)``.

Scoring is the hot path, so residuals are written as one matrix product with
per-point features computed once per call:

* translation, similarity and affine: ``|A p + t - q|^2`` is a quadratic form in
  ``z = (x, y, 1, u, v)``; with the 15 monomials ``z_i z_j`` precomputed it becomes
  ``C @ F.T`` where ``C`` holds the form's coefficients per hypothesis. The same
  monomials, summed over inliers, are the moments the closed-form refits need.
* homography: both transfer-error numerators and the projective depth are linear in
  ``g = (x, y, 1, ux, uy, u, vx, vy, v)``, so one product yields all three.

References
----------
.. [1] R. I. Hartley, "In defense of the eight-point algorithm", IEEE TPAMI, 1997.
.. [2] S. Umeyama, "Least-squares estimation of transformation parameters between two
   point patterns", IEEE TPAMI, 1991.
.. [3] R. Hartley and A. Zisserman, "Multiple View Geometry in Computer Vision",
   2nd ed., 2004, sections 4.1-4.2 (DLT) and A6 (Levenberg-Marquardt).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .solvers import (
    MONOMIALS,
    affine_project,
    affine_refit,
    affine_solve,
    homography_polish,
    homography_refit,
    homography_solve,
    normalise_h,
    similarity_project,
    similarity_refit,
    similarity_solve,
    translation_project,
    translation_refit,
    translation_solve,
)

__all__ = ["Model", "MODELS", "Normalisation", "normalisation", "normalise_in_place"]

Array = NDArray[np.float64]

# Points are stored transposed: z = (x, y, u, v, 1) as rows of a (5, n) array, so that
# every per-point quantity is a contiguous row. The upper-triangle monomials z_i z_j
# (i <= j) are the linear-family features; a symmetric form O gives
# r^2 = (FAC * O[TRI]) @ F.
_TI, _TJ = MONOMIALS
_TRI = _TI * 5 + _TJ
_FAC = np.where(_TI == _TJ, 1.0, 2.0)
_NEG_I2 = -np.eye(2)

# Flattened homography (9,) -> coefficients on g = (x, y, 1, ux, uy, u, vx, vy, v) for
# (numerator x, numerator y, depth), component-major so each is a contiguous block.
_HOM_SEL = np.zeros((9, 3, 9))
for _c in range(3):
    _HOM_SEL[_c, 0, _c] = 1.0  # h0 . (x, y, 1)
    _HOM_SEL[6 + _c, 0, 3 + _c] = -1.0  # -u h2 . (x, y, 1)
    _HOM_SEL[3 + _c, 1, _c] = 1.0
    _HOM_SEL[6 + _c, 1, 6 + _c] = -1.0
    _HOM_SEL[6 + _c, 2, _c] = 1.0
_HOM_SEL = _HOM_SEL.reshape(9, 27)


@dataclass(frozen=True)
class Normalisation:
    """Similarity normalisation ``x_n = scale * (x - centre)`` for src and dst.

    One common scale keeps every model family closed (a translation stays a
    translation); separate centroids centre both point sets.
    """

    src_centre: tuple[float, float]
    dst_centre: tuple[float, float]
    scale: float

    def t_src(self) -> Array:
        """3x3 matrix taking src pixels to normalised coordinates."""
        return _norm_matrix(self.src_centre, self.scale)

    def t_dst(self) -> Array:
        """3x3 matrix taking dst pixels to normalised coordinates."""
        return _norm_matrix(self.dst_centre, self.scale)

    def t_src_inv(self) -> Array:
        """3x3 matrix taking normalised src coordinates back to pixels."""
        cx, cy = self.src_centre
        s = 1.0 / self.scale
        return np.array([[s, 0.0, cx], [0.0, s, cy], [0.0, 0.0, 1.0]])

    def t_dst_inv(self) -> Array:
        """3x3 matrix taking normalised dst coordinates back to pixels."""
        cx, cy = self.dst_centre
        s = 1.0 / self.scale
        return np.array([[s, 0.0, cx], [0.0, s, cy], [0.0, 0.0, 1.0]])


def _norm_matrix(centre: tuple[float, float], scale: float) -> Array:
    cx, cy = centre
    return np.array([[scale, 0.0, -scale * cx], [0.0, scale, -scale * cy], [0.0, 0.0, 1.0]])


def normalisation(src: Array, dst: Array) -> tuple[Normalisation, Array, Array]:
    """Centre both point sets and scale them to an RMS distance of sqrt(2) (Hartley 1997).

    Parameters
    ----------
    src, dst : ndarray, shape (2, n)
        Matched points in pixels, stored transposed (rows x and y).

    Returns
    -------
    norm : Normalisation
    z : ndarray, shape (5, n)
        Rows ``(x, y, u, v, 1)``: normalised src ``(x, y)`` and dst ``(u, v)``.
    gram : ndarray, shape (4, 4)
        ``z[:4] @ z[:4].T``, the scatter of the normalised points (for degeneracy).

    References
    ----------
    .. [1] R. I. Hartley, "In defense of the eight-point algorithm", IEEE TPAMI, 1997.
    """
    z = np.empty((5, src.shape[1]))
    z[:2] = src
    z[2:4] = dst
    z[4] = 1.0
    norm, gram = normalise_in_place(z)
    return norm, z, gram


def normalise_in_place(z: Array) -> tuple[Normalisation, Array]:
    """:func:`normalisation` of the points already in ``z``.

    Parameters
    ----------
    z : ndarray, shape (5, n)
        Rows ``(x, y, u, v, 1)`` in pixels; rows 0 to 3 are overwritten with the
        normalised coordinates.

    Returns
    -------
    norm : Normalisation
    gram : ndarray, shape (4, 4)
        ``z[:4] @ z[:4].T`` after normalisation.
    """
    n = z.shape[1]
    mean = (z[:4] @ z[4]) / n
    np.subtract(z[:4], mean[:, None], out=z[:4])
    gram = z[:4] @ z[:4].T
    m = mean.tolist()
    ms = (gram[0, 0] + gram[1, 1] + gram[2, 2] + gram[3, 3]) / (2 * n)
    # Coincident data has no spread to normalise; scale 1 keeps the arithmetic finite.
    scale = math.sqrt(2.0 / ms) if ms > 1e-300 else 1.0
    if scale != 1.0:
        np.multiply(z[:4], scale, out=z[:4])
        gram *= scale * scale
    return Normalisation((m[0], m[1]), (m[2], m[3]), scale), gram


# --------------------------------------------------------------------------- features


def _linear_features(z: Array) -> Array:
    """Monomials z_i z_j (i <= j) of z = (x, y, u, v, 1), shape (15, n)."""
    return np.take(z, _TI, axis=0) * np.take(z, _TJ, axis=0)


def _homography_features(z: Array) -> Array:
    """g = (x, y, 1, ux, uy, u, vx, vy, v) per point, shape (9, n)."""
    g = np.empty((9, z.shape[1]))
    g[:2] = z[:2]
    g[2] = 1.0
    g[3:6] = g[:3] * z[2]
    g[6:] = g[:3] * z[3]
    return g


# --------------------------------------------------------------------------- residuals


def _linear_sq_residuals(feat: Array, h: Array) -> Array:
    """Squared transfer errors of affine-family hypotheses h (B, 3, 3) -> (B, n)."""
    b = h.shape[0]
    r = np.empty((b, 2, 5))
    r[:, :, :2] = h[:, :2, :2]
    r[:, :, 2:4] = _NEG_I2
    r[:, :, 4] = h[:, :2, 2]
    form = np.take(np.matmul(r.transpose(0, 2, 1), r).reshape(b, 25), _TRI, axis=1)
    form *= _FAC
    return form @ feat


def _linear_sq_residuals_one(feat: Array, h: Array) -> Array:
    """Squared transfer errors of one affine-family model, shape (n,).

    The 15 form coefficients of ``(a x + b y + c - u)^2 + (d x + e y + f - v)^2`` are
    written out, in the monomial order of :func:`_linear_features`.
    """
    a, b, c, d, e, f = h[:2].ravel().tolist()
    form = (
        a * a + d * d, 2 * (a * b + d * e), -2 * a, -2 * d, 2 * (a * c + d * f),
        b * b + e * e, -2 * b, -2 * e, 2 * (b * c + e * f),
        1.0, 0.0, -2 * c,
        1.0, -2 * f,
        c * c + f * f,
    )
    return np.array(form) @ feat


def _homography_sq_residuals(feat: Array, h: Array) -> Array:
    """Squared transfer errors of homographies h (B, 3, 3) -> (B, n)."""
    b = h.shape[0]
    coef = (h.reshape(b, 9) @ _HOM_SEL).reshape(b, 3, 9).transpose(1, 0, 2).reshape(3 * b, 9)
    return _sq_transfer((coef @ feat).reshape(3, b, -1))


def _homography_sq_residuals_one(feat: Array, h: Array) -> Array:
    """Squared transfer errors of one homography (3, 3), shape (n,); the same products as
    :func:`_homography_sq_residuals` on a batch of one."""
    return _sq_transfer((h.reshape(1, 9) @ _HOM_SEL).reshape(3, 9) @ feat)


def _sq_transfer(out: Array) -> Array:
    """``(nx^2 + ny^2) / w^2`` from the rows ``(nx, ny, w)`` of ``out`` (3, ...): the
    residual's numerators and the projection's depth; worked out in place, in ``out[0]``."""
    nx, ny, w = out[0], out[1], out[2]
    nx *= nx
    ny *= ny
    nx += ny
    w *= w
    nx /= w
    return nx


def _similarity_features(z: Array) -> Array:
    """The nine per-point features of the similarity transfer error, shape (9, n):
    ``(x^2 + y^2, x, y, xu + yv, xv - yu, u, v, u^2 + v^2, 1)`` (see :data:`SIM_FEATURES`).

    With ``theta = (a, b, tx, ty, 1)`` for ``q = [[a, -b], [b, a]] p + t`` the squared
    transfer error is a quadratic form ``theta^T Q theta`` whose distinct entries are these
    features (signs of the constant row folded into :data:`_SIM_FORM`); summed over inliers
    they are also every moment the least-squares similarity needs.
    """
    x, y, u, v = z[0], z[1], z[2], z[3]
    f = np.empty((9, z.shape[1]))
    np.multiply(z[:2], z[:2], out=f[1:3])
    np.add(f[1], f[2], out=f[0])
    np.multiply(z[2:4], z[2:4], out=f[5:7])
    np.add(f[5], f[6], out=f[7])
    np.multiply(z[:2], z[2:4], out=f[1:3])  # xu, yv
    np.add(f[1], f[2], out=f[3])
    np.multiply(x, v, out=f[4])
    f[4] -= y * u
    f[1:3] = z[:2]
    f[5:7] = z[2:4]
    f[8] = 1.0
    return f


#: Row order of :func:`_similarity_features`.
SIM_FEATURES = ("xx+yy", "x", "y", "xu+yv", "xv-yu", "u", "v", "uu+vv", "1")


def _similarity_form() -> Array:
    """(25, 9) map from the outer product ``theta theta^T`` (flattened) of
    ``theta = (a, b, tx, ty, 1)`` to the coefficients of the nine similarity features in
    ``r^2 = |a x - b y + tx - u|^2 + |b x + a y + ty - v|^2``."""
    k = np.zeros((5, 5, 9))
    k[0, 0, 0] = k[1, 1, 0] = 1.0  # (a^2 + b^2) (x^2 + y^2)
    k[0, 2, 1] = k[1, 3, 1] = 2.0  # 2 (a tx + b ty) x
    k[0, 3, 2], k[1, 2, 2] = 2.0, -2.0  # 2 (a ty - b tx) y
    k[0, 4, 3] = -2.0  # -2 a (xu + yv)
    k[1, 4, 4] = -2.0  # -2 b (xv - yu)
    k[2, 4, 5] = k[3, 4, 6] = -2.0  # -2 tx u, -2 ty v
    k[4, 4, 7] = 1.0  # u^2 + v^2
    k[2, 2, 8] = k[3, 3, 8] = 1.0  # tx^2 + ty^2
    return k.reshape(25, 9)


_SIM_FORM = _similarity_form()
#: Positions of (a, b, tx, ty, h33 = 1) in a flattened similarity matrix.
_SIM_THETA = np.array([0, 3, 2, 5, 8])


def _similarity_sq_residuals(feat: Array, h: Array) -> Array:
    """Squared transfer errors of similarities h (B, 3, 3) with ``h33 = 1`` -> (B, n)."""
    b = h.shape[0]
    th = h.reshape(b, 9).take(_SIM_THETA, axis=1)
    outer = th[:, :, None] * th[:, None, :]
    return (outer.reshape(b, 25) @ _SIM_FORM) @ feat


def _similarity_sq_residuals_one(feat: Array, h: Array) -> Array:
    """Squared transfer errors of one similarity (3, 3) with ``h33 = 1``, shape (n,)."""
    a, _, tx, b, _, ty = h[:2].ravel().tolist()
    form = (a * a + b * b, 2.0 * (a * tx + b * ty), 2.0 * (a * ty - b * tx), -2.0 * a,
            -2.0 * b, -2.0 * tx, -2.0 * ty, 1.0, tx * tx + ty * ty)
    return np.array(form) @ feat


# --------------------------------------------------------------------------- protocol


@dataclass(frozen=True)
class Model:
    """One motion model, the same protocol for every family.

    All arrays are in normalised coordinates; ``z`` is the (5, n) array of rows
    ``(x, y, u, v, 1)`` from :func:`normalisation`.

    Attributes
    ----------
    name : str
        Model name.
    sample_size : int
        Correspondences in a minimal sample.
    dof : int
        Degrees of freedom.
    features : callable
        ``features(z) -> (k, n)`` per-point features for residuals and refits.
    solve : callable
        ``solve(smp) -> (h, valid)``: batched minimal solver on samples ``smp`` of
        shape (4, B, sample_size) (rows x, y, u, v); ``h`` (B, 3, 3), ``valid`` (B,)
        bool: the sample is non-degenerate and orientation preserving.
    sq_residuals : callable
        ``sq_residuals(feat, h) -> (B, n)`` squared transfer errors of ``h`` (B, 3, 3).
    sq_residuals_one : callable
        ``sq_residuals_one(feat, h) -> (n,)`` for a single (3, 3) model.
    refit : callable
        ``refit(feat, z, mask) -> h or None``: least squares on the points in ``mask``.
    project : callable
        ``project(h) -> h or None``: nearest member of the family (used for a prior).
    polish : callable or None
        ``polish(z, h, mask) -> h``: non-linear refinement of the final fit.
    spread_rank : int
        How much spread the whole point set needs for any member of the family to be
        fitted: 0 none (translation), 1 not all coincident (similarity), 2 not all
        collinear (affine, homography).
    """

    name: str
    sample_size: int
    dof: int
    features: Callable[[Array], Array]
    solve: Callable[[Array], tuple[Array, NDArray[np.bool_]]]
    sq_residuals: Callable[[Array, Array], Array]
    sq_residuals_one: Callable[[Array, Array], Array]
    refit: Callable[[Array, Array, NDArray[np.bool_]], Array | None]
    project: Callable[[Array], Array | None]
    polish: Callable[[Array, Array, NDArray[np.bool_]], Array] | None = None
    spread_rank: int = 2


_LIN = (_linear_features, _linear_sq_residuals, _linear_sq_residuals_one)

MODELS: dict[str, Model] = {
    "translation": Model("translation", 1, 2, _LIN[0], translation_solve, _LIN[1], _LIN[2],
                         translation_refit, translation_project, spread_rank=0),
    "similarity": Model("similarity", 2, 4, _similarity_features, similarity_solve,
                        _similarity_sq_residuals, _similarity_sq_residuals_one,
                        similarity_refit, similarity_project, spread_rank=1),
    "affine": Model("affine", 3, 6, _LIN[0], affine_solve, _LIN[1], _LIN[2],
                    affine_refit, affine_project),
    "homography": Model("homography", 4, 8, _homography_features, homography_solve,
                        _homography_sq_residuals, _homography_sq_residuals_one,
                        homography_refit, normalise_h, homography_polish),
}
