"""Static overlays: parts of the picture that stay put while the scene moves.

Burnt-in telemetry text, timestamps, a logo, or a landing leg in view do not move with the
camera; tracked there, they pull the motion estimate toward zero whenever the camera is nearly
still. A grid cell is declared an overlay when, over enough frames in which the camera motion
would have moved it, its tracks stayed where they were.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .track import cell_index


@dataclass(frozen=True)
class OverlaySettings:
    """``grid`` (columns, rows) of cells; a track is *still* when it moved less than
    ``still_px`` while the fitted camera motion would have moved it at least ``moving_px``
    (analysis pixels); a cell becomes an overlay after ``min_votes`` such observations with a
    still share of at least ``still_share``."""

    grid: tuple[int, int] = (32, 18)
    still_px: float = 0.08
    moving_px: float = 1.0
    min_votes: int = 12
    still_share: float = 0.85


class OverlayFinder:
    """Accumulates per-cell evidence frame by frame; :attr:`cells` marks the overlay cells."""

    def __init__(self, size: tuple[int, int], settings: OverlaySettings | None = None) -> None:
        self.size = size
        self.settings = settings or OverlaySettings()
        n = self.settings.grid[0] * self.settings.grid[1]
        self.still = np.zeros(n)
        self.moving = np.zeros(n)
        self.cells = np.zeros(n, bool)

    def observe(self, src: np.ndarray, dst: np.ndarray, camera: np.ndarray) -> bool:
        """Add one frame's pairs (analysis pixels) and its fitted camera motion (3×3, analysis
        pixels). Returns True when the set of overlay cells grew."""
        if len(src) == 0:
            return False
        s = self.settings
        h = np.c_[src, np.ones(len(src))] @ camera.T
        expected = h[:, :2] / h[:, 2:3] - src
        moved = np.linalg.norm(dst - src, axis=1)
        informative = np.linalg.norm(expected, axis=1) >= s.moving_px
        if not informative.any():
            return False
        cells = cell_index(src[informative], self.size, s.grid)
        is_still = moved[informative] < s.still_px
        n = len(self.still)
        self.still += np.bincount(cells[is_still], minlength=n)
        self.moving += np.bincount(cells[~is_still], minlength=n)
        votes = self.still + self.moving
        new = (votes >= s.min_votes) & (self.still >= s.still_share * votes) & ~self.cells
        self.cells |= new
        return bool(new.any())

    def mask(self, base: np.ndarray | None) -> np.ndarray:
        """uint8 mask (255 = usable) with the overlay cells (and ``base``'s zeros) cut out."""
        w, h = self.size
        gx, gy = self.settings.grid
        out = np.full((h, w), 255, np.uint8) if base is None else base.copy()
        for c in np.flatnonzero(self.cells):
            cy, cx = divmod(int(c), gx)
            x0, x1 = int(np.floor(cx * w / gx)), int(np.ceil((cx + 1) * w / gx))
            y0, y1 = int(np.floor(cy * h / gy)), int(np.ceil((cy + 1) * h / gy))
            out[y0:y1, x0:x1] = 0
        return out

    def regions(self, scale: tuple[float, float]) -> list[list[int]]:
        """Overlay cells as (x, y, w, h) rectangles in full-resolution pixels, with horizontal
        runs of cells merged."""
        w, h = self.size
        gx, gy = self.settings.grid
        sx, sy = scale
        grid = self.cells.reshape(gy, gx)
        out: list[list[int]] = []
        for cy in range(gy):
            cx = 0
            while cx < gx:
                if not grid[cy, cx]:
                    cx += 1
                    continue
                start = cx
                while cx < gx and grid[cy, cx]:
                    cx += 1
                x0, x1 = start * w / gx / sx, cx * w / gx / sx
                y0, y1 = cy * h / gy / sy, (cy + 1) * h / gy / sy
                out.append([int(np.floor(x0)), int(np.floor(y0)), int(np.ceil(x1 - x0)),
                            int(np.ceil(y1 - y0))])
        return out
