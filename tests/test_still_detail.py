"""The still-detail check: faint detail away from the tracks, still or moved with the fit.

Scenes are drawn here: a plain wall (a faint lighting gradient, a few small marks, sensor
noise) with a densely textured board in front of it.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from stabilize.still_detail import (
    StillDetailSettings,
    find_detail,
    find_texture,
    is_plain,
    judge,
    judge_texture,
    on_surround,
    patch_agreement,
    spread_maxima,
    surround_grey,
)
from stabilize.track import corner_strength, track_settings_for

W, H = 640, 360
MARKS = ((60, 40), (580, 50), (70, 320), (590, 300), (320, 30), (300, 335))
BOARD = (200, 110, 240, 140)  # x, y, w, h at rest
SETTINGS = track_settings_for("balanced")


def _wall(marks=MARKS, contrast: float = 25.0) -> np.ndarray:
    yy, xx = np.mgrid[0:H, 0:W].astype(np.float32)
    wall = 150 + 20 * xx / W - 10 * yy / H
    for x, y in marks:
        cv2.circle(wall, (x, y), 3, float(150 - contrast), -1, cv2.LINE_AA)
    return wall


def _frame(wall: np.ndarray, board_at: tuple[int, int], camera: tuple[float, float] = (0, 0),
           seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """A frame (uint8) and the board's track positions in it (corners of a grid on it)."""
    rng = np.random.default_rng(99)
    bx, by, bw, bh = BOARD
    texture = cv2.resize(rng.integers(0, 255, (bh // 6, bw // 6)).astype(np.float32),
                         (bw, bh), interpolation=cv2.INTER_CUBIC)
    img = wall.copy()
    x0, y0 = board_at
    img[y0:y0 + bh, x0:x0 + bw] = texture
    if camera != (0, 0):
        m = np.float32([[1, 0, camera[0]], [0, 1, camera[1]]])
        img = cv2.warpAffine(img, m, (W, H), flags=cv2.INTER_LINEAR,
                             borderMode=cv2.BORDER_REFLECT)
    noise = np.random.default_rng(seed).normal(0, 1.5, img.shape)
    gx, gy = np.meshgrid(np.linspace(x0 + 8, x0 + bw - 8, 12), np.linspace(y0 + 8, y0 + bh - 8, 8))
    tracks = np.c_[gx.ravel(), gy.ravel()] + np.asarray(camera)
    return np.clip(img + noise, 0, 255).astype(np.uint8), tracks


def _shift(dx: float, dy: float) -> np.ndarray:
    return np.array([[1.0, 0.0, dx], [0.0, 1.0, dy], [0.0, 0.0, 1.0]])


def test_the_wall_marks_are_found_and_not_the_board():
    img, tracks = _frame(_wall(), (200, 110))
    detail = find_detail(img, tracks, None, SETTINGS)
    assert detail is not None
    found = {tuple(p) for p in detail.points.tolist()}
    for x, y in MARKS:
        assert any(abs(x - fx) <= 3 and abs(y - fy) <= 3 for fx, fy in found), (x, y)
    bx, by, bw, bh = BOARD
    inside = ((detail.points[:, 0] > bx - 10) & (detail.points[:, 0] < bx + bw + 10)
              & (detail.points[:, 1] > by - 10) & (detail.points[:, 1] < by + bh + 10))
    assert not inside.any()


def test_a_smooth_background_offers_no_detail():
    """A plain gradient (a sky, an evenly lit wall) under sensor noise has no corner that
    could vote: the record is empty, not missing (the picture away from the tracks was
    there to look at, and nothing in it can confirm the fit)."""
    img, tracks = _frame(_wall(marks=()), (200, 110))
    detail = find_detail(img, tracks, None, SETTINGS)
    assert detail is not None and detail.points.shape == (0, 2)
    assert detail.patches.shape == (0, 9, 9)


def test_a_bare_wall_is_plain_and_a_defocused_post_is_not():
    """Neither offers a corner, but only the bare wall (a soft gradient under noise) is a
    plain picture; a dark post out of focus before it is part of the scene."""
    img, tracks = _frame(_wall(marks=()), (200, 110))
    assert is_plain(img, tracks, None, SETTINGS.grid)
    post = _wall(marks=())
    post[:, 540:590] = 60.0
    post = cv2.GaussianBlur(post, (0, 0), 6.0)
    img, tracks = _frame(post, (200, 110))
    assert find_detail(img, tracks, None, SETTINGS).points.shape == (0, 2)
    assert not is_plain(img, tracks, None, SETTINGS.grid)
    # Left out of the comparison (an overlay, an ignored region), the post does not count.
    usable = np.full(img.shape, 255, np.uint8)
    usable[:, 500:] = 0
    assert is_plain(img, tracks, usable, SETTINGS.grid)


def _dark_board(wall: np.ndarray, at: tuple[int, int] = (200, 110)):
    """A frame with a dark board (grey 40) dotted with bright spots in front of ``wall``:
    the frame (uint8), the spots' centres and the board's four corners, pixels."""
    bx, by, bw, bh = BOARD
    img = wall.copy()
    x0, y0 = at
    img[y0:y0 + bh, x0:x0 + bw] = 40.0
    spots = np.array([[x0 + 40, y0 + 30], [x0 + 170, y0 + 45], [x0 + 90, y0 + 100],
                      [x0 + 200, y0 + 115]], float)
    for x, y in spots:
        cv2.circle(img, (int(x), int(y)), 4, 200.0, -1, cv2.LINE_AA)
    corners = np.array([[x0, y0], [x0 + bw - 1, y0], [x0, y0 + bh - 1],
                        [x0 + bw - 1, y0 + bh - 1]], float)
    noise = np.random.default_rng(4).normal(0, 1.5, img.shape)
    return np.clip(img + noise, 0, 255).astype(np.uint8), spots, corners


def test_the_surround_range_is_the_walls_even_with_a_dark_margin_away_from_the_tracks():
    """The grey range of the picture away from the tracks spans the wall's lighting
    gradient (150–170 left to right, 10 levels top to bottom), not the margin of the
    dark board that lies past its spots' hull."""
    img, spots, _ = _dark_board(_wall(marks=()))
    lo, hi = surround_grey(img, spots, None, SETTINGS.grid)
    assert 100.0 < lo < 145.0 and 165.0 < hi < 200.0, (lo, hi)
    assert surround_grey(img, np.array([[-1e4, -1e4], [1e4, -1e4], [0.0, 1e4]]), None,
                         SETTINGS.grid) is None


def test_marks_of_the_wall_stand_on_it_and_an_objects_spots_and_corners_do_not():
    """A wall's own marks are ringed by the wall all round; a bright spot on a dark board
    by the board's face, and the board's corner partly: neither stands on the wall."""
    img, spots, corners = _dark_board(_wall())
    grey = surround_grey(img, spots, None, SETTINGS.grid)
    assert on_surround(img, np.asarray(MARKS, float), grey).all()
    assert not on_surround(img, spots, grey).any()
    assert not on_surround(img, corners, grey).any()
    # A point of the wall at the frame's edge is judged on the part of its ring inside.
    assert on_surround(img, np.array([[0.0, 200.0]]), grey).all()
    assert on_surround(img, np.zeros((0, 2)), grey).shape == (0,)


def test_no_detail_is_looked_for_when_the_tracks_cover_the_picture():
    img, _ = _frame(_wall(), (200, 110))
    yy, xx = np.mgrid[10:img.shape[0] - 10:20, 10:img.shape[1] - 10:20]
    everywhere = np.column_stack([xx.ravel(), yy.ravel()]).astype(np.float64)
    assert find_detail(img, everywhere, None, SETTINGS) is None


def test_a_board_moved_before_a_still_wall_is_contradicted():
    wall = _wall()
    before, tracks = _frame(wall, (200, 110), seed=1)
    after, tracks_now = _frame(wall, (260, 130), seed=2)
    detail = find_detail(before, tracks, None, SETTINGS)
    votes = judge(detail, after, _shift(60, 20), tracks_now, SETTINGS.grid)
    assert votes.contradicted and not votes.supported
    # Three marks stay in the frame where the fit would carry them; all three vote still.
    assert votes.still == 3 and votes.moved == 0 and votes.compared == 3


def test_a_camera_moved_over_the_wall_with_the_board_is_borne_out():
    """The same pictures, but the camera moved: wall and board together. The detail moved
    with the fit, so the fit stands."""
    wall = _wall()
    before, tracks = _frame(wall, (200, 110), seed=1)
    after, tracks_now = _frame(wall, (200, 110), camera=(30, 12), seed=2)
    detail = find_detail(before, tracks, None, SETTINGS)
    votes = judge(detail, after, _shift(30, 12), tracks_now, SETTINGS.grid)
    assert votes.supported and not votes.contradicted
    assert votes.still == 0


def test_detail_the_board_now_covers_does_not_vote():
    """A mark the board slid over is neither still nor moved."""
    wall = _wall(marks=((480, 180),))
    before, tracks = _frame(wall, (200, 110), seed=1)
    detail = find_detail(before, tracks, None, SETTINGS)
    assert detail is not None and len(detail.points) == 1
    after, tracks_now = _frame(wall, (380, 110), seed=2)  # the board now over the mark
    votes = judge(detail, after, _shift(180, 0), tracks_now, SETTINGS.grid)
    assert votes.still == 0 and votes.moved == 0 and not votes.contradicted
    # Nor could it be compared: it is no detail of the picture left bare.
    assert votes.compared == 0


def test_no_vote_when_both_places_differ():
    """Detail that changed altogether (new lighting, a scene change) supports neither
    hypothesis."""
    wall = _wall()
    before, tracks = _frame(wall, (200, 110), seed=1)
    detail = find_detail(before, tracks, None, SETTINGS)
    after = (255 - before.astype(np.int16)).astype(np.uint8)
    votes = judge(detail, after, _shift(60, 20), tracks, SETTINGS.grid)
    assert votes.still == 0 and votes.moved == 0


def _textured_wall(contrast: float, seed: int = 5) -> np.ndarray:
    """A wall textured all over: a blurred random field spanning ``contrast`` × 170 grey
    levels about 128 (fine-grained plaster or concrete, far fainter than the board)."""
    rng = np.random.default_rng(seed)
    field = cv2.GaussianBlur(rng.uniform(0, 255, (H, W)).astype(np.float32), (0, 0), 3.0)
    return 128 + contrast * (cv2.normalize(field, None, 40, 210, cv2.NORM_MINMAX) - 128)


def test_a_faint_textured_wall_offers_no_corner_but_votes_patch_by_patch():
    """A sixth of the full contrast: after sensor noise no corner of the wall rises clear
    of the noise, so the corner check has nothing to compare. Its texture patches, far
    fainter than the board's, contradict the board's motion taken for the camera's, and
    bear out a camera that moved wall and board together."""
    wall = _textured_wall(0.15)
    before, tracks = _frame(wall, (200, 110), seed=1)
    detail = find_detail(before, tracks, None, SETTINGS)
    assert detail is not None and len(detail.points) == 0
    texture = find_texture(before, tracks, None, SETTINGS.grid)
    assert texture is not None and len(texture.points) > 100
    after, tracks_now = _frame(wall, (230, 120), seed=2)
    votes = judge_texture(texture, after, _shift(30, 10), tracks_now, SETTINGS.grid)
    assert votes.contradicted and not votes.supported and votes.still > 50 * max(votes.moved, 1)
    moved, tracks_moved = _frame(wall, (200, 110), camera=(30, 10), seed=2)
    votes = judge_texture(texture, moved, _shift(30, 10), tracks_moved, SETTINGS.grid)
    assert votes.supported and not votes.contradicted and votes.moved > 50 * max(votes.still, 1)
    assert votes.compared == 0


def test_texture_as_strong_as_the_tracks_or_as_smooth_as_shading_offers_no_patch():
    # Texture as strong as the tracks' own (here the tracks lie on the wall itself) would
    # have been tracked: that it was not means it is no trustworthy detail (patches near
    # the noise are what an encoder leaves unchanged from frame to frame). A lighting
    # gradient is taken out by the band-pass, and a smooth wall offers nothing.
    _, tracks = _frame(_wall(), (200, 110))
    alike = np.clip(_textured_wall(0.5) + np.random.default_rng(3).normal(0, 1.5, (H, W)),
                    0, 255).astype(np.uint8)
    smooth, _ = _frame(_wall(marks=()), (200, 110))
    for img in (alike, smooth):
        texture = find_texture(img, tracks, None, SETTINGS.grid)
        assert texture is not None and len(texture.points) == 0
    # The same wall, at a sixth of that contrast behind the board, does offer patches.
    faint, _ = _frame(_textured_wall(0.5 / 6), (200, 110))
    assert len(find_texture(faint, tracks, None, SETTINGS.grid).points) > 100


def _bar(img: np.ndarray) -> np.ndarray:
    """``img`` with a flat dark bar (no texture of its own) across the bottom of the frame,
    its long top edge level at row 300."""
    out = img.copy()
    out[300:] = 40
    return out


def test_the_fringe_of_a_straight_edge_is_no_texture():
    """A flat bar slides along its own long edge while the camera moves wall and board: the
    faint fringe the band-pass leaves beside that edge looks the same wherever along itself
    the edge has slid, and would vote the camera still. Patches must be textured in two
    directions, as a faint wall is."""
    wall = _wall(marks=())
    before, tracks = _frame(wall, (200, 110), seed=1)
    before = _bar(before)
    loose = StillDetailSettings(texture_isotropy=0.0)
    fringe = find_texture(before, tracks, None, SETTINGS.grid, loose)
    assert len(fringe.points) > 10 and (np.abs(fringe.points[:, 1] - 300) < 20).all()
    texture = find_texture(before, tracks, None, SETTINGS.grid)
    assert texture is not None and len(texture.points) == 0
    # The camera moves 30 px across and 10 down; the bar keeps its place in the frame.
    after, tracks_now = _frame(wall, (200, 110), camera=(30, 10), seed=2)
    after = _bar(after)
    votes = judge_texture(fringe, after, _shift(30, 10), tracks_now, SETTINGS.grid, loose)
    assert votes.contradicted  # what the fringe alone would have said
    # A faint textured wall keeps its patches under the same rule.
    faint, _ = _frame(_textured_wall(0.15), (200, 110), seed=1)
    kept = find_texture(faint, tracks, None, SETTINGS.grid)
    assert len(kept.points) >= 0.95 * len(find_texture(faint, tracks, None, SETTINGS.grid,
                                                        loose).points)


def test_texture_is_not_looked_for_when_the_tracks_cover_the_picture():
    img, _ = _frame(_textured_wall(0.15), (200, 110))
    yy, xx = np.mgrid[10:img.shape[0] - 10:20, 10:img.shape[1] - 10:20]
    everywhere = np.column_stack([xx.ravel(), yy.ravel()]).astype(np.float64)
    assert find_texture(img, everywhere, None, SETTINGS.grid) is None


@pytest.mark.parametrize("usable_blocks", [True, False])
def test_overlay_cells_are_left_out(usable_blocks):
    wall = _wall()
    img, tracks = _frame(wall, (200, 110))
    usable = np.full((H, W), 255, np.uint8)
    if usable_blocks:
        usable[:, :W // 2] = 0
    detail = find_detail(img, tracks, usable, SETTINGS, StillDetailSettings())
    left = detail.points[:, 0] < W // 2
    assert (not left.any()) if usable_blocks else left.any()


def test_spread_corners_are_the_strongest_apart_and_above_the_floor():
    """The points picked from a strength map keep at least the spacing between them (less
    the cell rounding), come strongest first, and none is under the floor; with a floor
    above every value there are none."""
    rng = np.random.default_rng(3)
    strength = cv2.GaussianBlur(rng.random((200, 300)).astype(np.float32), (0, 0), 2.0)
    floor = float(np.quantile(strength, 0.5))
    pts = spread_maxima(strength, floor, 15.0, 40)
    assert 0 < len(pts) <= 40
    values = strength[pts[:, 1], pts[:, 0]]
    assert np.all(values >= floor) and np.all(np.diff(values) <= 0)
    gaps = np.linalg.norm(pts[:, None, :] - pts[None, :, :], axis=2)
    assert gaps[~np.eye(len(pts), dtype=bool)].min() >= 15.0 - 1.0
    assert spread_maxima(strength, float(strength.max()) * 2, 15.0, 40).shape == (0, 2)
    # The strongest pixel of the whole map is always among them.
    y, x = np.unravel_index(np.argmax(strength), strength.shape)
    assert [x, y] in pts.tolist()


def test_detail_found_with_a_known_floor_matches_the_whole_picture_floor():
    """Given the tracker's noise floor, the strength is worked out only on the tiles away
    from the tracks; with that same floor the faint corners are those of the whole-picture
    computation."""
    img, tracks = _frame(_wall(), BOARD[:2])
    floor = corner_strength(img, SETTINGS)[1]
    whole = find_detail(img, tracks, None, SETTINGS)
    tiled = find_detail(img, tracks, None, SETTINGS, floor=floor)
    assert whole is not None and tiled is not None
    np.testing.assert_array_equal(whole.points, tiled.points)


def test_patch_agreement_tells_a_mark_from_a_point_of_noise():
    # A mark on a bare wall is found again where it moved; a point of the wall's grain is
    # drawn afresh each frame and agrees with nothing; a flat patch gives 0, not NaN.
    rng = np.random.default_rng(2)
    yy, xx = np.mgrid[0:H, 0:W].astype(np.float32)
    wall = 150 + 20 * xx / W - 10 * yy / H

    def frame(mark_at):
        img = wall.copy()
        cv2.circle(img, mark_at, 3, 120, -1, lineType=cv2.LINE_AA)
        return np.clip(img + rng.normal(0, 1.5, img.shape), 0, 255).astype(np.uint8)

    before, now = frame((100, 80)), frame((107, 83))
    r = patch_agreement(before, now, np.array([[100.0, 80.0], [400.0, 200.0]]),
                        np.array([[107.0, 83.0], [407.0, 203.0]]))
    assert r[0] > 0.9
    assert abs(r[1]) < 0.5
    flat = np.full((H, W), 128, np.uint8)
    assert patch_agreement(flat, flat, np.array([[50.0, 50.0]]), np.array([[50.0, 50.0]])
                           ).tolist() == [0.0]
