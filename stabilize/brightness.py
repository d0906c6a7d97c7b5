"""How far a change of brightness between two frames moves the tracks' measured motion.

Lucas–Kanade tracking (Lucas and Kanade, "An iterative image registration technique with an
application to stereo vision", IJCAI 1981) finds the shift ``d`` of a window that minimises
``Σ_w (I1(x + d) − I0(x))²``: it assumes the window's brightness does not change. When the
camera's automatic exposure (or the light) scales the picture by a gain ``g``,
``I1(x) = g·I0(x − d_true)``, and the same least squares, linearised about the true shift,
settles off it by

    e = −((g − 1) / g) · G⁻¹ · Σ_w ∇I0 · I0,   G = Σ_w ∇I0 ∇I0ᵀ

(this project's derivation, first order in ``g − 1``). ``G⁻¹ Σ ∇I0 · I0`` is a property of
the window alone, its *gain sensitivity* in pixels per unit of gain: large where the detail is
faint (small ``G``) and lies on a brightness slope (shading, a lit wall, haze), near nought on
crisp texture. One frame's error is a few hundredths of a pixel, but an exposure that ramps
for a second or two moves every faint window the same way on every frame, and the logged path
of a still camera drifts. On drawn fixed-camera scenes with a dark object crossing a faint
wall under automatic exposure the path strayed 0.5–1.4 px (the board of
``tests/test_motion.py``, seeds 1–3) and 1.0–3.4 px (a fainter, larger wall at 960×540),
against 0.5–1.0 and 1.5–2.4 px added up from this module's per-frame figures
(:func:`drift_px`); the same scenes at a fixed exposure read 0.01 px and nought. Track by
track the prediction follows OpenCV's tracker (``tests/test_brightness.py``). Measured
2026-12-05.

The gain is read on the tracks that carried the frame's fit: the median ratio of their
windows' mean grey levels, now and before. Points are in the pixels of the images given (x
right, y down, pixel centres at integers); the caller scales the result.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

__all__ = ["MIN_GAIN_CHANGE", "GainEffect", "drift_px", "gain_effect", "gain_sensitivity",
           "window_means"]

#: Gains closer to 1 than this are taken as no change (this project's choice: an eighth of
#: what one grey level is at mid-grey).
MIN_GAIN_CHANGE = 1e-3


def _windows(image: np.ndarray, pts: np.ndarray, half: int) -> np.ndarray:
    """(k, 2·half+1, 2·half+1) float32 windows of ``image`` (h, w) around ``pts`` (k, 2)
    rounded to whole pixels, moved inward where they would leave the picture."""
    h, w = image.shape
    xi = np.clip(np.rint(pts[:, 0]).astype(np.intp), half, w - 1 - half)
    yi = np.clip(np.rint(pts[:, 1]).astype(np.intp), half, h - 1 - half)
    side = 2 * half + 1
    return sliding_window_view(image, (side, side))[yi - half, xi - half].astype(np.float32)


def window_means(image: np.ndarray, pts: np.ndarray, win: int) -> np.ndarray:
    """(k,) mean grey level of the ``win``×``win`` window of ``image`` (h, w) centred on each
    point (k, 2), at its sub-pixel position (the means of the four whole-pixel windows
    around it, interpolated bilinearly)."""
    h, w = image.shape
    half = win // 2
    pts = np.asarray(pts, np.float64)
    x0 = np.clip(np.floor(pts[:, 0]), half, w - 2 - half).astype(np.intp)
    y0 = np.clip(np.floor(pts[:, 1]), half, h - 2 - half).astype(np.intp)
    fx = np.clip(pts[:, 0] - x0, 0.0, 1.0)
    fy = np.clip(pts[:, 1] - y0, 0.0, 1.0)
    block = sliding_window_view(image, (win + 1, win + 1))[y0 - half, x0 - half].astype(
        np.int32)                                         # (k, win + 1, win + 1)
    # The four windows' sums: the block's, less its last or first row and column.
    total = block.sum(axis=(1, 2))
    r0, r1 = block[:, 0, :].sum(axis=1), block[:, -1, :].sum(axis=1)
    c0, c1 = block[:, :, 0].sum(axis=1), block[:, :, -1].sum(axis=1)
    m00 = total - r1 - c1 + block[:, -1, -1]
    m01 = total - r1 - c0 + block[:, -1, 0]
    m10 = total - r0 - c1 + block[:, 0, -1]
    m11 = total - r0 - c0 + block[:, 0, 0]
    top = (1 - fx) * m00 + fx * m01
    return ((1 - fy) * top + fy * ((1 - fx) * m10 + fx * m11)) / (win * win)


def gain_sensitivity(image: np.ndarray, pts: np.ndarray, win: int) -> np.ndarray:
    """(k, 2) ``G⁻¹ Σ_w ∇I · I`` of each point's ``win``×``win`` window of ``image``
    (central differences): how far, in pixels, Lucas–Kanade's answer moves per unit of gain
    change (the module's formula, without its factor ``−(g − 1) / g``). Nought where the
    window has no two-dimensional texture (``G`` singular)."""
    half = win // 2
    p = _windows(image, pts, half + 1)
    k = len(p)
    core = p[:, 1:-1, 1:-1].reshape(k, -1)
    grad = np.stack([(p[:, 1:-1, 2:] - p[:, 1:-1, :-2]).reshape(k, -1),
                     (p[:, 2:, 1:-1] - p[:, :-2, 1:-1]).reshape(k, -1)], axis=1) * 0.5
    g = np.einsum("kan,kbn->kab", grad, grad).astype(np.float64)
    b = np.einsum("kan,kn->ka", grad, core).astype(np.float64)
    gxx, gyy, gxy = g[:, 0, 0], g[:, 1, 1], g[:, 0, 1]
    bx, by = b[:, 0], b[:, 1]
    det = gxx * gyy - gxy * gxy
    ok = det > 1e-9 * np.maximum(gxx + gyy, 1e-12) ** 2
    safe = np.where(ok, det, 1.0)
    sx = np.where(ok, (gyy * bx - gxy * by) / safe, 0.0)
    sy = np.where(ok, (gxx * by - gxy * bx) / safe, 0.0)
    return np.stack([sx, sy], axis=1)


@dataclass(frozen=True)
class GainEffect:
    """One frame pair's brightness change and what it did to the tracks.

    ``gain``: the median ratio of the tracks' window means, now over before (1 when there
    was too little to read it); ``shift`` (2,): the median predicted error of the tracks'
    shifts (dx, dy), pixels of the images given, the module's ``e``; nought when the gain
    changed by less than :data:`MIN_GAIN_CHANGE`.
    """

    gain: float
    shift: np.ndarray


def gain_effect(before: np.ndarray, now: np.ndarray, src: np.ndarray, dst: np.ndarray,
                win: int, min_points: int = 8) -> GainEffect:
    """The gain between two frames read on tracked windows, and the error it put into their
    Lucas–Kanade shifts (module docstring).

    Parameters
    ----------
    before, now : (h, w) uint8 frames the tracks were followed on.
    src, dst : (k, 2) the tracks' positions in ``before`` and in ``now``, pixels.
    win : the Lucas–Kanade window, pixels (odd).
    min_points : fewer tracks read no gain (nor does a picture smaller than ``win`` + 2 on
        a side).
    """
    if len(src) < min_points or min(before.shape) < win + 2:
        # Too few tracks, or a picture smaller than a window and its border.
        return GainEffect(1.0, np.zeros(2))
    m0 = window_means(before, src, win)
    m1 = window_means(now, dst, win)
    lit = m0 >= 1.0
    if np.count_nonzero(lit) < min_points:
        return GainEffect(1.0, np.zeros(2))
    gain = float(np.median(m1[lit] / m0[lit]))
    if abs(gain - 1.0) < MIN_GAIN_CHANGE:
        return GainEffect(gain, np.zeros(2))
    s = gain_sensitivity(before, src, win)
    # The tracker made up for part of the change by sliding down the windows' brightness
    # slopes, so their means were read a little darker than the gain makes them (1.0285
    # for 1.03 on the drawn wall of the tests): read again where they should have landed.
    back = dst + ((gain - 1.0) / gain) * s
    gain = float(np.median(window_means(now, back[lit], win) / m0[lit]))
    return GainEffect(gain, -((gain - 1.0) / gain) * np.median(s, axis=0).astype(np.float64))


def drift_px(shift: np.ndarray, counted: np.ndarray, cuts: np.ndarray) -> float:
    """The largest distance (pixels) the per-frame ``shift`` (n, 2) of the ``counted``
    frames (n,) bool adds up to within a shot (the sum restarts at each of ``cuts`` (n,)
    bool): how far a logged path may have drifted from brightness changes alone. Shifts of
    back-and-forth flicker cancel; those of a ramp add up."""
    s = np.where(np.asarray(counted, bool)[:, None], np.nan_to_num(np.asarray(shift, float)),
                 0.0)
    shot = np.cumsum(np.asarray(cuts, bool))
    worst = 0.0
    for k in np.unique(shot):
        path = np.cumsum(s[shot == k], axis=0)
        if len(path):
            worst = max(worst, float(np.hypot(path[:, 0], path[:, 1]).max()))
    return worst
