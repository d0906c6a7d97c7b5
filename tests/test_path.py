"""Camera path accumulation, parameterisations and the smoothers' dispatch."""

import numpy as np
import pytest

from stabilize.camera_path import blend, decode, encode
from stabilize.geometry import (
    frame_centre,
    from_corners,
    from_similarity,
    similarity_readout,
    to_similarity,
)
from stabilize.raw_path import accumulate, segments
from stabilize.smoothers.gaussian import gaussian_smooth
from stabilize.steady_path import SMOOTHERS, smooth_path


def _translation(dx, dy):
    m = np.eye(3)
    m[0, 2], m[1, 2] = dx, dy
    return m


def test_pan_right_makes_path_x_grow():
    # The scene moves left in the image by 2 px a frame when the camera pans right.
    h = np.stack([np.eye(3)] + [_translation(-2.0, 0.0)] * 9)
    p = accumulate(h)
    r = similarity_readout(p, frame_centre(640, 360))
    np.testing.assert_allclose(r[:, 0], 2.0 * np.arange(10), atol=1e-12)
    np.testing.assert_allclose(r[:, 1], 0.0, atol=1e-12)


def test_accumulate_composes_and_restarts_at_cuts():
    rng = np.random.default_rng(1)
    h = [np.eye(3)]
    for _ in range(5):
        m = np.eye(3)
        m[:2, :2] += rng.normal(0, 0.01, (2, 2))
        m[:2, 2] = rng.normal(0, 3, 2)
        h.append(m)
    h = np.stack(h)
    p = accumulate(h)
    a = h[3] @ h[2] @ h[1]
    np.testing.assert_allclose(p[3], np.linalg.inv(a) / np.linalg.inv(a)[2, 2], atol=1e-12)
    cuts = np.zeros(6, bool)
    cuts[3] = True
    pc = accumulate(h, cuts)
    np.testing.assert_allclose(pc[3], np.eye(3))
    np.testing.assert_allclose(pc[4], np.linalg.inv(h[4]) / np.linalg.inv(h[4])[2, 2])
    assert segments(cuts) == [slice(0, 3), slice(3, 6)]


def test_similarity_parameterisation_round_trips():
    c = frame_centre(1920, 1080)
    q = np.array([[3.0, -4.0, 0.1, 0.02], [0.0, 0.0, 0.0, 0.0], [-50.0, 7.5, -0.3, -0.1]])
    m = from_similarity(q, c)
    np.testing.assert_allclose(to_similarity(m, c), q, atol=1e-12)
    r = similarity_readout(m, c)
    np.testing.assert_allclose(r[:, 0:2], q[:, 0:2], atol=1e-9)
    np.testing.assert_allclose(np.radians(r[:, 2]), q[:, 2], atol=1e-12)
    np.testing.assert_allclose(np.log(r[:, 3]), q[:, 3], atol=1e-12)


def test_corner_parameterisation_round_trips_homographies():
    h = np.array([[[1.01, 0.02, 5.0], [-0.01, 0.99, -3.0], [1e-5, -2e-5, 1.0]]])
    q = encode(h, "homography", 640, 480)
    np.testing.assert_allclose(decode(q, "homography", 640, 480), h, atol=1e-9)
    np.testing.assert_allclose(from_corners(encode(np.eye(3)[None], "affine", 64, 48), 64, 48),
                               np.eye(3)[None], atol=1e-12)


def test_gaussian_keeps_a_steady_pan_to_the_ends_and_removes_shake():
    fps = 30.0
    t = np.arange(300) / fps
    pan = 40.0 * t
    shake = 3.0 * np.sin(2 * np.pi * 4.0 * t)
    out = gaussian_smooth(np.stack([pan + shake], axis=1), fps, 1.0)[:, 0]
    # Reflection about a fitted line keeps a linear pan straight to the ends (no pull toward
    # a constant): inside, exact; at the very ends, off by a small part of the 3 px shake.
    r = int(3 * 0.5 * fps)
    assert np.max(np.abs(out - pan)[r:-r]) < 0.01
    assert np.max(np.abs(out - pan)) < 0.5
    # Shake at 4 Hz through a Gaussian of sigma 0.5 s: attenuation exp(-2 pi^2 f^2 sigma^2).
    assert np.std((out - pan)[r:-r]) < 1e-3 * np.std(shake)


def test_smooth_path_is_frame_rate_independent():
    def path_at(fps):
        t = np.arange(int(5 * fps)) / fps
        q = np.stack([10 * t + 2 * np.sin(2 * np.pi * 3 * t), 0 * t, 0 * t, 0 * t], axis=1)
        p = from_similarity(q, frame_centre(320, 240))
        s = smooth_path(p, fps=fps, window_s=1.0, model="similarity", width=320, height=240)
        return t, to_similarity(s, frame_centre(320, 240))[:, 0]

    t30, x30 = path_at(30.0)
    t60, x60 = path_at(60.0)
    np.testing.assert_allclose(np.interp(t30, t60, x60), x30, atol=0.05)


def test_blend_goes_from_raw_to_smooth():
    c = frame_centre(320, 240)
    p = from_similarity(np.array([[10.0, 5.0, 0.2, 0.01]]), c)
    s = from_similarity(np.array([[0.0, 0.0, 0.0, 0.0]]), c)
    np.testing.assert_allclose(blend(p, s, np.array([0.0]), "similarity", 320, 240), p,
                               atol=1e-12)
    np.testing.assert_allclose(blend(p, s, np.array([1.0]), "similarity", 320, 240), s,
                               atol=1e-12)
    half = to_similarity(blend(p, s, np.array([0.5]), "similarity", 320, 240), c)
    np.testing.assert_allclose(half, [[5.0, 2.5, 0.1, 0.005]], atol=1e-12)


@pytest.mark.parametrize("smoother", SMOOTHERS)
def test_every_smoother_restarts_at_cuts_and_keeps_a_still_camera_still(smoother):
    n = 90
    c = frame_centre(320, 240)
    x = np.where(np.arange(n) < 45, 0.0, 30.0)
    p = from_similarity(np.stack([x, 0 * x, 0 * x, 0 * x], axis=1), c)
    cuts = np.zeros(n, bool)
    cuts[45] = True
    s = smooth_path(p, fps=30.0, window_s=1.0, model="similarity", width=320, height=240,
                    cuts=cuts, smoother=smoother, margin=0.1)
    # Each shot is still on its own: nothing of the jump across the cut leaks in.
    np.testing.assert_allclose(to_similarity(s, c), to_similarity(p, c), atol=1e-6)
