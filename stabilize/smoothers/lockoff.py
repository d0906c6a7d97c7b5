"""Lock-off: one virtual camera pose held for a whole segment, where the margin allows.

Where the budget cannot hold the pose (the raw camera wanders further than the margin), the
virtual camera is eased, frame by frame and smoothly in time, toward a heavily smoothed path
of the raw camera, and a warning says in how many frames.
"""

from __future__ import annotations

import logging

import numpy as np

from ..camera_path import decode, encode
from ..framing import covered, fit_to_margin, stabilising_warps, zoom
from .gaussian import gaussian_smooth

__all__ = ["hold_pose", "lockoff_path"]

_log = logging.getLogger("stabilize")

# Time scale of the fall-back path, in units of window_s: heavy enough to read as a nearly
# fixed camera, light enough to stay within a reasonable margin (common practice, our choice).
_FALLBACK_WINDOWS = 4.0


def hold_pose(q: np.ndarray) -> np.ndarray:
    """The pose to hold, (k,): per parameter, the middle of the raw path's range.

    The mid-range minimises the largest excursion of the raw path from the held pose in each
    parameter, so it is the pose that needs the smallest margin (parameter by parameter).

    Parameters
    ----------
    q : (n, k) the raw path encoded (:func:`stabilize.camera_path.encode`).

    Returns
    -------
    (k,) the held pose in the same parameterisation.
    """
    q = np.asarray(q, dtype=np.float64)
    return 0.5 * (q.min(axis=0) + q.max(axis=0))


def lockoff_path(
    p: np.ndarray,
    *,
    fps: float,
    window_s: float,
    margin: float | None,
    model: str,
    width: int,
    height: int,
) -> np.ndarray:
    """Held virtual camera for one segment, (n, 3, 3).

    Parameters
    ----------
    p : (n, 3, 3) raw path of the segment, pixels (conventions of :mod:`stabilize.motion_log`).
    fps : frame rate, frames per second (Hz).
    window_s : time scale, seconds (of the fall-back path and of the easing).
    margin : crop budget (fraction per side); None holds the pose regardless (the caller
        chooses a margin for it).
    model, width, height : motion model and frame size in pixels.

    Returns
    -------
    (n, 3, 3) the smoothed path S_t: the held pose, eased toward a path smoothed over
    4 · ``window_s`` in the frames where the margin cannot hold it.
    """
    q = encode(p, model, width, height)
    held = decode(np.repeat(hold_pose(q)[None], len(q), axis=0), model, width, height)
    if margin is None:
        return held
    z = zoom(margin, width, height)
    fits = covered(z @ stabilising_warps(p, held), width, height)
    if fits.all():
        return held
    heavy = decode(gaussian_smooth(q, fps, _FALLBACK_WINDOWS * window_s), model, width, height)
    # The easing runs on the fall-back's time scale too, so the share of held pose changes
    # slowly and brings no shake of its own.
    s, kept = fit_to_margin(p, held, margin, model=model, width=width, height=height, fps=fps,
                            window_s=_FALLBACK_WINDOWS * window_s, toward=heavy)
    _log.warning("lockoff: margin %.3f cannot hold one camera pose in %d of %d frames; the "
                "virtual camera was eased toward a heavily smoothed path there", margin,
                int(np.count_nonzero(kept < 1.0)), len(p))
    return s
