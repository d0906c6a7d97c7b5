"""The motion check of rendered frames (stabilize.residual) on frame pairs with exact motion,
and the summary figures built from it."""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest

from stabilize import residual, shake
from stabilize.geometry import frame_centre, similarity_readout
from stabilize.residual import (
    CheckSettings,
    MotionCheck,
    Region,
    RenderCheck,
    inherited_labels,
    pair_motion,
    reduce_luma,
)
from stabilize.steadiness import carried_readout, steadiness, with_carried


def _waves(seed: int, count: int = 24) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Random plane waves: wave vectors (count, 2) rad/px, phases, amplitudes. Wavelengths of
    24–120 full-resolution pixels, so even a 4× reduced copy samples them without aliasing."""
    rng = np.random.default_rng(seed)
    wavelength = rng.uniform(24.0, 120.0, count)
    angle = rng.uniform(0.0, math.pi, count)
    k = np.stack([np.cos(angle), np.sin(angle)], axis=1) * (2 * math.pi / wavelength)[:, None]
    return k, rng.uniform(0, 2 * math.pi, count), rng.uniform(0.5, 1.0, count)


def _render(waves, m: np.ndarray, width: int, height: int) -> np.ndarray:
    """Frame (height, width) uint8 showing the texture moved by the 3×3 similarity ``m``:
    the pixel at p shows the texture at m⁻¹·p, evaluated exactly (no resampling), so the
    motion between two frames is known to machine precision."""
    k, phase, amp = waves
    inv = np.linalg.inv(m)
    ys, xs = np.mgrid[0:height, 0:width].astype(np.float32)
    u = inv[0, 0] * xs + inv[0, 1] * ys + inv[0, 2]
    v = inv[1, 0] * xs + inv[1, 1] * ys + inv[1, 2]
    acc = np.zeros((height, width), np.float32)
    for (kx, ky), ph, a in zip(k, phase, amp, strict=True):
        acc += a * np.cos(kx * u + ky * v + ph)
    acc *= 60.0 / acc.std()
    return np.clip(np.rint(128.0 + acc), 0, 255).astype(np.uint8)


def _similarity(dx: float, dy: float, deg: float, centre: np.ndarray,
                scale: float = 1.0) -> np.ndarray:
    """A similarity about ``centre`` that moves the centre by (dx, dy), turns by ``deg``
    (the log's readout convention: atan2(m21 − m12, m11 + m22)) and scales by ``scale``."""
    t = math.radians(deg)
    r = scale * np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
    m = np.eye(3)
    m[:2, :2] = r
    m[:2, 2] = centre + (dx, dy) - r @ centre
    return m


def test_reduction_is_a_block_mean_on_the_pixel_centre_grid():
    rng = np.random.default_rng(0)
    for (w, h), k in [((1920, 1080), 4), ((1280, 720), 4), ((3840, 2160), 8), ((644, 362), 2),
                      ((500, 300), 1)]:
        luma = rng.integers(0, 256, (h, w), dtype=np.uint8)
        small, scale = reduce_luma(luma, 320)
        assert scale == (1.0 / k, 1.0 / k)
        assert 320 <= small.shape[1] < 640 or k == 1
        rw, rh = w // k, h // k
        exact = luma[:rh * k, :rw * k].astype(np.float64).reshape(rh, k, rw, k).mean(axis=(1, 3))
        # Each halving rounds once: within half a grey level per halving of the exact mean.
        assert np.abs(small - exact).max() <= 0.5 * math.log2(k) + 1e-9
    # A bright spot at full-resolution pixel (x, y) lands at ((x + 0.5)/k − 0.5, ...).
    luma = np.zeros((1080, 1920), np.uint8)
    luma[400:404, 800:804] = 255       # centred on (801.5, 401.5)
    small, (sx, _) = reduce_luma(luma, 320)
    ys, xs = np.nonzero(small)
    assert (xs.mean(), ys.mean()) == ((801.5 + 0.5) * sx - 0.5, (401.5 + 0.5) * sx - 0.5)


@pytest.mark.parametrize("size", [(960, 540), (1920, 1080)])
@pytest.mark.parametrize("dx, dy, deg", [(3.0, -2.0, 0.0), (0.37, 0.21, 0.0),
                                         (-7.6, 4.9, 0.6), (18.3, -11.2, -1.5)])
def test_pair_motion_recovers_exact_shifts_and_rotations(size, dx, dy, deg):
    """Sub-pixel accuracy on exact motion: within 0.03 px and 0.003° at 960×540 and 1080p
    (the copy measured is 480 wide: 2× and 4× reduced)."""
    w, h = size
    c = frame_centre(w, h)
    waves = _waves(1)
    m0 = _similarity(5.0, -3.0, 2.0, c)
    motion = _similarity(dx, dy, deg, c)
    a = _render(waves, m0, w, h)
    b = _render(waves, motion @ m0, w, h)
    check = MotionCheck((w, h))
    assert np.isnan(check.step(0, a)).all()       # the first frame has no predecessor
    got = check.step(1, b)
    want = similarity_readout(motion, c)[:3]
    np.testing.assert_allclose(got[:2], want[:2], atol=0.03)
    assert abs(got[2] - want[2]) < 0.003


def test_fill_and_excluded_regions_are_never_measured():
    """An output frame with a black fill band: the corners kept lie inside the covered region
    and outside the excluded rectangle, by the edge margin, and the motion is the content's."""
    w, h = 960, 540
    c = frame_centre(w, h)
    waves = _waves(2)
    shift = _similarity(2.4, -1.3, 0.0, c)
    a = _render(waves, np.eye(3), w, h)
    b = _render(waves, shift, w, h)
    # Black fill (Y = 16) over the left 200 columns and the bottom 90 rows of both frames:
    # a strong static edge and corner the check must not see.
    for img in (a, b):
        img[:, :200] = 16
        img[h - 90:] = 16
    covered = np.array([[199.5, -0.5], [w - 0.5, -0.5], [w - 0.5, h - 90.5], [199.5, h - 90.5]])
    excluded = np.array([[[600.0, 100.0], [760.0, 100.0], [760.0, 260.0], [600.0, 260.0]]])
    region = Region(covered, excluded)
    small_a, scale = reduce_luma(a, 320)
    small_b, _ = reduce_luma(b, 320)
    check = MotionCheck((w, h))
    pts = check._detect(small_a, scale, region)
    assert len(pts) > 40
    full = (pts + 0.5) / scale[0] - 0.5
    edge = CheckSettings().edge_px / scale[0]
    assert (full[:, 0] >= 199.5 + edge - 1).all() and (full[:, 1] <= h - 90.5 - edge + 1).all()
    inside_ex = ((full[:, 0] > 600 - edge + 1) & (full[:, 0] < 760 + edge - 1)
                 & (full[:, 1] > 100 - edge + 1) & (full[:, 1] < 260 + edge - 1))
    assert not inside_ex.any()
    pair = pair_motion(small_a, small_b, pts, scale=scale, full_size=(w, h), region=region)
    assert pair.ok
    np.testing.assert_allclose(pair.readout[:2], [2.4, -1.3], atol=0.03)
    back = (pair.points + 0.5) / scale[0] - 0.5
    assert (back[:, 0] >= 199.5 + edge - 1e-6).all()


def test_suspect_corners_do_not_decide_the_fit_even_when_they_are_the_most():
    """A large patch moving on its own holds most of the corners: unlabelled, the consensus
    sides with the patch; with its corners labelled suspect (they left an earlier fit), the
    fit is the scene's, and the labels then mark the patch's corners and clear the scene's
    by one pair."""
    w, h = 480, 270
    c = frame_centre(w, h)
    scene = _waves(3)
    patch = _waves(4, count=40)          # finer texture: more corners on the patch
    a = _render(scene, np.eye(3), w, h)
    b = _render(scene, _similarity(0.8, -0.4, 0.0, c), w, h)
    x0, x1 = 120, 420                    # the patch: over half of the frame
    a[:, x0:x1] = _render(patch, np.eye(3), w, h)[:, x0:x1]
    b[:, x0:x1] = _render(patch, _similarity(3.0, 2.0, 0.0, c), w, h)[:, x0:x1]
    region = Region.whole(w, h)
    small_a, scale = reduce_luma(a, 480)
    small_b, _ = reduce_luma(b, 480)
    # Points followed: 60 on the patch, 20 on the scene (left and right of it).
    gy = np.linspace(30, h - 30, 10)
    patch_pts = np.array([(x, y) for x in np.linspace(x0 + 30, x1 - 30, 6) for y in gy])
    scene_pts = np.array([(x, y) for x in (40.0, 80.0, 440.0) for y in gy])[:20]
    pts = np.vstack([patch_pts, scene_pts]).astype(np.float32)
    on_patch = np.arange(len(pts)) < len(patch_pts)
    blind = pair_motion(small_a, small_b, pts, scale=scale, full_size=(w, h), region=region)
    np.testing.assert_allclose(blind.readout[:2], [3.0, 2.0], atol=0.05)
    labels = np.where(on_patch, 15, 0)
    labelled = pair_motion(small_a, small_b, pts, scale=scale, full_size=(w, h),
                           region=region, suspect=labels)
    assert labelled.ok
    np.testing.assert_allclose(labelled.readout[:2], [0.8, -0.4], atol=0.05)
    # An expected scene motion (what the render passes from the source stream) picks the
    # group the same way, and the motion is still measured on the corners themselves.
    expected = _similarity(0.7, -0.3, 0.0, c)             # 0.14 px off the true motion
    guided = pair_motion(small_a, small_b, pts, scale=scale, full_size=(w, h),
                         region=region, scene=expected)
    np.testing.assert_allclose(guided.readout[:2], [0.8, -0.4], atol=0.05)
    # An expectation further off than the close band (0.25 px) but within the wide one (1 px)
    # still picks the scene's corners, not the patch's.
    rough = pair_motion(small_a, small_b, pts, scale=scale, full_size=(w, h), region=region,
                        scene=_similarity(0.3, -0.7, 0.0, c))      # 0.58 px off
    np.testing.assert_allclose(rough.readout[:2], [0.8, -0.4], atol=0.05)
    # Scene corners stay trusted; the patch's are suspect for the full span again.
    assert len(labelled.points) >= len(pts) - 3    # a few may fail the backward check
    kept_on_patch = (labelled.points[:, 0] > x0) & (labelled.points[:, 0] < x1)
    assert (labelled.suspect[kept_on_patch] == 15).all()
    assert (labelled.suspect[~kept_on_patch] == 0).all()


def test_corners_found_again_inherit_the_nearest_label():
    old = np.array([[10.0, 10.0], [50.0, 50.0], [90.0, 20.0]], np.float32)
    labels = np.array([0, 7, 15], np.int32)
    fresh = np.array([[50.5, 49.0], [200.0, 200.0], [88.0, 21.0], [11.0, 10.0]], np.float32)
    np.testing.assert_array_equal(inherited_labels(fresh, old, labels, 3.0), [7, 0, 15, 0])
    assert inherited_labels(fresh, old[:0], labels[:0], 3.0).tolist() == [0, 0, 0, 0]


def test_render_check_carries_the_region_through_the_correction_and_restarts_at_cuts():
    w, h = 640, 360
    c = frame_centre(w, h)
    waves = _waves(3)
    n = 8
    cuts = np.zeros(n, bool)
    cuts[5] = True
    rc = RenderCheck(n, (w, h), cuts=cuts, excluded=[(0, 300, 640, 60)])
    truth_src = np.array([[1.5 * t, -0.5 * t] for t in range(n)])
    for t in range(n):
        src = _render(waves, _similarity(*truth_src[t], 0.0, c), w, h)
        # The output: the source moved back by a correction that leaves 0.2 px of motion
        # per frame, with black fill where the source does not cover it.
        corr = _similarity(*(-truth_src[t] + (0.2 * t, 0.0)), 0.0, c)
        out = cv2.warpAffine(src, corr[:2], (w, h), flags=cv2.INTER_LINEAR,
                             borderMode=cv2.BORDER_CONSTANT, borderValue=16)
        rc(t, src, out, corr)
    assert np.isnan(rc.source[[0, 5]]).all() and np.isnan(rc.output[[0, 5]]).all()
    ok = np.setdiff1d(np.arange(n), [0, 5])
    np.testing.assert_allclose(rc.source[ok, :2], [[1.5, -0.5]] * len(ok), atol=0.03)
    np.testing.assert_allclose(rc.output[ok, :2], [[0.2, 0.0]] * len(ok), atol=0.05)
    assert rc.checked == n


def _still_scene_with_a_large_patch(n: int, w: int, h: int):
    """Frames of a still scene with a finer-textured patch over 60 % of the width that
    drifts on its own, slowly at first (0.3 px a frame, within the check's inlier
    threshold of the scene), then 1.5 px a frame; the scene has half the patch's contrast,
    so the patch holds most of the corners."""
    c = frame_centre(w, h)
    scene, patch = _waves(3), _waves(4, count=40)
    x0, x1 = 100, 500
    pos = np.cumsum([0.0] + [0.3 if t < 4 else 1.5 for t in range(1, n)])
    background = (64 + _render(scene, np.eye(3), w, h) // 2).astype(np.uint8)
    for t in range(n):
        frame = background.copy()
        frame[:, x0:x1] = _render(patch, _similarity(pos[t], 0.5 * pos[t], 0.0, c),
                                  w, h)[:, x0:x1]
        yield frame


def test_the_logs_scene_picks_the_sources_corners_and_a_log_the_frames_deny_does_not():
    """A still camera before a large patch moving on its own: left to itself, the check's
    first consensus takes the patch (or a blend of patch and scene while the patch creeps)
    for the scene; told the log's motion (none) on frames the log trusts, it measures the
    scene, and so does the output stream after it. A log the frames do not bear out (10 px
    off every corner) is not followed: the check falls back on its own consensus."""
    w, h, n = 640, 360, 10
    frames = list(_still_scene_with_a_large_patch(n, w, h))
    still = np.repeat(np.eye(3)[None], n, axis=0)
    status = np.array(["first"] + ["ok"] * (n - 1))
    runs = {}
    for name, scene in (("blind", None),
                        ("logged", residual.logged_scene(still, status)),
                        ("denied", residual.logged_scene(
                            still @ _similarity(10.0, -10.0, 0.0, np.zeros(2)), status))):
        rc = RenderCheck(n, (w, h), scene=scene)
        for t, frame in enumerate(frames):
            rc(t, frame, frame, np.eye(3))
        runs[name] = rc
    blind = np.nanmax(np.abs(runs["blind"].source[1:, :2]))
    assert blind > 0.2, blind                       # the patch's motion, read as the scene's
    np.testing.assert_allclose(runs["logged"].source[1:, :2], 0.0, atol=0.03)
    np.testing.assert_allclose(runs["logged"].output[1:, :2], 0.0, atol=0.03)
    np.testing.assert_allclose(runs["denied"].source[1:], runs["blind"].source[1:],
                               atol=1e-9)


def test_only_frames_the_log_measured_are_taken_as_its_scene():
    """Frames fitted in full, and weak fits on few inliers (measured, if noisily), give the
    check the log's scene; frames held still, left unconfirmed or stood in for, failed
    frames, cuts and the first frame do not: there the check chooses on its own."""
    status = np.array(["first", "ok", "weak", "weak", "weak", "weak", "failed", "cut", "ok"])
    reasons = np.array(["", "", "few_inliers", "held_still", "unconfirmed", "foreground",
                        "no_tracks", "", ""])
    m = np.repeat(np.eye(3)[None], len(status), axis=0)
    m[:, 0, 2] = np.arange(len(status))
    scene = residual.logged_scene(m, status, reasons)
    np.testing.assert_array_equal(scene[[1, 2, 8]], m[[1, 2, 8]])
    assert np.isnan(scene[[0, 3, 4, 5, 6, 7]]).all()
    assert np.isnan(residual.logged_scene(m, status)[2]).all()    # no reasons: ok only


def test_steadiness_compares_like_with_like():
    n, fps = 300, 30.0
    t = np.arange(n) / fps
    rng = np.random.default_rng(4)
    src = np.column_stack([np.diff(3.0 * np.sin(2 * np.pi * 2.0 * t), prepend=0.0),
                           np.diff(2.0 * np.sin(2 * np.pi * 3.1 * t + 1.0), prepend=0.0),
                           rng.normal(0, 0.01, n)])
    src[0] = np.nan
    cuts = np.zeros(n, bool)
    common = dict(cuts=cuts, fps=fps, above_hz=1.0, width=1920, height=1080)
    half = steadiness(0.5 * src, src, **common)
    assert half["output_steadier"] is True
    assert half["shake_reduction_x"] == pytest.approx(0.5, abs=0.01)
    assert half["shake_reduction_y"] == pytest.approx(0.5, abs=0.01)
    assert half["jitter_rms_x_px_src_check"] == pytest.approx(3.0 / math.sqrt(2), rel=0.05)
    worse = steadiness(1.2 * src, src, **common)
    assert worse["output_steadier"] is False and worse["shake_reduction_x"] < 0
    # Both still: below the floor the output counts as steady, whatever the ratio.
    assert steadiness(0.002 * src, 0.001 * src, **common)["output_steadier"] is True
    # Not measured, or too little of it: no verdict.
    assert steadiness(None, src, **common)["output_steadier"] is None
    sparse = src.copy()
    sparse[::3] = np.nan
    sparse[1::3] = np.nan
    res = steadiness(sparse, src, **common)
    assert res["output_steadier"] is None and res["output_pairs_measured"] < 0.5
    # Steadier, but keeping over a tenth of the shake (and over 1 px per 1000 px): not
    # steady, and said so; a tenth or less, or under the floor, is steady.
    big = 3.0 * src                          # 6.4 px RMS on x; the floor is 1.92 px
    assert steadiness(0.5 * big, big, **common)["output_keeps_shake"] is True
    huge = 30.0 * src                        # 64 px RMS: 8 % of it is 5 px, over the floor
    assert steadiness(0.08 * huge, huge, **common)["output_keeps_shake"] is False
    assert half["output_keeps_shake"] is False   # 1.06 px: under the floor
    assert steadiness(0.002 * src, 0.001 * src, **common)["output_keeps_shake"] is False
    assert steadiness(None, src, **common)["output_keeps_shake"] is None


def test_the_sources_motion_carried_through_the_corrections_is_the_outputs():
    """Exact ground truth: the output frame t is the source frame t resampled by C_t, so its
    motion is C_t·S_t·C_{t−1}⁻¹. Read about the centre, the carried motion must be that,
    for corrections that rotate, zoom and shift."""
    w, h, n = 640, 360, 6
    c = frame_centre(w, h)
    rng = np.random.default_rng(3)
    source = np.stack([_similarity(*rng.uniform(-4, 4, 2), rng.uniform(-0.5, 0.5), c)
                       for _ in range(n)])
    corrections = np.stack([_similarity(*rng.uniform(-20, 20, 2), rng.uniform(-2, 2), c,
                                        scale=rng.uniform(1.05, 1.15)) for _ in range(n)])
    readout = similarity_readout(source, c)[:, :3]
    readout[0] = np.nan
    readout[3] = np.nan                      # a pair the source did not measure
    cuts = np.zeros(n, bool)
    cuts[5] = True                           # nor is motion across a cut carried
    got = carried_readout(readout, corrections, cuts, w, h)
    want = similarity_readout(corrections[1:] @ source[1:] @ np.linalg.inv(corrections[:-1]),
                              c)[:, :3]
    np.testing.assert_allclose(got[[1, 2, 4]], want[[0, 1, 3]], atol=1e-9)
    assert np.isnan(got[[0, 3, 5]]).all()
    # It fills only the output's gaps, and only when half the pairs or more were measured on
    # the output itself.
    out = np.full((n, 3), 0.5)
    out[0] = np.nan
    out[2] = np.nan
    filled, from_source = with_carried(out, got, cuts)
    np.testing.assert_array_equal(from_source, [False, False, True, False, False, False])
    np.testing.assert_allclose(filled[2], got[2])
    np.testing.assert_array_equal(filled[[1, 3, 4, 5]], out[[1, 3, 4, 5]])
    out[[1, 3]] = np.nan                     # 1 of the 4 pairs measured on the output
    filled, from_source = with_carried(out, got, cuts)
    assert not from_source.any() and np.isnan(filled[2]).all()


def test_summary_out_figures_come_from_the_measured_output():
    """With the output's measured motion, ``_out`` describes it; the plan moves to
    ``_planned``."""
    n, fps, w, h = 240, 30.0, 640, 360
    c = frame_centre(w, h)
    t = np.arange(n) / fps
    sway = 2.0 * np.sin(2 * np.pi * 2.5 * t)
    matrices = np.stack([_similarity(d, 0.0, 0.0, c) for d in np.diff(sway, prepend=0.0)])
    status = np.full(n, "ok")
    from stabilize.raw_path import accumulate

    path = accumulate(matrices)
    corrections = np.linalg.inv(path)      # a plan that removes everything
    smooth = np.zeros((n, 4))
    smooth[:, 3] = 1.0
    left = 0.3 * np.sin(2 * np.pi * 4.0 * t)  # what the written video really kept
    measured = np.column_stack([np.diff(left, prepend=0.0), np.zeros(n), np.zeros(n)])
    measured[0] = np.nan
    measured[50] = np.nan                  # a gap, filled from its neighbours
    common = dict(matrices=matrices, path=path, status=status, fps=fps, width=w, height=h,
                  above_hz=1.0, fov_deg=None, smooth_readout=smooth, corrections=corrections)
    plan = shake.summarise(**common)
    s = shake.summarise(**common, output_motion_readout=measured)
    assert s["jitter_rms_x_px_planned"] == plan["jitter_rms_x_px_out"] < 1e-6
    assert s["stability_translation_planned"] == plan["stability_translation_out"]
    assert s["jitter_rms_x_px_out"] == pytest.approx(0.3 / math.sqrt(2), rel=0.05)
    assert s["jitter_rms_x_px"] == pytest.approx(2.0 / math.sqrt(2), rel=0.05)
    assert 0 <= s["stability_translation_out"] <= 1
    # Too little measured: no figures after steadying rather than wrong ones.
    blind = np.full((n, 3), np.nan)
    s = shake.summarise(**common, output_motion_readout=blind)
    assert s["jitter_rms_x_px_out"] is None and s["stability_translation_out"] is None
    assert s["jitter_rms_x_px_planned"] is not None


def test_a_gap_at_a_frame_the_log_found_weak_leaves_the_output_unvouched_for():
    """An output pair nothing measured is bridged for the figures after steadying; at a
    frame the log measured with confidence that is harmless, but at a weak one the log
    itself may have put a jump there (a drawn flat pattern: a weak frame 7 px off, in an
    unmeasured pair, and the figures read a tenth of the truth). Then no figure is given,
    unless the source's measurement, carried through the corrections, fills the gap."""
    from stabilize.jobs.figures import shake_summary

    n, fps, w, h = 240, 30.0, 640, 360
    c = frame_centre(w, h)
    t = np.arange(n) / fps
    sway = np.diff(2.0 * np.sin(2 * np.pi * 2.5 * t), prepend=0.0)
    matrices = np.stack([_similarity(d, 0.0, 0.0, c) for d in sway])
    corrections = np.repeat(np.eye(3)[None], n, axis=0)
    source = np.column_stack([sway, np.zeros(n), np.zeros(n)])
    source[0] = np.nan
    output = np.zeros((n, 3))
    output[0] = np.nan
    output[120] = np.nan
    status = np.full(n, "ok")
    status[0] = "first"
    common = dict(matrices=matrices, time_s=t, rms_px=np.full(n, 0.1),
                  inliers=np.full(n, 200), reasons=np.full(n, ""), width=w, height=h,
                  fps_nominal=fps, above_hz=1.0, fov_deg=None, corrections=corrections,
                  steadiness=True)
    no_source = source.copy()
    no_source[120] = np.nan                 # nor did the source's check measure that pair
    at_ok = shake_summary(status=status, output_check=output, source_check=no_source,
                          **common)
    assert at_ok["output_unchecked_weak_frames"] == 0
    assert at_ok["jitter_rms_x_px_out"] is not None and at_ok["output_steadier"] is not None
    weak = status.copy()
    weak[120] = "weak"
    at_weak = shake_summary(status=weak, output_check=output, source_check=no_source,
                            **common)
    assert at_weak["output_unchecked_weak_frames"] == 1
    assert at_weak["jitter_rms_x_px_out"] is None and at_weak["output_steadier"] is None
    assert at_weak["output_pairs_measured"] == pytest.approx(238 / 239)
    filled = shake_summary(status=weak, output_check=output, source_check=source, **common)
    assert filled["output_unchecked_weak_frames"] == 0
    assert filled["output_pairs_carried"] == pytest.approx(1 / 239)
    # The identity correction carries the source's sway into the output as it is.
    assert filled["jitter_rms_x_px_out"] > 0.01
