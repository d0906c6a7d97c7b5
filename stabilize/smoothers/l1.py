"""L1-optimal camera path with the framing constraint, solved as a sparse linear programme.

After M. Grundmann, V. Kwatra and I. Essa, "Auto-directed video stabilization with robust L1
optimal camera paths", CVPR 2011: the smoothed path minimises weighted L1 norms of its first,
second and third differences, so it is made of constant, constant-velocity and
constant-acceleration stretches joined smoothly, subject to the crop window staying inside
every source frame (inclusion constraint) and to proximity bounds on how far the smoothed
rotation and scale may stray from the raw ones.

Differences from the paper, and why
-----------------------------------
* The unknowns are the smoothed path itself in the parameterisation of
  :func:`stabilize.camera_path.encode` (x, y, angle, log-scale for similarity; frame-corner
  trajectories for affine and homography), not the entries of an update matrix, so the
  objective is exactly linear and frame-rate independent. Angle and log-scale are multiplied
  by the half-diagonal of the frame so every unknown is in pixels of corner motion (a
  well-scaled programme).
* The inclusion constraint is linearised around the raw path (the correction is small, so the
  error is second order: about r·δ²/2 px for a rotation δ at radius r) and shrunk by
  ``safety_px``; the result is checked with :func:`stabilize.framing.covered` by the caller and
  repaired by :func:`stabilize.framing.fit_to_margin` if needed.
* A small L1 pull toward the Gaussian path of the same time scale (``follow_s``) picks, among
  the many equally flat paths the paper's objective allows, the one that stays central in the
  budget and follows slow deliberate motion lasting longer than about ``follow_s · window_s``
  seconds;
  it is firmer at a chunk's ends, where the first-difference term would otherwise slow a pan
  down by starting ahead of the camera and ending behind it.
* Long clips are solved in overlapping chunks; each chunk's first frames are fixed to the
  previous chunk's solution so the differences run across the seam unbroken.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np
from scipy import sparse
from scipy.optimize import linprog

from ..camera_path import decode, uses_corners
from ..geometry import apply, frame_corners
from .gaussian import gaussian_smooth

__all__ = ["L1Settings", "l1_smooth"]

_log = logging.getLogger("stabilize")


@dataclass(frozen=True)
class L1Settings:
    """Settings of the L1-optimal path.

    Attributes
    ----------
    w1, w2, w3 : weights of the L1 norms of the first, second and third differences. 10, 1
        and 100 as recalled (from memory) from Grundmann et al.'s practice for per-frame
        differences; we take them to refer to 30 fps video at ``window_s`` = 1 s and rescale
        the second and third differences so the objective does not depend on the frame rate.
    follow_s : excursions of the deliberate path lasting longer than ``follow_s · window_s``
        seconds are followed (this sets the weight of the pull toward the Gaussian path).
    max_rotation_rad : proximity bound on |smoothed − raw| angle, radians (similarity).
    max_log_scale : proximity bound on |smoothed − raw| log-scale (similarity).
    max_shape_frac : for corner paths, bound on how far any corner's correction may differ
        from the mean correction of the four corners, as a fraction of the half-diagonal;
        this bounds the shear, perspective and rotation the correction can introduce.
    safety_px : the linearised crop window is kept this many pixels inside the frame.
    chunk_s, overlap_s : seconds; long clips are solved ``chunk_s`` at a time, each chunk
        overlapping the next by ``overlap_s`` (its provisional tail, solved again with what
        follows). Smaller chunks solve faster in total; the overlap gives the path time to
        see what comes next.
    """

    w1: float = 10.0
    w2: float = 1.0
    w3: float = 100.0
    follow_s: float = 4.0
    max_rotation_rad: float = 0.05
    max_log_scale: float = 0.05
    max_shape_frac: float = 0.05
    safety_px: float = 0.25
    chunk_s: float = 10.0
    overlap_s: float = 3.0


# Per-frame weights are taken as referring to frames of this duration at window_s = 1 s.
_REFERENCE_FRAME_S = 1.0 / 30.0
_PULL_STRIDE = 5
_FIXED = 3  # frames fixed at a chunk's start: enough for the third difference to span the seam


def _difference(n: int, order: int) -> sparse.csr_matrix:
    """(n − order, n) forward-difference operator of the given order."""
    d = sparse.eye(n, format="csr")
    for _ in range(order):
        d = d[1:] - d[:-1]
    return d.tocsr()


def _inclusion(q0: np.ndarray, p: np.ndarray, margin: float, model: str, width: int,
               height: int, scale: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Linearised positions of the crop window's corners in each source frame.

    With S = decode(q) the smoothed path, the output corner o maps to the source point
    u = P⁻¹ · S · Z⁻¹ · o (see :mod:`stabilize.motion_log`); Z⁻¹ · o is the crop-window corner w.
    Returns u0 (n, 8) at q0 and the Jacobian J (n, 8, k) of u with respect to the scaled
    unknowns z = q · scale, by central differences (exact for the linear parts).
    """
    n, k = q0.shape
    centre = np.array([(width - 1) / 2.0, (height - 1) / 2.0])
    window = centre + (1.0 - 2.0 * margin) * (frame_corners(width, height) - centre)
    p_inv = np.linalg.inv(p)

    def corners(q: np.ndarray) -> np.ndarray:
        return apply(p_inv @ decode(q, model, width, height), window).reshape(n, 8)

    u0 = corners(q0)
    jac = np.empty((n, 8, k))
    step = 1e-3  # pixels of corner motion in scaled units
    for j in range(k):
        dq = np.zeros(k)
        dq[j] = step / scale[j]
        jac[:, :, j] = (corners(q0 + dq) - corners(q0 - dq)) / (2.0 * step)
    return u0, jac


def _solve_chunk(z0: np.ndarray, z_follow: np.ndarray, u0: np.ndarray, jac: np.ndarray,
                 bounds: np.ndarray, weights: tuple[float, float, float, float],
                 lo: np.ndarray, hi: np.ndarray, shape_bound: float | None) -> np.ndarray | None:
    """One linear programme over a chunk; returns the scaled path (n, k) or None.

    Unknowns: the path z (n·k) and, for every term of the objective, a pair of non-negative
    parts (r = r⁺ − r⁻, |r| = r⁺ + r⁻ at the optimum). Each term is one equality row, so the
    programme has about half the rows of the |r| ≤ e form, which the simplex method rewards.
    """
    n, k = z0.shape
    nz = n * k
    w0, w1, w2, w3 = weights
    eye_k = sparse.identity(k, format="csr")
    # Rows of the objective's terms: first, second, third differences, then the pull z - g.
    terms = [sparse.kron(_difference(n, o), eye_k, format="csr") for o in (1, 2, 3)]
    wts = [w1, w2, w3]
    # The pull is firmer on a chunk's first and last frames: with a pan, the first-difference
    # term could otherwise save w1 per pixel by starting ahead and ending behind the camera,
    # slowing the whole pan down. A weight above w1 there removes that incentive.
    # The pull acts on every _PULL_STRIDE-th frame (and the last), with the weight of the
    # frames between: the same slow tug for a fifth of the rows, which the solver's time tracks.
    frames = np.unique(np.r_[np.arange(0, n, _PULL_STRIDE), n - 1])
    pull = np.full((len(frames), k), w0 * _PULL_STRIDE)
    pull[[0, -1]] = max(w0, 2.0 * w1)
    term_w = [np.full(t.shape[0], w) for t, w in zip(terms, wts, strict=True)] + [pull.ravel()]
    idx = (frames[:, None] * k + np.arange(k)).ravel()
    terms.append(sparse.csr_matrix((np.ones(len(idx)), (np.arange(len(idx)), idx)),
                                   shape=(len(idx), nz)))
    term_rhs = [np.zeros(t.shape[0]) for t in terms[:-1]] + [z_follow[frames].ravel()]
    t_mat = sparse.vstack(terms, format="csr")
    m = t_mat.shape[0]
    ident = sparse.identity(m, format="csr")
    a_eq = sparse.hstack([t_mat, -ident, ident], format="csr")
    b_eq = np.concatenate(term_rhs)
    w_all = np.concatenate(term_w)
    c = np.concatenate([np.zeros(nz), w_all, w_all])
    # Inclusion: lo <= u0 + J (z - z0) <= hi, per frame, corner and coordinate.
    r_idx = np.repeat(np.arange(n * 8), k)
    c_idx = np.broadcast_to(np.arange(n)[:, None, None] * k + np.arange(k)[None, None, :],
                            (n, 8, k)).ravel()
    g = sparse.csr_matrix((jac.ravel(), (r_idx, c_idx)), shape=(n * 8, nz + 2 * m))
    base = u0.ravel() - np.einsum("nrk,nk->nr", jac, z0).ravel()
    rows, rhs = [g, -g], [hi.ravel() - base, base - lo.ravel()]
    if shape_bound is not None:
        # Corner paths: each corner's correction within shape_bound of the mean correction
        # (x and y separately), which bounds shear, perspective and rotation of the correction.
        dev = np.eye(8) - np.kron(np.full((4, 4), 0.25), np.eye(2))
        a = sparse.hstack([sparse.kron(sparse.identity(n), sparse.csr_matrix(dev)),
                           sparse.csr_matrix((nz, 2 * m))], format="csr")
        dz0 = (z0 @ dev.T).ravel()
        rows += [a, -a]
        rhs += [shape_bound + dz0, shape_bound - dz0]
    a_ub = sparse.vstack(rows, format="csr")
    b_ub = np.concatenate(rhs)
    all_bounds = np.vstack([bounds.reshape(nz, 2), np.tile([0.0, np.inf], (2 * m, 1))])
    res = linprog(c, A_ub=a_ub, b_ub=b_ub, A_eq=a_eq, b_eq=b_eq, bounds=all_bounds,
                  method="highs")
    if res.status != 0:
        _log.debug("l1 chunk: linprog status %d: %s", res.status, res.message)
        return None
    return res.x[:nz].reshape(n, k)


def l1_smooth(
    q: np.ndarray,
    p: np.ndarray,
    *,
    fps: float,
    window_s: float,
    margin: float,
    model: str,
    width: int,
    height: int,
    settings: L1Settings = L1Settings(),
) -> np.ndarray | None:
    """L1-optimal smoothed path of one segment (no cuts inside).

    Parameters
    ----------
    q : (n, k) the raw path ``p`` encoded (:func:`stabilize.camera_path.encode`).
    p : (n, 3, 3) the raw path P_t (frame t to the segment's first frame), pixels
        (conventions of :mod:`stabilize.motion_log` and :mod:`stabilize.geometry`).
    fps : frame rate, frames per second (Hz).
    window_s : time scale, seconds (scales the weights of the second and third differences
        and the follow term).
    margin : the crop budget, fraction of width and height cut from each side.
    model, width, height : motion model and frame size in pixels.
    settings : weights, bounds and chunking (:class:`L1Settings`).

    Returns
    -------
    (n, k) the smoothed path in the same parameterisation (a copy of ``q`` when n < 4 or
    ``margin`` ≤ 0), or None when a programme could not be solved (the caller falls back to
    another smoother).
    """
    q = np.asarray(q, dtype=np.float64)
    n, k = q.shape
    tol = min(settings.safety_px, 0.25 * margin * min(width - 1, height - 1))
    if n < 4 or margin <= 0.0:
        return q.copy()
    half_diag = 0.5 * math.hypot(width - 1, height - 1)
    corners_mode = uses_corners(model)
    scale = np.ones(k) if corners_mode else np.array([1.0, 1.0, half_diag, half_diag])
    # Frame-rate independence: sum |D1| is a total variation; sum |D2| and |D3| shrink as
    # dt and dt^2, so they are multiplied by (T / dt) and (T / dt)^2, T the reference frame.
    t_ref = _REFERENCE_FRAME_S * window_s
    ratio = t_ref * fps
    w1 = settings.w1
    w2 = settings.w2 * ratio
    w3 = settings.w3 * ratio**2
    # Following an excursion of d px for T s costs w0 d T fps; flattening it costs about 2 w1 d.
    w0 = 2.0 * w1 / (fps * settings.follow_s * window_s)
    weights = (w0, w1, w2, w3)

    u0_all, jac_all = _inclusion(q, p, margin, model, width, height, scale)
    lo = np.tile([tol, tol], 4)
    hi = np.tile([width - 1 - tol, height - 1 - tol], 4)
    # Frames whose raw crop window already breaks the (shrunk) bounds cannot satisfy them at
    # z = z0 either; widen their bounds so the programme stays feasible (repaired later).
    lo_all = np.minimum(lo[None, :], u0_all)
    hi_all = np.maximum(hi[None, :], u0_all)
    z_raw = q * scale
    # The pull is toward the Gaussian path of the same time scale, which carries the
    # deliberate motion but hardly any shake, so even a firm pull brings no shake back.
    z_follow = gaussian_smooth(q, fps, window_s) * scale
    bounds = np.stack([np.full((n, k), -np.inf), np.full((n, k), np.inf)], axis=-1)
    if not corners_mode:
        lim = np.array([settings.max_rotation_rad, settings.max_log_scale]) * half_diag
        bounds[:, 2:, 0] = z_raw[:, 2:] - lim
        bounds[:, 2:, 1] = z_raw[:, 2:] + lim
    shape_bound = settings.max_shape_frac * half_diag if corners_mode else None

    out = np.empty_like(z_raw)
    chunk = max(int(round(settings.chunk_s * fps)), 4 * _FIXED + 1)
    overlap = max(_FIXED + 1, min(int(round(settings.overlap_s * fps)), chunk // 2))
    start, fixed_until = 0, 0
    while True:
        stop = min(n, start + chunk)
        sl = slice(start, stop)
        b = bounds[sl].copy()
        nf = fixed_until - start
        if nf > 0:
            b[:nf, :, 0] = b[:nf, :, 1] = out[start:fixed_until]
        z = _solve_chunk(z_raw[sl], z_follow[sl], u0_all[sl], jac_all[sl], b, weights, lo_all[sl],
                         hi_all[sl], shape_bound)
        if z is None:
            return None
        if stop == n:
            out[start:] = z
            break
        keep = stop - overlap
        out[start:keep] = z[:keep - start]
        start, fixed_until = keep - _FIXED, keep
    return out / scale
