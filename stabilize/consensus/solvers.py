"""Minimal solvers, least-squares refits, projections and the homography polish per model.

Everything here works in normalised coordinates (see
:func:`stabilize.consensus.models.normalisation`).
Minimal samples arrive as ``(4, B, s)`` arrays (rows x, y of src and u, v of dst of ``B``
samples of ``s`` points) and come back as ``(B, 3, 3)`` hypotheses with a ``(B,)`` validity
mask; refits take the per-point features of :mod:`stabilize.consensus.models`, the ``(5, n)``
points ``z`` and an inlier mask ``(n,)`` and return one ``(3, 3)`` matrix or None.

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

import cv2
import numpy as np
from numpy.typing import NDArray

__all__ = [
    "EPS_AREA", "EPS_LEN", "LM_STOP", "MONOMIALS", "affine_project", "affine_refit", "affine_solve",
    "homography_polish", "homography_refit", "homography_solve", "normalise_h",
    "similarity_project", "similarity_refit", "similarity_solve", "translation_project",
    "translation_refit", "translation_solve",
]

Array = NDArray[np.float64]

#: Samples whose points are closer than this (normalised units, ~0.07 px at a
#: 1920x1080 frame) are coincident.
EPS_LEN = 1e-4
#: Sample triangles with twice their area below this (normalised units^2, ~0.25 px^2)
#: are collinear.
EPS_AREA = 1e-6

#: Order of the monomials z_i z_j (i <= j) of z = (x, y, u, v, 1) in the linear-family
#: features: row and column indices of the upper triangle of a 5x5 matrix.
MONOMIALS = np.triu_indices(5)
_TI, _TJ = MONOMIALS
_COL = {(int(i), int(j)): k for k, (i, j) in enumerate(zip(_TI, _TJ, strict=True))}
# Moment positions used by the closed-form refits (z index: x 0, y 1, u 2, v 3, 1 4).
_M = {name: _COL[ij] for name, ij in {
    "n": (4, 4), "x": (0, 4), "y": (1, 4), "u": (2, 4), "v": (3, 4),
    "xx": (0, 0), "xy": (0, 1), "yy": (1, 1),
    "xu": (0, 2), "xv": (0, 3), "yu": (1, 2), "yv": (1, 3)}.items()}

_ROT1 = np.array([1, 2, 0])
_ROT2 = np.array([2, 0, 1])

# --------------------------------------------------------------------------- minimal solvers
# Samples arrive as (4, B, s): rows x, y (src) and u, v (dst) of B samples of s points.


def translation_solve(smp: Array) -> tuple[Array, NDArray[np.bool_]]:
    """Translation from one correspondence per hypothesis."""
    b = smp.shape[1]
    h = np.zeros((b, 9))
    h[:, [0, 4, 8]] = 1.0
    h[:, [2, 5]] = (smp[2:, :, 0] - smp[:2, :, 0]).T
    return h.reshape(b, 3, 3), np.ones(b, dtype=bool)


def similarity_solve(smp: Array) -> tuple[Array, NDArray[np.bool_]]:
    """Similarity from two correspondences, closed form.

    With points as complex numbers a similarity is ``q = a p + t``; two points give
    ``a = (q1 - q0) / (p1 - p0)`` and ``t = q0 - a p0``, written out in real arithmetic.
    """
    d = smp[:, :, 1] - smp[:, :, 0]  # (4, B): dx, dy, du, dv
    sq = d * d
    lp = sq[0] + sq[1]
    valid = (lp > EPS_LEN * EPS_LEN) & (sq[2] + sq[3] > EPS_LEN * EPS_LEN)
    inv = 1.0 / np.where(valid, lp, 1.0)
    dx, dy, du, dv = d
    x0, y0, u0, v0 = smp[:, :, 0]
    b = smp.shape[1]
    h = np.zeros((b, 3, 3))
    a_re = h[:, 0, 0]
    a_im = h[:, 1, 0]
    np.multiply(du * dx + dv * dy, inv, out=a_re)
    np.multiply(dv * dx - du * dy, inv, out=a_im)
    h[:, 1, 1] = a_re
    np.negative(a_im, out=h[:, 0, 1])
    h[:, 0, 2] = u0 - a_re * x0 + a_im * y0
    h[:, 1, 2] = v0 - a_im * x0 - a_re * y0
    h[:, 2, 2] = 1.0
    return h, valid


def affine_solve(smp: Array) -> tuple[Array, NDArray[np.bool_]]:
    """Affine map from three correspondences via a closed-form 2x2 inverse."""
    d = smp[:, :, 1:] - smp[:, :, :1]  # (4, B, 2): edge vectors of both triangles
    dx1, dx2 = d[0, :, 0], d[0, :, 1]
    dy1, dy2 = d[1, :, 0], d[1, :, 1]
    det_s = dx1 * dy2 - dx2 * dy1
    det_d = d[2, :, 0] * d[3, :, 1] - d[2, :, 1] * d[3, :, 0]
    # Same orientation in both images: a reflection is not camera motion.
    valid = (det_s * np.sign(det_d) > EPS_AREA) & (det_d * np.sign(det_s) > EPS_AREA)
    inv = 1.0 / np.where(valid, det_s, 1.0)
    r = d[2:]  # (2, B, 2): u and v edges
    col0 = (r[:, :, 0] * dy2 - r[:, :, 1] * dy1) * inv
    col1 = (r[:, :, 1] * dx1 - r[:, :, 0] * dx2) * inv
    t = smp[2:, :, 0] - col0 * smp[0, :, 0] - col1 * smp[1, :, 0]
    b = smp.shape[1]
    h = np.empty((b, 3, 3))
    h[:, :2] = np.stack((col0, col1, t), axis=-1).transpose(1, 0, 2)
    h[:, 2] = (0.0, 0.0, 1.0)
    return h, valid


def _triple_dets(ph: Array) -> tuple[Array, Array]:
    """For homogeneous 4-point samples ph (B, 4, 3) return the rows b x c, c x a, a x b
    (B, 3, 3) and the four triple determinants (B, 4): |d b c|, |a d c|, |a b d|, |a b c|."""
    abc = ph[:, :3]
    u = abc[:, _ROT1]
    v = abc[:, _ROT2]
    cross = u[:, :, _ROT1] * v[:, :, _ROT2] - u[:, :, _ROT2] * v[:, :, _ROT1]
    dets = np.empty((ph.shape[0], 4))
    dets[:, :3] = np.matmul(cross, ph[:, 3, :, None])[..., 0]
    dets[:, 3] = (abc[:, 0] * cross[:, 0]).sum(axis=1)
    return cross, dets


def homography_solve(smp: Array) -> tuple[Array, NDArray[np.bool_]]:
    """Homography from four correspondences by mapping both to the projective basis.

    ``H1 = [a b c] diag(l)`` with ``l = [a b c]^-1 d`` takes the canonical basis to the
    src points; likewise ``H2`` for dst; ``H = H2 H1^-1``. The inverse is written with
    cross products so that no division (and no linear solve) is needed; the four
    triple determinants come for free and drive the degeneracy and orientation checks.
    """
    b = smp.shape[1]
    ph = np.empty((2, b, 4, 3))
    ph[..., :2] = smp.reshape(2, 2, b, 4).transpose(0, 2, 3, 1)
    ph[..., 2] = 1.0
    cross, dets = _triple_dets(ph.reshape(2 * b, 4, 3))
    ls, ld = dets[:b], dets[b:]
    # General position and consistent orientation of every triple (no fold-over).
    valid = ((ls * np.sign(ld) > EPS_AREA) & (ld * np.sign(ls) > EPS_AREA)).all(axis=1)
    lam = ld[:, :3] * ls[:, [1, 0, 0]] * ls[:, [2, 2, 1]]
    m2 = ph[1, :, :3].transpose(0, 2, 1)  # columns a', b', c'
    h = np.matmul(m2 * lam[:, None, :], cross[:b])
    return h, valid


# --------------------------------------------------------------------------- refits


def _moments(feat: Array, mask: NDArray[np.bool_]) -> list[float]:
    return (feat @ mask.astype(np.float64)).tolist()


_MN, _MX, _MY, _MU, _MV = _M["n"], _M["x"], _M["y"], _M["u"], _M["v"]
_MXX, _MXY, _MYY = _M["xx"], _M["xy"], _M["yy"]
_MXU, _MXV, _MYU, _MYV = _M["xu"], _M["xv"], _M["yu"], _M["yv"]


def _centred(mom: list[float]) -> tuple[float, list[float], dict[str, float]]:
    """Count, means (x, y, u, v) and centred second moments of the masked points."""
    cnt = mom[_MN]
    mx, my, mu, mv = mom[_MX] / cnt, mom[_MY] / cnt, mom[_MU] / cnt, mom[_MV] / cnt
    c = {
        "xx": mom[_MXX] - cnt * mx * mx,
        "xy": mom[_MXY] - cnt * mx * my,
        "yy": mom[_MYY] - cnt * my * my,
        "xu": mom[_MXU] - cnt * mx * mu,
        "xv": mom[_MXV] - cnt * mx * mv,
        "yu": mom[_MYU] - cnt * my * mu,
        "yv": mom[_MYV] - cnt * my * mv,
    }
    return cnt, [mx, my, mu, mv], c


def translation_refit(feat: Array, z: Array, mask: NDArray[np.bool_]) -> Array | None:
    """Least-squares translation: the mean displacement of the points in ``mask``."""
    mom = _moments(feat, mask)
    cnt = mom[_M["n"]]
    if cnt < 1:
        return None
    tx = (mom[_M["u"]] - mom[_M["x"]]) / cnt
    ty = (mom[_M["v"]] - mom[_M["y"]]) / cnt
    return np.array([[1.0, 0.0, tx], [0.0, 1.0, ty], [0.0, 0.0, 1.0]])


def similarity_refit(feat: Array, z: Array, mask: NDArray[np.bool_]) -> Array | None:
    """Least-squares similarity (Umeyama 1991) from inlier moments.

    In 2-D, with the rotation kept proper, Umeyama's rotation and scale reduce to the
    complex least-squares ratio ``a = sum(q~ conj(p~)) / sum(|p~|^2)`` of the centred
    points, which is what the moments give here.
    """
    mom = _moments(feat, mask)
    # Moments of the similarity features: xx+yy, x, y, xu+yv, xv-yu, u, v, uu+vv, 1.
    cnt = mom[8]
    if cnt < 2:
        return None
    mx, my, mu, mv = mom[1] / cnt, mom[2] / cnt, mom[5] / cnt, mom[6] / cnt
    den = mom[0] - cnt * (mx * mx + my * my)
    if den <= EPS_LEN * EPS_LEN * cnt:
        return None
    a = (mom[3] - cnt * (mx * mu + my * mv)) / den
    b = (mom[4] - cnt * (mx * mv - my * mu)) / den
    tx = mu - a * mx + b * my
    ty = mv - b * mx - a * my
    return np.array([[a, -b, tx], [b, a, ty], [0.0, 0.0, 1.0]])


def affine_refit(feat: Array, z: Array, mask: NDArray[np.bool_]) -> Array | None:
    """Least-squares affine map ``A = C_qp C_pp^-1`` from inlier moments."""
    mom = _moments(feat, mask)
    if mom[_M["n"]] < 3:
        return None
    cnt, (mx, my, mu, mv), c = _centred(mom)
    sxx, sxy, syy = c["xx"], c["xy"], c["yy"]
    det = sxx * syy - sxy * sxy
    if det <= EPS_AREA * EPS_AREA * cnt * cnt:
        return None
    ixx, ixy, iyy = syy / det, -sxy / det, sxx / det
    sux, suy, svx, svy = c["xu"], c["yu"], c["xv"], c["yv"]
    a00, a01 = sux * ixx + suy * ixy, sux * ixy + suy * iyy
    a10, a11 = svx * ixx + svy * ixy, svx * ixy + svy * iyy
    tx = mu - a00 * mx - a01 * my
    ty = mv - a10 * mx - a11 * my
    return np.array([[a00, a01, tx], [a10, a11, ty], [0.0, 0.0, 1.0]])


def _dlt_index() -> tuple[NDArray[np.intp], Array]:
    """Where each entry of the DLT normal matrix ``A^T A`` (9x9) lives in the table of
    :func:`homography_refit` (the 81 moments of g, the nine entries of the sum of its two
    quadratic blocks, a 0) and with which sign."""
    idx = np.full((9, 9), 90, dtype=np.intp)
    sgn = np.ones((9, 9))
    mom = np.arange(81).reshape(9, 9)
    idx[:3, :3] = idx[3:6, 3:6] = mom[:3, :3]
    idx[:3, 6:], idx[3:6, 6:] = mom[:3, 3:6], mom[:3, 6:]
    idx[6:, :3], idx[6:, 3:6] = mom[3:6, :3], mom[6:, :3]
    sgn[:3, 6:] = sgn[3:6, 6:] = sgn[6:, :3] = sgn[6:, 3:6] = -1.0
    idx[6:, 6:] = 81 + np.arange(9).reshape(3, 3)
    return idx, sgn


_DLT_IDX, _DLT_SGN = _dlt_index()


def homography_refit(feat: Array, z: Array, mask: NDArray[np.bool_]) -> Array | None:
    """Normalised DLT on the inliers (Hartley 1997), via the 9x9 normal matrix, with h33 = 1
    (the least eigenvector of the normal matrix when that system cannot be solved).

    ``A^T A`` of the DLT system is assembled from the moments ``g g^T`` so that the
    2m x 9 design matrix is never built; the points are already normalised.
    """
    if np.count_nonzero(mask) < 4:
        return None
    gm = feat * mask
    tab = np.empty(91)  # the moments g g^T, the last block's sum and a 0
    m = tab[:81].reshape(9, 9)
    np.matmul(gm, feat.T, out=m)
    np.add(m[3:6, 3:6], m[6:, 6:], out=tab[81:90].reshape(3, 3))
    tab[90] = 0.0
    ata = np.take(tab, _DLT_IDX) * _DLT_SGN
    # h33 = 1: the 8x8 normal equations of the inhomogeneous DLT (Hartley and Zisserman
    # 2004, section 4.1.2, from memory), a sixth of the eigensolver's cost. On normalised
    # points h33 is far from 0 for any plausible camera motion (it is 0 only when the
    # points' centroid maps to infinity), and the Levenberg-Marquardt polish settles the
    # final fit on the transfer error either way. The eigenvector is the fallback.
    ok, x = cv2.solve(ata[:8, :8], -ata[:8, 8:], flags=cv2.DECOMP_CHOLESKY)
    if ok:
        v = x.ravel().tolist()
        if all(map(math.isfinite, v)):
            v.append(1.0)
            return np.array(v).reshape(3, 3)
    # OpenCV's symmetric eigensolver (Jacobi): eigenvalues in descending order, unit
    # eigenvectors as rows; the least one's vector minimises |A h| with |h| = 1.
    _, _, vec = cv2.eigen(ata)
    h = vec[8].reshape(3, 3)
    if abs(h[2, 2]) < 1e-12:
        return None
    return h / h[2, 2]


def _lm_index() -> tuple[NDArray[np.intp], Array, NDArray[np.intp]]:
    """Where each entry of the 8x8 normal matrix and the gradient of the transfer-error
    least squares lives in the (6 monomials x 7 weights) moment table."""
    mono = {(0, 0): 0, (0, 1): 1, (1, 1): 2, (0, 2): 3, (1, 2): 4, (2, 2): 5}

    def mi(i: int, j: int) -> int:
        return mono[min(i, j), max(i, j)]

    zero = 42  # index of an appended 0
    idx = np.full((8, 8), zero, dtype=np.intp)
    sgn = np.ones((8, 8))
    for p in range(8):
        for q in range(8):
            bp, bq = p // 3 if p < 6 else 2, q // 3 if q < 6 else 2
            ip, iq = p % 3 if p < 6 else p - 6, q % 3 if q < 6 else q - 6
            if bp < 2 and bp == bq:
                idx[p, q] = mi(ip, iq) * 7 + 0
            elif bp < 2 and bq == 2 or bq < 2 and bp == 2:
                blk, i, j = (bp, ip, iq) if bq == 2 else (bq, iq, ip)
                idx[p, q] = mi(i, j) * 7 + (1 if blk == 0 else 2)
                sgn[p, q] = -1.0
            elif bp == 2 and bq == 2:
                idx[p, q] = mi(ip, iq) * 7 + 3
    gidx = np.array([mi(i, 2) * 7 + 4 for i in range(3)] + [mi(i, 2) * 7 + 5 for i in range(3)]
                    + [mi(i, 2) * 7 + 6 for i in range(2)])
    return idx, sgn, gidx


_LM_IDX, _LM_SGN, _LM_GIDX = _lm_index()
#: The polish stops after a step that lowers the sum of squared transfer errors by at most
#: this share of it. Near the optimum the steps converge about quadratically: measured on
#: synthetic sets (60 to 1000 points, noise 0.3 to 1 px), a first step from the DLT fit
#: that gains 1e-6 to 1e-2 of the sum is followed by one gaining 1e-12 to 1e-7; so after a
#: step below 1e-4 the next would move the RMS error by about 1e-8 of itself or less.
LM_STOP = 1e-4
# Signs turning the gradient moments into -J^T r: the weight of the last two entries is
# stored negated (see homography_polish).
_LM_GSGN = np.array([-1.0] * 6 + [1.0] * 2)


def homography_polish(z: Array, h: Array, mask: NDArray[np.bool_], iters: int = 3) -> Array:
    """Levenberg-Marquardt on the transfer error of the inliers, h33 fixed to 1.

    The DLT minimises an algebraic error; a few LM steps reach the maximum-likelihood
    estimate under Gaussian noise in dst (Hartley and Zisserman 2004, A6). The normal
    matrix ``J^T J`` and gradient ``J^T r`` are sums over points of weights times the
    monomials ``(x^2, xy, y^2, x, y, 1)``, so each iteration is one 6 x m x 7 product
    instead of building the 2m x 8 Jacobian. Steps stop early once one lowers the sum of
    squares by no more than :data:`LM_STOP` of itself.
    """
    zi = np.compress(mask, z[:4], axis=1)
    m = zi.shape[1]
    if m < 5:
        return h
    x, y, uv = zi[0], zi[1], zi[2:4]
    mono = np.empty((6, m))
    np.multiply(x, zi[:2], out=mono[:2])  # x^2, xy
    np.multiply(y, y, out=mono[2])
    mono[3:5] = zi[:2]
    mono[5] = 1.0
    # Weights per point (rows): 1/w^2, px/w^2, py/w^2, |p|^2/w^2, rx/w, ry/w and
    # (px rx + py ry)/w, the last with its sign left to _LM_GSGN.
    wts = np.empty((7, m))
    tmp = np.empty((2, m))
    tab = np.zeros(43)  # the moment table, with a trailing 0 for the empty entries
    par = (h / h[2, 2]).ravel()[:8].copy()
    xy1 = mono[3:]  # rows x, y, 1
    hm = np.empty(9)
    hm[8] = 1.0

    def resid(p: Array) -> tuple[float, Array, Array, Array]:
        # Projected points pp = (px, py) (2, m), their inverse depth iw (m,) and the
        # residuals rr = pp - (u, v).
        hm[:8] = p
        num = hm.reshape(3, 3) @ xy1
        iw = np.divide(1.0, num[2], out=num[2])
        pp = num[:2]
        pp *= iw
        rr = pp - uv
        return float(rr[0] @ rr[0] + rr[1] @ rr[1]), iw, pp, rr

    sse, iw, pp, rr = resid(par)
    mu = 1e-3
    for _ in range(iters):
        a = np.multiply(iw, iw, out=wts[0])
        np.multiply(pp, a, out=wts[1:3])
        np.multiply(pp, pp, out=tmp)
        np.add(tmp[0], tmp[1], out=wts[3])
        wts[3] *= a
        np.multiply(rr, iw, out=wts[4:6])
        np.multiply(pp, rr, out=tmp)
        np.add(tmp[0], tmp[1], out=wts[6])
        wts[6] *= iw
        tab[:42] = (mono @ wts.T).ravel()
        jtj = np.take(tab, _LM_IDX) * _LM_SGN
        neg_grad = (np.take(tab, _LM_GIDX) * _LM_GSGN)[:, None]
        diag = jtj.diagonal().copy()
        converged = False
        while True:
            # J^T J + mu diag(J^T J) is symmetric positive definite unless J^T J is
            # singular, which Cholesky reports (OpenCV's solver: a tenth of numpy's cost
            # on an 8x8 system).
            damped = jtj.copy()
            damped.flat[::9] += mu * diag
            ok, step = cv2.solve(damped, neg_grad, flags=cv2.DECOMP_CHOLESKY)
            if not ok or not all(map(math.isfinite, step.ravel().tolist())):
                return _unflat(par)
            cand = par + step.ravel()
            res = resid(cand)
            if res[0] < sse:
                converged = sse - res[0] <= LM_STOP * sse
                par = cand
                sse, iw, pp, rr = res
                mu = max(mu * 0.1, 1e-9)
                break
            mu *= 10.0
            if mu > 1e6:
                return _unflat(par)
        if converged:
            break
    return _unflat(par)


def _unflat(x: Array) -> Array:
    return np.append(x, 1.0).reshape(3, 3)


# --------------------------------------------------------------------------- projections


def _normalised(h: Array) -> list[float] | None:
    """The nine entries of ``h`` (3, 3) divided by h33 (row-major), or None when one is not
    finite or h33 is near 0."""
    v = h.ravel().tolist()
    if not all(map(math.isfinite, v)) or abs(v[8]) < 1e-12:
        return None
    k = v[8]
    return [x / k for x in v]


def normalise_h(h: Array) -> Array | None:
    """``h`` (3, 3) scaled to h33 = 1, or None when it is not finite or h33 is near 0."""
    v = _normalised(h)
    return None if v is None else np.array(v).reshape(3, 3)


def translation_project(h: Array) -> Array | None:
    """The translation part of ``h`` (3, 3), or None for an unusable ``h``."""
    v = _normalised(h)
    if v is None:
        return None
    # The image of the (normalised) centroid keeps the best translation locally.
    return np.array([[1.0, 0.0, v[2]], [0.0, 1.0, v[5]], [0.0, 0.0, 1.0]])


def similarity_project(h: Array) -> Array | None:
    """The similarity nearest to ``h``'s linear part (its rotation-and-scale component),
    with ``h``'s translation; None for an unusable ``h``."""
    v = _normalised(h)
    if v is None:
        return None
    a = 0.5 * (v[0] + v[4])
    b = 0.5 * (v[3] - v[1])
    return np.array([[a, -b, v[2]], [b, a, v[5]], [0.0, 0.0, 1.0]])


def affine_project(h: Array) -> Array | None:
    """``h`` (3, 3) with its perspective row dropped; None for an unusable ``h``."""
    v = _normalised(h)
    if v is None:
        return None
    return np.array([v[:3], v[3:6], [0.0, 0.0, 1.0]])
