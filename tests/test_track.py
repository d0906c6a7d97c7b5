"""Tracking front end: bucketing, forward-backward tracking, analysis-to-full mapping."""

from dataclasses import replace

import cv2
import numpy as np
import pytest

import stabilize.track as track
from stabilize.geometry import rescale
from stabilize.track import (
    Tracker,
    TrackSettings,
    bucket,
    cell_index,
    cell_keep,
    cell_maxima,
    detect,
    global_shift,
    ignore_mask,
    peak_corners,
    strength_floor,
    strength_map,
    to_analysis_resolution,
    to_full_resolution,
)


def _texture(h=270, w=480, seed=0, blur=2.5):
    # Blurred enough that sub-pixel shifts by interpolation are exact to well below 0.01 px.
    rng = np.random.default_rng(seed)
    img = rng.normal(0, 1, (h, w))
    img = cv2.GaussianBlur(img, (0, 0), blur)
    return np.clip(128 + img / img.std() * 45, 0, 255).astype(np.uint8)


def _shift(img, dx, dy):
    """Exact sub-pixel shift (content moves by +dx, +dy) by the Fourier shift theorem;
    OpenCV's warps quantise sub-pixel positions to 1/32 px, too coarse for these checks."""
    f = np.fft.fft2(img.astype(np.float64))
    fy = np.fft.fftfreq(img.shape[0])[:, None]
    fx = np.fft.fftfreq(img.shape[1])[None, :]
    out = np.real(np.fft.ifft2(f * np.exp(-2j * np.pi * (fx * dx + fy * dy))))
    return np.clip(np.rint(out), 0, 255).astype(np.uint8)


def test_bucketing_caps_each_cell_and_puts_every_cells_strongest_first():
    pts = np.array([[1, 1], [2, 2], [3, 3], [60, 60], [61, 61], [80, 10]], float)
    kept = bucket(pts, (100, 100), (2, 2), per_cell=2)
    assert len(kept) == 5
    # Each cell's strongest (the first given) before any cell's second, so that a caller
    # keeping only the first few still has every cell with corners.
    assert list(cell_index(kept, (100, 100), (2, 2))) == [0, 3, 1, 0, 3]
    np.testing.assert_array_equal(kept[:3], pts[[0, 3, 5]])


def test_bucketing_deals_the_first_turns_out_cell_by_cell():
    pts = np.array([[1, 1], [2, 2], [3, 3], [4, 4], [60, 60], [61, 61], [62, 62]], float)
    kept = bucket(pts, (100, 100), (2, 2), per_cell=4, turns=2)
    # Two turns: each cell's strongest, each cell's second, then the rest as given.
    assert list(cell_index(kept, (100, 100), (2, 2))) == [0, 3, 0, 3, 0, 0, 3]
    np.testing.assert_array_equal(kept[:4], pts[[0, 4, 1, 5]])


def test_a_board_beside_a_wall_does_not_take_most_of_the_tracks():
    # A strongly textured board over the left half, a wall of a third of its contrast on
    # the right, both with corners in every cell: the wall gets a fair part of the tracks
    # asked for (with each cell's strongest alone dealt out first, it got 14 %; now 43 %,
    # measured), so it can still be told from the board as the board grows over it.
    img = (_texture(seed=1).astype(np.float32) * 0.3 + 90).astype(np.uint8)
    busy = _texture(seed=2, blur=1.2)
    h, w = img.shape
    img[:, : w // 2] = busy[:, : w // 2]
    pts = detect(img, TrackSettings(max_corners=500), None, 500)
    assert (pts[:, 0] >= w // 2).mean() > 0.4


def test_corners_spread_over_a_frame_with_one_busy_object():
    # A flat-ish background with a busy patch: a global strongest-N pick would take the
    # patch alone; bucketing keeps corners everywhere there is texture.
    img = (_texture(seed=1).astype(np.float32) * 0.15 + 100).astype(np.uint8)
    busy = _texture(seed=2)
    img[60:200, 150:330] = busy[60:200, 150:330]
    pts = detect(img, TrackSettings(max_corners=600), None, 600)
    outside = ~((pts[:, 0] > 150) & (pts[:, 0] < 330) & (pts[:, 1] > 60) & (pts[:, 1] < 200))
    assert outside.sum() > 0.3 * len(pts)


def test_a_few_corners_asked_for_still_reach_the_quiet_half_of_the_frame():
    # A strongly textured board over half the frame, a softer wall beside it: the board's
    # corners are the strongest of all, yet the first corners of the list reach every cell
    # of the wall that has any.
    img = (_texture(seed=1).astype(np.float32) * 0.3 + 90).astype(np.uint8)
    busy = _texture(seed=2)
    h, w = img.shape
    img[:, : w // 2] = busy[:, : w // 2]
    settings = TrackSettings(max_corners=600)
    pts = detect(img, settings, None, 200)
    every = detect(img, settings, None, 10_000)
    quiet = every[:, 0] >= w // 2 + 8
    size = (w, h)
    want = set(cell_index(every[quiet], size, settings.grid).tolist())
    got = set(cell_index(pts, size, settings.grid).tolist())
    assert len(want) > 10 and want <= got


def _board_beside_faint_wall(contrast=0.3):
    """A board of coarse random blocks over the left half of the picture beside a wall of
    blurred texture at ``contrast`` of full range (grey, 270×480); and the half-width."""
    rng = np.random.default_rng(5)
    h, w = 270, 480
    wall = cv2.GaussianBlur(rng.uniform(0, 255, (h, w)).astype(np.float32), (0, 0), 3.0)
    wall = cv2.normalize(wall, None, 40, 210, cv2.NORM_MINMAX)
    wall = 128 + contrast * (wall - 128)
    board = cv2.resize(rng.integers(0, 255, (h // 6 + 1, w // 12 + 1)).astype(np.uint8),
                       (w // 2, h), interpolation=cv2.INTER_CUBIC)
    img = wall.copy()
    img[:, : w // 2] = board
    img = np.clip(img + rng.normal(0, 1.5, img.shape), 0, 255).astype(np.uint8)
    return img, w // 2


def test_the_noise_floor_is_judged_on_the_quieter_parts_of_the_picture():
    # A strongly textured board over half the picture raises the whole picture's median
    # strength above every corner of a faint wall beside it; the floor from the quieter
    # cells is the wall's own. On a picture textured alike all over the two rules agree.
    s = TrackSettings()
    img, half = _board_beside_faint_wall()
    strength = track.strength_map(img, s.block_size)
    whole = strength_floor(strength, s)
    quiet = strength_floor(strength, s, s.grid)
    wall_best = float(strength[8:-8, half + 8:-8].max())
    assert whole > wall_best and quiet < 0.2 * whole
    even = track.strength_map(_texture(seed=3), s.block_size)
    assert strength_floor(even, s, s.grid) == pytest.approx(strength_floor(even, s), rel=0.25)


def test_tracks_the_prediction_loses_are_tried_from_no_motion():
    # The prediction is an object's motion (12 px); the still wall's tracks do not share it
    # and must not be lost for it, or a fit that followed the object keeps itself.
    a = _texture()
    tr = Tracker(track.track_settings_for("balanced"))
    tr.step(a)
    guess = np.array([[1.0, 0.0, 12.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
    pairs = tr.step(a.copy(), guess)
    assert len(pairs) > 0.9 * tr.live
    assert np.abs(pairs.dst - pairs.src).max() < 0.05


def test_a_full_tracker_still_seeds_the_cells_left_without_tracks():
    # All tracks on the left half (the right was masked when they were seeded): once the
    # right half may be used again, its cells get a corner each at the next refresh, even
    # though the tracker already follows as many tracks as it aims for.
    img = _texture(seed=6)
    h, w = img.shape
    s = TrackSettings(max_corners=60, refresh_frames=3, reseed_share=0.1)
    left = np.zeros((h, w), np.uint8)
    left[:, : w // 2] = 255
    tr = Tracker(s, left)
    tr.step(img)
    assert tr.live == s.max_corners
    tr.set_mask(None)
    for _ in range(4):
        tr.step(img)
        tr.update(None)
    right = cell_index(tr._pts[tr._pts[:, 0] >= w // 2], (w, h), s.grid)
    want = {c for c in range(s.grid[0] * s.grid[1]) if c % s.grid[0] >= s.grid[0] // 2}
    assert set(right.tolist()) == want
    assert tr.live > s.max_corners


def test_cell_maxima_use_the_cells_of_cell_index():
    rng = np.random.default_rng(3)
    strength = rng.uniform(0, 1, (37, 53))
    grid = (5, 4)
    ys, xs = np.mgrid[0:37, 0:53]
    cells = cell_index(np.c_[xs.ravel(), ys.ravel()].astype(float), (53, 37), grid)
    expected = np.full(20, -np.inf)
    np.maximum.at(expected, cells, strength.ravel())
    np.testing.assert_array_equal(cell_maxima(strength, grid), expected)


def test_cell_keep_judges_weak_cells_by_their_own_best_above_the_floor():
    strength = np.array([1.0, 0.002, 0.004, 0.0005, 0.004])
    cells = np.array([0, 0, 1, 1, 2])
    cell_max = np.array([1.0, 0.004, 0.004])
    kw = dict(quality=0.01, cell_quality=0.1)
    # Cell 0: its weak corner is judged against the frame's strongest (1.0) and dropped;
    # cells 1 and 2: corners near their own best are kept, one below the floor is not.
    keep = cell_keep(strength, cells, cell_max, 1.0, floor=0.001, **kw)
    assert keep.tolist() == [True, False, True, False, True]
    assert cell_keep(strength, cells, cell_max, 1.0, floor=0.01, **kw).tolist() == [
        True, False, False, False, False]
    assert cell_keep(strength, cells, cell_max, 1.0, floor=0.001, quality=0.003,
                     cell_quality=2.0).tolist() == [True, False, True, False, True]
    # A point on an edge (one eigenvalue far below the other) is not a corner of its cell.
    edge = cell_keep(strength, cells, cell_max, 1.0, floor=0.001,
                     isotropy=np.array([1.0, 1.0, 0.05, 1.0, 1.0]), min_isotropy=0.2, **kw)
    assert edge.tolist() == [True, False, False, False, True]
    # In a cell the frame-wide rule already filled, the per-cell rule adds nothing.
    three = np.array([1.0, 0.9, 0.002])
    crowded = cell_keep(three, np.zeros(3, int), np.array([1.0]), 1.0, quality=0.5,
                        cell_quality=0.001, floor=0.0, sparse_below=2)
    assert crowded.tolist() == [True, True, False]
    assert cell_keep(three, np.zeros(3, int), np.array([1.0]), 1.0, quality=0.5,
                     cell_quality=0.001, floor=0.0, sparse_below=3).all()


def test_hazy_scene_keeps_corners_beside_high_contrast_text():
    # A low-contrast picture with a strip of bright text along the bottom: judged against the
    # frame's strongest corner alone, nearly every corner would be on the text.
    rng = np.random.default_rng(4)
    img = np.full((270, 480), 160.0)
    for x, y, r, d in zip(rng.uniform(0, 480, 400), rng.uniform(0, 235, 400),
                          rng.uniform(2, 6, 400), rng.choice([-10.0, 10.0], 400),
                          strict=True):
        cv2.circle(img, (int(x), int(y)), int(r), 160.0 + d, -1, cv2.LINE_AA)
    img = np.clip(img + rng.normal(0, 1.5, img.shape), 0, 255).astype(np.uint8)
    img[240:] = 20
    cv2.putText(img, "ALT 48.3m  GS 0.6m/s  HDG 090", (5, 262), cv2.FONT_HERSHEY_SIMPLEX, 0.6,
                235, 1, cv2.LINE_AA)
    pts = detect(img, TrackSettings(max_corners=600), None, 600)
    above = pts[:, 1] < 235
    assert above.sum() > 0.6 * len(pts)
    cells = np.unique(cell_index(pts[above], (480, 270), TrackSettings().grid))
    assert len(cells) > 0.8 * 16 * 8
    # A flat picture with only noise gets no corners from the per-cell rule.
    flat = np.clip(160 + rng.normal(0, 1.5, (270, 480)), 0, 255)
    flat = flat.astype(np.uint8)
    flat[240:] = img[240:]
    noisy = detect(flat, TrackSettings(max_corners=600), None, 600)
    assert (noisy[:, 1] < 235).sum() < 0.05 * (16 * 8 * 16)


def test_tracker_follows_a_subpixel_shift():
    a = _texture()
    b = _shift(a, 1.37, -0.62)
    tr = Tracker()
    tr.step(a)
    pairs = tr.step(b)
    d = np.median(pairs.dst - pairs.src, axis=0)
    assert len(pairs) > 200
    np.testing.assert_allclose(d, [1.37, -0.62], atol=0.02)
    assert np.all(pairs.background == 0.5)  # new tracks have no history yet
    tr.update(np.ones(len(pairs), bool))
    pairs2 = tr.step(_shift(a, 2.74, -1.24))
    assert np.all(pairs2.background[: len(pairs2)] > 0.5)


def _faint_pair(amplitude, noise=1.5, shift=(0.7, -0.4), h=270, w=480, seed=0):
    """Two frames of a blurred texture of ``amplitude`` grey levels (standard deviation),
    the second shifted by ``shift`` (exact, Fourier), each with its own Gaussian noise of
    ``noise`` grey levels: a hazy picture whose detail lies near the sensor noise."""
    rng = np.random.default_rng(seed)
    img = cv2.GaussianBlur(rng.normal(0, 1, (h, w)), (0, 0), 2.5)
    base = 128 + img / img.std() * amplitude
    f = np.fft.fft2(base)
    fy, fx = np.fft.fftfreq(h)[:, None], np.fft.fftfreq(w)[None, :]
    moved = np.real(np.fft.ifft2(f * np.exp(-2j * np.pi * (fx * shift[0] + fy * shift[1]))))
    return tuple(np.clip(np.rint(x + rng.normal(0, noise, (h, w))), 0, 255).astype(np.uint8)
                 for x in (base, moved))


@pytest.mark.parametrize("amplitude, faint", [(3.0, True), (20.0, False)])
def test_a_picture_at_the_noise_is_tracked_with_the_wider_window(amplitude, faint):
    # Detail of 3 grey levels under noise of 1.5: the corners found lie at the noise
    # (median strength about 9e-5), and the 11-px window of `balanced` reads each track
    # 0.26 px off (median), the 31-px one 0.09 px (measured). A picture of clear detail
    # keeps the level's own window (and its cost).
    a, b = _faint_pair(amplitude)
    errors = {}
    for wide in (True, False):
        settings = track.track_settings_for("balanced")
        if not wide:
            settings = replace(settings, faint_picture_strength=0.0)
        tr = Tracker(settings)
        tr.step(a)
        pairs = tr.step(b)
        assert tr.faint == (wide and faint)
        errors[wide] = np.median(np.linalg.norm(pairs.dst - pairs.src - [0.7, -0.4], axis=1))
    if faint:
        assert errors[True] < 0.5 * errors[False]
    else:
        assert errors[True] == errors[False]


def test_forward_backward_check_drops_occluded_tracks():
    a = _texture()
    b = _shift(a, 2.0, 0.0)
    b[100:170, 200:300] = 128  # an occluder appears
    tr = Tracker()
    tr.step(a)
    pairs = tr.step(b)
    inside = ((pairs.src[:, 0] > 205) & (pairs.src[:, 0] < 295)
              & (pairs.src[:, 1] > 105) & (pairs.src[:, 1] < 165))
    # Only a few tracks at the occluder's rim may survive; none from its inside.
    assert inside.sum() <= 3


def test_ignore_mask_in_analysis_pixels():
    m = ignore_mask((480, 270), ((0, 1000, 1920, 80),), (0.25, 0.25))
    assert m.shape == (270, 480)
    assert (m[250:, :] == 0).all() and (m[:249, :] == 255).all()


@pytest.mark.parametrize("scale", [(0.5, 0.5), (0.75, 0.75), (960 / 1920, 540 / 1080)])
def test_subpixel_motion_maps_exactly_to_full_resolution(scale):
    """A full-resolution motion seen on the reduced copy maps back exactly (pixel centres)."""
    sx, sy = scale
    full = np.array([[1.001, -0.002, 3.3], [0.002, 1.001, -1.7], [0.0, 0.0, 1.0]])
    small = rescale(full, scale)
    pts_full = np.array([[0.0, 0.0], [1919.0, 1079.0], [640.25, 300.5]])
    pts_small = np.c_[(pts_full[:, 0] + 0.5) * sx - 0.5, (pts_full[:, 1] + 0.5) * sy - 0.5]
    np.testing.assert_allclose(to_full_resolution(pts_small, scale), pts_full, atol=1e-9)
    np.testing.assert_allclose(to_analysis_resolution(pts_full, scale), pts_small, atol=1e-9)
    moved_small = cv2.perspectiveTransform(pts_small[None], small)[0]
    moved_full = cv2.perspectiveTransform(pts_full[None], full)[0]
    np.testing.assert_allclose(to_full_resolution(moved_small, scale), moved_full, atol=1e-9)


def test_subpixel_motion_through_a_real_reduction():
    """Tracking on an area-reduced copy recovers a full-resolution sub-pixel shift."""
    big = _texture(540, 960, seed=3, blur=5.0)
    moved = _shift(big, 0.8, 0.3)
    a = cv2.resize(big, (480, 270), interpolation=cv2.INTER_AREA)
    b = cv2.resize(moved, (480, 270), interpolation=cv2.INTER_AREA)
    tr = Tracker()
    tr.step(a)
    pairs = tr.step(b)
    d = np.median(to_full_resolution(pairs.dst, (0.5, 0.5))
                  - to_full_resolution(pairs.src, (0.5, 0.5)), axis=0)
    np.testing.assert_allclose(d, [0.8, 0.3], atol=0.03)


def test_phase_correlation_restart_guess():
    a = _texture()
    b = _shift(a, 37.0, -12.0)
    dx, dy, response = global_shift(a, b)
    assert abs(dx - 37.0) < 1.5 and abs(dy + 12.0) < 1.5 and response > 0.2


def test_corner_poor_picture_is_not_searched_on_every_frame(monkeypatch):
    # Fewer corners than max_corners: the tracker must not run the detector again each
    # frame for nothing new, yet it looks again now and then for picture entering view.
    calls = []
    real = track.detect
    monkeypatch.setattr(track, "detect", lambda *a, **k: calls.append(1) or real(*a, **k))
    img = np.full((270, 480), 110, np.uint8)
    img[100:170, 200:280] = _texture(seed=4)[100:170, 200:280]
    s = TrackSettings(refresh_frames=10)
    tr = Tracker(s)
    for t in range(31):
        tr.step(_shift(img, 0.3 * t, 0.0))
        tr.update(None)
    assert 0 < tr.live < 0.8 * s.max_corners
    assert 2 <= len(calls) <= 5


def test_wrong_prediction_falls_back_to_the_pyramid():
    # A prediction 12 px off is beyond a single-level flow's reach; the tracker must notice
    # that most tracks failed and solve again over the whole pyramid.
    a = _texture()
    b = _shift(a, 3.25, -1.5)
    tr = Tracker()
    tr.step(a)
    wrong = np.array([[1.0, 0.0, 15.25], [0.0, 1.0, -1.5], [0.0, 0.0, 1.0]])
    pairs = tr.step(b, wrong)
    assert len(pairs) > 0.8 * tr.live
    d = pairs.dst - pairs.src
    assert np.median(np.abs(d[:, 0] - 3.25)) < 0.02 and np.median(np.abs(d[:, 1] + 1.5)) < 0.02


@pytest.mark.parametrize("shape", [(540, 960), (37, 50), (130, 129)])
def test_strength_map_on_tiles_is_the_whole_picture_map(shape):
    """The corner strength worked out tile by tile (each with a margin) is OpenCV's map of
    the whole picture to float rounding; given a region, only the tiles it reaches are
    filled, the rest left at nought."""
    img = _texture(*shape, seed=4)
    full = cv2.cornerMinEigenVal(img, 7, ksize=3)
    tiled = strength_map(img, 7)
    np.testing.assert_allclose(tiled, full, rtol=0, atol=1e-6 * float(full.max()))
    where = np.zeros(shape, np.uint8)
    where[: shape[0] // 3, : shape[1] // 3] = 1
    part = strength_map(img, 7, where)
    sel = where > 0
    np.testing.assert_allclose(part[sel], full[sel], rtol=0, atol=1e-6 * float(full.max()))
    if shape[0] > 2 * track.STRENGTH_TILE and shape[1] > 2 * track.STRENGTH_TILE:
        assert not part[-1, -1] and not part[-track.STRENGTH_TILE:].any()


def _opencv_corners(img, quality, min_dist, mask=None):
    pts = cv2.goodFeaturesToTrack(img, maxCorners=0, qualityLevel=quality,
                                  minDistance=min_dist, mask=mask, blockSize=7)
    return np.empty((0, 2), np.float32) if pts is None else pts.reshape(-1, 2)


@pytest.mark.parametrize("quality, min_dist, masked", [
    (0.003, 4.0, False), (0.01, 2.0, False), (0.05, 7.5, False), (0.003, 4.0, True),
])
def test_peak_corners_are_opencvs_corners(quality, min_dist, masked):
    """On a map of the whole picture, the peaks thinned in rounds are exactly the corners
    OpenCV's detector picks one at a time, in the same order (a random texture has no ties),
    with a mask as well (a masked stronger neighbour still hides a corner beside it)."""
    img = _texture(270, 480, seed=9, blur=1.5)
    img[100:180, 200:330] = 128  # a flat patch: no corners inside, some along its edge
    strength = cv2.cornerMinEigenVal(img, 7, ksize=3)
    mask = None
    if masked:
        mask = np.full(img.shape, 255, np.uint8)
        mask[40:120, 60:200] = 0
    top = float(strength.max() if mask is None else strength[mask > 0].max())
    ours = peak_corners(strength, top * quality, min_dist, mask)
    cv = _opencv_corners(img, quality, min_dist, mask)
    assert len(cv) > 100
    np.testing.assert_array_equal(ours, cv)


def test_peak_corners_break_ties_in_row_major_order():
    """Two equal peaks closer than the spacing: the one earlier in row-major order is kept;
    farther apart, both."""
    strength = np.zeros((40, 60), np.float32)
    strength[10, 20] = strength[10, 23] = strength[12, 21] = 1.0
    strength[30, 40] = 0.5
    assert peak_corners(strength, 0.1, 4.0).tolist() == [[20.0, 10.0], [40.0, 30.0]]
    assert peak_corners(strength, 0.1, 2.5).tolist() == [[20.0, 10.0], [23.0, 10.0],
                                                          [40.0, 30.0]]
    assert peak_corners(strength, 0.1, 2.0).tolist() == [[20.0, 10.0], [23.0, 10.0],
                                                          [21.0, 12.0], [40.0, 30.0]]
    assert peak_corners(strength, 0.6, 4.0).tolist() == [[20.0, 10.0]]
    assert peak_corners(np.zeros((20, 20), np.float32), 0.0, 4.0).shape == (0, 2)


def test_flow_parts_hold_each_point_with_its_margin_on_the_pyramid_grid():
    pts = np.array([[100.3, 80.2], [130.7, 90.1], [600.5, 400.9]], np.float32)
    parts = track.flow_parts(pts, (540, 960), levels=2, win_size=21)
    # The two close points share a rectangle; the far one has its own.
    assert sorted(ix.tolist() for ix, _ in parts) == [[0, 1], [2]]
    margin = (21 // 2 + 4) * 4 + track.FLOW_REACH_PX
    for ix, (x0, y0, x1, y1) in parts:
        assert x0 % 4 == 0 and y0 % 4 == 0
        assert 0 <= x0 and 0 <= y0 and x1 <= 960 and y1 <= 540
        p = pts[ix]
        assert (p[:, 0] - margin >= x0).all() or x0 == 0
        assert (p[:, 1] - margin >= y0).all() or y0 == 0
        assert (p[:, 0] + margin < x1).all() or x1 == 960
        assert (p[:, 1] + margin < y1).all() or y1 == 540


def test_flow_parts_give_way_to_the_whole_frame_when_they_would_cover_much_of_it():
    rng = np.random.default_rng(3)
    spread = rng.uniform(0, [960, 540], size=(12, 2)).astype(np.float32)
    assert track.flow_parts(spread, (540, 960), 2, 21) is None
    many = rng.uniform(400, 420, size=(track.FLOW_PARTS_MAX_POINTS + 1, 2)).astype(np.float32)
    assert track.flow_parts(many, (540, 960), 2, 21) is None
    assert track.flow_parts(np.zeros((0, 2), np.float32), (540, 960), 2, 21) is None


def test_flow_on_parts_is_the_flow_on_the_whole_frame():
    # Same pixels on every pyramid level inside a rectangle, so the same flow up to float32
    # rounding of the coordinates (the rectangle's are smaller numbers).
    a = _texture(h=540, w=960, seed=4)
    b = _shift(a, 2.6, -1.3)
    pts = np.array([[40.5, 30.25], [50.0, 60.0], [700.2, 500.7], [955.0, 270.0]], np.float32)
    kw = dict(winSize=(21, 21), maxLevel=2, criteria=(3, 20, 0.01), minEigThreshold=1e-4)
    whole, st, _ = cv2.calcOpticalFlowPyrLK(a, b, pts, None, **kw)
    parts = track.flow_parts(pts, a.shape, 2, 21)
    assert len(parts) == 3
    for ix, (x0, y0, x1, y1) in parts:
        o = np.array([x0, y0], np.float32)
        got, st_p, _ = cv2.calcOpticalFlowPyrLK(a[y0:y1, x0:x1], b[y0:y1, x0:x1], pts[ix] - o,
                                                None, **kw)
        assert (st_p.ravel() == st.ravel()[ix]).all()
        np.testing.assert_allclose(got + o, whole[ix], atol=2e-3)


def test_the_few_tracks_a_prediction_loses_are_found_again_on_parts_of_the_frame(monkeypatch):
    # The camera moved 6 px; a small still sign (a patch of its own texture) stays put. Its
    # few tracks are lost under the prediction and found again from no motion, on a part of
    # the frames only.
    scene = _texture(h=540, w=960, seed=5)
    a = scene.copy()
    b = _shift(scene, 6.0, 0.0)
    sign = _texture(h=60, w=80, seed=9, blur=1.5)
    a[200:260, 400:480] = sign
    b[200:260, 400:480] = sign
    used = []
    real = track.flow_parts

    def spy(*args):
        got = real(*args)
        used.append(got)
        return got

    monkeypatch.setattr(track, "flow_parts", spy)
    tr = Tracker(track.track_settings_for("balanced"))
    tr.step(a)
    guess = np.array([[1.0, 0.0, 6.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
    pairs = tr.step(b, guess)
    on_sign = (pairs.src[:, 0] > 412) & (pairs.src[:, 0] < 468) & (pairs.src[:, 1] > 212) & \
        (pairs.src[:, 1] < 248)
    assert used and used[0] is not None
    assert on_sign.sum() >= 3
    np.testing.assert_allclose(pairs.dst[on_sign], pairs.src[on_sign], atol=0.05)
