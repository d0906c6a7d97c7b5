"""Motion models as small objects with one protocol: estimate, residuals, parameters, path encoding.

One :class:`MotionModel` per family (translation, similarity, affine, homography). Code that
needs "a motion model" takes the object; a model's name is looked up once, at the edge, with
:func:`model_named`. Every method works in full-resolution pixels under the convention of
:mod:`stabilize.geometry` (x right, y down, origin at the centre of the top-left pixel; 3×3
matrices act on column vectors (x, y, 1) and are normalised so m33 = 1).

The protocol follows the transform classes of scikit-image (S. van der Walt et al.,
"scikit-image: image processing in Python", PeerJ, 2014): ``estimate`` from matched points,
``residuals``, ``params``; and, for camera-path smoothing, ``encode``/``decode`` into a
well-conditioned parameterisation.

Examples
--------
>>> import numpy as np
>>> model = model_named("translation")
>>> src = np.random.default_rng(0).uniform(0, 640, (50, 2))
>>> fit = model.estimate(src, src + (3.0, -2.0), frame_size=(640, 480))
>>> np.round(model.params(fit.matrix), 6).tolist()
[3.0, -2.0]
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from .consensus import Fit, estimate
from .consensus.models import MODELS, Model
from .geometry import frame_centre, from_corners, from_similarity, to_corners, to_similarity

__all__ = [
    "AFFINE", "HOMOGRAPHY", "MOTION_MODELS", "MotionModel", "SIMILARITY", "TRANSLATION",
    "model_named", "transfer_error",
]


def transfer_error(m: np.ndarray, src: np.ndarray, dst: np.ndarray) -> np.ndarray:
    """Distance between ``m`` applied to ``src`` and ``dst``, per point.

    Parameters
    ----------
    m : (3, 3) transform, pixels to pixels.
    src, dst : (n, 2) matched points, pixels.

    Returns
    -------
    (n,) transfer error, pixels.
    """
    h = src @ m[:, :2].T + m[:, 2]
    d = h[:, :2] / h[:, 2:3] - dst
    d *= d
    # The sum of squares written out (what numpy.linalg.norm does, without its overhead).
    return np.sqrt(d[:, 0] + d[:, 1])


@dataclass(frozen=True, eq=False)
class MotionModel:
    """One motion model: its consensus solver and its camera-path parameterisation.

    Attributes
    ----------
    name : str
        The model's name in settings and logs (``translation``, ``similarity``, ``affine``,
        ``homography``).
    solver : Model
        The consensus machinery's minimal solver, refit and projection
        (:class:`stabilize.consensus.models.Model`).
    uses_corners : bool
        Whether camera paths of this model are smoothed as the trajectories of the four
        frame corners (8 numbers per frame) rather than as a similarity about the frame
        centre (x, y pixels, angle radians, log-scale; 4 numbers per frame).
    free : tuple of int
        Positions in the row-major 3×3 matrix of the model's parameters (:meth:`params`).
    """

    name: str
    solver: Model
    uses_corners: bool
    free: tuple[int, ...]

    @property
    def dof(self) -> int:
        """Degrees of freedom.

        Returns
        -------
        int : 2 (translation), 4 (similarity), 6 (affine) or 8 (homography).
        """
        return self.solver.dof

    @property
    def sample_size(self) -> int:
        """Correspondences in a minimal sample.

        Returns
        -------
        int : matched point pairs the minimal solver needs.
        """
        return self.solver.sample_size

    def estimate(self, src: ArrayLike, dst: ArrayLike, **options: Any) -> Fit:
        """Robust fit to matched points (:func:`stabilize.consensus.estimate`).

        Parameters
        ----------
        src, dst : (n, 2) matched points, pixels.
        **options : the consensus options (``inlier_px``, ``confidence``, ``max_rounds``,
            ``seed``, ``prior``, ``bounds``, ``frame_size``).

        Returns
        -------
        Fit : the matrix (3, 3) mapping src to dst, inliers (n,) and diagnostics.
        """
        return estimate(src, dst, model=self.solver, **options)

    def residuals(self, matrix: np.ndarray, src: np.ndarray, dst: np.ndarray) -> np.ndarray:
        """Transfer error of ``matrix`` on matched points (:func:`transfer_error`).

        Parameters
        ----------
        matrix : (3, 3) transform, pixels to pixels.
        src, dst : (n, 2) matched points, pixels.

        Returns
        -------
        (n,) transfer error, pixels.
        """
        return transfer_error(matrix, src, dst)

    def params(self, matrix: ArrayLike) -> np.ndarray:
        """The model's parameters of 3×3 matrices.

        translation: tx, ty (pixels); similarity: a, b, tx, ty with linear part
        [[a, −b], [b, a]]; affine: the top two rows; homography: the first eight entries
        (m33 = 1).

        Parameters
        ----------
        matrix : (..., 3, 3) transforms, pixels; normalised to m33 = 1 first.

        Returns
        -------
        (..., dof) the parameters in the order above (translations in pixels).
        """
        m = np.asarray(matrix, dtype=np.float64)
        m = m / m[..., 2:3, 2:3]
        return m.reshape(*m.shape[:-2], 9)[..., list(self.free)]

    def encode(self, p: np.ndarray, width: int, height: int) -> np.ndarray:
        """Path matrices (n, 3, 3) -> the smoothing parameterisation (n, 4) or (n, 8).

        Corner trajectories (pixels) when :attr:`uses_corners`, otherwise the similarity
        about the centre of the ``width`` × ``height`` frame.

        Parameters
        ----------
        p : (n, 3, 3) path matrices, pixels (convention of :mod:`stabilize.geometry`).
        width, height : frame size, pixels.

        Returns
        -------
        (n, 8) corners x0, y0, … x3, y3 in pixels (:func:`stabilize.geometry.to_corners`),
        or (n, 4) x, y (pixels), angle (radians), log-scale
        (:func:`stabilize.geometry.to_similarity`).
        """
        if self.uses_corners:
            return to_corners(p, width, height)
        return to_similarity(p, frame_centre(width, height))

    def decode(self, q: np.ndarray, width: int, height: int) -> np.ndarray:
        """Inverse of :meth:`encode`: (n, 4) or (n, 8) -> path matrices (n, 3, 3).

        Parameters
        ----------
        q : (n, 8) corner trajectories or (n, 4) similarity values, as :meth:`encode` gives.
        width, height : frame size, pixels.

        Returns
        -------
        (n, 3, 3) path matrices, pixels, m33 = 1.
        """
        if self.uses_corners:
            return from_corners(q, width, height)
        return from_similarity(q, frame_centre(width, height))


TRANSLATION = MotionModel("translation", MODELS["translation"], False, (2, 5))
SIMILARITY = MotionModel("similarity", MODELS["similarity"], False, (0, 3, 2, 5))
AFFINE = MotionModel("affine", MODELS["affine"], True, (0, 1, 2, 3, 4, 5))
HOMOGRAPHY = MotionModel("homography", MODELS["homography"], True, (0, 1, 2, 3, 4, 5, 6, 7))

#: Every model by name, in order of increasing freedom.
MOTION_MODELS: dict[str, MotionModel] = {
    m.name: m for m in (TRANSLATION, SIMILARITY, AFFINE, HOMOGRAPHY)}


def model_named(model: str | MotionModel) -> MotionModel:
    """The motion model of this name (a model given is returned as it is).

    Parameters
    ----------
    model : one of :data:`MOTION_MODELS`' names, or a :class:`MotionModel`.

    Returns
    -------
    MotionModel : the model (the same object when one was given).

    Raises
    ------
    ValueError
        For an unknown name.
    """
    if isinstance(model, MotionModel):
        return model
    found = MOTION_MODELS.get(model)
    if found is None:
        raise ValueError(f"unknown model {model!r}; expected one of {list(MOTION_MODELS)}")
    return found
