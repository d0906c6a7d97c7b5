"""Motion models: minimal solvers, least-squares refits and batched residuals.

Every model follows one protocol (:class:`Model`). Models are 3x3 matrices acting on
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

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

__all__ = ["Model", "MODELS", "Normalisation", "normalisation"]

Array = NDArray[np.float64]

#: Samples whose points are closer than this (normalised units, ~0.07 px at a
#: 1920x1080 frame) are coincident.
EPS_LEN = 1e-4
#: Sample triangles with twice their area below this (normalised units^2, ~0.25 px^2)
#: are collinear.
EPS_AREA = 1e-6

# Upper-triangle monomials z_i z_j of z = (x, y, 1, u, v); off-diagonal ones are
# doubled so that a symmetric form O gives r^2 = F @ O[TRI].
_TI, _TJ = np.triu_indices(5)
_TRI = _TI * 5 + _TJ
_FAC = np.where(_TI == _TJ, 1.0, 2.0)
_COL = {(int(i), int(j)): k for k, (i, j) in enumerate(zip(_TI, _TJ))}
_NEG_I2 = -np.eye(2)
_E33 = np.zeros(9)
_E33[8] = 1.0

# Similarity parameters (a_re, a_im, b_re, b_im) -> flattened 3x3.
_SIM_SEL = np.zeros((4, 9))
_SIM_SEL[0, [0, 4]] = 1.0
_SIM_SEL[1, 1], _SIM_SEL[1, 3] = -1.0, 1.0
_SIM_SEL[2, 2] = 1.0
_SIM_SEL[3, 5] = 1.0

# Flattened homography (9,) -> coefficients on g for (numerator x, numerator y, depth),
# laid out component-major so each component is a contiguous (B, n) block.
_HOM_SEL = np.zeros((9, 3, 9))
for _c in range(3):
    _HOM_SEL[_c, 0, _c] = 1.0  # h0 . (x, y, 1)
    _HOM_SEL[6 + _c, 0, 3 + _c] = -1.0  # -u h2 . (x, y, 1)
    _HOM_SEL[3 + _c, 1, _c] = 1.0
    _HOM_SEL[6 + _c, 1, 6 + _c] = -1.0
    _HOM_SEL[6 + _c, 2, _c] = 1.0
_HOM_SEL = _HOM_SEL.reshape(9, 27)
_ADJ_SIGN = np.array([[1.0, -1.0], [-1.0, 1.0]])
_ROT1 = np.array([1, 2, 0])
_ROT2 = np.array([2, 0, 1])


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
    src, dst : ndarray, shape (n, 2)
        Matched points in pixels.

    Returns
    -------
    norm : Normalisation
    src_n, dst_n : ndarray, shape (n, 2)
        Normalised points.

    References
    ----------
    .. [1] R. I. Hartley, "In defense of the eight-point algorithm", IEEE TPAMI, 1997.
    """
    cs = src.mean(axis=0)
    cd = dst.mean(axis=0)
    src_c = src - cs
    dst_c = dst - cd
    ms = float(np.vdot(src_c, src_c) + np.vdot(dst_c, dst_c)) / (2 * len(src))
    # Coincident data has no spread to normalise; scale 1 keeps the arithmetic finite.
    scale = float(np.sqrt(2.0 / ms)) if ms > 1e-300 else 1.0
    norm = Normalisation((float(cs[0]), float(cs[1])), (float(cd[0]), float(cd[1])), scale)
    return norm, src_c * scale, dst_c * scale


# --------------------------------------------------------------------------- features


def _linear_features(src: Array, dst: Array) -> Array:
    """Monomials z_i z_j (i <= j, off-diagonal doubled) of z = (x, y, 1, u, v), (n, 15)."""
    z = np.empty((len(src), 5))
    z[:, :2] = src
    z[:, 2] = 1.0
    z[:, 3:] = dst
    return z[:, _TI] * z[:, _TJ] * _FAC


def _homography_features(src: Array, dst: Array) -> Array:
    """g = (x, y, 1, ux, uy, u, vx, vy, v) per point, (n, 9)."""
    g = np.empty((len(src), 9))
    g[:, :2] = src
    g[:, 2] = 1.0
    g[:, 3:6] = g[:, :3] * dst[:, :1]
    g[:, 6:] = g[:, :3] * dst[:, 1:]
    return g


# --------------------------------------------------------------------------- residuals


def _linear_sq_residuals(feat: Array, h: Array) -> Array:
    """Squared transfer errors of affine-family hypotheses h (B, 3, 3) -> (B, n)."""
    b = h.shape[0]
    r = np.empty((b, 2, 5))
    r[:, :, :3] = h[:, :2]
    r[:, :, 3:] = _NEG_I2
    form = np.matmul(r.transpose(0, 2, 1), r).reshape(b, 25)[:, _TRI]
    return form @ feat.T


def _homography_sq_residuals(feat: Array, h: Array) -> Array:
    """Squared transfer errors of homographies h (B, 3, 3) -> (B, n)."""
    b = h.shape[0]
    coef = (h.reshape(b, 9) @ _HOM_SEL).reshape(b, 3, 9).transpose(1, 0, 2).reshape(3 * b, 9)
    out = (coef @ feat.T).reshape(3, b, -1)
    nx, ny, w = out[0], out[1], out[2]
    num = nx * nx
    num += ny * ny
    w *= w
    num /= w
    return num


# --------------------------------------------------------------------------- minimal solvers


def _translation_solve(s: Array, d: Array) -> tuple[Array, NDArray[np.bool_]]:
    """Translation from one correspondence per hypothesis: s, d (B, 1, 2)."""
    b = s.shape[0]
    h = np.zeros((b, 9))
    h[:, [0, 4, 8]] = 1.0
    h[:, [2, 5]] = d[:, 0] - s[:, 0]
    return h.reshape(b, 3, 3), np.ones(b, dtype=bool)


def _similarity_solve(s: Array, d: Array) -> tuple[Array, NDArray[np.bool_]]:
    """Similarity from two correspondences, closed form in complex numbers.

    With points as complex numbers a similarity is ``q = a p + b``; two points give
    ``a = (q1 - q0) / (p1 - p0)`` and ``b = q0 - a p0``.
    """
    zs = s.view(np.complex128)[..., 0]
    zd = d.view(np.complex128)[..., 0]
    dp = zs[:, 1] - zs[:, 0]
    dq = zd[:, 1] - zd[:, 0]
    valid = (np.abs(dp) > EPS_LEN) & (np.abs(dq) > EPS_LEN)
    a = dq / dp
    bb = zd[:, 0] - a * zs[:, 0]
    params = np.stack((a, bb), axis=1).view(np.float64)
    return (params @ _SIM_SEL + _E33).reshape(-1, 3, 3), valid


def _affine_solve(s: Array, d: Array) -> tuple[Array, NDArray[np.bool_]]:
    """Affine map from three correspondences via a closed-form 2x2 inverse."""
    sd = s[:, 1:] - s[:, :1]  # rows: edge vectors of the src triangle
    ed = d[:, 1:] - d[:, :1]
    det_s = sd[:, 0, 0] * sd[:, 1, 1] - sd[:, 0, 1] * sd[:, 1, 0]
    det_d = ed[:, 0, 0] * ed[:, 1, 1] - ed[:, 0, 1] * ed[:, 1, 0]
    # Same orientation in both images: a reflection is not camera motion.
    valid = (det_s * np.sign(det_d) > EPS_AREA) & (det_d * np.sign(det_s) > EPS_AREA)
    adj = sd[:, ::-1, ::-1].transpose(0, 2, 1) * _ADJ_SIGN
    det_s = np.where(valid, det_s, 1.0)
    at = np.matmul(adj, ed) / det_s[:, None, None]  # A^T
    b = s.shape[0]
    h = np.empty((b, 3, 3))
    h[:, :2, :2] = at.transpose(0, 2, 1)
    h[:, :2, 2] = d[:, 0] - np.matmul(s[:, :1], at)[:, 0]
    h[:, 2] = (0.0, 0.0, 1.0)
    return h, valid


def _triple_dets(ph: Array) -> tuple[Array, Array]:
    """For homogeneous 4-point samples ph (B, 4, 3) return the rows b x c, c x a, a x b
    (B, 3, 3) and the four triple determinants (B, 4)."""
    abc = ph[:, :3]
    u = abc[:, _ROT1]
    v = abc[:, _ROT2]
    cross = u[:, :, _ROT1] * v[:, :, _ROT2] - u[:, :, _ROT2] * v[:, :, _ROT1]
    dets = np.empty((ph.shape[0], 4))
    dets[:, :3] = np.matmul(cross, ph[:, 3, :, None])[..., 0]
    dets[:, 3] = np.einsum("bi,bi->b", abc[:, 0], cross[:, 0])
    return cross, dets


def _homography_solve(s: Array, d: Array) -> tuple[Array, NDArray[np.bool_]]:
    """Homography from four correspondences by mapping both to the projective basis.

    ``H1 = [a b c] diag(l)`` with ``l = [a b c]^-1 d`` takes the canonical basis to the
    src points; likewise ``H2`` for dst; ``H = H2 H1^-1``. The inverse is written with
    cross products so that no division (and no linear solve) is needed; the four
    triple determinants come for free and drive the degeneracy and orientation checks.
    """
    b = s.shape[0]
    ph = np.empty((2, b, 4, 3))
    ph[0, :, :, :2] = s
    ph[1, :, :, :2] = d
    ph[:, :, :, 2] = 1.0
    cs, ls = _triple_dets(ph[0])
    _, ld = _triple_dets(ph[1])
    # General position and consistent orientation of every triple (no fold-over).
    valid = ((ls * np.sign(ld) > EPS_AREA) & (ld * np.sign(ls) > EPS_AREA)).all(axis=1)
    lam = ld[:, :3] * ls[:, [1, 0, 0]] * ls[:, [2, 2, 1]]
    m2 = ph[1, :, :3].transpose(0, 2, 1)  # columns a', b', c'
    h = np.matmul(m2 * lam[:, None, :], cs)
    return h, valid


# --------------------------------------------------------------------------- refits


def _moments(feat: Array, mask: NDArray[np.bool_]) -> dict[tuple[int, int], float]:
    vals = ((mask @ feat) / _FAC).tolist()
    return {ij: vals[k] for ij, k in _COL.items()}


def _translation_refit(feat: Array, src: Array, dst: Array, mask: NDArray[np.bool_]):
    m = _moments(feat, mask)
    cnt = m[2, 2]
    if cnt < 1:
        return None
    tx = (m[2, 3] - m[0, 2]) / cnt
    ty = (m[2, 4] - m[1, 2]) / cnt
    return np.array([[1.0, 0.0, tx], [0.0, 1.0, ty], [0.0, 0.0, 1.0]])


def _centred(m: dict[tuple[int, int], float]):
    cnt = m[2, 2]
    mean = [m[min(i, 2), max(i, 2)] / cnt for i in range(5)]

    def cov(i: int, j: int) -> float:
        return m[min(i, j), max(i, j)] - cnt * mean[i] * mean[j]

    return cnt, mean, cov


def _similarity_refit(feat: Array, src: Array, dst: Array, mask: NDArray[np.bool_]):
    """Least-squares similarity (Umeyama 1991) from inlier moments.

    In 2-D the rotation-and-scale part of Umeyama's solution equals the complex
    least-squares ratio ``a = sum(q~ conj(p~)) / sum(|p~|^2)`` of centred points.
    """
    cnt, mu, cov = _centred(_moments(feat, mask))
    if cnt < 2:
        return None
    den = cov(0, 0) + cov(1, 1)
    if den <= EPS_LEN * EPS_LEN * cnt:
        return None
    a = (cov(0, 3) + cov(1, 4)) / den
    b = (cov(0, 4) - cov(1, 3)) / den
    tx = mu[3] - a * mu[0] + b * mu[1]
    ty = mu[4] - b * mu[0] - a * mu[1]
    return np.array([[a, -b, tx], [b, a, ty], [0.0, 0.0, 1.0]])


def _affine_refit(feat: Array, src: Array, dst: Array, mask: NDArray[np.bool_]):
    """Least-squares affine map ``A = C_qp C_pp^-1`` from inlier moments."""
    cnt, mu, cov = _centred(_moments(feat, mask))
    if cnt < 3:
        return None
    sxx, sxy, syy = cov(0, 0), cov(0, 1), cov(1, 1)
    det = sxx * syy - sxy * sxy
    if det <= EPS_AREA * EPS_AREA * cnt * cnt:
        return None
    ixx, ixy, iyy = syy / det, -sxy / det, sxx / det
    sux, suy, svx, svy = cov(0, 3), cov(1, 3), cov(0, 4), cov(1, 4)
    a00, a01 = sux * ixx + suy * ixy, sux * ixy + suy * iyy
    a10, a11 = svx * ixx + svy * ixy, svx * ixy + svy * iyy
    tx = mu[3] - a00 * mu[0] - a01 * mu[1]
    ty = mu[4] - a10 * mu[0] - a11 * mu[1]
    return np.array([[a00, a01, tx], [a10, a11, ty], [0.0, 0.0, 1.0]])


def _homography_refit(feat: Array, src: Array, dst: Array, mask: NDArray[np.bool_]):
    """Normalised DLT on the inliers (Hartley 1997), via the 9x9 normal matrix.

    ``A^T A`` of the DLT system is assembled from the moments ``g^T g`` so that the
    2m x 9 design matrix is never built; inputs are already normalised.
    """
    if np.count_nonzero(mask) < 4:
        return None
    g = feat[mask]
    m = g.T @ g
    ata = np.zeros((9, 9))
    zz = m[:3, :3]
    ata[:3, :3] = zz
    ata[3:6, 3:6] = zz
    ata[:3, 6:] = -m[:3, 3:6]
    ata[3:6, 6:] = -m[:3, 6:]
    ata[6:, :3] = -m[3:6, :3]
    ata[6:, 3:6] = -m[6:, :3]
    ata[6:, 6:] = m[3:6, 3:6] + m[6:, 6:]
    _, vec = np.linalg.eigh(ata)
    h = vec[:, 0].reshape(3, 3)
    if abs(h[2, 2]) < 1e-12:
        return None
    return h / h[2, 2]


def _homography_polish(
    src: Array, dst: Array, h: Array, mask: NDArray[np.bool_], iters: int = 4
) -> Array:
    """Levenberg-Marquardt on the transfer error of the inliers, h33 fixed to 1.

    The DLT minimises an algebraic error; a few LM steps reach the maximum-likelihood
    estimate under Gaussian noise in dst (Hartley and Zisserman 2004, A6).
    """
    p = src[mask]
    q = dst[mask]
    m = len(p)
    if m < 5:
        return h
    x = (h / h[2, 2]).ravel()[:8].copy()
    jac = np.zeros((2 * m, 8))

    def resid(par: Array) -> tuple[Array, Array, Array, Array]:
        w = p[:, 0] * par[6] + p[:, 1] * par[7] + 1.0
        iw = 1.0 / w
        px = (p[:, 0] * par[0] + p[:, 1] * par[1] + par[2]) * iw
        py = (p[:, 0] * par[3] + p[:, 1] * par[4] + par[5]) * iw
        r = np.concatenate((px - q[:, 0], py - q[:, 1]))
        return r, iw, px, py

    r, iw, px, py = resid(x)
    sse = float(r @ r)
    mu = 1e-3
    for _ in range(iters):
        zw = p * iw[:, None]
        jac[:m, 0:2] = zw
        jac[:m, 2] = iw
        jac[m:, 3:5] = zw
        jac[m:, 5] = iw
        jac[:m, 6:] = -px[:, None] * zw
        jac[m:, 6:] = -py[:, None] * zw
        jtj = jac.T @ jac
        grad = jac.T @ r
        while True:
            try:
                step = np.linalg.solve(jtj + mu * np.diag(np.diag(jtj)), -grad)
            except np.linalg.LinAlgError:
                return _unflat(x)
            cand = x + step
            rc, iwc, pxc, pyc = resid(cand)
            sc = float(rc @ rc)
            if np.isfinite(sc) and sc < sse:
                x, r, iw, px, py, sse = cand, rc, iwc, pxc, pyc, sc
                mu = max(mu * 0.1, 1e-9)
                break
            mu *= 10.0
            if mu > 1e6:
                return _unflat(x)
    return _unflat(x)


def _unflat(x: Array) -> Array:
    return np.append(x, 1.0).reshape(3, 3)


# --------------------------------------------------------------------------- projections


def _normalise_h(h: Array) -> Array | None:
    if not np.all(np.isfinite(h)) or abs(h[2, 2]) < 1e-12:
        return None
    return h / h[2, 2]


def _translation_project(h: Array) -> Array | None:
    h = _normalise_h(h)
    if h is None:
        return None
    # The image of the (normalised) centroid keeps the best translation locally.
    out = np.eye(3)
    out[:2, 2] = h[:2, 2]
    return out


def _similarity_project(h: Array) -> Array | None:
    h = _normalise_h(h)
    if h is None:
        return None
    a = 0.5 * (h[0, 0] + h[1, 1])
    b = 0.5 * (h[1, 0] - h[0, 1])
    return np.array([[a, -b, h[0, 2]], [b, a, h[1, 2]], [0.0, 0.0, 1.0]])


def _affine_project(h: Array) -> Array | None:
    h = _normalise_h(h)
    if h is None:
        return None
    out = h.copy()
    out[2] = (0.0, 0.0, 1.0)
    return out


# --------------------------------------------------------------------------- protocol


@dataclass(frozen=True)
class Model:
    """One motion model, the same protocol for every family.

    Attributes
    ----------
    name : str
        Model name.
    sample_size : int
        Correspondences in a minimal sample.
    dof : int
        Degrees of freedom.
    features : callable
        ``features(src_n, dst_n) -> (n, k)`` per-point features for residuals and refits.
    solve : callable
        ``solve(s, d) -> (h, valid)``: batched minimal solver, ``s, d`` of shape
        ``(B, sample_size, 2)``; ``h`` (B, 3, 3), ``valid`` (B,) bool (non-degenerate,
        orientation preserving sample).
    sq_residuals : callable
        ``sq_residuals(feat, h) -> (B, n)`` squared transfer errors (normalised units).
    refit : callable
        ``refit(feat, src_n, dst_n, mask) -> h or None``: least squares on ``mask``.
    project : callable
        ``project(h) -> h or None``: nearest member of the family (used for a prior).
    polish : callable or None
        ``polish(src_n, dst_n, h, mask) -> h``: non-linear refinement of the final fit.
    """

    name: str
    sample_size: int
    dof: int
    features: Callable[[Array, Array], Array]
    solve: Callable[[Array, Array], tuple[Array, NDArray[np.bool_]]]
    sq_residuals: Callable[[Array, Array], Array]
    refit: Callable[..., Array | None]
    project: Callable[[Array], Array | None]
    polish: Callable[..., Array] | None = None


MODELS: dict[str, Model] = {
    "translation": Model(
        "translation", 1, 2, _linear_features, _translation_solve, _linear_sq_residuals,
        _translation_refit, _translation_project,
    ),
    "similarity": Model(
        "similarity", 2, 4, _linear_features, _similarity_solve, _linear_sq_residuals,
        _similarity_refit, _similarity_project,
    ),
    "affine": Model(
        "affine", 3, 6, _linear_features, _affine_solve, _linear_sq_residuals,
        _affine_refit, _affine_project,
    ),
    "homography": Model(
        "homography", 4, 8, _homography_features, _homography_solve,
        _homography_sq_residuals, _homography_refit, _normalise_h, _homography_polish,
    ),
}
