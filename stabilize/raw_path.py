"""The raw camera path: inter-frame transforms chained into P_t, restarting at scene cuts.

Ground floor: pure arithmetic on (n, 3, 3) arrays, imported by the motion-log record (whose
``path`` columns it defines) and by the stages. Conventions are those of
:mod:`stabilize.motion_log`: ``P_t`` maps pixels of frame t to frame 0 (or to the first frame
after the latest scene cut).
"""

from __future__ import annotations

import numpy as np

__all__ = ["accumulate", "segments"]


def accumulate(matrices: np.ndarray, cuts: np.ndarray | None = None) -> np.ndarray:
    """Raw camera path P_t = (H_t ⋯ H_1)⁻¹ from inter-frame transforms.

    At a frame flagged in ``cuts`` the accumulation restarts (P_t = I), so motion across a
    scene cut, which is not real, never enters the path.

    Parameters
    ----------
    matrices : (n, 3, 3) inter-frame transforms H_t, frame t−1 to frame t (pixels).
    cuts : (n,) bool, frames that start a new shot; None for none.

    Returns
    -------
    (n, 3, 3) P_t, frame t to the shot's first frame, normalised so p33 = 1.
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
    """Index ranges between scene cuts (a cut frame starts a new segment).

    Parameters
    ----------
    cuts : (n,) bool, frames that start a new shot.

    Returns
    -------
    list of slices covering 0 … n−1, one per shot, in order.
    """
    n = len(cuts)
    starts = [0, *[int(t) for t in np.flatnonzero(cuts) if t > 0], n]
    return [slice(a, b) for a, b in zip(starts[:-1], starts[1:], strict=True) if b > a]
