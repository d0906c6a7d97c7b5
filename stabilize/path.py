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

from .motion_models import MotionModel, model_named

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
def uses_corners(model: str | MotionModel) -> bool:
    """Whether paths of this motion model are smoothed as corner trajectories."""
    return model_named(model).uses_corners


def encode(p: np.ndarray, model: str | MotionModel, width: int, height: int) -> np.ndarray:
    """Path matrices (n, 3, 3) -> the smoothing parameterisation of ``model``
    (:meth:`stabilize.motion_models.MotionModel.encode`)."""
    return model_named(model).encode(p, width, height)


def decode(q: np.ndarray, model: str | MotionModel, width: int, height: int) -> np.ndarray:
    """Inverse of :func:`encode` (:meth:`stabilize.motion_models.MotionModel.decode`)."""
    return model_named(model).decode(q, width, height)


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
