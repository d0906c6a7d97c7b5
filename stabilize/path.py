"""Camera path: accumulation of inter-frame transforms and the smoothers.

Conventions are those of :mod:`stabilize.log`: ``P_t`` maps pixels of frame t to frame 0 (or
to the first frame after the latest scene cut). Smoothers return ``S_t`` of the same form for
the virtual camera. Time scales are in seconds and the frame rate is passed explicitly.

Paths are smoothed in a well-conditioned parameterisation: for the translation and similarity
models the similarity about the frame centre (x, y in pixels, angle in radians, log-scale); for
affine and homography the trajectories of the four frame corners, so no matrix entry can blow up.
"""

from __future__ import annotations

import logging

import numpy as np

from .log import frame_centre

_log = logging.getLogger("stabilize")


def accumulate(matrices: np.ndarray, cuts: np.ndarray | None = None) -> np.ndarray:
    """Raw camera path P_t = (H_t ⋯ H_1)⁻¹ from inter-frame transforms, (n, 3, 3).

    At a frame flagged in ``cuts`` the accumulation restarts (P_t = I), so motion across a
    scene cut, which is not real, never enters the path.
    """
    n = len(matrices)
    cuts = np.zeros(n, bool) if cuts is None else np.asarray(cuts, bool)
    paths = np.empty((n, 3, 3))
    if n == 0:
        return paths
    # The inverses in one batched call; only the running product is sequential.
    inverses = np.linalg.inv(matrices)
    p = np.eye(3)
    for t in range(n):
        if t == 0 or cuts[t]:
            p = np.eye(3)
        else:
            # P_t = P_{t-1} H_t^-1: frame t -> frame t-1 -> frame 0.
            p = p @ inverses[t]
            p = p / p[2, 2]
        paths[t] = p
    return paths


def segments(cuts: np.ndarray) -> list[slice]:
    """Index ranges between scene cuts (a cut frame starts a new segment)."""
    n = len(cuts)
    starts = [0, *[int(t) for t in np.flatnonzero(cuts) if t > 0], n]
    return [slice(a, b) for a, b in zip(starts[:-1], starts[1:], strict=True) if b > a]


# ------------------------------------------------------------- parameterisations
def to_similarity(p: np.ndarray, centre: np.ndarray) -> np.ndarray:
    """(n, 3, 3) -> (n, 4): x, y (pixels, where the centre goes minus the centre), angle
    (radians) and log-scale of the matrices read as similarities about ``centre``."""
    cx, cy = centre
    w = p[:, 2, 0] * cx + p[:, 2, 1] * cy + p[:, 2, 2]
    x = (p[:, 0, 0] * cx + p[:, 0, 1] * cy + p[:, 0, 2]) / w - cx
    y = (p[:, 1, 0] * cx + p[:, 1, 1] * cy + p[:, 1, 2]) / w - cy
    a, b, c, d = p[:, 0, 0], p[:, 0, 1], p[:, 1, 0], p[:, 1, 1]
    angle = np.unwrap(np.arctan2(c - b, a + d))
    log_s = 0.5 * np.log(np.maximum(np.abs(a * d - b * c), 1e-12))
    return np.stack([x, y, angle, log_s], axis=1)


def from_similarity(q: np.ndarray, centre: np.ndarray) -> np.ndarray:
    """Inverse of :func:`to_similarity`: (n, 4) -> (n, 3, 3) similarities about ``centre``."""
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
    """The four corner pixel centres (4, 2), clockwise from the top-left."""
    return np.array([[0.0, 0.0], [width - 1.0, 0.0], [width - 1.0, height - 1.0],
                     [0.0, height - 1.0]])


def apply(m: np.ndarray, pts: np.ndarray) -> np.ndarray:
    """Map points (k, 2) by matrices (n, 3, 3) -> (n, k, 2), with perspective division."""
    h = np.einsum("nij,kj->nki", m[:, :, :2], pts) + m[:, None, :, 2]
    return h[..., :2] / h[..., 2:3]


def to_corners(p: np.ndarray, width: int, height: int) -> np.ndarray:
    """(n, 3, 3) -> (n, 8): where the frame corners land under each matrix."""
    return apply(p, frame_corners(width, height)).reshape(len(p), 8)


def from_corners(corners: np.ndarray, width: int, height: int) -> np.ndarray:
    """(n, 8) -> (n, 3, 3): the homographies taking the frame corners to ``corners``."""
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


def uses_corners(model: str) -> bool:
    """Whether paths of this motion model are smoothed as corner trajectories."""
    return model in ("affine", "homography")


def encode(p: np.ndarray, model: str, width: int, height: int) -> np.ndarray:
    """Path matrices -> the smoothing parameterisation of ``model``."""
    if uses_corners(model):
        return to_corners(p, width, height)
    return to_similarity(p, frame_centre(width, height))


def decode(q: np.ndarray, model: str, width: int, height: int) -> np.ndarray:
    """Inverse of :func:`encode`."""
    if uses_corners(model):
        return from_corners(q, width, height)
    return from_similarity(q, frame_centre(width, height))


# ------------------------------------------------------------------ smoothers
def gaussian_kernel(sigma_frames: float) -> np.ndarray:
    radius = max(1, int(np.ceil(3.0 * sigma_frames)))
    x = np.arange(-radius, radius + 1, dtype=np.float64)
    k = np.exp(-0.5 * (x / max(sigma_frames, 1e-9)) ** 2)
    return k / k.sum()


def _end_anchor(values: np.ndarray, span: int) -> np.ndarray:
    """Value at the first sample of a straight line fitted to the first ``span`` samples."""
    span = max(2, min(span, len(values)))
    t = np.arange(span, dtype=np.float64)
    seg = values[:span]
    tc = t - t.mean()
    slope = (tc[:, None] * (seg - seg.mean(axis=0))).sum(axis=0) / (tc**2).sum()
    return seg.mean(axis=0) - slope * t.mean()


def gaussian_smooth(values: np.ndarray, fps: float, window_s: float) -> np.ndarray:
    """Zero-phase Gaussian low-pass of each column of ``values`` (n, k).

    The Gaussian's standard deviation is ``window_s / 2`` seconds, so shake above about
    1 / window_s hertz is removed while slower, deliberate moves pass. At the clip ends the
    series is extended by point reflection about a straight line fitted to the last
    2 · ``window_s`` of samples, which keeps a steady pan straight to the last frame instead of
    pulling the path toward a constant (or toward the shake of the very last frame).
    """
    values = np.asarray(values, dtype=np.float64)
    n = len(values)
    if n < 3:
        return values.copy()
    kernel = gaussian_kernel(0.5 * window_s * fps)
    r = len(kernel) // 2
    # Reflection longer than the series would need values that do not exist.
    r_pad = min(r, n - 1)
    span = int(round(2.0 * window_s * fps))
    a0 = _end_anchor(values, span)
    a1 = _end_anchor(values[::-1], span)
    head = 2.0 * a0 - values[r_pad:0:-1]
    tail = 2.0 * a1 - values[-2:-r_pad - 2:-1]
    padded = np.concatenate([head, values, tail])
    if r_pad < r:
        padded = np.pad(padded, ((r - r_pad, r - r_pad), (0, 0)), mode="edge")
    out = np.empty_like(values)
    for j in range(values.shape[1]):
        out[:, j] = np.convolve(padded[:, j], kernel, mode="valid")
    return out


SMOOTHERS = ("gaussian", "kalman", "l1", "lockoff")


def smooth_path(
    p: np.ndarray,
    *,
    fps: float,
    window_s: float,
    model: str,
    width: int,
    height: int,
    cuts: np.ndarray | None = None,
    smoother: str = "gaussian",
    margin: float | None = None,
) -> np.ndarray:
    """Smoothed camera path S_t (n, 3, 3) of a raw path P_t, segment by segment between cuts.

    Parameters
    ----------
    p : (n, 3, 3) raw path (:func:`accumulate`).
    fps : frames per second. window_s : smoothing time scale, seconds.
    model : motion model; fixes the parameterisation (:func:`encode`).
    width, height : frame size, pixels.
    cuts : (n,) bool, frames that start a new shot; every shot is smoothed on its own.
    smoother : ``gaussian`` (zero-phase Gaussian, σ = window_s / 2), ``kalman``
        (constant-velocity Kalman filter + RTS pass), ``l1`` (L1-optimal path with the
        framing constraint; needs ``margin``) or ``lockoff`` (one held pose per shot; with a
        ``margin`` it eases toward a heavy smoothing where the margin cannot hold it).
    margin : crop budget, fraction per side, for the smoothers that respect it in their own
        solve (``l1``, ``lockoff``); the others ignore it (:func:`stabilize.framing.fit_to_margin`
        applies the budget to every smoother afterwards).
    """
    if smoother not in SMOOTHERS:
        raise ValueError(f"unknown smoother {smoother!r}")
    if smoother == "l1" and margin is None:
        raise ValueError("the l1 smoother needs a margin")
    # Imported here: the smoothers use this module's parameterisations (and framing's
    # coverage test), so importing them at the top would be circular.
    from .smoothers.kalman import kalman_smooth
    from .smoothers.lockoff import lockoff_path

    n = len(p)
    cuts = np.zeros(n, bool) if cuts is None else np.asarray(cuts, bool)
    out = np.empty_like(p)
    for seg in segments(cuts):
        ps = p[seg]
        if smoother == "lockoff":
            out[seg] = lockoff_path(ps, fps=fps, window_s=window_s, margin=margin, model=model,
                                    width=width, height=height)
            continue
        q = encode(ps, model, width, height)
        if smoother == "kalman":
            qs = kalman_smooth(q, fps, window_s)
        elif smoother == "l1":
            from .smoothers.l1 import l1_smooth

            qs = l1_smooth(q, ps, fps=fps, window_s=window_s, margin=float(margin),
                           model=model, width=width, height=height)
            if qs is None:
                _log.warning("l1: the linear programme could not be solved for frames %d-%d; "
                             "used the Gaussian path there", seg.start, seg.stop - 1)
                qs = gaussian_smooth(q, fps, window_s)
        else:
            qs = gaussian_smooth(q, fps, window_s)
        out[seg] = decode(qs, model, width, height)
    return out


def blend(p: np.ndarray, s: np.ndarray, alpha: np.ndarray, model: str, width: int,
          height: int) -> np.ndarray:
    """Paths part way from P (alpha = 0: no correction) to S (alpha = 1), per frame."""
    qp = encode(p, model, width, height)
    qs = encode(s, model, width, height)
    if not uses_corners(model):
        # Angles of the two paths may be unwrapped differently; blend the difference.
        d = qs[:, 2] - qp[:, 2]
        qs[:, 2] = qp[:, 2] + (d + np.pi) % (2 * np.pi) - np.pi
    a = np.asarray(alpha, dtype=np.float64)[:, None]
    return decode(qp + a * (qs - qp), model, width, height)
