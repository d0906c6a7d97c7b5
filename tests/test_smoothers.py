"""Smoothers on synthetic camera paths with known shake: shake removed, deliberate motion kept,
the margin respected, lock-off holding still."""

from __future__ import annotations

import logging

import numpy as np
import pytest

import stabilize
from stabilize import framing
from stabilize.camera_path import encode
from stabilize.config import AUTO_MARGIN_CAP, Settings
from stabilize.geometry import (
    apply,
    frame_centre,
    frame_corners,
    from_similarity,
    similarity_readout,
)
from stabilize.io import iter_frames
from stabilize.raw_path import accumulate
from stabilize.shake import shake_component
from stabilize.smoothers.kalman import kalman_smooth
from stabilize.smoothers.l1 import L1Settings, l1_smooth
from stabilize.smoothers.lockoff import hold_pose
from stabilize.steady_path import fill_missing, plan_corrections, smooth_path
from stabilize.synthetic import MotionSpec, SceneSpec, ShakeSpec, SyntheticClip

from .conftest import write_clip

W, H, FPS = 480, 270, 30.0
MARGIN = 0.1
SMOOTHERS = ("gaussian", "kalman", "l1", "lockoff")


def _clip(pan_px_s: float, seconds: float = 10.0, seed: int = 1, model: str = "similarity",
          fps: float = FPS) -> SyntheticClip:
    return SyntheticClip(SceneSpec(width=W, height=H, fps=fps, duration_s=seconds, seed=seed,
                                   model=model, motion=MotionSpec(pan_px_s=pan_px_s),
                                   shake=ShakeSpec.drone()))


@pytest.fixture(scope="module")
def still_path():
    return accumulate(_clip(0.0).inter_frame)


@pytest.fixture(scope="module")
def pan_path():
    return accumulate(_clip(40.0).inter_frame)


def _steady(p, smoother, model="similarity", margin=MARGIN, window_s=1.0):
    """Smoothed path with the budget enforced, as plan_corrections does it."""
    s = smooth_path(p, fps=FPS, window_s=window_s, model=model, width=W, height=H,
                    smoother=smoother, margin=margin)
    s, kept = framing.fit_to_margin(p, s, margin, model=model, width=W, height=H, fps=FPS,
                                    window_s=window_s, min_distortion=framing.MIN_DISTORTION)
    return s, kept


def _readout(m):
    return similarity_readout(m, frame_centre(W, H))


def _shake_rms(series):
    return float(np.sqrt(np.mean(shake_component(series, FPS, 1.0) ** 2)))


def _residual_shake(p, s):
    """Shake left in the output camera path (the readout of S_t) over the input's, per axis
    x, y, rotation (the contract's definition: above 1 Hz, zero-phase)."""
    rp, rs = _readout(p), _readout(s)
    return np.array([_shake_rms(rs[:, j]) / _shake_rms(rp[:, j]) for j in range(3)])


def _low_pass(r):
    return np.stack([r[:, j] - shake_component(r[:, j], FPS, 1.0) for j in range(2)], axis=1)


@pytest.mark.parametrize("smoother", SMOOTHERS)
@pytest.mark.parametrize("which", ["still", "pan"])
def test_shake_left_is_small_and_no_pixel_uncovered(smoother, which, still_path, pan_path):
    p = still_path if which == "still" else pan_path
    s, kept = _steady(p, smoother)
    assert np.all(_residual_shake(p, s) < 0.03)
    assert framing.covered(framing.corrections(p, s, MARGIN, W, H), W, H).all()
    if smoother != "lockoff" or which == "still":
        # The budget is ample for these: no frame needed easing.
        assert kept.min() == 1.0


@pytest.mark.parametrize("smoother", ["gaussian", "kalman", "l1"])
def test_deliberate_pan_comes_through(smoother, pan_path):
    s, _ = _steady(pan_path, smoother)
    err = np.abs(_low_pass(_readout(s)) - _low_pass(_readout(pan_path)))
    # The input's low-pass still holds the 0.5-1 Hz part of the wind, which every smoother at
    # window_s = 1 s takes out; that is most of these pixels.
    assert err.max() < 4.0
    assert np.polyfit(np.arange(len(s)) / FPS, _readout(s)[:, 0], 1)[0] == pytest.approx(
        40.0, abs=1.0)


def test_lockoff_holds_the_camera_still(still_path):
    s, kept = _steady(still_path, "lockoff")
    assert kept.min() == 1.0
    # The output camera S_t Z^-1: where the output frame's corners lie in frame 0.
    cam = apply(s @ np.linalg.inv(framing.zoom(MARGIN, W, H)), frame_corners(W, H))
    assert np.ptp(cam, axis=0).max() < 1.0


def test_lockoff_falls_back_smoothly_and_warns_when_the_margin_cannot_hold(pan_path, caplog):
    with caplog.at_level(logging.WARNING, logger="stabilize"):
        s, _ = _steady(pan_path, "lockoff")
    assert any("lockoff" in r.message for r in caplog.records)
    assert framing.covered(framing.corrections(pan_path, s, MARGIN, W, H), W, H).all()
    assert np.all(_residual_shake(pan_path, s) < 0.03)


def test_lockoff_holds_one_pose_per_shot():
    x = np.concatenate([np.full(30, 5.0), np.full(30, -7.0)]) + np.sin(np.arange(60))
    q = np.stack([x, 0 * x, 0 * x, 0 * x], axis=1)
    p = from_similarity(q, frame_centre(W, H))
    cuts = np.zeros(60, bool)
    cuts[30] = True
    s = smooth_path(p, fps=FPS, window_s=1.0, model="similarity", width=W, height=H,
                    cuts=cuts, smoother="lockoff", margin=MARGIN)
    r = _readout(s)
    assert np.ptp(r[:30, 0]) < 1e-9 and np.ptp(r[30:, 0]) < 1e-9
    np.testing.assert_allclose(r[[0, 30], 0], [hold_pose(q[:30])[0], hold_pose(q[30:])[0]])


def test_kalman_keeps_a_steady_pan_to_the_ends_and_is_frame_rate_independent():
    def smoothed(fps):
        t = np.arange(int(6 * fps)) / fps
        x = 40.0 * t + 2.0 * np.sin(2 * np.pi * 3.0 * t)
        return t, kalman_smooth(np.stack([x, -x], axis=1), fps, 1.0)

    t30, k30 = smoothed(30.0)
    t60, k60 = smoothed(60.0)
    # Diffuse start, RTS pass: no pull toward zero at either end; inside, the 3 Hz shake is
    # gone, at the very ends a small part of it remains.
    err = np.abs(k30[:, 0] - 40.0 * t30)
    assert err[60:-60].max() < 0.02
    assert err.max() < 0.5
    np.testing.assert_allclose(k30[:, 1], -k30[:, 0], atol=1e-9)
    np.testing.assert_allclose(np.interp(t30, t60, k60[:, 0]), k30[:, 0], atol=0.05)


def test_kalman_removes_shake_above_one_hertz():
    t = np.arange(600) / FPS
    out = kalman_smooth(np.sin(2 * np.pi * 2.0 * t)[:, None], FPS, 1.0)[:, 0]
    # Response 1 / (1 + (f / f_c)^4) with f_c = 0.375 Hz at window_s = 1: about 1e-3 at 2 Hz.
    assert np.std(out[60:-60]) < 3e-3


def test_l1_chunks_join_without_a_seam():
    clip = _clip(40.0, seconds=20.0, seed=4)
    p = accumulate(clip.inter_frame)
    q = encode(p, "similarity", W, H)
    args = dict(fps=FPS, window_s=1.0, margin=MARGIN, model="similarity", width=W, height=H)
    whole = l1_smooth(q, p, settings=L1Settings(chunk_s=30.0), **args)
    parts = l1_smooth(q, p, settings=L1Settings(chunk_s=6.0, overlap_s=2.0), **args)
    for z in (whole, parts):
        for j in range(3):
            assert _shake_rms(z[:, j]) < 0.03 * _shake_rms(q[:, j])
    # Second differences at the seams are no larger than along the rest of the path.
    d2 = np.abs(np.diff(parts[:, 0], 2))
    assert d2.max() < 0.2
    s = from_similarity(parts, frame_centre(W, H))
    assert framing.covered(framing.corrections(p, s, MARGIN, W, H), W, H).all()


@pytest.mark.parametrize("synth_model,model", [("affine", "affine"),
                                               ("perspective", "homography")])
def test_l1_on_corner_paths_covers_and_does_not_distort(synth_model, model):
    p = accumulate(_clip(0.0, seconds=6.0, seed=2, model=synth_model).inter_frame)
    s = smooth_path(p, fps=FPS, window_s=1.0, model=model, width=W, height=H, smoother="l1",
                    margin=MARGIN)
    c = framing.corrections(p, s, MARGIN, W, H)
    assert framing.covered(c, W, H).all()
    assert framing.distortion(c).min() > framing.MIN_DISTORTION
    assert np.all(_residual_shake(p, s) < 0.03)


def test_smooth_path_rejects_unknown_smoothers_and_l1_without_margin(still_path):
    args = dict(fps=FPS, window_s=1.0, model="similarity", width=W, height=H)
    with pytest.raises(ValueError):
        smooth_path(still_path, smoother="median", **args)
    with pytest.raises(ValueError):
        smooth_path(still_path, smoother="l1", **args)


@pytest.mark.parametrize("smoother", SMOOTHERS)
def test_auto_margin_is_chosen_reported_and_respected(smoother, caplog):
    clip = _clip(0.0, seconds=6.0, seed=5)
    matrices = np.array(clip.inter_frame)
    cuts = np.zeros(clip.n_frames, bool)
    settings = Settings(smoother=smoother)
    with caplog.at_level(logging.INFO, logger="stabilize"):
        plan = plan_corrections(matrices, cuts, fps=FPS, window_s=settings.window_s,
                                model=settings.model, smoother=smoother,
                                margin=settings.margin, width=W, height=H,
                                auto_cap=AUTO_MARGIN_CAP)
    margin = plan.figures()["margin"]
    assert 0.0 < margin <= 0.25
    assert any("auto chose" in r.message for r in caplog.records)
    assert framing.covered(plan.corrections, W, H).all()
    assert plan.figures()["frames_correction_eased"] == 0
    p = accumulate(matrices, cuts)
    # Smallest: a clearly smaller margin would not have covered the unconstrained path.
    ref = smooth_path(p, fps=FPS, window_s=1.0, model="similarity", width=W, height=H,
                      smoother="gaussian" if smoother == "l1" else smoother, margin=None)
    assert not framing.covered(framing.corrections(p, ref, 0.9 * margin, W, H), W, H).all()


@pytest.mark.slow
@pytest.mark.parametrize("smoother", ["kalman", "l1", "lockoff"])
def test_steady_end_to_end(smoother, tmp_path):
    clip = SyntheticClip(SceneSpec(style="truss", width=W, height=H, fps=FPS, duration_s=2.0,
                                   seed=3, noise_sigma=1.0))
    src = write_clip(tmp_path / "clip.mp4", (f for _, f in clip.frames()), FPS)
    log = stabilize.steady(src, tmp_path / "out.mp4", smoother=smoother, margin=MARGIN,
                           compare=True)
    compare = tmp_path / "out.compare.mp4"
    assert log.extra["outputs"]["compare"] == str(compare)
    assert sum(1 for _ in iter_frames(compare)) == clip.n_frames
    s = log.summary
    assert s["margin"] == MARGIN
    assert framing.covered(log.corrections, W, H).all()
    assert s["cropping_ratio"] == pytest.approx(0.8, abs=0.02)
    assert s["distortion"] > 0.99
    for axis in ("x_px", "y_px"):
        assert s[f"jitter_rms_{axis}_out"] < 0.1 * s[f"jitter_rms_{axis}"]


def _translations(x: np.ndarray) -> np.ndarray:
    m = np.repeat(np.eye(3)[None], len(x), axis=0)
    m[:, 0, 2] = x
    return m


def test_frames_missing_are_put_back_on_a_straight_line_for_the_smoothing():
    p = _translations(np.array([0.0, 1.0, 2.0, 8.0, 9.0]))
    cuts = np.array([False, False, False, False, True])
    missing = np.array([0, 0, 0, 5, 3])  # none is put back before a cut
    q, qcuts, real = fill_missing(p, cuts, missing)
    assert q[:, 0, 2].tolist() == [0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0]
    assert real.tolist() == [True] * 3 + [False] * 5 + [True] * 2
    assert qcuts.tolist() == [False] * 9 + [True]


def test_the_plan_of_a_clip_missing_frames_is_the_whole_clips_at_its_frames():
    """A pan of 2 px a frame with a 3 Hz shake (1.5 px), 15 frames missing: planned with the
    frames put back (on a straight line, so without the shake they had), the corrections of
    the frames present are those of the clip whole within 0.33 px; counting frames across
    the gap, they were up to 18.4 px off (measured)."""
    t = np.arange(150)
    x = 2.0 * t + 1.5 * np.sin(2 * np.pi * 3.0 * t / FPS)
    keep = (t < 60) | (t >= 75)
    h = _translations(np.r_[0.0, np.diff(x)])
    common = dict(fps=FPS, window_s=1.0, model="similarity", smoother="gaussian",
                  margin=0.1, width=W, height=H, auto_cap=AUTO_MARGIN_CAP)
    whole = plan_corrections(h, np.zeros(150, bool), **common)
    hk = _translations(np.r_[0.0, np.diff(x[keep])])
    missing = np.zeros(keep.sum(), int)
    missing[60] = 15
    put_back = plan_corrections(hk, np.zeros(keep.sum(), bool), missing=missing, **common)
    counted = plan_corrections(hk, np.zeros(keep.sum(), bool), **common)
    np.testing.assert_allclose(put_back.corrections, whole.corrections[keep], atol=0.4)
    assert np.abs(counted.corrections[:, 0, 2] - whole.corrections[keep][:, 0, 2]).max() > 15
