"""Removing the row spread inside rolling-shutter frames, on drawn scenes of our own.

The rendered clips are 640×360 (the within-frame figures at 1280×720 are as good or better:
``tests/benchmarks/bench_rolling_correction.py`` prints both).
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from stabilize.geometry import from_similarity
from stabilize.row_bands import band_centres, band_phase_shifts, exposure_times, within_frame_spread
from stabilize.row_motion import RowMotionSettings, within_frame_motion
from stabilize.row_warp import plain_maps, plane_maps, remap, row_shift_at, row_warp_maps
from stabilize.synthetic_rolling import (
    VibratingPath,
    draw_world,
    one_frame_difference,
    render_rolling,
)

FPS = 30.0
READOUT = 0.025
BANDS = 24


def _true_within(path, motion, readout_s, height):
    """w_t(y) straight from the path at the rows and frames of ``motion``, (n, r, 2) px."""
    tt = exposure_times(motion.frames[:, None] / FPS, motion.rows_px[None, :], height,
                        readout_s)
    tr = exposure_times(motion.frames / FPS, motion.ref_row_px, height, readout_s)
    return path(tt.ravel()).reshape(*tt.shape, 2) - path(tr)[:, None, :]


def _exact_samples(path, n_frames, height, readout_s, noise_px, seed=0):
    rows = band_centres(height, BANDS)
    frames = np.repeat(np.arange(1, n_frames), BANDS)
    row = np.tile(rows, n_frames - 1)
    t = exposure_times(frames / FPS, row, height, readout_s)
    d = one_frame_difference(path, t, FPS)
    d += np.random.default_rng(seed).normal(0.0, noise_px, d.shape)
    return frames, row, d


def _spread(w):
    """RMS (px) of within-frame displacements about each frame's mean."""
    return float(np.sqrt(((w - w.mean(axis=1, keepdims=True)) ** 2).sum(axis=2).mean()))


@pytest.mark.parametrize("freq", [47.0, 83.0, 131.0])
def test_within_frame_motion_from_exact_band_samples(freq):
    path = VibratingPath(vibration_hz=freq, seed=int(freq))
    frames, rows, d = _exact_samples(path, 90, 720, READOUT, noise_px=0.05)
    m = within_frame_motion(frames, rows, d, fps=FPS, height=720, readout_s=READOUT)
    assert m.shift_px.shape == (90, 33, 2) and m.frames[0] == 0 and m.frames[-1] == 89
    ref = np.argmin(np.abs(m.rows_px - m.ref_row_px))
    truth = _true_within(path, m, READOUT, 720)
    assert np.abs(truth[:, ref]).max() < 0.05 and np.abs(m.shift_px[:, ref]).max() < 0.05
    # The error is the noise plus the share of the vibration that looks alike in every frame.
    assert _spread(m.shift_px - truth) < 0.15 * _spread(truth)


def test_shake_alone_gives_the_shear_of_its_velocity():
    # A pan at (300, −120) px/s shears each frame by velocity · R · (y − y_ref) / H.
    path = VibratingPath(vibration_hz=0.0, shake_px=(0.0, 0.0), drift_px_s=(300.0, -120.0))
    for noise, worst, rms in ((0.0, 0.01, 0.005), (0.05, 0.3, 0.1)):
        frames, rows, d = _exact_samples(path, 40, 720, READOUT, noise_px=noise)
        m = within_frame_motion(frames, rows, d, fps=FPS, height=720, readout_s=READOUT)
        expect = np.outer((m.rows_px - m.ref_row_px) * READOUT / 720, [300.0, -120.0])
        err = m.shift_px - expect[None]
        assert np.abs(err).max() < worst
        assert np.sqrt((err ** 2).sum(axis=2).mean()) < rms


def test_windows_give_the_same_answer_chunk_by_chunk():
    path = VibratingPath(vibration_hz=83.0, seed=5)
    frames, rows, d = _exact_samples(path, 70, 720, READOUT, noise_px=0.05)
    st = RowMotionSettings(window_frames=16, margin_frames=4)
    whole = within_frame_motion(frames, rows, d, fps=FPS, height=720, readout_s=READOUT,
                                settings=st)
    parts = [within_frame_motion(frames, rows, d, fps=FPS, height=720, readout_s=READOUT,
                                 frames=np.arange(a, min(a + 25, 70)), settings=st)
             for a in range(0, 70, 25)]
    assert np.array_equal(np.concatenate([p.shift_px for p in parts]), whole.shift_px)
    # Frames without samples around them get no correction.
    out = within_frame_motion(frames, rows, d, fps=FPS, height=720, readout_s=READOUT,
                              frames=np.array([-3, 200]), settings=st)
    assert not out.shift_px.any()


def test_readout_zero_is_the_identity():
    path = VibratingPath(vibration_hz=47.0)
    frames, rows, d = _exact_samples(path, 30, 360, 0.0, noise_px=0.05)
    m = within_frame_motion(frames, rows, d, fps=FPS, height=360, readout_s=0.0)
    assert not m.shift_px.any()
    c = from_similarity(np.array([[4.2, -2.7, np.radians(1.2), np.log(1.03)]]),
                        np.array([319.5, 179.5]))[0]
    c[2, :2] = (3e-5, -2e-5)                                     # a little perspective
    ref = plain_maps(c, (640, 360))
    for k in (0, 17):
        maps = row_warp_maps(c, m.rows_px, m.shift_px[k], (640, 360))
        assert np.abs(maps - ref).max() < 0.01


def test_plain_maps_resample_like_warp_perspective():
    img = draw_world(320, 200, seed=2)
    c = from_similarity(np.array([[3.3, 1.1, np.radians(-2.0), np.log(0.97)]]),
                        np.array([159.5, 99.5]))[0]
    a = cv2.warpPerspective(img, c, (320, 200), flags=cv2.INTER_LINEAR)
    b = remap(img, plain_maps(c, (320, 200)))
    assert np.abs(a.astype(int) - b).max() <= 1


def test_maps_send_each_output_pixel_to_its_recorded_row():
    # Forward: a source pixel v recorded in row v_y lands at C(v − w(v_y)). The maps must
    # bring that output position back to v (checked without the fixed-point iteration).
    w, h = 640, 360
    rows = np.linspace(0, h - 1, 33)
    shift = np.stack([1.5 * np.sin(rows / 25.0), 0.9 * np.cos(rows / 31.0)], axis=1)
    c = from_similarity(np.array([[6.0, -4.0, np.radians(1.5), np.log(1.04)]]),
                        np.array([319.5, 179.5]))[0]
    rng = np.random.default_rng(4)
    v = np.column_stack([rng.uniform(40, w - 40, 500), rng.uniform(40, h - 40, 500)])
    u = v - row_shift_at(rows, shift, v[:, 1])
    o = cv2.perspectiveTransform(u[None], c)[0]
    exact = row_warp_maps(c, rows, shift, (w, h), step=1).astype(np.float64)
    i, j = np.floor(o[:, 1]).astype(int), np.floor(o[:, 0]).astype(int)
    fy, fx = (o[:, 1] - i)[:, None], (o[:, 0] - j)[:, None]
    back = ((1 - fy) * ((1 - fx) * exact[i, j] + fx * exact[i, j + 1])
            + fy * ((1 - fx) * exact[i + 1, j] + fx * exact[i + 1, j + 1]))
    assert np.abs(back - v).max() < 0.01
    # The map enlarged from a coarse grid matches the one computed at every pixel.
    assert np.abs(row_warp_maps(c, rows, shift, (w, h)) - exact).max() < 0.01


def test_chroma_maps_are_the_luma_map_on_the_chroma_grid():
    w, h = 640, 360
    rows = np.linspace(0, h - 1, 33)
    shift = np.stack([1.5 * np.sin(rows / 25.0), 0.9 * np.cos(rows / 31.0)], axis=1)
    c = from_similarity(np.array([[6.0, -4.0, np.radians(1.5), np.log(1.04)]]),
                        np.array([319.5, 179.5]))[0]
    luma, u_map, v_map = plane_maps(c, rows, shift, [(w, h), (w // 2, h // 2),
                                                     (w // 2, h // 2)], (2, 2))
    assert luma.shape == (h, w, 2) and u_map.shape == (h // 2, w // 2, 2)
    assert np.array_equal(u_map, v_map)
    exact = row_warp_maps(c, rows, shift, (w, h), step=1).astype(np.float64)
    # Chroma pixel j sits at luma 2j + 0.5: the mean of luma pixels 2j and 2j + 1.
    at = 0.25 * (exact[0::2, 0::2] + exact[1::2, 0::2] + exact[0::2, 1::2] + exact[1::2, 1::2])
    expect = (at + 0.5) / 2.0 - 0.5
    inner = (slice(4, -4), slice(4, -4))
    assert np.abs(u_map[inner] - expect[inner]).max() < 0.01
    # 4:4:4 uses the luma map for every plane.
    same = plane_maps(c, rows, shift, [(w, h)] * 3, (1, 1))
    assert all(np.array_equal(p, same[0]) for p in same)


def _clip(freq, readout_s, width=640, height=360, n_frames=48):
    path = VibratingPath(vibration_hz=freq, seed=int(freq))
    world = draw_world(width + 160, height + 160, seed=int(freq) + 1)
    frames = render_rolling(world, path, width=width, height=height, fps=FPS,
                            n_frames=n_frames, readout_s=readout_s, noise_sigma=1.0,
                            seed=int(freq))
    return path, frames


def _band_samples(frames, readout_s):
    """Band shifts of every consecutive pair by phase correlation: frame, row, shift."""
    fr, rows, d = [], [], []
    for t in range(1, len(frames)):
        b = band_phase_shifts(frames[t - 1], frames[t], n_bands=BANDS, frame_time_s=t / FPS,
                              readout_s=readout_s)
        fr.append(np.full(BANDS, t))
        rows.append(b.row_px)
        d.append(b.shift_px)
    return np.concatenate(fr), np.concatenate(rows), np.concatenate(d)


def _correct(frames, motion, correction=None):
    h, w = frames.shape[1:]
    c = np.eye(3) if correction is None else correction
    out = np.empty_like(frames)
    for k in range(len(frames)):
        maps = row_warp_maps(c, motion.rows_px, motion.shift_px[k], (w, h))
        out[k] = remap(frames[k], maps, border=cv2.BORDER_REFLECT)
    return out


@pytest.mark.slow
@pytest.mark.parametrize("freq", [47.0, 83.0, 131.0])
def test_corrected_frames_keep_a_fifth_of_the_row_spread_at_most(freq):
    path, frames = _clip(freq, READOUT)
    h = frames.shape[1]
    fr, rows, d = _band_samples(frames, READOUT)
    m = within_frame_motion(fr, rows, d, fps=FPS, height=h, readout_s=READOUT,
                            band_s=READOUT / BANDS)
    truth = _true_within(path, m, READOUT, h)
    assert _spread(m.shift_px - truth) < 0.2 * _spread(truth)
    before = within_frame_spread(d.reshape(-1, BANDS, 2))
    _, _, d_after = _band_samples(_correct(frames, m), READOUT)
    after = within_frame_spread(d_after.reshape(-1, BANDS, 2))
    assert np.mean(before) > 1.0                                 # there was row spread to remove
    assert np.mean(after) <= 0.2 * np.mean(before)


def test_global_shutter_clip_is_left_alone():
    _, frames = _clip(83.0, 0.0, n_frames=12)
    h, w = frames.shape[1:]
    fr, rows, d = _band_samples(frames, 0.0)
    # With its true readout of 0 there is nothing to undo.
    # With its true readout of 0 the maps are the plain warp.
    m0 = within_frame_motion(fr, rows, d, fps=FPS, height=h, readout_s=0.0)
    assert m0.shift_px.shape == (12, 33, 2) and not m0.shift_px.any()
    c = from_similarity(np.array([[2.0, 1.0, np.radians(0.8), 0.0]]),
                        np.array([(w - 1) / 2, (h - 1) / 2]))[0]
    plain = plain_maps(c, (w, h))
    corrected = np.stack([remap(f, row_warp_maps(c, m0.rows_px, m0.shift_px[k], (w, h)))
                          for k, f in enumerate(frames)])
    assert all(np.abs(row_warp_maps(c, m0.rows_px, m0.shift_px[k], (w, h)) - plain).max()
               < 0.01 for k in range(12))
    # Maps equal to float32 rounding: at most a grey level apart after the fixed-point remap.
    plain_frames = np.stack([remap(f, plain) for f in frames])
    assert np.abs(corrected.astype(int) - plain_frames).max() <= 1
