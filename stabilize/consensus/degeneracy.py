"""Degeneracy and sanity checks: point sets, motion bounds, inlier spread.

Sample-level degeneracy (coincident, collinear, orientation-flipping samples) is
tested inside each minimal solver in :mod:`stabilize.consensus.models`, where the
determinants are already at hand. This module holds the checks on whole point sets,
on candidate models (plausible frame-to-frame motion) and on the final inlier set.

References
----------
.. [1] R. Raguram, O. Chum, M. Pollefeys, J. Matas and J.-M. Frahm, "USAC: A Universal
   Framework for Random Sample Consensus", IEEE TPAMI, 2013 (model and degeneracy
   verification stages).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

__all__ = ["MotionBounds", "Frame", "cell_index", "count_cells", "frame_box", "occupied_cells",
           "plausible", "point_set_problem", "weakness"]

#: A fit is weak below this many inliers ...
WEAK_MIN_INLIERS = 12
#: ... or below this share of all correspondences ...
WEAK_MIN_SHARE = 0.2
#: ... or when its inliers occupy fewer than WEAK_MIN_CELLS of SPREAD_GRID x SPREAD_GRID
#: cells of the frame (i.e. they sit in about one quarter of it or less).
SPREAD_GRID = 4
WEAK_MIN_CELLS = 5


@dataclass(frozen=True)
class MotionBounds:
    """Plausible limits of frame-to-frame motion; hypotheses outside are rejected.

    All quantities are measured on the model expressed about the frame centre.

    Parameters
    ----------
    max_shift_frac : float
        Largest displacement of the frame centre, as a fraction of the frame diagonal.
        Applied only when the frame size is known: the bounding box of the points is
        no guide to how far the camera may move.
    max_rotation_deg : float
        Largest rotation, degrees (angle of the nearest similarity of the local
        Jacobian at the frame centre).
    min_scale, max_scale : float
        Range of the isotropic scale ``sqrt(det J)`` at the frame centre.
    max_shear : float
        Largest non-similar part of the local Jacobian, ``(s1 - s2) / (s1 + s2)`` with
        ``s1 >= s2`` its singular values (0 for a similarity).
    max_perspective : float
        Largest change of projective depth from the frame centre to its corners,
        ``|(h31, h32)| * diagonal / 2`` with ``h33 = 1``.

    Notes
    -----
    Always enforced regardless of these limits: no reflection (``det J > 0``), a
    non-singular Jacobian, and positive projective depth over the whole frame (no
    part of the frame is mapped through the line at infinity).
    """

    max_shift_frac: float = 0.3
    max_rotation_deg: float = 20.0
    min_scale: float = 0.7
    max_scale: float = 1.0 / 0.7
    max_shear: float = 0.25
    max_perspective: float = 0.3

    def __post_init__(self) -> None:
        if not (0 < self.min_scale <= 1.0 <= self.max_scale):
            raise ValueError("need 0 < min_scale <= 1 <= max_scale")
        for name in ("max_shift_frac", "max_rotation_deg", "max_shear", "max_perspective"):
            if not getattr(self, name) >= 0:
                raise ValueError(f"{name} must be >= 0")

    @classmethod
    def unbounded(cls) -> MotionBounds:
        """Limits that accept any orientation-preserving, non-singular motion."""
        inf = math.inf
        return cls(inf, inf, 1e-12, 1e12, inf, inf)


DEFAULT_BOUNDS = MotionBounds()


@dataclass(frozen=True)
class Frame:
    """Frame rectangle in pixels: top-left corner, size, centre, diagonal."""

    x0: float
    y0: float
    width: float
    height: float
    known: bool = True

    @property
    def centre(self) -> tuple[float, float]:
        return self.x0 + 0.5 * self.width, self.y0 + 0.5 * self.height

    @property
    def diagonal(self) -> float:
        return math.hypot(self.width, self.height)


# Frames of the sizes seen lately (a frozen record each; building one costs a few µs).
_FRAMES: dict[tuple[float, float], Frame] = {}


def frame_box(frame_size: tuple[float, float] | None, pts: NDArray[np.float64]) -> Frame:
    """The frame, or without ``frame_size`` the bounding box of the src points.

    Pixel centres sit at integer coordinates, so a ``(w, h)`` frame spans
    ``[-0.5, w - 0.5] x [-0.5, h - 0.5]``. ``pts`` is (4, n) with src x, y in rows 0, 1.
    """
    if frame_size is not None:
        w, h = frame_size
        frame = _FRAMES.get((w, h))
        if frame is None:
            if len(_FRAMES) > 16:
                _FRAMES.clear()
            frame = _FRAMES[(w, h)] = Frame(-0.5, -0.5, float(w), float(h))
        return frame
    x0, y0 = pts[:2].min(axis=1).tolist()
    x1, y1 = pts[:2].max(axis=1).tolist()
    return Frame(x0, y0, max(x1 - x0, 1.0), max(y1 - y0, 1.0), known=False)


def to_frame_centred(
    h: list[float], scale: float, src_off: tuple[float, float], dst_off: tuple[float, float]
) -> list[float]:
    """Re-express a model on normalised points about the frame centre, in pixels.

    ``h`` (row-major 3x3) maps ``scale * (p - c_src)`` to ``scale * (q - c_dst)``; the
    result maps ``p - f`` to ``q - f`` (``f`` the frame centre), up to scale. The
    offsets are ``f - c_src`` and ``c_dst - f``. Written out because the conjugation
    by two scale-and-shift matrices is a handful of products.
    """
    h0, h1, h2, h3, h4, h5, h6, h7, h8 = h
    ox, oy = dst_off
    inv = 1.0 / scale
    # L h with L = [[1/s, 0, ox], [0, 1/s, oy], [0, 0, 1]]
    r = (h0 * inv + ox * h6, h1 * inv + ox * h7, h2 * inv + ox * h8,
         h3 * inv + oy * h6, h4 * inv + oy * h7, h5 * inv + oy * h8, h6, h7, h8)
    ax, ay = src_off
    # (L h) R with R = [[s, 0, s ax], [0, s, s ay], [0, 0, 1]]
    out = []
    for i in (0, 3, 6):
        a, b, c = r[i], r[i + 1], r[i + 2]
        out += (scale * a, scale * b, scale * (a * ax + b * ay) + c)
    return out


def plausible(m: list[float], bounds: MotionBounds, frame: Frame) -> bool:
    """Whether a model is a plausible frame-to-frame motion.

    Parameters
    ----------
    m : list of 9 float
        Row-major 3x3 model in frame-centred pixel coordinates (any scale), see
        :func:`to_frame_centred`.
    bounds : MotionBounds
    frame : Frame

    Returns
    -------
    bool
    """
    m22 = m[8]
    if not abs(m22) > 1e-12:
        return False
    k = 1.0 / m22
    m0, m1, m2, m3, m4, m5, m6, m7 = m[:8]
    a, b, tx, c, d, ty, g, h = m0 * k, m1 * k, m2 * k, m3 * k, m4 * k, m5 * k, m6 * k, m7 * k
    if not math.isfinite(a + b + tx + c + d + ty + g + h):
        return False
    # Depth 1 + g x + h y must stay positive on every corner of the frame.
    if abs(g) * (0.5 * frame.width) + abs(h) * (0.5 * frame.height) >= 0.999:
        return False
    diagonal = frame.diagonal
    if math.hypot(g, h) * 0.5 * diagonal > bounds.max_perspective:
        return False
    if frame.known and math.hypot(tx, ty) > bounds.max_shift_frac * diagonal:
        return False
    # Local Jacobian at the centre: J = A - t (g, h)^T.
    j00, j01, j10, j11 = a - tx * g, b - tx * h, c - ty * g, d - ty * h
    det = j00 * j11 - j01 * j10
    if not det > 0:
        return False
    scale = math.sqrt(det)
    if not bounds.min_scale <= scale <= bounds.max_scale:
        return False
    sim = math.hypot(j00 + j11, j10 - j01)
    anti = math.hypot(j00 - j11, j01 + j10)
    shear = anti / sim
    if shear > min(bounds.max_shear, 0.999):
        return False
    rot = math.degrees(math.atan2(j10 - j01, j00 + j11))
    return abs(rot) <= bounds.max_rotation_deg


def point_set_problem(gram: NDArray[np.float64], n: int, spread_rank: int) -> str:
    """Reason why no model of this family can be fitted to the whole set, or "".

    Parameters
    ----------
    gram : ndarray, shape (4, 4)
        Scatter matrix of the centred (normalised) points, order (x, y, u, v).
    n : int
        Number of points.
    spread_rank : int
        The family's need for spread (:attr:`stabilize.consensus.models.Model.spread_rank`):
        0 none, 1 not all coincident, 2 not all collinear.
    """
    if spread_rank == 0:
        return ""
    cov = gram.tolist()
    for i in (0, 2):
        sxx, sxy, syy = cov[i][i], cov[i][i + 1], cov[i + 1][i + 1]
        tr = sxx + syy
        root = math.sqrt(max(0.25 * (sxx - syy) ** 2 + sxy * sxy, 0.0))
        lmax = 0.5 * tr + root
        lmin = max(0.5 * tr - root, 0.0)
        if lmax <= 1e-20 * n:
            return "degenerate: all points coincident"
        if spread_rank >= 2 and lmin <= 1e-12 * lmax:
            return "degenerate: all points collinear"
    return ""


def cell_index(xy: NDArray[np.float64], frame: Frame, grid: int = SPREAD_GRID) -> NDArray[np.intp]:
    """Cell of a ``grid x grid`` partition of the frame holding each point, numbered row by
    row from the top-left; shape (m,).

    ``xy`` is (2, m): rows x and y in pixels. A point on the frame's edge or outside it
    counts in the nearest cell.
    """
    origin, per_px = _grid_map(frame, grid)
    g = xy - origin
    g *= per_px
    np.minimum(np.maximum(g, 0.0, out=g), grid - 0.5, out=g)
    gi = g.astype(np.intp)
    return gi[0] + grid * gi[1]


# The frame's top-left corner and cells per pixel as (2, 1) columns, per frame and grid.
_GRID_MAPS: dict[tuple[Frame, int], tuple[NDArray[np.float64], NDArray[np.float64]]] = {}


def _grid_map(frame: Frame, grid: int) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    got = _GRID_MAPS.get((frame, grid))
    if got is None:
        if len(_GRID_MAPS) > 16:
            _GRID_MAPS.clear()
        got = (np.array([[frame.x0], [frame.y0]]),
               np.array([[grid / frame.width], [grid / frame.height]]))
        for a in got:
            a.flags.writeable = False
        _GRID_MAPS[(frame, grid)] = got
    return got


def occupied_cells(xy: NDArray[np.float64], frame: Frame, grid: int = SPREAD_GRID) -> int:
    """Number of cells of a ``grid x grid`` partition of the frame holding a point.

    ``xy`` is (2, m): rows x and y in pixels.
    """
    if xy.shape[1] == 0:
        return 0
    return count_cells(cell_index(xy, frame, grid), grid)


def count_cells(cells: NDArray[np.intp], grid: int = SPREAD_GRID) -> int:
    """Number of distinct cells among ``cells`` (from :func:`cell_index`)."""
    if len(cells) == 0:
        return 0
    return int(np.count_nonzero(np.bincount(cells, minlength=grid * grid)))


def weakness(n_inliers: int, n: int, cells: int) -> str:
    """Why a fit is weak (few or bunched inliers), or "" when it is not."""
    if n_inliers < WEAK_MIN_INLIERS or n_inliers < WEAK_MIN_SHARE * n:
        return f"weak: few inliers ({n_inliers} of {n})"
    if cells < WEAK_MIN_CELLS:
        return (
            f"weak: inliers bunched in one part of the frame "
            f"({cells} of {SPREAD_GRID * SPREAD_GRID} grid cells)"
        )
    return ""
