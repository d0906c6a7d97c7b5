"""Per-frame motion: rival fits and track history, overlays, cuts, stand-ins."""

import cv2
import numpy as np
import pytest

import stabilize
from stabilize import motion_pass
from stabilize.anchors import Grouping, hull_share
from stabilize.config import Settings
from stabilize.cuts import CutSettings, aligned_correlation, collapsed, is_cut, is_textureless
from stabilize.frame_fit import bunched, fit_frame
from stabilize.geometry import from_similarity, to_similarity
from stabilize.io import VideoWriter, iter_frames, probe
from stabilize.io.decode import analysis_size
from stabilize.io.frames import Frame
from stabilize.motion import fit_motion
from stabilize.motion_models import SIMILARITY, transfer_error
from stabilize.motion_track import (
    LOG_COLUMNS,
    MotionTrack,
    anchor_frames,
    fill_failed,
    stand_ins,
)
from stabilize.overlays import OverlayFinder, OverlaySettings, still_band
from stabilize.synthetic import Mover, SceneSpec, SyntheticClip
from stabilize.track_groups import outshone_band

W, H = 640, 360


def _scene(n_bg, n_obj, obj_shift, rng):
    bg = np.c_[rng.uniform(0, W, n_bg), rng.uniform(0, H, n_bg)]
    # The background is everywhere; the object is one compact blob in the middle.
    ring = (np.abs(bg[:, 0] - W / 2) > 0.35 * W) | (np.abs(bg[:, 1] - H / 2) > 0.35 * H)
    bg = bg[ring]
    obj = np.c_[rng.uniform(0.15 * W, 0.85 * W, n_obj), rng.uniform(0.15 * H, 0.85 * H, n_obj)]
    src = np.concatenate([bg, obj])
    dst = src.copy()
    dst[len(bg):] += obj_shift
    dst += rng.normal(0, 0.05, dst.shape)
    return src, dst, len(bg)


def test_a_slow_busy_object_loses_to_the_surrounding_background():
    rng = np.random.default_rng(0)
    # The object has three times the background's tracks and moves 1.2 px a frame: inside
    # the 1.5 px threshold of the still background, so counting inliers alone would pick it.
    src, dst, n_bg = _scene(1200, 1500, np.array([1.2, 0.6]), rng)
    assert n_bg < 0.5 * len(src)
    fit = fit_frame(src, dst, np.full(len(src), 0.5), model=SIMILARITY, settings=Settings(),
                    seed=[0, 1], prior=None, frame_size=(W, H))
    np.testing.assert_allclose(fit.matrix[:2, 2], 0.0, atol=0.02)
    # The tight set keeps about 95% of the true inliers (a 95% χ² threshold).
    assert fit.support[:n_bg].mean() > 0.85 and fit.support[n_bg:].mean() < 0.05


def test_history_keeps_the_background_when_spread_cannot_tell():
    rng = np.random.default_rng(1)
    src = np.c_[rng.uniform(0, W, 800), rng.uniform(0, H, 800)]
    dst = src + rng.normal(0, 0.05, src.shape)
    obj = np.arange(800) % 2 == 0  # interleaved: both sets spread over the whole frame
    dst[obj] += [3.0, 0.0]
    history = np.where(obj, 0.1, 0.95)
    fit = fit_frame(src, dst, history, model=SIMILARITY, settings=Settings(), seed=[0, 2],
                    prior=None, frame_size=(W, H))
    np.testing.assert_allclose(fit.matrix[:2, 2], 0.0, atol=0.02)


def test_a_fit_that_rests_on_a_strip_of_its_inliers_is_bunched():
    # A still strip along the bottom edge (a burnt-in caption) and tracks of noise over the
    # rest, all within the 1.5 px threshold of no motion: the consensus's inliers spread over
    # the frame, but the refit to the tracking noise keeps the strip alone.
    rng = np.random.default_rng(3)
    strip = np.c_[rng.uniform(0, W, 80), rng.uniform(H - 14, H - 4, 80)]
    rest = np.c_[rng.uniform(0, W, 40), rng.uniform(0, H - 40, 40)]
    src = np.concatenate([strip, rest])
    dst = src + np.concatenate([rng.normal(0, 0.02, strip.shape), rng.normal(0, 0.4, rest.shape)])
    fit = fit_frame(src, dst, np.full(len(src), 0.5), model=SIMILARITY, settings=Settings(),
                    seed=[0, 4], prior=None, frame_size=(W, H))
    assert fit.inliers[80:].mean() > 0.9 and not fit.weak
    assert fit.support[:80].mean() > 0.9 and fit.support[80:].mean() < 0.2
    assert fit.bunched
    # The same rest moving with the strip as precisely spreads the fit's support again.
    dst[80:] = src[80:] + rng.normal(0, 0.02, rest.shape)
    fit = fit_frame(src, dst, np.full(len(src), 0.5), model=SIMILARITY, settings=Settings(),
                    seed=[0, 4], prior=None, frame_size=(W, H))
    assert not fit.bunched and not fit.weak
    # Points in fewer than five of the 4 × 4 cells are bunched; in five, not.
    assert bunched(np.array([[10.0, 350.0], [200.0, 350.0], [400.0, 350.0], [630.0, 350.0]]),
                   (W, H))
    assert not bunched(np.array([[10.0, 350.0], [200.0, 350.0], [400.0, 350.0],
                                 [630.0, 350.0], [10.0, 10.0]]), (W, H))


def test_transfer_error_and_hull_share():
    src = np.array([[0.0, 0.0], [W - 1.0, 0.0], [W - 1.0, H - 1.0], [0.0, H - 1.0]])
    m = np.eye(3)
    m[0, 2] = 3.0
    np.testing.assert_allclose(transfer_error(m, src, src), 3.0)
    assert hull_share(src, (W, H)) > 0.99
    assert hull_share(src[:2], (W, H)) == 0.0


def test_overlays_found_where_tracks_stay_put_while_the_camera_moves():
    finder = OverlayFinder((W, H))
    rng = np.random.default_rng(2)
    camera = np.eye(3)
    camera[0, 2] = 2.0
    for _ in range(20):
        scene = np.c_[rng.uniform(0, W, 300), rng.uniform(0, 0.8 * H, 300)]
        strip = np.c_[rng.uniform(0, W, 80), rng.uniform(0.9 * H, H - 1, 80)]
        src = np.concatenate([scene, strip])
        dst = np.concatenate([scene + [2.0, 0.0], strip])
        finder.observe(src, dst, camera)
    mask = finder.mask(None)
    assert (mask[int(0.92 * H):, :] == 0).mean() > 0.8
    assert (mask[: int(0.75 * H), :] == 255).all()
    regions = finder.regions((0.5, 0.5))
    assert regions and all(r[1] >= 0.85 * H * 2 for r in regions)


def test_still_band_along_an_edge_against_a_moving_scene_is_an_overlay():
    rng = np.random.default_rng(5)
    scene = np.c_[rng.uniform(0, W, 200), rng.uniform(0, 0.85 * H, 200)]
    strip = np.c_[rng.uniform(0, W, 60), rng.uniform(0.92 * H, H - 1, 60)]
    start = np.concatenate([scene, strip])
    now = np.concatenate([scene + [3.0, -1.0], strip + rng.normal(0, 0.01, (60, 2))])
    still = np.r_[np.zeros(200, bool), np.ones(60, bool)]
    spread = hull_share(now[~still], (W, H))
    assert still_band(start, now, still, ~still, spread, (W, H))
    # The same still group spread over the frame (a fixed camera's background around a
    # moving object) is not an overlay, nor is a band that moved, nor one beside a small
    # moving group.
    around = np.c_[rng.uniform(0, W, 60), rng.uniform(0, H, 60)]
    spread_out = np.concatenate([scene, around])
    now_out = np.concatenate([scene + [3.0, -1.0], around])
    assert not still_band(spread_out, now_out, still, ~still, spread, (W, H))
    drifted = now.copy()
    drifted[still] += [0.3, 0.0]
    assert not still_band(start, drifted, still, ~still, spread, (W, H))
    assert not still_band(start, now, still, ~still, 0.1, (W, H))
    # A band at the left edge counts as well.
    side = np.c_[rng.uniform(0, 0.1 * W, 60), rng.uniform(0, H, 60)]
    assert still_band(np.concatenate([scene, side]), np.concatenate([scene + 2.0, side]),
                      still, ~still, spread, (W, H))


def test_a_still_line_beside_a_scene_spanning_the_frame_is_an_overlay():
    # A hazy scene's few tracks along a girder across the middle: their hull covers a tenth
    # of the frame, too little for a band, enough beside a thin line of burnt-in text.
    rng = np.random.default_rng(6)
    scene = np.c_[rng.uniform(10, W - 10, 50), rng.uniform(0.4 * H, 0.65 * H, 50)]
    line = np.c_[rng.uniform(15, 0.6 * W, 50), rng.uniform(H - 13, H - 8, 50)]
    start = np.concatenate([scene, line])
    now = np.concatenate([scene + [2.0, 1.5], line + rng.normal(0, 0.005, (50, 2))])
    still = np.r_[np.zeros(50, bool), np.ones(50, bool)]
    spread = hull_share(now[~still], (W, H))
    assert 0.1 <= spread < OverlaySettings().band_spread
    assert still_band(start, now, still, ~still, spread, (W, H))
    # Not beside an object that spans half the frame's width (a board held before a fixed
    # camera whose only other detail is a skirting line), nor when the still group is a band
    # a tenth of the frame thick, nor when the moving group's hull is smaller still.
    narrow = np.c_[rng.uniform(0.25 * W, 0.75 * W, 50), rng.uniform(0.2 * H, 0.75 * H, 50)]
    assert hull_share(narrow, (W, H)) < OverlaySettings().band_spread
    assert not still_band(np.concatenate([narrow, line]), np.concatenate([narrow + 2.0, now[50:]]),
                          still, ~still, hull_share(narrow, (W, H)), (W, H))
    thick = np.c_[line[:, 0], rng.uniform(0.9 * H, H - 1, 50)]
    assert not still_band(np.concatenate([scene, thick]), np.concatenate([now[:50], thick]),
                          still, ~still, spread, (W, H))
    assert not still_band(start, now, still, ~still, 0.05, (W, H))


def test_a_still_band_far_fainter_than_the_moving_group_is_the_scene_not_an_overlay():
    # A faint wall's strip along the right edge beside a strongly textured board: no text
    # is drawn that faint. The same strip as white text on a dark bar is an overlay.
    rng = np.random.default_rng(2)
    img = _textured_wall(rng, 0.15)
    img[40:320, 100:460] = cv2.resize(rng.uniform(0, 255, (48, 60)).astype(np.float32),
                                      (360, 280), interpolation=cv2.INTER_CUBIC)
    strip = np.c_[rng.uniform(610, 630, 30), rng.uniform(20, 340, 30)]
    board = np.c_[rng.uniform(110, 450, 80), rng.uniform(50, 310, 80)]
    pts = np.concatenate([strip, board])
    band = np.r_[np.ones(30, bool), np.zeros(80, bool)]
    grouping = Grouping(~band, band, 0.4, 0.02)
    faint = np.clip(img, 0, 255).astype(np.uint8)
    assert outshone_band(faint, pts, band, grouping)
    text = faint.copy()
    text[:, 600:] = 20
    for y in range(20, 340, 24):
        cv2.putText(text, "88", (602, y + 14), cv2.FONT_HERSHEY_PLAIN, 1.0, 235, 1)
    assert not outshone_band(text, pts, band, grouping)
    assert not outshone_band(faint, pts, np.zeros(110, bool), grouping)


def test_band_votes_need_many_frames():
    finder = OverlayFinder((W, H))
    strip = np.c_[np.linspace(5, W - 5, 50), np.full(50, H - 5.0)]
    grew = [finder.observe_band(strip) for _ in range(finder.settings.band_frames)]
    assert not any(grew[:-1]) and grew[-1]
    mask = finder.mask(None)
    assert (mask[-10:, 10:-10] == 0).all() and (mask[: int(0.8 * H)] == 255).all()
    assert not finder.observe_band(strip[:0])
    # The cells found cover the strip's points and nothing well above it.
    above = np.c_[np.linspace(5, W - 5, 20), np.full(20, 0.5 * H)]
    assert finder.covers(strip).all() and not finder.covers(above).any()
    assert finder.covers(strip[:0]).shape == (0,)
    assert not OverlayFinder((W, H)).covers(strip).any()


def test_cut_and_texture_rules():
    cfg = CutSettings()
    assert collapsed(10, 1000, cfg) and not collapsed(900, 1000, cfg)
    assert is_cut(0.6, None, cfg)
    assert is_cut(0.2, 0.02, cfg) and not is_cut(0.2, 0.5, cfg) and not is_cut(0.05, 0.02, cfg)
    assert is_textureless(1e-5, 3e-3, cfg) and not is_textureless(2e-3, 3e-3, cfg)
    assert is_textureless(1e-5, None, cfg)
    # A phase-correlation peak that does not align the pictures (something both frames share
    # in place) does not hide a cut; a low correlation alone, with near-equal histograms,
    # does not make one.
    assert is_cut(0.3, 0.2, cfg, aligned=0.02) and not is_cut(0.3, 0.2, cfg, aligned=0.6)
    assert not is_cut(0.05, 0.2, cfg, aligned=0.0)


def test_aligned_correlation_tells_a_shifted_view_from_another_scene():
    rng = np.random.default_rng(4)
    world = cv2.GaussianBlur(rng.integers(0, 256, (300, 500), np.uint8), (0, 0), 2.0)
    other = cv2.GaussianBlur(rng.integers(0, 256, (300, 500), np.uint8), (0, 0), 2.0)
    prev, cur = world[20:260, 30:350], world[20 + 6:260 + 6, 30 + 25:350 + 25]
    # prev's content lies (-25, -6) px away in cur.
    assert aligned_correlation(prev, cur, (-25.0, -6.0)) > 0.8
    assert abs(aligned_correlation(prev, other[20:260, 30:350], (0.0, 0.0))) < 0.1
    # A shift that leaves almost no overlap says nothing.
    assert aligned_correlation(prev, cur, (300.0, 0.0)) == 0.0


def test_a_cut_is_found_though_an_object_stays_put_across_it(tmp_path):
    # A drawn clip cuts from a bridge to a solar farm while a car, fixed in the frame, crosses
    # both shots: phase correlation locks onto the car, and the histograms are only
    # moderately apart, so the cut rests on the aligned pictures' disagreement.
    spec = SceneSpec(style="truss", width=320, height=180, fps=24.0, duration_s=2.5, seed=3,
                     movers=(Mover("vehicle", (60.0, 28.0), (80.0, 120.0), (70.0, 0.0)),),
                     cuts_s=(1.6,))
    clip = SyntheticClip(spec)
    path = tmp_path / "cut.mp4"
    with VideoWriter(path, clip.width, clip.height, clip.fps, crf=14, preset="veryfast") as wr:
        for _, frame in clip.frames():
            wr.write(frame)
    info = probe(path)
    settings = Settings()
    size = analysis_size(info, settings.analysis_width)
    track = fit_motion(iter_frames(path, size=size, gray=True, info=info),
                       full_size=(info.width, info.height), analysis_size=size,
                       settings=settings)
    assert np.flatnonzero(track.status == "cut").tolist() == np.flatnonzero(clip.cut).tolist()


def _torn_frames(tear_at: int, n: int = 16) -> list[Frame]:
    """A still camera over a textured picture; on frame ``tear_at`` the picture's 4×4 tiles
    are each carried their own way (up to 7 px, at least 3 px apart), three of them (19 %
    of it) the same way, (6, −5) px; on the next frame they are back. Grey frames, W×H,
    30 fps. (Drawn freely, a fourth tile once took (6, −5) too, and with tracks spread
    evenly over the tiles a chance consensus of five tiles on the way back reached 34 % of
    the tracks.)"""
    rng = np.random.default_rng(4)
    pad = 20
    big = cv2.GaussianBlur(rng.uniform(0, 255, (H + 2 * pad, W + 2 * pad)).astype(np.float32),
                           (0, 0), 2.0)
    big = cv2.normalize(big, None, 20, 235, cv2.NORM_MINMAX)
    frames = []
    for t in range(n):
        img = big[pad:pad + H, pad:pad + W].copy()
        if t == tear_at:
            # The other tiles' motions are drawn apart from those and from each other
            # (3 px at least), so no group larger than the three is left to chance.
            moves: list[tuple[int, int]] = [(6, -5)]
            while len(moves) < 14:
                d = tuple(int(v) for v in rng.integers(-7, 8, 2))
                if min(np.hypot(d[0] - a, d[1] - b) for a, b in moves) >= 3:
                    moves.append(d)
            others = iter(moves[1:])
            for k in range(16):
                i, j = divmod(k, 4)
                dx, dy = (6, -5) if k in (1, 6, 11) else next(others)
                y0, y1, x0, x1 = i * H // 4, (i + 1) * H // 4, j * W // 4, (j + 1) * W // 4
                img[y0:y1, x0:x1] = big[pad + y0 - dy:pad + y1 - dy, pad + x0 - dx:pad + x1 - dx]
        img = np.clip(img + rng.normal(0, 1.0, img.shape), 0, 255).astype(np.uint8)
        frames.append(Frame(t, t / 30.0, img))
    return frames


def test_a_fit_most_tracks_disagree_with_is_a_stand_in(monkeypatch):
    # Most of the picture moved, each part its own way (a head turning in a close-up): the
    # best consensus is a chance minority, and its motion is no measurement of the camera.
    def run():
        return fit_motion(iter(_torn_frames(10)), full_size=(W, H), analysis_size=(W, H),
                          settings=Settings())

    track = run()
    for t in (10, 11):
        assert track.inliers[t] < motion_pass.MINORITY_SHARE * track.tracked[t]
        assert (track.status[t], track.reason[t]) == ("weak", "foreground")
    # The stand-in comes from the still neighbours, not from the minority's (6, -5) px.
    np.testing.assert_allclose(track.matrices[9:13], np.eye(3)[None].repeat(4, 0), atol=0.05)
    # Without the rule the log follows one of the parts.
    monkeypatch.setattr(motion_pass, "MINORITY_SHARE", 0.0)
    track = run()
    assert (track.reason[10:12] == "few_inliers").all()
    assert np.abs(track.matrices[10:12, :2, 2]).max() > 2.0


def _board_before(wall: np.ndarray, size: tuple[int, int], centre, n: int,
                  rng: np.random.Generator, scale=lambda s: 1.0) -> list[Frame]:
    """A still camera over ``wall`` (H×W float grey levels); a board of ``size`` = (width,
    height) pixels with coarse, strong texture (drawn from ``rng``) centred at
    ``centre(s)`` = (x, y) at time s, scaled by ``scale(s)`` about its centre. ``n`` grey
    frames, W×H, 30 fps, with noise of 1.5 grey levels."""
    bw, bh = size
    board = cv2.resize(rng.integers(0, 255, (bh // 6 + 1, bw // 6 + 1)).astype(np.uint8),
                       (bw, bh), interpolation=cv2.INTER_CUBIC).astype(np.float32)
    frames = []
    for t in range(n):
        s = t / 30.0
        cx, cy = centre(s)
        k = scale(s)
        m = np.float32([[k, 0, cx - k * bw / 2], [0, k, cy - k * bh / 2]])
        warped = cv2.warpAffine(board, m, (W, H), flags=cv2.INTER_LINEAR)
        cover = cv2.warpAffine(np.ones_like(board), m, (W, H), flags=cv2.INTER_LINEAR)
        img = wall * (1 - cover) + warped * cover
        img = np.clip(img + rng.normal(0, 1.5, img.shape), 0, 255).astype(np.uint8)
        frames.append(Frame(t, s, img))
    return frames


def _textured_wall(rng: np.random.Generator, contrast: float) -> np.ndarray:
    """A softly textured wall (H×W float grey levels): a blurred random field drawn from
    ``rng``, spanning ``contrast`` (a share of its full contrast) × 170 grey levels about
    128."""
    wall = cv2.GaussianBlur(rng.uniform(0, 255, (H, W)).astype(np.float32), (0, 0), 3.0)
    return 128 + contrast * (cv2.normalize(wall, None, 40, 210, cv2.NORM_MINMAX) - 128)


def _board_frames(n: int = 90, contrast: float = 1.0) -> list[Frame]:
    """A softly textured wall (``contrast``: a share of its full contrast); a board over
    nearly half of the picture waved sideways by hand (±120 px at 0.7 Hz, ±40 px at 1.1 Hz
    up and down) (:func:`_board_before`)."""
    rng = np.random.default_rng(7)
    wall = _textured_wall(rng, contrast)
    return _board_before(wall, (362, 305), lambda s: (
        W / 2 + 120 * np.sin(2 * np.pi * 0.7 * s), H / 2 + 40 * np.sin(2 * np.pi * 1.1 * s + 1)),
        n, rng)


def test_a_board_waved_over_half_of_a_still_view_is_not_the_camera():
    # The board's corners are the strongest and most numerous of the picture; the wall's
    # weaker ones must still be tracked, or the log follows the board (17 px a frame).
    track = fit_motion(iter(_board_frames()), full_size=(W, H), analysis_size=(W, H),
                       settings=Settings())
    assert (track.status[1:] == "ok").mean() > 0.9
    assert np.abs(track.matrices[:, :2, 2]).max() < 0.1
    np.testing.assert_allclose(track.matrices[:, :2, :2], np.eye(2)[None].repeat(90, 0),
                               atol=1e-3)


def test_a_board_waved_before_a_faint_wall_is_not_the_camera():
    # The wall has a third of the contrast: its corners fall under the frame-wide rule, and
    # the first frame's fit, made before any baseline, follows the board (17 px); the wall's
    # tracks must survive the board's motion as the prediction, and the first fits be
    # revised once the wall is known to be the scene.
    track = fit_motion(iter(_board_frames(contrast=0.3)), full_size=(W, H),
                       analysis_size=(W, H), settings=Settings())
    assert np.abs(track.matrices[:, :2, 2]).max() < 0.5
    assert (track.status[1:] == "ok").mean() > 0.9


def _board_sweeping(seed: int, contrast: float = 0.15) -> list[Frame]:
    """A tall board (360×320 px, half the picture, nine tenths of its height) comes in from
    the left, bobs over the middle for three seconds and then sweeps from side to side
    (±100 px at 0.6 Hz) before a still camera and a faint wall (``contrast``, a sixth of
    its full contrast by default): every track of the wall but a strip along the top edge
    is covered at some point (:func:`_board_before`, 240 frames)."""
    rng = np.random.default_rng(seed)
    wall = _textured_wall(rng, contrast)

    def centre(s: float) -> tuple[float, float]:
        x = (-200 + (W / 2 + 200) * s / 2 if s < 2 else W / 2 if s < 5
             else W / 2 + 100 * np.sin(2 * np.pi * 0.6 * (s - 5)))
        return x, H / 2 + 10 * np.sin(3 * s)

    return _board_before(wall, (360, 320), centre, 240, rng)


def test_a_board_sweeping_across_a_faint_wall_leaves_the_wall_the_camera(tmp_path):
    # After H.264 the board's far stronger corners keep the wall's from being found again.
    # The strip's tracks, proven the scene's long before, covering 3 % of the frame, must
    # still stand for it against the board's new tracks. Before, they stood only when
    # covering 10 %, and the log followed the board by 195 px, most frames `ok` (1.3 px
    # since, 29 % of the frames weak; measured).
    path = tmp_path / "sweep.mp4"
    with VideoWriter(path, W, H, 30.0, crf=20, preset="veryfast") as wr:
        for f in _board_sweeping(5):
            wr.write(np.repeat(f.image[:, :, None], 3, axis=2))
    info = probe(path)
    track = fit_motion(iter_frames(path, gray=True, info=info), full_size=(W, H),
                       analysis_size=(W, H), settings=Settings())
    assert np.abs(np.cumsum(track.matrices[:, :2, 2], axis=0)).max() < 2.0
    # The frames the strip alone carried say so.
    assert (track.status[1:] == "weak").mean() > 0.1


def test_a_board_sweeping_across_a_faint_wall_keeps_its_edge_strip_as_the_scene(tmp_path):
    # At CRF 23 the wall's strip along the right edge, which the board never covers, stays
    # still beside it: a still band along an edge beside a moving group, as burnt-in text
    # looks. It was taken for an overlay and its tracks left out: the log followed the
    # board by 148 px before the wall's texture could hold it (0.92 px since), and seed 7
    # still by 131 px. Far fainter than the board, the strip is the scene: 0.92 px, and
    # seed 7 3.8 px (measured).
    path = tmp_path / "sweep.mp4"
    with VideoWriter(path, W, H, 30.0, crf=23, preset="veryfast") as wr:
        for f in _board_sweeping(6):
            wr.write(np.repeat(f.image[:, :, None], 3, axis=2))
    track = fit_motion(iter_frames(path, gray=True, info=probe(path)), full_size=(W, H),
                       analysis_size=(W, H), settings=Settings())
    assert np.abs(np.cumsum(track.matrices[:, :2, 2], axis=0)).max() < 2.0
    assert not track.excluded.get("static_overlay")


def test_a_board_sweeping_across_a_faint_wall_unencoded_is_held_by_the_walls_texture():
    # The same scene with its sensor noise left in (no encoder to smooth it): the wall's
    # corners lie at the noise, the strip keeps 11-14 tracks (under the 12 a group needs),
    # and the log followed the board by 179 px, most frames `ok`. No faint corner of the
    # wall clears the noise either; its texture does, patch by patch
    # (:func:`stabilize.still_detail.find_texture`), and holds the camera still
    # (1.58 px since; measured).
    track = fit_motion(iter(_board_sweeping(7)), full_size=(W, H), analysis_size=(W, H),
                       settings=Settings())
    assert np.abs(np.cumsum(track.matrices[:, :2, 2], axis=0)).max() < 2.0
    assert (track.reason[1:] == "held_still").mean() > 0.2


def _dark_board_crossing(seed: int, exposure: bool, n: int = 180) -> list[Frame]:
    """A dark board (290×290 px, nearly half the picture) crosses a still camera's view of
    a faint wall (a third of its full contrast) from left to right in 6 s. With
    ``exposure`` the camera's automatic exposure follows the picture's mean brightness: each
    frame the gain moves 15 % of the way to the one that brings the mean back to mid-grey
    (this project's own model of a camera's exposure loop), so the whole picture brightens
    by up to about a fifth while the board is in view, by under 1 % a frame. Grey frames,
    W×H, 30 fps, noise of 1.5 grey levels."""
    rng = np.random.default_rng(seed)
    wall = _textured_wall(rng, 0.3)
    bw, bh = int(0.45 * W), int(0.8 * H)
    board = cv2.resize(rng.integers(0, 150, (bh // 6 + 1, bw // 6 + 1)).astype(np.uint8),
                       (bw, bh), interpolation=cv2.INTER_CUBIC).astype(np.float32)
    gain, frames = 1.0, []
    for t in range(n):
        s = t / 30.0
        m = np.float32([[1, 0, -bw + (W + bw) * s / 6.0], [0, 1, H / 2 + 15 * np.sin(4 * s)
                                                            - bh / 2]])
        warped = cv2.warpAffine(board, m, (W, H), flags=cv2.INTER_LINEAR)
        cover = cv2.warpAffine(np.ones_like(board), m, (W, H), flags=cv2.INTER_LINEAR)
        img = wall * (1 - cover) + warped * cover
        if exposure:
            gain += 0.15 * (128.0 / img.mean() - gain)
            img = img * gain
        img = np.clip(img + rng.normal(0, 1.5, img.shape), 0, 255).astype(np.uint8)
        frames.append(Frame(t, s, img))
    return frames


def _encoded_path_px(frames: list[Frame], path) -> float:
    """Largest excursion (px) of the summed logged shifts of ``frames`` written with H.264
    at CRF 23 to ``path`` and analysed at full size."""
    with VideoWriter(path, W, H, 30.0, crf=23, preset="veryfast") as wr:
        for f in frames:
            wr.write(np.repeat(f.image[:, :, None], 3, axis=2))
    track = fit_motion(iter_frames(path, gray=True, info=probe(path)), full_size=(W, H),
                       analysis_size=(W, H), settings=Settings())
    return float(np.abs(np.cumsum(track.matrices[:, :2, 2], axis=0)).max())


def test_a_dark_board_crossing_a_still_view_of_a_faint_wall_is_not_the_camera(tmp_path):
    # The control of the next test: the same scene at a fixed exposure (0.01-0.02 px for
    # seeds 1-3, measured).
    assert _encoded_path_px(_dark_board_crossing(3, exposure=False), tmp_path / "a.mp4") < 0.1


@pytest.mark.xfail(strict=True, reason=(
    "known limit (DEVELOPERS.md, Known limits): Lucas-Kanade assumes unchanged brightness; "
    "under an exposure ramp each faint track is pulled the same way frame after frame, and "
    "the path of a still camera drifts by 0.7-1.6 px (seeds 1-3) with at most one frame weak; "
    "the verdict says so where the estimate of that drift passes 0.5 px (next test)"))
def test_an_exposure_ramp_while_a_dark_board_crosses_leaves_a_still_camera_still(tmp_path):
    assert _encoded_path_px(_dark_board_crossing(3, exposure=True), tmp_path / "b.mp4") < 0.5


def test_an_exposure_ramp_that_moves_a_still_cameras_path_is_said_to(tmp_path):
    # The drift of the expected failure above cannot be told from the frames' motion, but
    # the brightness change that causes it can: the log gives how far it may have moved the
    # path (0.95 px for a path 1.4 px off, measured), and the verdict says so. At a fixed
    # exposure the figure is nought and the verdict sound.
    logs = {}
    for exposure in (False, True):
        path = tmp_path / f"board {exposure}.mp4"
        with VideoWriter(path, W, H, 30.0, crf=23, preset="veryfast") as wr:
            for f in _dark_board_crossing(3, exposure=exposure):
                wr.write(np.repeat(f.image[:, :, None], 3, axis=2))
        logs[exposure] = stabilize.measure(path).summary
    assert logs[False]["brightness_drift_px"] < 0.05 and logs[False]["trust"] == "sound"
    ramp = logs[True]
    assert ramp["brightness_drift_px"] > 0.5
    assert ramp["trust"] == "rough"
    assert any("brightness changed" in r for r in ramp["trust_reasons"])


def _slow_board_before_plain_wall(n: int = 150) -> list[Frame]:
    """A plain wall (a soft grey gradient and eight small dots); a board over a third of
    the picture drifting slowly (±60 px at 0.1 Hz sideways, ±20 px at 0.13 Hz up and
    down) (:func:`_board_before`)."""
    rng = np.random.default_rng(0)
    yy, xx = np.mgrid[0:H, 0:W].astype(np.float32)
    wall = 150 + 20 * xx / W - 10 * yy / H
    for _ in range(8):
        x, y = (int(v) for v in rng.integers(20, (W - 20, H - 20)))
        cv2.circle(wall, (x, y), int(rng.integers(2, 5)), 130.0, -1, cv2.LINE_AA)
    return _board_before(wall, (280, 236), lambda s: (
        W / 2 + 60 * np.sin(2 * np.pi * 0.1 * s), H / 2 + 20 * np.sin(2 * np.pi * 0.13 * s)),
        n, rng)


def test_a_hold_lasts_while_nothing_on_the_frames_can_end_it():
    # The dots stay put while the board's tracks move: the camera is held still. Later the
    # board covers the dots or moves too little over a baseline to judge them; the hold must
    # not lapse for want of evidence (it did after three seconds: 29 px of drift).
    track = fit_motion(iter(_slow_board_before_plain_wall()), full_size=(W, H),
                       analysis_size=(W, H), settings=Settings())
    path = np.cumsum(track.matrices[:, :2, 2], axis=0)
    assert np.abs(path).max() < 2.0
    assert (track.reason[1:] == "held_still").mean() > 0.9


def _board_before_bare_wall(n: int = 120) -> list[Frame]:
    """A bare wall (a soft grey gradient, no marks at all); a board over a quarter of the
    picture drifting (±60 px at 0.2 Hz sideways, ±20 px at 0.26 Hz up and down)
    (:func:`_board_before`)."""
    yy, xx = np.mgrid[0:H, 0:W].astype(np.float32)
    wall = 150 + 20 * xx / W - 10 * yy / H
    return _board_before(wall, (300, 200), lambda s: (
        W / 2 + 60 * np.sin(2 * np.pi * 0.2 * s), H / 2 + 20 * np.sin(2 * np.pi * 0.26 * s)),
        n, np.random.default_rng(3))


def test_a_board_before_a_bare_wall_is_held_still_and_says_why():
    # Nothing away from the board tells whether it or the camera moved. The camera is held
    # still, never given the board's motion: before, every frame was `ok` while the log
    # followed the board by 60 px.
    track = fit_motion(iter(_board_before_bare_wall()), full_size=(W, H),
                       analysis_size=(W, H), settings=Settings())
    # Every frame after the first is held. Before, three frames where the board turned were
    # left `ok` (6.7 px; measured): the wall's marks moved "with" the board's fit for a frame
    # and were taken for the background's own detail confirming it.
    assert np.abs(np.cumsum(track.matrices[:, :2, 2], axis=0)).max() < 0.5
    assert (track.reason[1:] == "unconfirmed").all()
    assert ((track.status == "weak") == (track.reason == "unconfirmed")).all()


def _bare_wall() -> np.ndarray:
    """A bare wall: a soft grey gradient, no marks at all (H×W float grey levels)."""
    yy, xx = np.mgrid[0:H, 0:W].astype(np.float32)
    return 150 + 20 * xx / W - 10 * yy / H


def test_a_board_brought_close_over_a_bare_wall_stays_held():
    # The board grows to cover most of the picture: too little is left away from its tracks
    # to judge, and those frames stay unconfirmed as the frames before them were. Before,
    # some were `ok` and the log followed the board (measured: 142 px at the corners).
    frames = _board_before(_bare_wall(), (300, 200), lambda s: (
        W / 2 + 30 * np.sin(2 * np.pi * 0.2 * s), H / 2), 120, np.random.default_rng(3),
        scale=lambda s: 1.0 + 0.5 * np.sin(2 * np.pi * 0.25 * s))
    track = fit_motion(iter(frames), full_size=(W, H), analysis_size=(W, H),
                       settings=Settings())
    corners = np.array([[0, 0, 1], [W - 1, 0, 1], [0, H - 1, 1], [W - 1, H - 1, 1]], float).T
    path = np.eye(3)
    worst = 0.0
    for m in track.matrices:
        path = m @ path
        moved = path @ corners
        worst = max(worst, float(np.abs(moved[:2] / moved[2] - corners[:2]).max()))
    assert worst < 0.5
    assert (track.reason[1:] == "unconfirmed").all()


def test_a_board_waved_from_the_first_frame_over_a_bare_wall_is_held_from_the_start():
    # Waved fast from the first frame: its first frames came before any baseline could
    # judge them. Once the board is found unconfirmed, they are held too. Before, they kept
    # the board's motion (measured: 132 px).
    frames = _board_before(_bare_wall(), (362, 305), lambda s: (
        W / 2 + 120 * np.sin(2 * np.pi * 0.7 * s), H / 2 + 40 * np.sin(2 * np.pi * 1.1 * s)),
        90, np.random.default_rng(0))
    track = fit_motion(iter(frames), full_size=(W, H), analysis_size=(W, H),
                       settings=Settings())
    assert np.abs(np.cumsum(track.matrices[:, :2, 2], axis=0)).max() < 0.5
    assert (track.status[1:] == "weak").all()


def test_told_to_follow_the_tracks_the_board_is_the_camera_but_still_unconfirmed():
    # A moving drone before a clear sky looks the same: with plain_surround 'follow' the
    # tracks' motion is logged, and the frames still say that nothing confirmed it.
    track = fit_motion(iter(_board_before_bare_wall()), full_size=(W, H),
                       analysis_size=(W, H), settings=Settings(plain_surround="follow"))
    assert np.abs(np.cumsum(track.matrices[:, :2, 2], axis=0)).max() > 50
    assert (track.reason[1:] == "unconfirmed").mean() > 0.6


def test_a_moving_camera_over_a_textured_view_is_confirmed():
    # A drone shaken before a bridge, its tracks all over the picture: no frame is called
    # unconfirmed.
    clip = SyntheticClip(SceneSpec(style="truss", width=W, height=H, duration_s=3.0, seed=4))
    frames = (Frame(t, t / clip.fps, cv2.cvtColor(rgb, cv2.COLOR_RGB2GRAY))
              for t, rgb in clip.frames())
    track = fit_motion(frames, full_size=(W, H), analysis_size=(W, H), settings=Settings())
    assert "unconfirmed" not in set(track.reason)
    assert (track.status[1:] == "ok").mean() > 0.9


def test_failed_frames_get_interpolated_stand_ins():
    centre = np.array([(W - 1) / 2, (H - 1) / 2])
    q = np.zeros((6, 4))
    q[:, 0] = [0.0, 2.0, 2.0, 99.0, 4.0, 4.0]
    m = from_similarity(q, centre)
    status = np.array(["ok", "ok", "ok", "failed", "ok", "ok"])
    out = to_similarity(fill_failed(m, status, (W, H)), centre)
    assert out[3, 0] == 3.0  # halfway between its neighbours, not the wild 99
    np.testing.assert_allclose(out[[1, 2, 4, 5], 0], q[[1, 2, 4, 5], 0])


def test_a_weak_fit_on_few_tracks_does_not_anchor_a_run_of_stand_ins():
    # A still camera: frames 2-9 are stand-ins and frame 5 a weak fit 0.4 px off. Anchored
    # on it, the stand-ins on either side would ramp up to its 0.4 px and down again, 1.5 px
    # of path over the run; anchored on the frames measured in full, they stay at 0.01 px
    # a frame (the weak fit itself is kept as measured).
    centre = np.array([(W - 1) / 2, (H - 1) / 2])
    q = np.zeros((12, 4))
    q[:, 0] = 0.01
    q[5, 0] = 0.4
    q[[2, 3, 4, 6, 7, 8, 9], 0] = 50.0
    m = from_similarity(q, centre)
    status = np.array(["first", "ok"] + ["weak"] * 8 + ["ok", "ok"])
    reason = np.array(["", ""] + ["foreground"] * 3 + ["few_inliers"] + ["foreground"] * 4
                      + ["", ""])
    assert anchor_frames(status, reason).tolist() == [True, True] + [False] * 8 + [True, True]
    out = to_similarity(fill_failed(m, status, (W, H), stand_in=stand_ins(status, reason),
                                    anchor=anchor_frames(status, reason)), centre)
    np.testing.assert_allclose(out[[2, 3, 4, 6, 7, 8, 9], 0], 0.01, atol=1e-9)
    assert out[5, 0] == pytest.approx(0.4)
    before = to_similarity(fill_failed(m, status, (W, H), stand_in=stand_ins(status, reason)),
                           centre)
    assert before[2:10, 0].sum() - 0.4 > 1.4


def test_motion_track_select_and_concatenate_keep_every_column():
    n = 5
    rng = np.random.default_rng(9)
    track = MotionTrack(time_s=np.arange(n) / 30.0, matrices=rng.normal(size=(n, 3, 3)),
                        tracked=np.arange(n), inliers=np.arange(n) // 2,
                        inlier_ratio=rng.uniform(size=n), rms_px=rng.uniform(size=n),
                        rounds=np.arange(n) * 3, status=np.array(["ok", "weak", "ok", "failed",
                                                                  "cut"]),
                        excluded={"ignore": [[0, 0, 4, 4]]}, reason=None)
    head, tail = track.select(slice(None, 2)), track.select(slice(2, None))
    assert len(tail.time_s) == 3 and tail.reason is None and tail.excluded is track.excluded
    whole = MotionTrack.concatenate([head, tail], {"ignore": []})
    for name in LOG_COLUMNS:
        np.testing.assert_array_equal(getattr(whole, name), getattr(track, name))
    assert whole.reason.tolist() == [""] * n and whole.excluded == {"ignore": []}
    empty = MotionTrack.concatenate([], {})
    assert empty.matrices.shape == (0, 3, 3) and empty.status.dtype == np.dtype("<U6")
    assert set(track.log_columns()) == set(LOG_COLUMNS)


def test_lone_tracks_are_marks_apart_from_an_object():
    rng = np.random.default_rng(5)
    board = rng.uniform((200, 100), (440, 260), (300, 2))
    marks = np.array([[40.0, 30.0], [41.0, 33.0], [600.0, 320.0], [150.0, 300.0]])
    # The marks (one of them a pair of tracks) stand apart; the board's tracks never do.
    assert motion_pass.lone_tracks(board, 40.0).sum() == 0
    assert motion_pass.lone_tracks(np.concatenate([board, marks]), 40.0).sum() == 4
    assert motion_pass.lone_tracks(np.concatenate([board, marks]), 40.0, company=0).sum() == 2
    # Only the marks that moved with the scene over the baseline are counted; the others
    # still keep each other company.
    scene = np.r_[np.ones(len(board), bool), [True, False, False, True]]
    assert motion_pass.lone_tracks(np.concatenate([board, marks]), 40.0, among=scene).sum() == 2
    # A track alone just past a board's corner, against a plain wall, is still the board's.
    gx, gy = np.meshgrid(np.arange(200.0, 441.0, 20.0), np.arange(100.0, 261.0, 20.0))
    grid = np.c_[gx.ravel(), gy.ravel()]
    outline = np.array([[452.0, 272.0]])
    assert motion_pass.lone_tracks(np.concatenate([grid, outline]), 40.0, company=3).sum() == 0
    assert motion_pass.lone_tracks(np.concatenate([grid, outline + 30.0]), 40.0).sum() == 1
