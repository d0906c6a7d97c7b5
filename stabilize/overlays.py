"""Static overlays: parts of the picture that stay put while the scene moves.

Burnt-in telemetry text, timestamps, a logo, or a landing leg in view do not move with the
camera; tracked there, they pull the motion estimate toward zero whenever the camera is nearly
still. A grid cell is declared an overlay when, over enough frames in which the camera motion
would have moved it, its tracks stayed where they were.

That evidence rests on the fitted motion being the scene's. When the overlay holds most of the
strong corners (burnt-in text over a hazy, low-contrast scene) the fit may follow the overlay
itself, and nothing then looks still against a moving camera. A second, fit-free piece of
evidence covers that case: when the tracks split into two rigid groups over a baseline of
several frames (:mod:`stabilize.anchors`), one perfectly still and confined to a thin band
along an edge of the frame, the other moving and spread over much of the rest (or, beside a
line of text, spanning the frame along it), the band's cells collect a vote each frame
(:func:`still_band`, :meth:`OverlayFinder.observe_band`). A static background seen by a
fixed camera around a moving object is spread over the frame, not confined to an edge band,
and so collects none.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .track import cell_index

__all__ = ["OverlayFinder", "OverlaySettings", "still_band"]


@dataclass(frozen=True)
class OverlaySettings:
    """``grid`` (columns, rows) of cells; a track is *still* when it moved less than
    ``still_px`` while the fitted camera motion would have moved it at least ``moving_px``
    (analysis pixels); a cell becomes an overlay after ``min_votes`` such observations with a
    still share of at least ``still_share``.

    Band evidence (:func:`still_band`; full-resolution pixels): the still group moved at most
    ``band_still_px`` over the baseline (90th percentile) and lies within ``band_share`` of the
    frame's height (or width) from one edge; the other group moved at least ``band_moving_px``
    (median) and its hull covers at least ``band_spread`` of the frame; a cell becomes an
    overlay after ``band_frames`` frames of such evidence.

    A *line* of burnt-in text needs less of the moving group: a still group at most
    ``line_thickness`` of the frame thick across its edge, beside a moving group that spans at
    least ``line_span`` of the frame along that edge and whose hull covers at least
    ``line_spread``. A hazy scene's few faint tracks lie where its detail is (a girder across
    the middle of the frame), and their hull rarely reached 0.4 (a hazy truss at CRF 23 found
    its text line after 3.5 s, 17 frames of evidence in 239; with the line rule after 41
    frames, and its median error fell from 0.49 to 0.33 px, measured 2026-12-05). A real
    background that thin along an edge, with nothing else still in view, would be taken for
    an overlay; a moving object must then also span three quarters of the frame (a skirting
    line below a board waved before a fixed camera: DEVELOPERS.md, Known limits).

    Burnt-in text and symbols are drawn to be read over any scene: a still band is taken
    for one only when its tracks' patches are at least ``band_contrast`` as contrasted as
    the moving group's (median standard deviations of their patches,
    :func:`stabilize.track_groups.outshone_band`). A strip of a faint wall along an edge
    that a large textured object never covers is as still, but far fainter (a board
    sweeping before a wall of a sixth of its contrast: the wall's strip along the right
    edge was taken for an overlay, its tracks left out, and the log followed the board by
    131 and 148 px at CRF 23; 3.8 and 0.9 px with the rule, measured 2026-12-05). An
    overlay fainter than that beside a strongly textured scene is no longer found by this
    rule (the per-frame evidence of :meth:`OverlayFinder.observe` still can find it).

    These values are this project's own choices (common practice, no source).
    """

    grid: tuple[int, int] = (32, 18)
    still_px: float = 0.08
    moving_px: float = 1.0
    min_votes: int = 12
    still_share: float = 0.85
    band_still_px: float = 0.1
    band_moving_px: float = 1.0
    band_share: float = 0.15
    band_spread: float = 0.4
    band_frames: int = 15
    band_contrast: float = 0.25
    line_spread: float = 0.1
    line_thickness: float = 0.05
    line_span: float = 0.75


def still_band(start: np.ndarray, now: np.ndarray, still: np.ndarray, moving: np.ndarray,
               moving_spread: float, frame_size: tuple[int, int],
               settings: OverlaySettings | None = None) -> bool:
    """Whether the group ``still`` looks like a static overlay against the group ``moving``.

    Parameters
    ----------
    start, now : (k, 2) float
        Each track's position at the baseline frame and now, full-resolution pixels.
    still, moving : (k,) bool
        The two rigid groups found over the baseline.
    moving_spread : float
        Share of the frame (0 to 1) covered by the hull of the ``moving`` group.
    frame_size : (width, height)
        Full-resolution frame size, pixels.
    settings : OverlaySettings or None
        The thresholds; None for the defaults.

    Returns
    -------
    bool
        True when ``still`` moved at most ``band_still_px`` (90th percentile), lies within a
        band of ``band_share`` of the frame along one edge, and ``moving`` moved at least
        ``band_moving_px`` (median) and covers at least ``band_spread`` of the frame; or, for
        a thin line along the edge (``line_thickness``), spans ``line_span`` of the frame
        along it and covers at least ``line_spread``.
    """
    s = settings or OverlaySettings()
    if not still.any() or not moving.any() or moving_spread < s.line_spread:
        return False
    shift = np.linalg.norm(now - start, axis=1)
    if (float(np.percentile(shift[still], 90)) > s.band_still_px
            or float(np.median(shift[moving])) < s.band_moving_px):
        return False
    w, h = frame_size
    lo, hi = now[still].min(axis=0), now[still].max(axis=0)
    size = np.array([w, h], float)
    # Per axis: a band along the top or bottom edge lies near in y (index 1), and so on.
    edge = (hi <= s.band_share * size) | (lo >= (1.0 - s.band_share) * size)
    if moving_spread >= s.band_spread:
        return bool(edge.any())
    # A line: thin across, and the moving group spans the frame along it.
    m_lo, m_hi = now[moving].min(axis=0), now[moving].max(axis=0)
    thin = (hi - lo) <= s.line_thickness * size
    along = ((m_hi - m_lo) >= s.line_span * size)[::-1]
    return bool((edge & thin & along).any())


class OverlayFinder:
    """Accumulates per-cell evidence frame by frame; :attr:`cells` marks the overlay cells."""

    def __init__(self, size: tuple[int, int], settings: OverlaySettings | None = None) -> None:
        self.size = size
        self.settings = settings or OverlaySettings()
        n = self.settings.grid[0] * self.settings.grid[1]
        self.still = np.zeros(n)
        self.moving = np.zeros(n)
        self.cells = np.zeros(n, bool)
        self.band = np.zeros(n)

    def observe(self, src: np.ndarray, dst: np.ndarray, camera: np.ndarray) -> bool:
        """Add one frame's pairs (analysis pixels) and its fitted camera motion (3×3, analysis
        pixels). Returns True when the set of overlay cells grew.

        Parameters
        ----------
        src, dst : (k, 2) matched points (x, y) in the previous and current analysis frame,
            analysis pixels (convention of :mod:`stabilize.geometry`).
        camera : (3, 3) the fitted inter-frame transform, analysis pixels.

        Returns
        -------
        bool : True when the set of overlay cells grew.
        """
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

    def observe_band(self, pts: np.ndarray) -> bool:
        """Add one frame's vote for the cells holding ``pts`` (analysis pixels), the tracks of
        a group :func:`still_band` judged an overlay. Returns True when the set of overlay
        cells grew.

        Parameters
        ----------
        pts : (k, 2) points (x, y), analysis pixels.

        Returns
        -------
        bool : True when the set of overlay cells grew.
        """
        if len(pts) == 0:
            return False
        n = len(self.band)
        self.band += np.bincount(cell_index(pts, self.size, self.settings.grid), minlength=n) > 0
        new = (self.band >= self.settings.band_frames) & ~self.cells
        self.cells |= new
        return bool(new.any())

    def covers(self, pts: np.ndarray) -> np.ndarray:
        """Whether each point (k, 2), analysis pixels, lies in an overlay cell: (k,) bool."""
        if len(pts) == 0 or not self.cells.any():
            return np.zeros(len(pts), bool)
        return self.cells[cell_index(pts, self.size, self.settings.grid)]

    def mask(self, base: np.ndarray | None) -> np.ndarray:
        """uint8 mask (255 = usable) with the overlay cells (and ``base``'s zeros) cut out.

        Parameters
        ----------
        base : (h, w) uint8 mask in analysis pixels to start from (not changed), or None for
            all usable.

        Returns
        -------
        (h, w) uint8 mask of the analysis frame, 0 in overlay cells.
        """
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
        runs of cells merged.

        Parameters
        ----------
        scale : (sx, sy) analysis pixels per full-resolution pixel.

        Returns
        -------
        list of [x, y, w, h] ints, full-resolution pixels (outward-rounded), row by row.
        """
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
