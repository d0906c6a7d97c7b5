"""Feature tracking between consecutive frames of the reduced analysis copy.

Shi–Tomasi corners (Shi and Tomasi, "Good features to track", CVPR 1994), spread over the frame
by bucketing into a grid with a minimum spacing, are followed from frame to frame with
pyramidal Lucas–Kanade (Bouguet's pyramidal form of Lucas and Kanade 1981, as implemented by
OpenCV). A track is kept only if tracking back lands where it started (forward–backward error,
Kalal, Mikolajczyk and Matas, "Forward-backward error: automatic detection of tracking
failures", ICPR 2010) and its patch still looks the same (photometric check). Tracks persist
across frames, carry a history of whether they moved with the camera, and are re-seeded where
they thin out.

Points are in analysis-frame pixels; :func:`to_full_resolution` maps them to full resolution
under the pixel-centre convention of :mod:`stabilize.motion_log`.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from .consensus.metrics import median

__all__ = [
    "FLOW_PARTS_MAX_POINTS", "FLOW_PARTS_MAX_SHARE", "FLOW_REACH_PX", "MEMO_WIDTH",
    "Pairs", "TrackSettings", "Tracker", "bucket", "cell_index", "cell_keep", "cell_maxima",
    "corner_strength", "detect", "flow_parts", "global_shift", "ignore_mask", "peak_corners",
    "strength_floor", "strength_map", "to_analysis_resolution", "to_full_resolution",
    "track_settings_for",
]


@dataclass(frozen=True)
class TrackSettings:
    """Tracking parameters, in analysis-frame pixels unless named otherwise.

    ``max_corners`` is the number of live tracks aimed for; ``grid`` the (columns, rows) of
    the bucketing grid; ``quality_floor`` the weakest corner considered, as a share of the
    strongest (each cell then keeps its own strongest); ``cell_quality``, ``noise_floor``,
    ``min_strength``, ``min_isotropy``, ``sparse_share``: when the frame-wide rule finds
    corners in fewer than ``sparse_share`` of the grid cells of the whole picture while more
    than twice as many cells hold only weaker corners (strong corners crowding into a small
    part of a picture textured elsewhere, such as burnt-in text over a hazy scene), a corner in
    a cell the rule left sparse is also kept when it reaches ``cell_quality`` of its own
    cell's strongest, ``noise_floor`` times the picture's median corner strength and
    ``min_strength`` (OpenCV's minimum-eigenvalue units for 8-bit images and this block size;
    about the strongest corner that Gaussian noise of 1.3 grey levels makes on a flat patch,
    measured), and its smaller eigenvalue is at least ``min_isotropy`` of its larger (a
    corner, not a point on an edge) (see :func:`cell_keep`; this project's own values);
    ``min_distance_frac`` the minimum
    corner spacing as a share of the frame width; ``fb_max_px`` the largest forward–backward
    error kept; ``photo_max`` the largest mean absolute patch difference (grey levels) kept;
    ``reseed_share``: re-seed when live tracks fall below this share of ``max_corners``, or
    of what the last detection reached when the picture holds fewer corners than that;
    ``refresh_frames``: otherwise, while below ``max_corners``, look for new corners every
    this many frames (picture entering the frame);
    ``empty_cells_share``: re-seed when more than this share of the grid cells that had
    corners lost them all; ``min_eig``: Lucas–Kanade's minimum eigenvalue threshold;
    ``backward_check``: track each point back and drop those that do not return (off: the
    photometric check alone guards against slips); ``back_win_size``, ``back_levels``:
    window and coarsest pyramid level of the backward check; ``predicted_levels``: coarsest
    pyramid level when a predicted motion gives the
    starting points, and ``fallback_share``: below this share of surviving tracks, the whole
    pyramid is tried as well; ``retry_still_px``: when the prediction moves some track
    further than this, the tracks it lost are tracked again from no motion.
    ``texture_check_share``: when fewer pairs than this share of
    ``max_corners`` survive, the frame's texture is checked (plain sky yields a few tracks of
    noise, more of them with a small window).
    ``faint_picture_strength``, ``faint_win_size``: when the median live track's corner
    strength at its detection is under ``faint_picture_strength`` (OpenCV units as above;
    about 3× ``min_strength``: the picture's detail lies at its noise, as in a hazy scene),
    every track is followed with a window of at least ``faint_win_size`` pixels, forwards
    and backwards, which averages each track's noise down (0 turns this off). The picture
    as a whole decides, not each track: a wider window for the faint tracks alone reached
    the edges of a moving object beside them on a real clip (a cup waved before a plain
    wall, whose faint marks are tracks of their own: 2.3 → 5.6 px off the wall, measured).
    On the hazy truss of ``tests/test_tracking_accuracy.py`` (640×360, CRF 18) the median
    error went 0.155 → 0.139 px (contrast 0.08, seed 1), 0.123 → 0.111 px (seed 3) and
    1.65 → 0.33 px (contrast 0.05, seed 1), for about a third more analysis time on such
    clips. On the real clips of ``tests/real`` the median live track lies over 1e-4 (4e-4
    or more on nine pairs in ten; their tracking is unchanged) except on ``bikes.mp4``'s
    pairs 9–24, a plain white roof over grey asphalt at 7e-5 to 9e-5, followed with the
    wider window (measured 2026-12-05; the value is this project's choice).
    The spacing, window and levels were chosen on
    the synthetic accuracy clips of ``tests/test_tracking_accuracy.py`` for the least error
    per unit of time.
    """

    max_corners: int = 1500
    quality_floor: float = 0.003
    cell_quality: float = 0.1
    noise_floor: float = 5.0
    min_strength: float = 3e-5
    min_isotropy: float = 0.2
    sparse_share: float = 0.5
    min_distance_frac: float = 1.0 / 240.0
    block_size: int = 7
    win_size: int = 21
    levels: int = 2
    fb_max_px: float = 0.3
    photo_max: float = 12.0
    grid: tuple[int, int] = (16, 9)
    reseed_share: float = 0.8
    refresh_frames: int = 10
    empty_cells_share: float = 0.15
    lk_iterations: int = 20
    lk_epsilon: float = 0.01
    min_eig: float = 1e-4
    backward_check: bool = True
    texture_check_share: float = 0.3
    back_win_size: int = 21
    back_levels: int = 0
    predicted_levels: int = 0
    fallback_share: float = 0.5
    retry_still_px: float = 2.0
    faint_picture_strength: float = 1e-4
    faint_win_size: int = 31


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


def cell_index(pts: np.ndarray, size: tuple[int, int], grid: tuple[int, int]) -> np.ndarray:
    """Grid cell of each point (k,), row-major over ``grid`` = (columns, rows)."""
    w, h = size
    gx, gy = grid
    cx = np.clip((pts[:, 0] * gx / w).astype(int), 0, gx - 1)
    cy = np.clip((pts[:, 1] * gy / h).astype(int), 0, gy - 1)
    return cy * gx + cx


def bucket(pts: np.ndarray, size: tuple[int, int], grid: tuple[int, int],
           per_cell: int, turns: int = 1) -> np.ndarray:
    """Keep at most ``per_cell`` points in each grid cell, the first (strongest) ones, in
    ``turns`` rounds over the cells first (every cell's strongest, then every cell's second,
    and so on), then the rest in the order given.

    ``pts`` must be sorted by decreasing corner quality, as :func:`peak_corners` returns them.
    A caller that keeps only the first few points so still has some in every cell that has
    any: a busy object's corners, however strong and many, do not crowd the rest of the
    picture out of the tracks.
    """
    if len(pts) == 0:
        return pts
    cells = cell_index(pts, size, grid)
    order = np.argsort(cells, kind="stable")
    sorted_cells = cells[order]
    starts = np.searchsorted(sorted_cells, sorted_cells, side="left")
    rank = np.empty(len(pts), int)
    rank[order] = np.arange(len(pts)) - starts
    kept = np.flatnonzero(rank < per_cell)
    return pts[kept[np.argsort(np.minimum(rank[kept], turns), kind="stable")]]


def cell_maxima(strength: np.ndarray, grid: tuple[int, int]) -> np.ndarray:
    """Largest value of ``strength`` (h, w) in each grid cell, row-major over ``grid`` =
    (columns, rows), with the cells of :func:`cell_index` (pixel centres)."""
    h, w = strength.shape
    gx, gy = grid
    xs = np.ceil(np.arange(gx) * w / gx).astype(int)
    ys = np.ceil(np.arange(gy) * h / gy).astype(int)
    cols = np.maximum.reduceat(strength, xs, axis=1)
    return np.maximum.reduceat(cols, ys, axis=0).reshape(-1)


def cell_keep(strength: np.ndarray, cells: np.ndarray, cell_max: np.ndarray,
              global_max: float, *, quality: float, cell_quality: float,
              floor: float, isotropy: np.ndarray | None = None,
              min_isotropy: float = 0.0, sparse_below: int | None = None) -> np.ndarray:
    """Which corners to keep (k,) bool, judged against the whole frame or their own cell.

    A corner of ``strength`` (k,) is kept when it reaches ``quality`` × ``global_max`` (the
    usual rule of Shi and Tomasi's detector as OpenCV applies it), or when it reaches both
    ``cell_quality`` × the strongest corner of its own cell (``cell_max`` indexed by ``cells``)
    and the absolute ``floor`` (same units as ``strength``) and, given ``isotropy`` (k,), the
    ratio of the smaller to the larger eigenvalue, ``min_isotropy``. The per-cell rule keeps a
    low-contrast part of the frame from losing all its corners to a far stronger part
    elsewhere; the floor keeps flat cells from yielding corners of noise alone, the isotropy
    cells holding only edges from yielding points that slide along them (common practice).
    With ``sparse_below``, the per-cell rule applies only in cells where the frame-wide rule
    kept fewer corners than that, so well-textured cells keep exactly their usual corners.
    """
    usual = strength >= quality * global_max
    local = (strength >= cell_quality * cell_max[cells]) & (strength >= floor)
    if isotropy is not None:
        local &= isotropy >= min_isotropy
    if sparse_below is not None:
        local &= np.bincount(cells[usual], minlength=len(cell_max))[cells] < sparse_below
    return usual | local


#: Step (pixels, both ways) of the regular sample of a corner-strength map whose median sets
#: the noise floor: a sixteenth of the pixels gave the median to 1 % at a fourteenth of the
#: cost of the whole map's (0.27 ms against 3.8 ms, a 960×540 frame of the 720p accuracy
#: clip, measured).
FLOOR_SAMPLE_STEP = 4

#: Which quantile of the grid cells' median strengths stands for the quieter parts of a
#: picture in :func:`strength_floor` (this project's choice: a quarter of the cells is
#: enough background to track against).
QUIET_CELLS_QUANTILE = 0.25


def strength_floor(strength: np.ndarray, settings: TrackSettings,
                   grid: tuple[int, int] | None = None, factor: float | None = None) -> float:
    """The least corner strength above the picture's noise and fine texture:
    ``noise_floor`` (or ``factor``) × the median of ``strength`` (OpenCV minimum-eigenvalue
    map, (h, w)), taken on a regular sample of every :data:`FLOOR_SAMPLE_STEP`-th row and
    column, and no less than ``min_strength`` (flat pictures have a median of nought).

    On a picture of Gaussian noise alone (σ 1–3 grey levels, raw or blurred by σ 0.7 px as
    a codec does) the strongest corner of a 640×360 frame reaches 2.8–4.1× the map's median
    (measured); the default of 5× keeps above that. It was 10×: a hazy truss at contrast
    0.08 whose sensor noise survived the encoding (CRF 10) then kept only the corners of its
    burnt-in strip, the strip was not found and the log followed it (median error 1.65 px,
    every frame weak; 0.059 px at 5×, measured).

    Given the bucketing ``grid`` (columns, rows), the median is that of the quieter parts:
    the lower quartile of the cells' own medians when it is below the whole sample's. A
    strongly textured object over half the picture otherwise raises the floor above every
    corner of a low-contrast background (a drawn board over a wall of a third of its
    contrast: the wall's strongest corner was 0.43 of the whole-picture floor, measured),
    while on a picture textured alike all over the two agree."""
    s = FLOOR_SAMPLE_STEP
    sample = strength[s // 2::s, s // 2::s]
    level = float(np.median(sample))
    if grid is not None:
        gx, gy = grid
        h, w = sample.shape
        ch, cw = h // gy, w // gx
        if ch > 0 and cw > 0:
            cells = sample[:ch * gy, :cw * gx].reshape(gy, ch, gx, cw).swapaxes(1, 2)
            per_cell = np.median(cells.reshape(gy * gx, ch * cw), axis=1)
            level = min(level, float(np.quantile(per_cell, QUIET_CELLS_QUANTILE)))
    factor = settings.noise_floor if factor is None else factor
    return max(settings.min_strength, factor * level)


#: The still-detail check's floor, ``noise_floor`` of its own: its thresholds were tried with
#: this (:mod:`stabilize.still_detail`).
STILL_DETAIL_NOISE_FLOOR = 10.0

#: Side (pixels) of the tiles of :func:`strength_map`.
STRENGTH_TILE = 64


def strength_map(gray: np.ndarray, block: int, where: np.ndarray | None = None) -> np.ndarray:
    """OpenCV's minimum-eigenvalue corner strength of ``gray`` (h, w) uint8 over
    ``block``×``block`` windows (3×3 Sobel), (h, w) float32; given ``where`` (h, w), only
    on the tiles that hold some of it (nonzero), 0 elsewhere.

    The map is worked out on tiles of :data:`STRENGTH_TILE` pixels, each read with a margin
    of the window's reach, so its values are those of the whole picture's map to float
    rounding; tiles that stay in the processor's cache take half the time of one pass over
    a 960×540 picture (measured, one thread).
    """
    h, w = gray.shape
    out = np.empty((h, w), np.float32) if where is None else np.zeros((h, w), np.float32)
    t = STRENGTH_TILE
    reach = block // 2 + 2
    rows = np.arange(0, h, t)
    cols = np.arange(0, w, t)
    if where is None:
        tiles = np.ones((len(rows), len(cols)), bool)
    else:
        tiles = np.maximum.reduceat(np.maximum.reduceat(where, rows, axis=0), cols, axis=1)
    for i, j in zip(*np.nonzero(tiles), strict=True):
        y0, x0 = int(rows[i]), int(cols[j])
        y1, x1 = min(h, y0 + t), min(w, x0 + t)
        ya, xa = max(0, y0 - reach), max(0, x0 - reach)
        yb, xb = min(h, y1 + reach), min(w, x1 + reach)
        e = cv2.cornerMinEigenVal(gray[ya:yb, xa:xb], block, ksize=3)
        out[y0:y1, x0:x1] = e[y0 - ya:y1 - ya, x0 - xa:x1 - xa]
    return out


def peak_corners(strength: np.ndarray, threshold: float, min_dist: float,
                 mask: np.ndarray | None = None) -> np.ndarray:
    """The corners OpenCV's ``goodFeaturesToTrack`` (no cap on their number) picks, found on
    a corner-strength map already at hand instead of working the map out again: (k, 2)
    float32 positions (x, y), pixel centres, strongest first (ties: the earlier in row-major
    order).

    A corner is a pixel of ``strength`` (h, w) float32 above ``threshold``, off the map's
    outermost rows and columns, where ``mask`` (h, w; None: everywhere) is nonzero, and no
    weaker than its eight neighbours; corners closer than ``min_dist`` pixels to a stronger
    corner that is kept are dropped. The greedy thinning, strongest first, is done in rounds:
    each round keeps every corner whose stronger neighbours within ``min_dist`` were all
    dropped and drops every corner with a kept stronger one, which gives the same set as one
    corner at a time (checked against OpenCV on real clips in the tests).
    """
    h, w = strength.shape
    peak = cv2.compare(strength, cv2.dilate(strength, None), cv2.CMP_EQ)
    peak &= cv2.compare(strength, float(threshold), cv2.CMP_GT)
    if mask is not None:
        peak &= cv2.compare(mask, 0, cv2.CMP_NE)
    peak[0, :] = peak[-1, :] = 0
    peak[:, 0] = peak[:, -1] = 0
    found = cv2.findNonZero(peak)
    if found is None:
        return np.empty((0, 2), np.float32)
    found = found.reshape(-1, 2).astype(np.intp)
    order = np.lexsort((found[:, 0], found[:, 1], -strength[found[:, 1], found[:, 0]]))
    xs, ys = found[order, 0], found[order, 1]
    k = len(xs)
    # Each corner's stronger neighbours within min_dist, by rank (k: none), read off an image
    # of ranks padded by the reach.
    r = int(np.ceil(min_dist))
    oy, ox = np.mgrid[-r:r + 1, -r:r + 1]
    near = (ox * ox + oy * oy < min_dist * min_dist) & ((ox != 0) | (oy != 0))
    rank = np.full((h + 2 * r, w + 2 * r), k, np.int32)
    rank[ys + r, xs + r] = np.arange(k, dtype=np.int32)
    nb = rank[(ys + r)[:, None] + oy[near], (xs + r)[:, None] + ox[near]]
    nb[nb > np.arange(k)[:, None]] = k
    # 1 kept, -1 dropped, 0 not yet decided; the extra last entry stands for no neighbour.
    status = np.zeros(k + 1, np.int8)
    status[k] = -1
    todo = np.arange(k)
    while len(todo):
        st = status[nb[todo]]
        beaten = (st == 1).any(axis=1)
        free = ~beaten & (st == -1).all(axis=1)
        status[todo[beaten]] = -1
        status[todo[free]] = 1
        todo = todo[~beaten & ~free]
    kept = status[:k] == 1
    return np.stack([xs[kept], ys[kept]], axis=1).astype(np.float32)


def corner_strength(gray: np.ndarray, settings: TrackSettings) -> tuple[np.ndarray, float]:
    """The corner-strength map of ``gray`` (:func:`strength_map`: the smaller eigenvalue of
    the gradient structure tensor over ``block_size`` windows, OpenCV units) and its
    :func:`strength_floor`."""
    strength = strength_map(gray, settings.block_size)
    return strength, strength_floor(strength, settings, settings.grid)


def detect(gray: np.ndarray, settings: TrackSettings, mask: np.ndarray | None,
           count: int, strength: tuple[np.ndarray, float] | None = None) -> np.ndarray:
    """Up to ``count`` corners (k, 2) float32, bucketed over the grid.

    Corner strength is the smaller eigenvalue of the gradient structure tensor (Shi and
    Tomasi, CVPR 1994); each corner is judged against the frame's strongest and its own
    grid cell's strongest (:func:`cell_keep`; the latter only when the former leaves most
    cells empty, and then only in cells where it kept fewer than a quarter of the corners a
    cell may hold), the absolute floor being :func:`strength_floor`, a measure of the
    quieter parts' noise and fine texture (this project's choice).
    ``strength``: the picture's :func:`corner_strength`, when already worked out (its map is
    changed here).
    """
    if count <= 0:
        return np.empty((0, 2), np.float32)
    min_dist = max(2.0, settings.min_distance_frac * gray.shape[1])
    size = (gray.shape[1], gray.shape[0])
    n_cells = settings.grid[0] * settings.grid[1]
    per_cell = max(2, int(np.ceil(1.5 * settings.max_corners / n_cells)))
    # Half of what a cell may hold is dealt out to the cells in turns before the strongest
    # corners take the rest: a strongly textured board held over half of a textured wall
    # otherwise took 440 of 500 tracks; the wall's tracks thinned out as the board grew
    # (zooming towards the lens) until they were too few to be a group, and the log followed
    # the board (18 px; 0.07 px with the turns, a drawn clip). Dealt out all in turns, the
    # 720p accuracy clip's median error rose from 0.0154 to 0.0161 px; with half, 0.0155
    # (measured; this project's choice).
    turns = max(1, per_cell // 2)
    strength, floor = strength or corner_strength(gray, settings)
    # Whether the picture's strong corners crowd into a few cells, judged on the whole
    # picture (not the mask, which at a re-seed hides the corners already tracked).
    whole = cell_maxima(strength, settings.grid)
    strong = whole >= settings.quality_floor * float(whole.max())
    weak_only = ~strong & (whole >= floor)
    crowded = strong.mean() < settings.sparse_share and weak_only.sum() > 2 * strong.sum()
    unmasked = strength
    if mask is not None:
        # Corners are peaks of the whole picture's map (a masked stronger neighbour still
        # counts), judged against the strongest corner left outside the mask.
        unmasked = strength.copy()
        strength[mask == 0] = 0.0
    top = float(strength.max())
    if top <= 0.0:
        return np.empty((0, 2), np.float32)
    cell_max = cell_maxima(strength, settings.grid)
    lowest = min(settings.quality_floor * top,
                 max(floor, settings.cell_quality * float(cell_max[cell_max > 0].min())))
    # No cap on the number here: a cap keeps the strongest corners of the whole frame, which
    # can all lie on one busy object; bucketing below spreads them instead.
    pts = peak_corners(unmasked, top * max(lowest / top, 1e-6), min_dist, mask)
    if len(pts) == 0:
        return pts
    xi = np.clip(np.rint(pts[:, 0]).astype(int), 0, size[0] - 1)
    yi = np.clip(np.rint(pts[:, 1]).astype(int), 0, size[1] - 1)
    at = strength[yi, xi]
    cells = cell_index(pts, size, settings.grid)
    if not crowded:
        # The frame-wide rule reaches most of the frame: corners judged as usual.
        return bucket(pts[at >= settings.quality_floor * top], size, settings.grid,
                      per_cell, turns)[:count]
    # Both eigenvalues only where the per-cell rule needs them (this costs five times the
    # smaller eigenvalue alone).
    eig = cv2.cornerEigenValsAndVecs(gray, settings.block_size, ksize=3)
    larger = np.maximum(eig[..., 0], eig[..., 1])
    keep = cell_keep(at, cells, cell_max, top,
                     quality=settings.quality_floor, cell_quality=settings.cell_quality,
                     floor=floor, isotropy=at / np.maximum(larger[yi, xi], 1e-12),
                     min_isotropy=settings.min_isotropy, sparse_below=max(1, per_cell // 4))
    pts = pts[keep]
    return bucket(pts, size, settings.grid, per_cell, turns)[:count]


@dataclass
class Pairs:
    """Correspondences between the previous frame and this one, analysis pixels.

    ``src``, ``dst`` (k, 2); ``ids`` (k,) track identities; ``background`` (k,) the track's
    history of moving with the camera (1 = always did, 0 = never, 0.5 = new); ``memo``
    (k, MEMO_WIDTH) what the caller last stored for each track with :meth:`Tracker.update`
    (NaN for a track it has not seen yet).
    """

    src: np.ndarray
    dst: np.ndarray
    ids: np.ndarray
    background: np.ndarray
    memo: np.ndarray

    def __len__(self) -> int:
        return len(self.src)


#: How far (analysis pixels) the pyramidal flow from no motion is taken to carry a point, for
#: the rectangles that :func:`flow_parts` cuts. The flow is retried from no motion for tracks
#: that the predicted motion lost, to keep the still background when the fit followed an
#: object (:meth:`Tracker.retry`), so it is set for slow motion; a point carried further can
#: be lost at a rectangle's edge. This project's choice.
FLOW_REACH_PX = 32
#: Points are tracked on rectangles only while there are at most this many of them and the
#: rectangles cover at most this share of the frame: past that, the gradients of the whole
#: picture cost about as much as those of the rectangles and the calls' own overheads.
FLOW_PARTS_MAX_POINTS = 48
FLOW_PARTS_MAX_SHARE = 0.4


def flow_parts(pts: np.ndarray, shape: tuple[int, ...], levels: int, win_size: int,
               ) -> list[tuple[np.ndarray, tuple[int, int, int, int]]] | None:
    """Rectangles of the frame, analysis pixels, that the pyramidal flow of ``pts`` (k, 2)
    from no motion reads: a list of (indices into ``pts``, (x0, y0, x1, y1)), or None when
    tracking on the whole frame is about as cheap (see :data:`FLOW_PARTS_MAX_POINTS`).

    Around each point: its window on the coarsest level (``win_size // 2`` pixels there, so
    ``2**levels`` times that here), four pixels more on each level for the pyramid's 5-tap
    smoothing and the 3-tap gradients, and :data:`FLOW_REACH_PX` for the motion found;
    overlapping rectangles are merged. Their corners lie on multiples of ``2**levels``, so
    each pyramid level of a rectangle holds the same pixels as the whole frame's there:
    inside it the flow is the whole frame's, up to float32 rounding of the coordinates
    (smaller numbers in a rectangle). ``shape`` is the frame's (height, width).
    """
    k = len(pts)
    if k == 0 or k > FLOW_PARTS_MAX_POINTS:
        return None
    h, w = shape[:2]
    step = 1 << levels
    margin = (win_size // 2 + 4) * step + FLOW_REACH_PX
    lo = np.floor(pts).astype(int) - margin
    hi = np.ceil(pts).astype(int) + margin + 1
    lo = np.maximum(lo, 0) // step * step
    hi = np.minimum(hi, (w, h))
    parts = [[lo[i].tolist(), hi[i].tolist(), [i]] for i in range(k)]
    merged = True
    while merged:
        merged = False
        for i in range(len(parts)):
            for j in range(i + 1, len(parts)):
                (a0, a1, ai), (b0, b1, bi) = parts[i], parts[j]
                if a0[0] < b1[0] and b0[0] < a1[0] and a0[1] < b1[1] and b0[1] < a1[1]:
                    parts[i] = [[min(a0[0], b0[0]), min(a0[1], b0[1])],
                                [max(a1[0], b1[0]), max(a1[1], b1[1])], ai + bi]
                    del parts[j]
                    merged = True
                    break
            if merged:
                break
    area = sum((b[0] - a[0]) * (b[1] - a[1]) for a, b, _ in parts)
    if area > FLOW_PARTS_MAX_SHARE * w * h:
        return None
    return [(np.array(sorted(ix), np.intp), (a[0], a[1], b[0], b[1])) for a, b, ix in parts]


#: Columns of the per-track record a caller may keep in the tracker (see :class:`Pairs`).
MEMO_WIDTH = 7


def _empty_pairs() -> Pairs:
    z = np.empty((0, 2))
    return Pairs(z, z.copy(), np.empty(0, np.int64), np.empty(0),
                 np.empty((0, MEMO_WIDTH)))


class Tracker:
    """Feeds consecutive analysis frames; keeps tracks alive across frames.

    Call :meth:`step` with each frame (and optionally a predicted motion for it) to get the
    pairs, then :meth:`update` with which of them moved with the camera. ``floor``: the
    corner-strength floor of the picture at the last detection (:func:`strength_floor`;
    None before the first); ``window_px``: the forward Lucas–Kanade window (pixels) the last
    pairs were followed with.
    """

    def __init__(self, settings: TrackSettings | None = None,
                 mask: np.ndarray | None = None) -> None:
        self.settings = settings or TrackSettings()
        self.mask = mask
        self._pyr: np.ndarray | None = None
        self._gray: np.ndarray | None = None
        self._prev_pyr: np.ndarray | None = None
        self._prev_gray: np.ndarray | None = None
        self._pts = np.empty((0, 2), np.float32)
        self._ids = np.empty(0, np.int64)
        self._bg = np.empty(0)
        self._strength = np.empty(0)
        self._memo = np.empty((0, MEMO_WIDTH))
        self._next_id = 0
        self._pending: tuple[np.ndarray, np.ndarray] | None = None
        self._had_cells: np.ndarray | None = None
        # Live tracks right after the last detection, and frames since it.
        self._reached = 0
        self._since_detect = 0
        self.floor: float | None = None
        self.window_px = self.settings.win_size

    def reset(self) -> None:
        """Forget every track (after a scene cut)."""
        self._pts = np.empty((0, 2), np.float32)
        self._ids = np.empty(0, np.int64)
        self._bg = np.empty(0)
        self._strength = np.empty(0)
        self._memo = np.empty((0, MEMO_WIDTH))
        self._had_cells = None
        self._reached = 0
        self._since_detect = 0

    def set_mask(self, mask: np.ndarray | None) -> None:
        """Change where new corners may be seeded, and drop tracks now outside it."""
        self.mask = mask
        if mask is not None and len(self._pts):
            xi = np.clip(np.rint(self._pts[:, 0]).astype(int), 0, mask.shape[1] - 1)
            yi = np.clip(np.rint(self._pts[:, 1]).astype(int), 0, mask.shape[0] - 1)
            keep = mask[yi, xi] > 0
            self._pts, self._ids, self._bg = self._pts[keep], self._ids[keep], self._bg[keep]
            self._strength, self._memo = self._strength[keep], self._memo[keep]

    def step(self, gray: np.ndarray, predicted: np.ndarray | None = None) -> Pairs:
        """Track the live corners of the previous frame into ``gray``.

        ``predicted`` is an optional 3×3 motion (analysis pixels, previous -> this frame) used
        as the starting guess for every track, so fast but steady motion is followed.
        Returns an empty set for the first frame.
        """
        if self._pending is not None:
            self.update(None)
        # OpenCV 5's Python binding takes images, not prebuilt pyramids, for the flow.
        pyr = gray
        self._prev_pyr, self._prev_gray = self._pyr, self._gray
        self._pyr, self._gray = pyr, gray
        if self._prev_pyr is None:
            self._reseed(gray)
            return _empty_pairs()
        self._reseed(self._prev_gray)
        return self.retry(predicted)

    def retry(self, predicted: np.ndarray | None) -> Pairs:
        """Track the same pair of frames again from another starting guess.

        With a predicted motion the tracks start close to where they end, so the flow is
        first solved on the full-resolution level alone (``predicted_levels``); when fewer
        than ``fallback_share`` of the tracks survive that (the motion changed more than
        the prediction allowed for), the whole pyramid is used, as without a prediction. The
        tracks still lost are then tracked once more from no motion at all.
        """
        self._pending = None
        if self._prev_pyr is None or len(self._pts) == 0:
            return _empty_pairs()
        s = self.settings
        src = self._pts
        win = self._windows()
        self.window_px = win[0]
        guess = None
        if predicted is not None:
            guess = cv2.perspectiveTransform(src.reshape(-1, 1, 2).astype(np.float64),
                                             predicted).reshape(-1, 2).astype(np.float32)
        dst, keep, _ = self._flow(src, guess, s.predicted_levels if guess is not None
                                    else s.levels, win)
        if guess is not None and s.predicted_levels < s.levels and \
                keep.sum() < s.fallback_share * len(src):
            again = self._flow(src, guess, s.levels, win)
            if again[1].sum() > keep.sum():
                dst, keep, _ = again
        if guess is not None and not keep.all() and \
                np.abs(guess - src).max() > s.retry_still_px:
            # Tracks a prediction of clear motion lost are tried again from where they were:
            # the prediction is the camera's motion as last fitted, and tracks that do not
            # share it (the still background when the fit followed an object) would
            # otherwise all be lost in the frame after, and the wrong fit would keep itself.
            # (Under a prediction of almost no motion, the lost tracks are those of fast
            # objects, better lost: on two real clips of fixed cameras, carphone and cup,
            # keeping them strayed the path 0.3 and 2.4 px further, measured on an earlier
            # form of this change.)
            lost = np.flatnonzero(~keep)
            found, ok, _ = self._flow(src[lost], None, s.levels, win,
                                      flow_parts(src[lost], self._gray.shape, s.levels,
                                                 win[0]))
            dst, keep = dst.copy(), keep.copy()
            dst[lost[ok]] = found[ok]
            keep[lost[ok]] = True
        self._pending = (dst, keep)
        return Pairs(src[keep].astype(np.float64), dst[keep].astype(np.float64),
                     self._ids[keep], self._bg[keep], self._memo[keep].copy())

    def _windows(self) -> tuple[int, int]:
        """The forward and backward Lucas–Kanade windows (pixels) for the live tracks:
        the settings' own, or at least ``faint_win_size`` when the median live track's
        corner strength at its detection is under ``faint_picture_strength`` (a picture
        whose detail lies at the noise; see :class:`TrackSettings`)."""
        s = self.settings
        if s.faint_picture_strength > 0 and len(self._strength) and \
                median(self._strength) < s.faint_picture_strength:
            return max(s.win_size, s.faint_win_size), max(s.back_win_size, s.faint_win_size)
        return s.win_size, s.back_win_size

    @property
    def faint(self) -> bool:
        """Whether the live tracks are followed with the faint picture's wider window."""
        s = self.settings
        return self._windows() != (s.win_size, s.back_win_size)

    def _flow(self, src: np.ndarray, guess: np.ndarray | None, levels: int,
              win: tuple[int, int],
              parts: list[tuple[np.ndarray, tuple[int, int, int, int]]] | None = None,
              ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Lucas–Kanade from the previous frame to this one, then the checks: returns the
        tracked points (k, 2) float32, which passed (k,) bool, and the photometric error.
        ``win``: the forward and backward windows (pixels, :meth:`_windows`).

        ``parts`` (:func:`flow_parts`): track each group of points on its rectangle of both
        frames only; the flow computes image gradients over the whole picture it is given,
        which for a handful of points costs far more than tracking them."""
        if parts is None:
            dst, keep, err = self._lk(src, guess, levels, None, win)
        else:
            dst = np.empty_like(src)
            keep = np.empty(len(src), bool)
            err = np.empty(len(src), np.float32)
            for ix, rect in parts:
                dst[ix], keep[ix], err[ix] = self._lk(
                    src[ix], None if guess is None else guess[ix], levels, rect, win)
        s = self.settings
        h, w = self._gray.shape
        keep &= (dst[:, 0] >= 0) & (dst[:, 0] <= w - 1) & (dst[:, 1] >= 0) & (dst[:, 1] <= h - 1)
        if keep.any():
            # Photometric check: a patch that changed much (occlusion, a reflection, a
            # blinking light) is not a trustworthy match even when the flow converged.
            med = median(err[keep])
            mad = median(np.abs(err[keep] - med)) + 1e-6
            keep &= err <= max(s.photo_max, med + 5.0 * 1.4826 * mad)
        return dst, keep, err

    def _lk(self, src: np.ndarray, guess: np.ndarray | None, levels: int,
            rect: tuple[int, int, int, int] | None, win: tuple[int, int],
            ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The flow of ``src`` (k, 2) float32, on the rectangle ``rect`` (x0, y0, x1, y1) of
        both frames or on the whole frames (None), and its backward check: the tracked
        points (frame coordinates), which were found and came back (k,) bool, and the
        photometric error (k,). ``win``: the forward and backward windows (pixels)."""
        s = self.settings
        criteria = (cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, s.lk_iterations,
                    s.lk_epsilon)
        prev, cur = self._prev_pyr, self._pyr
        if rect is not None:
            x0, y0, x1, y1 = rect
            prev, cur = prev[y0:y1, x0:x1], cur[y0:y1, x0:x1]
            origin = np.array([x0, y0], np.float32)
            src = src - origin
            guess = None if guess is None else guess - origin
        dst, st, err = cv2.calcOpticalFlowPyrLK(
            prev, cur, src, None if guess is None else guess.copy(),
            winSize=(win[0], win[0]), maxLevel=levels, criteria=criteria,
            minEigThreshold=s.min_eig,
            flags=0 if guess is None else cv2.OPTFLOW_USE_INITIAL_FLOW)
        # Tracking back from where each point landed, starting at its origin: a point that
        # does not return there slid or jumped. Started at the origin, the check needs no
        # coarser levels; it keeps the forward window, since on sharp patterns another
        # window settles a few tenths of a pixel elsewhere and would read as a failure.
        keep = st.ravel() == 1
        if s.backward_check:
            back, st_back, _ = cv2.calcOpticalFlowPyrLK(
                cur, prev, dst, src.copy(), winSize=(win[1], win[1]),
                maxLevel=s.back_levels, criteria=criteria, minEigThreshold=s.min_eig,
                flags=cv2.OPTFLOW_USE_INITIAL_FLOW)
            fb = np.linalg.norm(back - src, axis=1)
            keep &= (st_back.ravel() == 1) & (fb < s.fb_max_px)
        if rect is not None:
            dst = dst + origin
        return dst, keep, err.ravel()

    @property
    def live(self) -> int:
        """Tracks offered for the current pair (before the checks)."""
        return len(self._pts)

    @property
    def frames(self) -> tuple[np.ndarray | None, np.ndarray | None]:
        """The previous and current analysis frames."""
        return self._prev_gray, self._gray

    def update(self, moved_with_camera: np.ndarray | None,
               memo: np.ndarray | None = None) -> None:
        """Advance the tracks to this frame, with which kept pairs fitted the camera motion.

        ``None`` means the fit was not trustworthy: histories are left as they are.
        ``memo`` (k, MEMO_WIDTH), one row per kept pair, replaces what the caller keeps for
        those tracks (returned as :attr:`Pairs.memo` next time); None leaves it as it was.
        """
        if self._pending is None:
            return
        dst, keep = self._pending
        self._pending = None
        bg = self._bg[keep]
        if moved_with_camera is not None and len(bg):
            bg = 0.7 * bg + 0.3 * moved_with_camera.astype(np.float64)
        self._pts = dst[keep]
        self._ids = self._ids[keep]
        self._bg = bg
        self._strength = self._strength[keep]
        self._memo = self._memo[keep] if memo is None else np.asarray(memo, np.float64)

    def _reseed(self, gray: np.ndarray) -> None:
        """Add corners where tracks have thinned out (few overall, or cells emptied)."""
        s = self.settings
        h, w = gray.shape
        n_cells = s.grid[0] * s.grid[1]
        counts = np.bincount(cell_index(self._pts, (w, h), s.grid), minlength=n_cells)
        # A picture poorer in corners than max_corners would otherwise be searched again on
        # every frame, for nothing new.
        self._since_detect += 1
        live = len(self._pts)
        few = live < s.reseed_share * min(s.max_corners, max(self._reached, 1))
        due = self._since_detect >= s.refresh_frames
        few |= live < s.max_corners and due
        # Full, yet cells hold no track: an object crowding the tracks it carries into its
        # own cells while the picture it uncovers goes untracked.
        full = live >= s.max_corners and due and bool((counts == 0).any())
        gaps = False
        if self._had_cells is not None:
            lost = self._had_cells & (counts == 0)
            gaps = lost.sum() > s.empty_cells_share * max(1, self._had_cells.sum())
        if not (few or gaps or full):
            return
        mask = np.full((h, w), 255, np.uint8) if self.mask is None else self.mask.copy()
        if len(self._pts):
            # Keep new corners a spacing away from live tracks: mark the tracks, grow the
            # marks into discs, cut them out of the mask.
            radius = int(max(2.0, s.min_distance_frac * w))
            marks = np.zeros((h, w), np.uint8)
            xy = np.rint(self._pts).astype(int)
            marks[np.clip(xy[:, 1], 0, h - 1), np.clip(xy[:, 0], 0, w - 1)] = 1
            disc = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * radius + 1,) * 2)
            mask[cv2.dilate(marks, disc) > 0] = 0
        count = s.max_corners - len(self._pts)
        if count <= 0:
            # One corner for each cell without a track, beyond max_corners: the tracks
            # are fewer again once the object's are lost.
            cx = np.minimum(np.arange(w) * s.grid[0] // w, s.grid[0] - 1)
            cy = np.minimum(np.arange(h) * s.grid[1] // h, s.grid[1] - 1)
            mask[counts[cy[:, None] * s.grid[0] + cx[None, :]] > 0] = 0
            count = int((counts == 0).sum())
        strength = corner_strength(gray, s) if count > 0 else None
        if strength is not None:
            # The still-detail check keeps the whole picture's floor, the one its own
            # thresholds were tried with (the quieter cells' floor is for tracking).
            self.floor = strength_floor(strength[0], s, factor=STILL_DETAIL_NOISE_FLOOR)
        new = detect(gray, s, mask, count, strength)
        if len(new):
            self._pts = np.concatenate([self._pts, new]).astype(np.float32)
            self._ids = np.concatenate([self._ids, self._next_id + np.arange(len(new))])
            self._bg = np.concatenate([self._bg, np.full(len(new), 0.5)])
            xi = np.clip(np.rint(new[:, 0]).astype(int), 0, w - 1)
            yi = np.clip(np.rint(new[:, 1]).astype(int), 0, h - 1)
            self._strength = np.concatenate([self._strength, strength[0][yi, xi]])
            self._memo = np.concatenate([self._memo, np.full((len(new), MEMO_WIDTH), np.nan)])
            self._next_id += len(new)
        counts = np.bincount(cell_index(self._pts, (w, h), s.grid), minlength=n_cells)
        self._had_cells = counts > 0
        self._reached = len(self._pts)
        self._since_detect = 0


#: Tracking at each analysis level (:data:`stabilize.config.ANALYSIS_LEVELS`). ``thorough``
#: follows 1500 tracks with a 21-px window and looks for new corners every 10 frames;
#: ``balanced`` 500 tracks with an 11-px window, still checked backwards, new corners every
#: 30 frames (unless tracks thin out); ``fast`` 400 such tracks. Without the backward check
#: tracks survive scene cuts (none of the five cuts of a real clip was found, measured), so
#: every level keeps it. Chosen
#: on the 720p accuracy clip of ``tests/test_tracking_accuracy.py`` and checked on real
#: footage (figures in the README, measured).
_LEVELS = {
    "fast": TrackSettings(max_corners=400, win_size=11, back_win_size=11, refresh_frames=30,
                          texture_check_share=0.6),
    "balanced": TrackSettings(max_corners=500, win_size=11, back_win_size=11,
                              refresh_frames=30, texture_check_share=0.6),
    "thorough": TrackSettings(),
}


def track_settings_for(level: str) -> TrackSettings:
    """The tracking settings of an analysis level (``"fast"``, ``"balanced"``,
    ``"thorough"``)."""
    try:
        return _LEVELS[level]
    except KeyError:
        raise ValueError(f"unknown analysis level {level!r}; expected one of "
                         f"{', '.join(_LEVELS)}") from None


def to_full_resolution(pts: np.ndarray, scale: tuple[float, float]) -> np.ndarray:
    """Analysis-frame points -> full-resolution pixels: x = (x_a + 0.5) / sx − 0.5."""
    sx, sy = scale
    out = np.empty_like(pts, dtype=np.float64)
    out[:, 0] = (pts[:, 0] + 0.5) / sx - 0.5
    out[:, 1] = (pts[:, 1] + 0.5) / sy - 0.5
    return out


def to_analysis_resolution(pts: np.ndarray, scale: tuple[float, float]) -> np.ndarray:
    """Full-resolution points -> analysis-frame pixels (the inverse of
    :func:`to_full_resolution`): x_a = (x + 0.5) · sx − 0.5."""
    sx, sy = scale
    return np.stack([(pts[:, 0] + 0.5) * sx - 0.5, (pts[:, 1] + 0.5) * sy - 0.5], axis=1)


def global_shift(prev: np.ndarray, cur: np.ndarray, max_side: int = 320) -> tuple[float, float,
                                                                                    float]:
    """Whole-frame shift (dx, dy) from ``prev`` to ``cur`` in their pixels, by phase
    correlation (Kuglin and Hines, "The phase correlation image alignment method", 1975) on a
    copy at most ``max_side`` wide, and the correlation peak's response (0 to 1).

    Used to restart tracking when the motion was too fast for the pyramid to follow.
    """
    h, w = prev.shape
    f = min(1.0, max_side / w)
    size = (max(16, int(round(w * f))), max(16, int(round(h * f))))
    a = cv2.resize(prev, size, interpolation=cv2.INTER_AREA).astype(np.float32)
    b = cv2.resize(cur, size, interpolation=cv2.INTER_AREA).astype(np.float32)
    window = cv2.createHanningWindow(size, cv2.CV_32F)
    (dx, dy), response = cv2.phaseCorrelate(a, b, window)
    return dx * w / size[0], dy * h / size[1], float(response)
