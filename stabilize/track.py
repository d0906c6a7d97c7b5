"""Feature tracking between consecutive frames of the reduced analysis copy.

Shi–Tomasi corners (Shi and Tomasi, "Good features to track", CVPR 1994) spread over the frame
are followed into the next frame with pyramidal Lucas–Kanade (Bouguet's pyramidal form of Lucas
and Kanade 1981, as implemented by OpenCV) and kept only if tracking back lands where they
started (forward–backward error, Kalal, Mikolajczyk and Matas, "Forward-backward error:
automatic detection of tracking failures", ICPR 2010).

Points are returned in analysis-frame pixels; :func:`to_full_resolution` maps them to full
resolution under the pixel-centre convention of :mod:`stabilize.log`.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np


@dataclass(frozen=True)
class TrackSettings:
    """Tracking parameters, in analysis-frame pixels unless named otherwise.

    ``max_corners`` caps corners per frame; ``min_distance_frac`` is their minimum spacing as a
    share of the frame width; ``fb_max_px`` the largest forward–backward error kept.
    """

    max_corners: int = 1500
    quality: float = 0.005
    min_distance_frac: float = 1.0 / 120.0
    block_size: int = 7
    win_size: int = 21
    levels: int = 3
    fb_max_px: float = 0.5


def ignore_mask(
    size: tuple[int, int],
    regions: tuple[tuple[int, int, int, int], ...],
    scale: tuple[float, float],
) -> np.ndarray | None:
    """uint8 mask (255 = usable) of the analysis frame with the ignored regions cut out.

    ``regions`` are (x, y, w, h) in full-resolution pixels; ``scale`` is (sx, sy) from full
    resolution to the analysis frame.
    """
    if not regions:
        return None
    w, h = size
    mask = np.full((h, w), 255, np.uint8)
    sx, sy = scale
    for x, y, rw, rh in regions:
        x0 = int(np.floor(x * sx))
        y0 = int(np.floor(y * sy))
        x1 = int(np.ceil((x + rw) * sx))
        y1 = int(np.ceil((y + rh) * sy))
        mask[max(0, y0):max(0, y1), max(0, x0):max(0, x1)] = 0
    return mask


def detect(gray: np.ndarray, settings: TrackSettings, mask: np.ndarray | None) -> np.ndarray:
    """Corners (k, 2) float32 in pixel coordinates of ``gray``."""
    min_dist = max(2.0, settings.min_distance_frac * gray.shape[1])
    pts = cv2.goodFeaturesToTrack(
        gray, maxCorners=settings.max_corners, qualityLevel=settings.quality,
        minDistance=min_dist, mask=mask, blockSize=settings.block_size,
    )
    if pts is None:
        return np.empty((0, 2), np.float32)
    return pts.reshape(-1, 2).astype(np.float32)


class Tracker:
    """Feeds consecutive analysis frames; each step returns the matched points of the pair."""

    def __init__(self, settings: TrackSettings | None = None,
                 mask: np.ndarray | None = None) -> None:
        self.settings = settings or TrackSettings()
        self.mask = mask
        self._prev: np.ndarray | None = None

    def reset(self) -> None:
        self._prev = None

    def step(self, gray: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Track corners of the previous frame into ``gray``.

        Returns (src, dst), each (k, 2) float64 in analysis pixels: corner positions in the
        previous frame and in this one. Empty for the first frame.
        """
        prev, self._prev = self._prev, gray
        empty = np.empty((0, 2))
        if prev is None:
            return empty, empty
        s = self.settings
        src = detect(prev, s, self.mask)
        if len(src) == 0:
            return empty, empty
        lk = dict(winSize=(s.win_size, s.win_size), maxLevel=s.levels,
                  criteria=(cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, 30, 0.01))
        dst, st, _ = cv2.calcOpticalFlowPyrLK(prev, gray, src, None, **lk)
        back, st_back, _ = cv2.calcOpticalFlowPyrLK(gray, prev, dst, None, **lk)
        fb = np.linalg.norm(back - src, axis=1)
        keep = (st.ravel() == 1) & (st_back.ravel() == 1) & (fb < s.fb_max_px)
        h, w = gray.shape
        d = dst[keep]
        inside = (d[:, 0] >= 0) & (d[:, 0] <= w - 1) & (d[:, 1] >= 0) & (d[:, 1] <= h - 1)
        return src[keep][inside].astype(np.float64), d[inside].astype(np.float64)


def to_full_resolution(pts: np.ndarray, scale: tuple[float, float]) -> np.ndarray:
    """Analysis-frame points -> full-resolution pixels: x = (x_a + 0.5) / sx − 0.5."""
    sx, sy = scale
    out = np.empty_like(pts, dtype=np.float64)
    out[:, 0] = (pts[:, 0] + 0.5) / sx - 0.5
    out[:, 1] = (pts[:, 1] + 0.5) / sy - 0.5
    return out
