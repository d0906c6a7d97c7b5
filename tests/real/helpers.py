"""Measurements the real-clip tests share: path excursion, region drift, real frame rate.

Coordinates follow the motion log's convention (``stabilize/log.py``): pixels, origin at the
centre of the top-left pixel, x right, y down.
"""

from __future__ import annotations

import os
from contextlib import closing

import cv2
import numpy as np
from scipy.ndimage import median_filter

from stabilize.io import iter_frames
from stabilize.motion_log import MotionLog

__all__ = ["apply_homography", "path_excursion_px", "real_rate_hz", "reference_path_px",
           "region_drift_px", "region_moved_px", "region_shifts_px"]


def apply_homography(matrices: np.ndarray, points: np.ndarray) -> np.ndarray:
    """Map ``points`` (k, 2) px by every matrix of ``matrices`` (n, 3, 3); returns (n, k, 2)."""
    ph = np.column_stack([points, np.ones(len(points))])
    q = np.einsum("nij,kj->nki", matrices, ph)
    return q[..., :2] / q[..., 2:3]


def path_excursion_px(log: MotionLog) -> tuple[float, float]:
    """Largest distance |P_t(p) − p| over all frames, at the frame centre and at the corners.

    Returns
    -------
    centre_px : max over frames at the centre ((w−1)/2, (h−1)/2), px.
    corner_px : max over frames and over the four frame corners, px (rotation and zoom in
        the path show here more than at the centre).
    """
    w, h = log.size
    points = np.array([[(w - 1) / 2, (h - 1) / 2],
                       [0, 0], [w - 1, 0], [0, h - 1], [w - 1, h - 1]], dtype=np.float64)
    moved = apply_homography(np.asarray(log.path, dtype=np.float64), points)
    dist = np.linalg.norm(moved - points, axis=2).max(axis=0)
    return float(dist[0]), float(dist[1:].max())


def region_shifts_px(clip: str | os.PathLike, box: tuple[int, int, int, int], *,
                     high_pass_px: float | None = None,
                     with_response: bool = False) -> np.ndarray:
    """Shift (dx, dy) px of a fixed image region in every frame relative to frame 0, (n, 2).

    ``box`` is (x0, y0, x1, y1) in full-resolution pixels. Each shift is found by phase
    correlation with a Hann window (Kuglin and Hines, "The phase correlation image alignment
    method", Proc. IEEE Int. Conf. Cybernetics and Society, 1975), sub-pixel as OpenCV's
    ``phaseCorrelate`` gives it. ``high_pass_px``: subtract a Gaussian blur of this sigma
    first (a faint texture on a shaded wall is then what correlates, not the shading).
    ``with_response``: add the correlation peak's response as a third column, (n, 3).
    """
    x0, y0, x1, y1 = box
    window = cv2.createHanningWindow((x1 - x0, y1 - y0), cv2.CV_64F)
    ref = None
    shifts = []
    with closing(iter_frames(clip, gray=True)) as frames:
        for frame in frames:
            patch = frame.image[y0:y1, x0:x1].astype(np.float64)
            if high_pass_px:
                patch = patch - cv2.GaussianBlur(patch, (0, 0), high_pass_px)
            if ref is None:
                ref = patch
            (dx, dy), response = cv2.phaseCorrelate(ref, patch, window)
            shifts.append((dx, dy, response))
    out = np.asarray(shifts)
    return out if with_response else out[:, :2]


def region_moved_px(source: str | os.PathLike, output: str | os.PathLike,
                    box: tuple[int, int, int, int]) -> np.ndarray:
    """How far a fixed region of each output frame lies from the same region of the same
    source frame, (n,) px: what a steadied video did to a still part of the picture,
    measured on the pixels of both (phase correlation with a Hann window, as
    :func:`region_shifts_px`). The two frames show the same content, so the readings are
    sharp where a drift from frame 0 on a weakly textured region is not. ``box`` is (x0, y0,
    x1, y1) in pixels of both clips (of equal size)."""
    x0, y0, x1, y1 = box
    window = cv2.createHanningWindow((x1 - x0, y1 - y0), cv2.CV_64F)
    moved = []
    with closing(iter_frames(source, gray=True)) as a, closing(iter_frames(output, gray=True)) as b:
        for fa, fb in zip(a, b, strict=True):
            (dx, dy), _ = cv2.phaseCorrelate(fa.image[y0:y1, x0:x1].astype(np.float64),
                                             fb.image[y0:y1, x0:x1].astype(np.float64), window)
            moved.append(np.hypot(dx, dy))
    return np.asarray(moved)


def reference_path_px(clip: str | os.PathLike, boxes: list[tuple[int, int, int, int]], *,
                      agree_px: float = 1.5, min_response: float = 0.15,
                      at: tuple[float, float] | None = None,
                      ) -> tuple[np.ndarray, np.ndarray]:
    """The camera's displacement from frame 0, measured independently of the tool on patches
    of static background: the mean of the phase-correlation shifts of ``boxes`` (each
    (x0, y0, x1, y1), full-resolution px, high-passed at 8 px), negated (a pan right moves
    the background left, and the log's path then grows).

    ``at`` (x, y) px, with two boxes or more: the displacement of that point instead, read off
    the similarity (shift, rotation, scale; least squares) that the boxes' shifts at their
    centres give. The mean shift
    is the displacement of the boxes' own middle; a point far from them (the frame centre
    above a strip of wall) also moves with the rotation and scale times its distance, which
    the mean alone leaves out.

    Returns
    -------
    path : (n, 2) px, the path of the frame centre (or of ``at``) as the log states it
        (``path_x, path_y``).
    valid : (n,) bool, frames where every box correlates (response ≥ ``min_response``) and the
        boxes agree within ``agree_px``: elsewhere an object covers a box or the texture is
        too faint, and the reference says nothing.
    """
    shifts = np.stack([region_shifts_px(clip, b, high_pass_px=8.0, with_response=True)
                       for b in boxes])
    spread = np.linalg.norm(shifts[:, :, :2] - shifts[:, :, :2].mean(axis=0), axis=2).max(axis=0)
    valid = (shifts[:, :, 2] >= min_response).all(axis=0) & (spread <= agree_px)
    if at is None or len(boxes) < 2:
        return -shifts[:, :, :2].mean(axis=0), valid
    # d(p) = t + [[a, -b], [b, a]] p at each box centre p = (x, y); unknowns (tx, ty, a, b).
    centres = np.array([((x0 + x1 - 1) / 2.0, (y0 + y1 - 1) / 2.0) for x0, y0, x1, y1 in boxes])
    rows = []
    for x, y in centres:
        rows += [(1.0, 0.0, x, -y), (0.0, 1.0, y, x)]
    d = shifts[:, :, :2].transpose(0, 2, 1).reshape(2 * len(boxes), -1)  # (2k, n)
    tx, ty, a, b = np.linalg.lstsq(np.array(rows), d, rcond=None)[0]
    x, y = at
    return -np.stack([tx + a * x - b * y, ty + b * x + a * y], axis=1), valid


def region_drift_px(clip: str | os.PathLike, box: tuple[int, int, int, int]) -> float:
    """How far a fixed region wanders from where it was in frame 0: the largest shift
    magnitude over frames, px, after a 5-frame running median.

    The median (common practice) drops one- or two-frame glitches of the correlation on a
    weakly textured region (a frame of coding noise), and keeps any displacement that lasts
    three frames or more, which is what drift is. At the clip's ends the window is mirrored,
    not padded with the end frame: padding counted a glitch on the last frame three times
    (``box.mp4`` steadied: a reading of 2.35 px at correlation response 0.32 on a last frame
    whose region differs from three frames before by 0.09 grey levels on average, measured).
    """
    mag = np.hypot(*region_shifts_px(clip, box).T)
    return float(median_filter(mag, size=5, mode="mirror").max())


def real_rate_hz(clip: str | os.PathLike) -> float:
    """Mean frame rate from the decoded timestamps: (frames − 1) / (t_last − t_first), Hz."""
    with closing(iter_frames(clip, gray=True, size=(64, 48))) as frames:
        times = np.array([f.time_s for f in frames])
    return (len(times) - 1) / (times[-1] - times[0])
