"""Synthetic clips: their ground truth must describe the rendered pixels exactly."""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from stabilize.synthetic import (
    MotionSpec,
    Mover,
    SceneSpec,
    ShakeSpec,
    SyntheticClip,
    grid_transfer_error,
    movers_covering,
)

W, H = 320, 180
BUSY = MotionSpec(pan_px_s=50.0, climb_px_s=8.0, zoom_per_s=0.04, roll_deg_s=1.5,
                  shear_per_s=0.01, aspect_per_s=0.01, tilt_x_deg_s=1.0, tilt_y_deg=2.0)


def _spec(**kw) -> SceneSpec:
    base = dict(width=W, height=H, fps=30.0, duration_s=1.0, seed=4, motion=BUSY,
                shake=ShakeSpec.drone(wind_px=5.0))
    base.update(kw)
    return SceneSpec(**base)


def _warp_residual(prev: np.ndarray, cur: np.ndarray, hom: np.ndarray) -> float:
    """Mean |warp(prev, hom) − cur| in grey levels over the region both frames see."""
    warped = cv2.warpPerspective(prev.astype(np.float32), hom, (W, H), flags=cv2.INTER_LINEAR)
    inside = cv2.warpPerspective(np.ones((H, W), np.uint8), hom, (W, H),
                                 flags=cv2.INTER_NEAREST, borderValue=0)
    inside = cv2.erode(inside, np.ones((5, 5), np.uint8)).astype(bool)
    assert inside.mean() > 0.5
    return float(np.abs(warped - cur.astype(np.float32))[inside].mean())


@pytest.mark.parametrize(
    ("style", "model", "limit"),
    [("truss", "similarity", 2.0), ("field", "perspective", 2.0), ("solar", "affine", 3.0),
     ("truss", "translation", 2.0)],
)
def test_warping_previous_frame_by_ground_truth_reproduces_frame(style, model, limit):
    clip = SyntheticClip(_spec(style=style, model=model))
    for t in (1, 17, 29):
        prev, cur = clip.frame(t - 1), clip.frame(t)
        good = _warp_residual(prev, cur, clip.inter_frame[t])
        assert good < limit
        # Half a pixel off must be clearly visible, so the check above has teeth.
        off = np.array([[1, 0, 0.5], [0, 1, 0.0], [0, 0, 1]]) @ clip.inter_frame[t]
        assert _warp_residual(prev, cur, off) > 1.5 * good


def test_inter_frame_is_composition_of_world_to_frame():
    clip = SyntheticClip(_spec(model="perspective"))
    g, h = clip.world_to_frame, clip.inter_frame
    assert np.array_equal(h[0], np.eye(3))
    expect = g[1:] @ np.linalg.inv(g[:-1])
    np.testing.assert_allclose(h[1:], expect / expect[:, 2:3, 2:3], atol=1e-12, rtol=1e-9)
    np.testing.assert_allclose(h[:, 2, 2], 1.0)
    np.testing.assert_allclose(g[:, 2, 2], 1.0)
    assert np.abs(h[1:, 2, :2]).max() > 1e-7  # genuinely projective


def test_model_restricts_the_inter_frame_transform():
    h = SyntheticClip(_spec(model="translation")).inter_frame[1:]
    np.testing.assert_allclose(h[:, :2, :2], np.broadcast_to(np.eye(2), h[:, :2, :2].shape),
                               atol=1e-12)
    h = SyntheticClip(_spec(model="similarity")).inter_frame[1:]
    np.testing.assert_allclose(h[:, 0, 0], h[:, 1, 1], atol=1e-12)
    np.testing.assert_allclose(h[:, 0, 1], -h[:, 1, 0], atol=1e-12)
    np.testing.assert_allclose(h[:, 2, :2], 0.0, atol=1e-15)
    h = SyntheticClip(_spec(model="affine")).inter_frame[1:]
    np.testing.assert_allclose(h[:, 2, :2], 0.0, atol=1e-15)
    assert np.abs(h[:, 0, 0] - h[:, 1, 1]).max() > 1e-5


def test_same_seed_same_clip_other_seed_other_clip():
    kw = dict(style="field", movers=movers_covering(0.05, W, H), telemetry=True,
              noise_sigma=2.0, duration_s=0.3)
    a, b = SyntheticClip(_spec(**kw)), SyntheticClip(_spec(**kw))
    c = SyntheticClip(_spec(seed=5, **kw))
    for t in (0, 5):
        assert np.array_equal(a.frame(t), b.frame(t))
        assert not np.array_equal(a.frame(t), c.frame(t))
    ga, gb = a.ground_truth(), b.ground_truth()
    assert ga.keys() == gb.keys()
    for key in ga:
        np.testing.assert_array_equal(ga[key], gb[key])
    assert not np.allclose(a.world_to_frame, c.world_to_frame)


def test_motion_is_frame_rate_independent():
    s30 = SyntheticClip(_spec(fps=30.0))
    s60 = SyntheticClip(_spec(fps=60.0))
    assert (s30.n_frames, s60.n_frames) == (30, 60)
    assert s30.world_size == s60.world_size
    np.testing.assert_allclose(s30.world_to_frame, s60.world_to_frame[::2], atol=1e-9)
    p30, p60 = s30.camera_path(), s60.camera_path()
    for key in p30:
        np.testing.assert_allclose(p30[key], p60[key][::2], atol=1e-9)
    assert np.array_equal(s30.frame(21), s60.frame(42))
    # Two 60 fps steps make one 30 fps step.
    np.testing.assert_allclose(s60.inter_frame[42] @ s60.inter_frame[41], s30.inter_frame[21],
                               atol=1e-9)


def test_supersampling_keeps_the_geometry():
    """A 2× render, area-downsampled, must sit exactly where the 1× render sits."""
    # Zoomed out and rolled, so a half-pixel slip in the pixel-centre bookkeeping would show.
    motion = MotionSpec(pan_px_s=20.0, zoom=0.6, roll_deg=7.0)
    one = SyntheticClip(_spec(motion=motion, shake=ShakeSpec(), supersample=1))
    two = SyntheticClip(_spec(motion=motion, shake=ShakeSpec(), supersample=2))
    np.testing.assert_array_equal(one.world_to_frame, two.world_to_frame)
    w, h = one.world_size
    rng = np.random.default_rng(0)
    smooth = cv2.GaussianBlur(rng.random((h, w, 3)).astype(np.float32), (0, 0), 2.0)
    smooth = (smooth - smooth.min()) / (smooth.max() - smooth.min()) * 255.0
    one.set_world(np.rint(smooth).astype(np.uint8))
    big = cv2.resize(smooth, (2 * w, 2 * h), interpolation=cv2.INTER_CUBIC)
    two.set_world(np.rint(np.clip(big, 0, 255)).astype(np.uint8))
    a = one.frame(10).astype(np.float32)
    b = two.frame(10).astype(np.float32)
    assert np.abs(a - b).mean() < 0.6
    # Shifting by a quarter pixel would be far worse than what is left.
    shifted = cv2.warpAffine(b, np.float32([[1, 0, 0.25], [0, 1, 0.25]]), (W, H),
                             borderMode=cv2.BORDER_REPLICATE)
    inner = (slice(4, -4), slice(4, -4))
    assert np.abs(a - shifted)[inner].mean() > 2 * np.abs(a - b)[inner].mean()
    # The drawn worlds agree too, up to rendering detail.
    one, two = (SyntheticClip(_spec(style="field", shake=ShakeSpec(), supersample=k))
                for k in (1, 2))
    assert np.abs(one.frame(3).astype(np.float32) - two.frame(3)).mean() < 4.0


def test_shake_scaled_to_zero_is_the_smooth_path():
    clip = SyntheticClip(_spec(shake=ShakeSpec.drone().scaled(0.0)))
    np.testing.assert_allclose(clip.world_to_frame, clip.smooth_world_to_frame, atol=1e-12)
    shaky = SyntheticClip(_spec())
    gt = shaky.ground_truth()
    fixed = gt["shake_correction"] @ gt["world_to_frame"]
    np.testing.assert_allclose(fixed / fixed[:, 2:3, 2:3], gt["smooth_world_to_frame"], atol=1e-9)


def test_frames_stream_in_order():
    clip = SyntheticClip(_spec(duration_s=0.2, telemetry=True))
    got = [(t, f.shape, f.dtype) for t, f in clip.frames()]
    assert got == [(t, (H, W, 3), np.uint8) for t in range(6)]


def test_cut_and_textureless_flags():
    clip = SyntheticClip(_spec(duration_s=2.0, cuts_s=(1.0,), textureless_s=(0.4, 0.6)))
    gt = clip.ground_truth()
    cut = np.flatnonzero(gt["cut"])
    assert list(cut) == [30]
    assert np.isnan(gt["inter_frame"][30]).all()
    assert not np.isnan(np.delete(gt["inter_frame"], 30, axis=0)).any()
    assert list(np.flatnonzero(gt["textureless"])) == list(range(12, 18))
    expect = np.ones(60, bool)
    expect[[0, 30]] = False
    expect[12:19] = False
    np.testing.assert_array_equal(gt["observable"], expect)
    assert list(np.unique(gt["shot"])) == [0, 1]
    sky = cv2.cvtColor(clip.frame(14), cv2.COLOR_RGB2GRAY)
    ground = cv2.cvtColor(clip.frame(5), cv2.COLOR_RGB2GRAY)
    assert cv2.Laplacian(sky, cv2.CV_64F).std() < 0.2 * cv2.Laplacian(ground, cv2.CV_64F).std()
    assert not np.array_equal(clip.frame(29), clip.frame(30))


def test_movers_and_telemetry_are_masked_and_move_independently():
    movers = movers_covering(0.08, W, H, count=2, speed_px_s=60.0, seed=1)
    area = sum(m.size_px[0] * m.size_px[1] for m in movers)
    assert area == pytest.approx(0.08 * W * H)
    clip = SyntheticClip(_spec(movers=movers, telemetry=True, duration_s=0.5))
    gt = clip.ground_truth()
    boxes = gt["mover_boxes"]
    assert boxes.shape == (15, 2, 4)
    # Frame-anchored movers bounce inside the frame and ignore the camera.
    assert boxes[..., :2].min() >= -1.0 and boxes[..., 2].max() <= W and boxes[..., 3].max() <= H
    speed = np.hypot(*(boxes[1:, :, :2] - boxes[:-1, :, :2]).transpose(2, 0, 1)) * clip.fps
    assert np.isclose(speed, 60.0).mean() > 0.75  # a bounce step is shorter
    rgb, mask = clip.frame(7, return_mask=True)
    y0 = int(gt["telemetry_box"][1])
    assert mask[y0:].all() and 0.5 * y0 < H
    share = mask[:y0].mean() * y0 / H
    assert 0.04 < share < 0.09
    other = clip.frame(8)
    assert np.array_equal(rgb[y0:y0 + 1], other[y0:y0 + 1])  # static strip background
    assert not np.array_equal(rgb[y0:], other[y0:])  # but the digits change


def test_world_anchored_mover_starts_where_asked():
    car = Mover("vehicle", (40.0, 20.0), (100.0, 90.0), (30.0, 0.0), "world")
    clip = SyntheticClip(_spec(movers=(car,), shake=ShakeSpec(), duration_s=0.3))
    box = clip.ground_truth()["mover_boxes"][0, 0]
    assert (box[0] + box[2]) / 2 == pytest.approx(100.0, abs=1e-6)
    assert (box[1] + box[3]) / 2 == pytest.approx(90.0, abs=1e-6)


def test_grid_transfer_error():
    rng = np.random.default_rng(0)
    a = np.eye(3) + 0.01 * rng.standard_normal((3, 3))
    assert grid_transfer_error(a, a, 640, 360) == 0.0
    shift = np.array([[1, 0, 3.0], [0, 1, -4.0], [0, 0, 1]])
    assert grid_transfer_error(np.eye(3), shift, 640, 360) == pytest.approx(5.0, abs=1e-12)
    # Scale about the origin: mean distance of the grid from the origin times the scale step.
    scale = np.diag([1.1, 1.1, 1.0])
    xs, ys = np.meshgrid(np.linspace(0, 99, 5), np.linspace(0, 49, 5))
    expect = 0.1 * np.hypot(xs, ys).mean()
    assert grid_transfer_error(np.eye(3), scale, 100, 50, n=5) == pytest.approx(expect)
    stack = np.stack([np.eye(3), shift, 2 * shift])  # 2·shift is the same homography
    err = grid_transfer_error(stack, np.eye(3), 640, 360)
    assert err.shape == (3,)
    np.testing.assert_allclose(err, [0.0, 5.0, 5.0], atol=1e-12)
    assert np.isnan(grid_transfer_error(np.full((3, 3), np.nan), np.eye(3), 640, 360))


@given(st.floats(-50, 50), st.floats(-50, 50), st.floats(0.2, 5.0))
def test_grid_transfer_error_of_any_translation_is_its_length(dx, dy, s):
    shift = np.array([[1, 0, dx], [0, 1, dy], [0, 0, 1]])
    # Scaling a homography does not change the mapping, nor the error.
    err = grid_transfer_error(s * np.eye(3), shift, 320, 180, n=4)
    assert err == pytest.approx(math.hypot(dx, dy), abs=1e-9)


def test_invalid_specs_are_rejected():
    with pytest.raises(ValueError):
        SceneSpec(style="moon")
    with pytest.raises(ValueError):
        SceneSpec(model="warp")
    with pytest.raises(ValueError):
        SyntheticClip(_spec(motion=MotionSpec(tilt_y_deg=80.0), model="perspective"))
