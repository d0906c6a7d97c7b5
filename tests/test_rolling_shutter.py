"""Vibration above the frame rate from rolling-shutter row bands, on drawn scenes of our own."""

from __future__ import annotations

import numpy as np
import pytest

from stabilize.row_bands import (
    band_centres,
    band_phase_shifts,
    exposure_times,
    fit_band_shifts,
    within_frame_spread,
)
from stabilize.synthetic_rolling import (
    VibratingPath,
    draw_world,
    one_frame_difference,
    render_rolling,
    row_times,
)
from stabilize.track import Tracker
from stabilize.vibration import (
    blind_spots,
    estimate_readout,
    estimate_vibration,
    vibration_spectrum,
)

FPS = 30.0
READOUT = 0.025
BANDS = 24


def _true_samples(path, n_frames, height, readout_s, noise_px=0.0, seed=0):
    """Band samples straight from the path (no pictures): frame, row, time, shift."""
    rows = band_centres(height, BANDS)
    frames = np.repeat(np.arange(1, n_frames), BANDS)
    row = np.tile(rows, n_frames - 1)
    t = exposure_times(frames / FPS, row, height, readout_s)
    d = one_frame_difference(path, t, FPS)
    d += np.random.default_rng(seed).normal(0.0, noise_px, d.shape)
    return frames, row, t, d


def _reference_peak(path, lo_hz=10.0):
    """Frequency and amplitude of the path's strongest line above ``lo_hz``, from SciPy's
    periodogram of the true path sampled evenly at 2 kHz (an outside reference)."""
    from scipy.signal import periodogram
    fs, dur = 2000.0, 8.0
    x = path(np.arange(0.0, dur, 1.0 / fs))
    f, pxx = periodogram(x, fs=fs, window="hann", detrend="linear", axis=0,
                         scaling="spectrum")
    total = pxx.sum(axis=1)
    sel = f >= lo_hz
    k = np.flatnonzero(sel)[np.argmax(total[sel])]
    # Hann-windowed power spectrum: a line of amplitude A spreads over three bins.
    amp = np.sqrt(2.0 * total[k - 1:k + 2].sum() / 1.5)
    return float(f[k]), float(amp)


def test_row_times_follow_the_readout():
    t = row_times(3, 720, FPS, READOUT)
    assert t.shape == (3, 720)
    assert t[1, 0] == pytest.approx(1 / FPS)
    assert t[2, 719] - t[2, 0] == pytest.approx(READOUT * 719 / 720)
    assert np.all(row_times(2, 10, FPS, 0.0)[1] == 1 / FPS)


def test_rendered_rows_move_with_their_own_instant():
    path = VibratingPath(vibration_hz=0.0, shake_px=(0.0, 0.0), drift_px_s=(300.0, 0.0))
    world = draw_world(480, 280, seed=3)
    f = render_rolling(world, path, width=320, height=180, fps=FPS, n_frames=2,
                       readout_s=READOUT)
    b = band_phase_shifts(f[0], f[1], n_bands=6, frame_time_s=1 / FPS, readout_s=READOUT)
    # A constant pan moves every band by the same 10 px; the rows are sheared within a frame.
    assert np.allclose(b.shift_px[:, 0], 10.0, atol=0.15)
    assert np.allclose(b.shift_px[:, 1], 0.0, atol=0.15)
    g = render_rolling(world, path, width=320, height=180, fps=FPS, n_frames=1, readout_s=0.0)
    shear = band_phase_shifts(g[0], f[0], n_bands=6)
    expected = 300.0 * READOUT * shear.row_px / 180
    assert np.allclose(shear.shift_px[:, 0], expected, atol=0.15)


def test_band_fit_follows_rows_ignores_outliers_and_fills_empty_bands():
    rng = np.random.default_rng(1)
    h = 720
    src = np.column_stack([rng.uniform(0, 1280, 1500), rng.uniform(0, h, 1500)])
    true = lambda y: np.column_stack([2.0 * np.sin(y / 90.0), 0.5 + y / h])  # noqa: E731
    dst = src + true(src[:, 1]) + rng.normal(0, 0.05, src.shape)
    dst[:100] += rng.uniform(-20, 20, (100, 2))                 # gross mismatches
    empty = (src[:, 1] > 300) & (src[:, 1] < 330)                  # one band without tracks
    b = fit_band_shifts(src[~empty], dst[~empty], h, frame_time_s=1.0, readout_s=READOUT)
    err = b.shift_px - true(b.row_px)
    assert np.abs(err).max() < 0.1
    assert b.support.min() < 0.5 * np.median(b.support)
    assert b.time_s[0] == pytest.approx(1.0 + b.row_px[0] * READOUT / h)
    keep = np.zeros(len(src), bool)
    assert np.isnan(fit_band_shifts(src, dst, h, inliers=keep).shift_px).all()


def test_row_spread_is_the_spread_about_the_frame_mean():
    s = np.zeros((2, 4, 2))
    s[0, :, 0] = [1.0, 1.0, 1.0, 1.0]
    s[1, :, 0] = [0.0, 2.0, 0.0, 2.0]
    s[1, 2] = np.nan
    w = within_frame_spread(s)
    assert w[0] == 0.0
    m = np.mean([0.0, 2.0, 2.0])
    assert w[1] == pytest.approx(np.sqrt(np.mean((np.array([0.0, 2.0, 2.0]) - m) ** 2)))


def test_blind_spots_sit_on_multiples_of_the_frame_rate():
    assert blind_spots(5.0, 100.0, 30.0, 4.0) == ((26.0, 34.0), (56.0, 64.0), (86.0, 94.0))


@pytest.mark.parametrize("freq", [47.0, 83.0, 131.0])
def test_vibration_from_exact_band_samples_matches_outside_reference(freq):
    path = VibratingPath(vibration_hz=freq, seed=int(freq))
    frames, _, t, d = _true_samples(path, 60, 720, READOUT, noise_px=0.1)
    v = estimate_vibration(t, d, FPS, frame_index=frames, band_s=READOUT / BANDS,
                           width=1280, hfov_deg=70.0)
    ref_f, ref_a = _reference_peak(path)
    assert v.found
    assert abs(ref_f - freq) <= 0.25 and abs(ref_a - 1.5) < 0.05       # the reference itself
    assert abs(v.frequency_hz - ref_f) < 1.0
    assert abs(v.amplitude_px - ref_a) < 0.2 * ref_a
    focal = 640 / np.tan(np.radians(35.0))
    assert v.amplitude_deg == pytest.approx(np.degrees(np.arctan(v.amplitude_px / focal)))
    assert v.false_alarm < 1e-6
    # The frequency sits outside every reported blind spot.
    assert all(not (a <= v.frequency_hz <= b) for a, b in v.spectrum.blind_hz)


def test_shake_alone_and_global_shutter_report_no_vibration():
    shake_only = VibratingPath(vibration_hz=0.0, shake_px=(12.0, 8.0))
    frames, _, t, d = _true_samples(shake_only, 60, 720, READOUT, noise_px=0.1, seed=2)
    assert not estimate_vibration(t, d, FPS, frame_index=frames).found
    # A global shutter exposes every band at once: all bands of a frame see the same shift,
    # even with a strong vibration (aliased into the frame-to-frame motion).
    vib = VibratingPath(vibration_hz=47.0, vibration_px=3.0)
    frames, _, t, d = _true_samples(vib, 60, 720, 0.0, noise_px=0.1, seed=3)
    # Analysed as if the sensor had a 25 ms readout, which the user may not know.
    t_assumed = exposure_times(frames / FPS, np.tile(band_centres(720, BANDS), 59), 720,
                               READOUT)
    v = estimate_vibration(t_assumed, d, FPS, frame_index=frames)
    assert not v.found and np.isnan(v.frequency_hz)
    assert v.false_alarm > 0.01
    # Analysed with the true readout of 0: every frequency is blind.
    spec = vibration_spectrum(t, d, FPS, frame_index=frames)
    assert not spec.usable.any()


def _frames_to_samples(frames_px, height, readout_s, method):
    rows, fr, ds, ts = [], [], [], []
    tracker = Tracker()
    for t in range(len(frames_px)):
        if method == "tracks":
            pairs = tracker.step(frames_px[t])
            if t == 0:
                continue
            b = fit_band_shifts(pairs.src, pairs.dst, height, frame_time_s=t / FPS,
                                readout_s=readout_s)
            tracker.update(None)
        else:
            if t == 0:
                continue
            b = band_phase_shifts(frames_px[t - 1], frames_px[t], n_bands=BANDS,
                                  frame_time_s=t / FPS, readout_s=readout_s)
        rows.append(b.row_px)
        fr.append(np.full(BANDS, t))
        ds.append(b.shift_px)
        ts.append(b.time_s)
    return np.concatenate(fr), np.concatenate(rows), np.concatenate(ts), np.concatenate(ds)


def _clip(freq, readout_s, width=640, height=360, n_frames=60):
    path = VibratingPath(vibration_hz=freq, seed=int(freq))
    world = draw_world(width + 160, height + 160, seed=int(freq) + 1)
    frames = render_rolling(world, path, width=width, height=height, fps=FPS,
                            n_frames=n_frames, readout_s=readout_s, noise_sigma=1.0,
                            seed=int(freq))
    return path, frames


@pytest.mark.slow
@pytest.mark.parametrize("freq,method", [(47.0, "tracks"), (83.0, "phase"),
                                         (131.0, "tracks")])
def test_vibration_from_rendered_frames(freq, method):
    path, frames = _clip(freq, READOUT)
    fr, _, t, d = _frames_to_samples(frames, frames.shape[1], READOUT, method)
    v = estimate_vibration(t, d, FPS, frame_index=fr, band_s=READOUT / BANDS)
    assert v.found
    assert abs(v.frequency_hz - freq) < 1.0
    assert abs(v.amplitude_px - 1.5) < 0.2 * 1.5
    # The band measurements themselves sample the one-frame difference of the path.
    truth = one_frame_difference(path, t, FPS)
    assert np.sqrt(np.mean((d - truth) ** 2)) < 0.3


@pytest.mark.slow
def test_global_shutter_frames_report_no_vibration():
    _, frames = _clip(83.0, 0.0)
    fr, _, t, d = _frames_to_samples(frames, frames.shape[1], READOUT, "tracks")
    v = estimate_vibration(t, d, FPS, frame_index=fr, band_s=READOUT / BANDS)
    assert not v.found
    assert np.nanmedian(within_frame_spread(d.reshape(-1, BANDS, 2))) < 0.2


@pytest.mark.slow
def test_readout_from_the_footage():
    _, frames = _clip(83.0, READOUT)
    fr, rows, _, d = _frames_to_samples(frames, frames.shape[1], READOUT, "phase")
    est = estimate_readout(fr, rows, frames.shape[1], d, FPS, band_s_per_readout=1 / BANDS)
    assert est.found
    assert abs(est.readout_s - READOUT) < 0.003
    assert abs(est.frequency_hz - 83.0) < 1.0
    assert 0 < est.sigma_s < 0.003
