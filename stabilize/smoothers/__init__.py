"""Camera-path smoothers beyond the Gaussian of :mod:`stabilize.path`.

Each works on an encoded path (see :func:`stabilize.path.encode`), one row per frame, and takes
its time scale in seconds with the frame rate passed explicitly. :func:`stabilize.path.smooth_path`
is the entry point that dispatches to them.
"""

from .kalman import kalman_noise, kalman_smooth
from .l1 import L1Settings, l1_smooth
from .lockoff import hold_pose, lockoff_path

__all__ = ["L1Settings", "hold_pose", "kalman_noise", "kalman_smooth", "l1_smooth",
           "lockoff_path"]
