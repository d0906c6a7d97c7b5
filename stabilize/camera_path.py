"""Camera-path parameterisations: path matrices to the well-conditioned values smoothers use.

Paths are smoothed in a well-conditioned parameterisation: for the translation and similarity
models the similarity about the frame centre (x, y in pixels, angle in radians, log-scale); for
affine and homography the trajectories of the four frame corners, so no matrix entry can blow up.
Conventions are those of :mod:`stabilize.motion_log`; the raw path itself is
:func:`stabilize.raw_path.accumulate`.
"""

from __future__ import annotations

import numpy as np

from .motion_models import MotionModel, model_named

__all__ = ["blend", "decode", "encode", "uses_corners"]


def uses_corners(model: str | MotionModel) -> bool:
    """Whether paths of this motion model are smoothed as corner trajectories.

    Parameters
    ----------
    model : motion-model name or object (:func:`stabilize.motion_models.model_named`).

    Returns
    -------
    True for corner trajectories (affine, homography), False for the similarity about the
    frame centre (translation, similarity).
    """
    return model_named(model).uses_corners


def encode(p: np.ndarray, model: str | MotionModel, width: int, height: int) -> np.ndarray:
    """Path matrices (n, 3, 3) -> the smoothing parameterisation of ``model``.

    See :meth:`stabilize.motion_models.MotionModel.encode`.

    Parameters
    ----------
    p : (n, 3, 3) path matrices, pixels (convention of :mod:`stabilize.geometry`).
    model : motion-model name or object.
    width, height : frame size, pixels.

    Returns
    -------
    (n, 4) x, y (pixels), angle (radians), log-scale, or (n, 8) corner trajectories x0, y0, …
    x3, y3 (pixels), as :func:`uses_corners` says.
    """
    return model_named(model).encode(p, width, height)


def decode(q: np.ndarray, model: str | MotionModel, width: int, height: int) -> np.ndarray:
    """Inverse of :func:`encode` (:meth:`stabilize.motion_models.MotionModel.decode`).

    Parameters
    ----------
    q : (n, 4) or (n, 8) values in the parameterisation of ``model`` (see :func:`encode`).
    model : motion-model name or object.
    width, height : frame size, pixels.

    Returns
    -------
    (n, 3, 3) path matrices, pixels, m33 = 1.
    """
    return model_named(model).decode(q, width, height)


def blend(p: np.ndarray, s: np.ndarray, alpha: np.ndarray, model: str, width: int,
          height: int) -> np.ndarray:
    """Paths part way from P (alpha = 0: no correction) to S (alpha = 1), per frame.

    Parameters
    ----------
    p, s : (n, 3, 3) raw and smoothed paths.
    alpha : (n,) share of S, 0 to 1.
    model : motion model; fixes the parameterisation the blend is taken in.
    width, height : frame size, pixels.

    Returns
    -------
    (n, 3, 3) the blended path.
    """
    qp = encode(p, model, width, height)
    qs = encode(s, model, width, height)
    if not uses_corners(model):
        # Angles of the two paths may be unwrapped differently; blend the difference.
        d = qs[:, 2] - qp[:, 2]
        qs[:, 2] = qp[:, 2] + (d + np.pi) % (2 * np.pi) - np.pi
    a = np.asarray(alpha, dtype=np.float64)[:, None]
    return decode(qp + a * (qs - qp), model, width, height)
