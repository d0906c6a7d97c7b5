"""Resampling maps that undo each row's within-frame displacement and apply a correction.

A rolling-shutter frame's row ``y`` shows its content displaced by ``w(y)`` px from where a
global shutter at the reference instant would have put it (:mod:`stabilize.row_motion`).
For a 3×3 correction ``C`` (source -> output pixels, pixel-centre convention of
:mod:`stabilize.geometry`), output pixel ``o`` is read from source pixel ``v`` with

    u = C⁻¹ o,        v = u + w(v_y)

(``u`` the pixel of the frame as a global shutter would have seen it; the row ``v_y`` it was
actually recorded in appears on both sides and is found by fixed-point iteration, which
converges at once because ``w`` changes by far less than a pixel per row). One ``cv2.remap``
then applies both, so the frame is resampled once.

The map is computed exactly on a grid every ``step`` px and enlarged by ``cv2.resize``
(bilinear, float weights): the map is a homography plus a smooth function of the row, so the
enlargement errs by curvature × step² / 8 at most; the step is chosen per frame from the
displacement's curvature to keep that under a few thousandths of a pixel, and the grid
reaches half a step beyond every edge so nothing is extrapolated. A planar YUV frame's
chroma maps come from the same computation in the plane's own pixels, the correction and the
row displacements carried there by :func:`stabilize.geometry.rescale`'s convention
(``x' = (x + 0.5) / sub − 0.5``), which is exactly the luma map resampled to the chroma grid.
"""

from __future__ import annotations

from collections.abc import Sequence

import cv2
import numpy as np

from .geometry import rescale
from .io import PlanarImage

__all__ = [
    "plain_maps",
    "plane_maps",
    "remap",
    "row_shift_at",
    "row_warp_maps",
    "warp_rows",
]


def row_shift_at(rows_px: np.ndarray, shift_px: np.ndarray, y: np.ndarray, *,
                 reach_px: float = 16.0) -> np.ndarray:
    """Within-frame displacement at rows ``y`` (...,), returned as (..., 2) px.

    A cubic spline through the sampled rows (not-a-knot ends; linear for two rows),
    continued along its end slope for ``reach_px`` rows beyond the first and last sampled
    row (so a resampling grid straddling the frame edge sees no kink) and held constant
    further out.
    """
    r = np.asarray(rows_px, dtype=np.float64)
    s = np.asarray(shift_px, dtype=np.float64).reshape(len(r), 2)
    y = np.asarray(y, dtype=np.float64)
    if len(r) < 3:
        inner = np.clip(y, r[0], r[-1])
        out = np.stack([np.interp(inner, r, s[:, 0]), np.interp(inner, r, s[:, 1])], axis=-1)
        slope = (s[-1] - s[0]) / max(r[-1] - r[0], 1e-12)
        lo_slope = hi_slope = slope
    else:
        # lazy: scipy.interpolate is only needed for the within-frame correction.
        from scipy.interpolate import CubicSpline
        spline = CubicSpline(r, s, axis=0)
        out = spline(np.clip(y, r[0], r[-1]))
        lo_slope, hi_slope = spline(r[0], 1), spline(r[-1], 1)
    below = np.clip(y - r[0], -reach_px, 0.0)[..., None]
    above = np.clip(y - r[-1], 0.0, reach_px)[..., None]
    return out + below * lo_slope + above * hi_slope


_TABLE_PAD = 32


def _row_table(rows_px: np.ndarray, shift_px: np.ndarray) -> tuple[float, np.ndarray, float]:
    """The displacement every whole row from a little above the first sampled row to a little
    below the last: (first row, (n, 2) px, the largest second difference between sampled
    rows in px per row²)."""
    r = np.asarray(rows_px, dtype=np.float64)
    lo = float(np.floor(r[0])) - _TABLE_PAD
    grid = lo + np.arange(int(np.ceil(r[-1] - lo)) + _TABLE_PAD + 2, dtype=np.float64)
    table = row_shift_at(r, shift_px, grid)
    inner = table[_TABLE_PAD:len(table) - _TABLE_PAD - 1]
    curvature = float(np.abs(np.diff(inner, 2, axis=0)).max()) if len(inner) > 2 else 0.0
    return lo, table, curvature


def _lookup(lo: float, table: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Linear interpolation in a whole-row table (error ~ curvature / 8 per row²)."""
    pos = np.clip(y - lo, 0.0, len(table) - 1.0)
    i = np.minimum(pos.astype(np.int64), len(table) - 2)
    f = pos - i
    return (table[i, 0] * (1.0 - f) + table[i + 1, 0] * f,
            table[i, 1] * (1.0 - f) + table[i + 1, 1] * f)


def _grid_step(curvature: float, tolerance_px: float, largest: int) -> int:
    """The coarsest grid step whose bilinear enlargement errs by at most ``tolerance_px``:
    linear interpolation over a step s errs by at most curvature · s² / 8. The map's
    homography part is smooth on a far larger scale (perspective terms of a correction are
    tiny)."""
    if curvature <= 0:
        return largest
    return int(np.clip(np.floor(np.sqrt(8.0 * tolerance_px / curvature)), 1, largest))


def _source_of(correction: np.ndarray, x: np.ndarray, y: np.ndarray,
               row_table: tuple[float, np.ndarray, float] | None,
               iterations: int) -> tuple[np.ndarray, np.ndarray]:
    """Source pixel (vx, vy) of output pixels (x, y) (broadcast), float64."""
    inv = np.linalg.inv(np.asarray(correction, dtype=np.float64))
    den = inv[2, 0] * x + inv[2, 1] * y + inv[2, 2]
    ux = (inv[0, 0] * x + inv[0, 1] * y + inv[0, 2]) / den
    uy = (inv[1, 0] * x + inv[1, 1] * y + inv[1, 2]) / den
    if row_table is None:
        return ux, uy
    lo, table, _ = row_table
    vx, vy = ux, uy
    for _ in range(max(1, iterations)):
        wx, wy = _lookup(lo, table, vy)
        vx, vy = ux + wx, uy + wy
    return vx, vy


def plain_maps(correction: np.ndarray, out_size: tuple[int, int]) -> np.ndarray:
    """Exact per-pixel maps of the correction alone, (out_h, out_w, 2) float32.

    ``out_size`` is (width, height) of the output; each entry is the source (x, y) px that
    ``cv2.warpPerspective(src, correction, out_size)`` would read for that output pixel.
    """
    w, h = out_size
    x = np.arange(w, dtype=np.float64)[None, :]
    y = np.arange(h, dtype=np.float64)[:, None]
    vx, vy = _source_of(correction, x, y, None, 1)
    return np.stack(np.broadcast_arrays(vx, vy), axis=-1).astype(np.float32)


def row_warp_maps(correction: np.ndarray, rows_px: np.ndarray | None,
                  shift_px: np.ndarray | None, out_size: tuple[int, int], *,
                  step: int | None = None, tolerance_px: float = 0.004,
                  iterations: int = 2) -> np.ndarray:
    """Maps for one ``cv2.remap`` undoing the within-frame displacement, then the correction.

    Parameters
    ----------
    correction : (3, 3) source -> output pixels (pixel-centre convention).
    rows_px : (r,) source rows at which the displacement is sampled (px), increasing;
        None for no within-frame correction (the plain warp).
    shift_px : (r, 2) within-frame displacement ``w(y)`` (dx, dy) px at ``rows_px``
        (:class:`stabilize.row_motion.RowMotion` gives it per frame).
    out_size : (width, height) of the output (px).
    step : the map is computed exactly every ``step`` output pixels and enlarged bilinearly
        (1: exact at every pixel, slower). None: the coarsest step up to 16 px whose
        enlargement errs by at most ``tolerance_px`` for this frame's displacement.
    tolerance_px : see ``step`` (px).
    iterations : fixed-point rounds for the source row.

    Returns
    -------
    (out_h, out_w, 2) float32 source (x, y) px of every output pixel, for
    ``cv2.remap(src, maps, None, ...)``. It may be a view of a slightly larger array.
    """
    w, h = int(out_size[0]), int(out_size[1])
    table = (None if rows_px is None or shift_px is None or len(rows_px) < 2
             else _row_table(rows_px, shift_px))
    if step is not None:
        s = max(1, int(step))
    else:
        s = _grid_step(0.0 if table is None else table[2], tolerance_px, 16)
    if s == 1:
        x = np.arange(w, dtype=np.float64)[None, :]
        y = np.arange(h, dtype=np.float64)[:, None]
        vx, vy = _source_of(correction, x, y, table, iterations)
        return np.stack(np.broadcast_arrays(vx, vy), axis=-1).astype(np.float32)
    # cv2.resize by a whole factor s reads output pixel i at grid position (i + 0.5)/s − 0.5;
    # grid node j therefore sits at full-resolution (j + 0.5)·s − 0.5 − a once the result is
    # cropped by a = s // 2, which puts the first node at or before pixel 0.
    a = s // 2
    nx = (w + a) // s + 2
    ny = (h + a) // s + 2
    x = ((np.arange(nx) + 0.5) * s - 0.5 - a)[None, :]
    y = ((np.arange(ny) + 0.5) * s - 0.5 - a)[:, None]
    vx, vy = _source_of(correction, x, y, table, iterations)
    coarse = np.empty((ny, nx, 2), np.float32)
    coarse[..., 0] = vx
    coarse[..., 1] = vy
    full = cv2.resize(coarse, (nx * s, ny * s), interpolation=cv2.INTER_LINEAR)
    return full[a:a + h, a:a + w]


def plane_maps(correction: np.ndarray, rows_px: np.ndarray | None,
               shift_px: np.ndarray | None, plane_sizes: Sequence[tuple[int, int]],
               subsampling: tuple[int, int], *, step: int | None = None,
               tolerance_px: float = 0.004, iterations: int = 2) -> list[np.ndarray]:
    """:func:`row_warp_maps` for each plane of a planar YUV frame.

    Parameters
    ----------
    correction, rows_px, shift_px : in luma pixels, as in :func:`row_warp_maps`.
    plane_sizes : (width, height) of each output plane, luma first.
    subsampling : (sub_x, sub_y) of the chroma planes (2, 2 for 4:2:0; 1, 1 for 4:4:4).
    step, tolerance_px, iterations : as in :func:`row_warp_maps`, in each plane's own
        pixels.

    Returns
    -------
    One (h, w, 2) float32 map per plane. A chroma plane uses ``D·C·D⁻¹`` and the
    displacements ``w / sub`` at rows ``(y + 0.5) / sub_y − 0.5`` (centre-sited chroma, as
    :func:`stabilize.geometry.rescale`).
    """
    sub_x, sub_y = subsampling
    if (sub_x, sub_y) == (1, 1):
        chroma = (np.asarray(correction, dtype=np.float64), rows_px, shift_px)
    else:
        c = rescale(correction, (1.0 / sub_x, 1.0 / sub_y), normalised=False)
        if rows_px is None or shift_px is None:
            chroma = (c, None, None)
        else:
            r = (np.asarray(rows_px, dtype=np.float64) + 0.5) / sub_y - 0.5
            sh = np.asarray(shift_px, dtype=np.float64) / np.array([sub_x, sub_y])
            chroma = (c, r, sh)
    out = []
    for k, size in enumerate(plane_sizes):
        cm, r, sh = (correction, rows_px, shift_px) if k == 0 else chroma
        out.append(row_warp_maps(cm, r, sh, size, step=step, tolerance_px=tolerance_px,
                                 iterations=iterations))
    return out


def remap(image: np.ndarray, maps: np.ndarray, *, border: int = cv2.BORDER_CONSTANT,
          fill: float | tuple[float, ...] = 0, dst: np.ndarray | None = None) -> np.ndarray:
    """Resample ``image`` (h, w) or (h, w, c) by ``maps`` (bilinear), into ``dst`` if given.

    ``border`` is an OpenCV border mode and ``fill`` the value it uses outside the source.
    """
    return cv2.remap(image, maps, None, cv2.INTER_LINEAR, dst=dst, borderMode=border,
                     borderValue=fill)


def warp_rows(image: np.ndarray | PlanarImage, correction: np.ndarray, rows_px: np.ndarray,
              shift_px: np.ndarray, *, border: int, fills: Sequence[float],
              out: PlanarImage | None = None) -> np.ndarray | PlanarImage:
    """One frame's render with its within-frame displacement undone: the counterpart of a
    plain ``cv2.warpPerspective`` by ``correction``, one resampling per plane.

    Parameters
    ----------
    image : planar YUV frame, or an (h, w[, c]) array.
    correction : (3, 3) source -> output luma pixels (pixel-centre convention).
    rows_px, shift_px : the frame's within-frame displacement ``w(y)`` (r,), (r, 2) px
        (:class:`stabilize.row_motion.RowMotion`).
    border : OpenCV border mode; fills : the value outside the source, per plane (an array
        takes the first).
    out : planar output frame to write into (planar input only; a new one when None).

    Returns
    -------
    The output frame (``out`` when given).
    """
    if not isinstance(image, PlanarImage):
        h, w = image.shape[:2]
        maps = row_warp_maps(correction, rows_px, shift_px, (w, h))
        return remap(image, maps, border=border, fill=fills[0])
    if out is None:
        out = PlanarImage.empty(image.pix_fmt, image.width, image.height)
    sizes = [(p.shape[1], p.shape[0]) for p in out.planes]
    maps = plane_maps(correction, rows_px, shift_px, sizes, image.subsampling)
    for k, (src, dst) in enumerate(zip(image.planes, out.planes, strict=True)):
        remap(src, maps[k], border=border, fill=fills[k], dst=dst)
    return out
