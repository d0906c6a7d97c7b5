"""Shake figures against synthetic paths with known sinusoidal shake."""

import math

import numpy as np
import pytest

import stabilize
from stabilize.geometry import frame_centre, from_similarity, similarity_readout
from stabilize.raw_path import accumulate
from stabilize.shake import (
    NOISE_FLOOR_PX,
    SHAKE_BANDS_HZ,
    band_key,
    band_powers,
    correction_figures,
    dominant_hz,
    frame_gaps,
    frame_rate,
    missing_before,
    path_figures,
    peak_to_peak,
    resample_even,
    shake_component,
    shake_peaks,
    shake_spectrum,
    stability,
    summarise,
    timestamps_irregular,
    trust_verdict,
    uncertainty_notes,
    unlogged_source_shake,
)
from stabilize.synthetic import MotionSpec, SceneSpec, ShakeSpec, Sinusoid, SyntheticClip

from .conftest import write_clip


def _sine_path(f_hz, amp_px, fps=30.0, seconds=10.0, amp_deg=0.0):
    t = np.arange(int(fps * seconds)) / fps
    x = amp_px * np.sin(2 * np.pi * f_hz * t) + 5.0 * t  # shake on top of a slow pan
    y = 0.5 * amp_px * np.sin(2 * np.pi * f_hz * t + 1.0)
    rot = np.radians(amp_deg) * np.sin(2 * np.pi * f_hz * t)
    return from_similarity(np.stack([x, y, rot, 0 * t], axis=1), frame_centre(640, 360))


@pytest.mark.parametrize("f_hz", [3.5, 6.0])
def test_dominant_frequency_and_rms_of_sinusoidal_shake(f_hz):
    fps = 30.0
    p = _sine_path(f_hz, 4.0, fps, amp_deg=0.2)
    h = np.repeat(np.eye(3)[None], len(p), axis=0)
    s = summarise(matrices=h, path=p, status=np.array(["ok"] * len(p)), fps=fps, width=640,
                  height=360, above_hz=1.0, fov_deg=90.0)
    assert s["dominant_hz_x"] == pytest.approx(f_hz, abs=0.1)
    assert s["dominant_hz_y"] == pytest.approx(f_hz, abs=0.1)
    # A sine of amplitude A has RMS A / sqrt(2); the 1 Hz high-pass barely touches 3.5 Hz.
    assert s["jitter_rms_x_px"] == pytest.approx(4.0 / math.sqrt(2), rel=0.05)
    assert s["jitter_rms_y_px"] == pytest.approx(2.0 / math.sqrt(2), rel=0.05)
    assert s["jitter_rms_rot_deg"] == pytest.approx(0.2 / math.sqrt(2), rel=0.05)
    f = 320.0 / math.tan(math.radians(45.0))
    assert s["jitter_rms_x_deg"] == pytest.approx(
        math.degrees(math.atan(s["jitter_rms_x_px"] / f)))


def test_shake_component_removes_slow_motion():
    fps = 30.0
    t = np.arange(300) / fps
    hp = shake_component(20 * t + 3 * np.sin(2 * np.pi * 0.2 * t), fps, 1.0)
    assert np.sqrt(np.mean(hp[30:-30] ** 2)) < 0.05
    assert shake_component(t, fps, 20.0) is None  # above Nyquist: not measurable


def test_stability_score():
    t = np.arange(300)
    assert stability(np.sin(2 * np.pi * 2 * t / 300)) == pytest.approx(1.0)
    rng = np.random.default_rng(0)
    assert stability(rng.normal(size=300)) < 0.1
    assert dominant_hz(np.zeros(100), 30.0, 1.0) is None


def test_cropping_ratio_and_distortion():
    z = np.diag([1.25, 1.25, 1.0])[None]
    figs = correction_figures(z)
    assert figs["cropping_ratio"] == pytest.approx(0.8)
    assert figs["distortion"] == pytest.approx(1.0)
    stretch = np.diag([1.2, 1.0, 1.0])[None]
    assert correction_figures(stretch)["distortion"] == pytest.approx(1 / 1.2)


def _summary_of(p, fps=30.0, width=640, fov_deg=90.0, status=None):
    h = np.repeat(np.eye(3)[None], len(p), axis=0)
    status = np.array(["ok"] * len(p)) if status is None else status
    return summarise(matrices=h, path=p, status=status, fps=fps, width=width, height=360,
                     above_hz=1.0, fov_deg=fov_deg)


@pytest.mark.parametrize("f_hz", [3.5, 6.0])
def test_band_powers_add_up_to_the_rms_and_sit_in_the_right_band(f_hz):
    s = _summary_of(_sine_path(f_hz, 4.0, amp_deg=0.2))
    for axis, unit in (("x", "px"), ("y", "px"), ("rot", "deg")):
        powers = [s[band_key(axis, lo, hi)] for lo, hi in SHAKE_BANDS_HZ]
        # Parseval: the Welch density integrates to the variance of the shake.
        assert sum(powers) == pytest.approx(s[f"jitter_rms_{axis}_{unit}"] ** 2, rel=0.05)
    in_band = s["shake_power_x_3_6hz_px2"] + (s["shake_power_x_6_12hz_px2"] if f_hz == 6 else 0)
    assert in_band > 0.95 * sum(s[band_key("x", lo, hi)] for lo, hi in SHAKE_BANDS_HZ)
    assert s["spectrum_resolution_hz"] == pytest.approx(30.0 / 240)
    assert s["frames_weak_share"] == 0.0 and s["frames_failed_share"] == 0.0


def test_degree_figures_follow_the_field_of_view():
    p = _sine_path(3.5, 4.0)
    for fov in (40.0, 90.0):
        s = _summary_of(p, fov_deg=fov)
        f = 320.0 / math.tan(math.radians(fov / 2))
        for axis in ("x", "y"):
            for kind in ("rms", "p2p"):
                px = s[f"jitter_{kind}_{axis}_px"]
                assert s[f"jitter_{kind}_{axis}_deg"] == pytest.approx(
                    math.degrees(math.atan(px / f)))
        # Small angles: the angle is the pixel figure over the focal length in pixels.
        assert s["jitter_rms_x_deg"] == pytest.approx(
            math.degrees(4.0 / math.sqrt(2) / f), rel=0.05)
    assert _summary_of(p, fov_deg=None)["jitter_p2p_x_deg"] is None


def test_bands_above_nyquist_cannot_be_measured():
    fps = 20.0  # Nyquist 10 Hz: the 6-12 Hz band is cut short, the one above it is empty
    t = np.arange(200) / fps
    powers = band_powers(np.sin(2 * np.pi * 4.0 * t), fps)
    assert powers[-1] is None and powers[3] is not None
    assert band_powers(None, fps) == [None] * len(SHAKE_BANDS_HZ)


def test_shake_peaks_label_both_tones():
    fps = 30.0
    t = np.arange(600) / fps
    rng = np.random.default_rng(0)
    x = (2.0 * np.sin(2 * np.pi * 3.5 * t) + 1.0 * np.sin(2 * np.pi * 9.0 * t)
         + 0.1 * rng.normal(size=len(t)))
    peaks = shake_peaks(x, fps, 1.0, count=3)
    assert [round(hz, 1) for hz, _ in peaks] == [3.5, 9.0]  # and nothing else
    f, pxx = shake_spectrum(x, fps)
    assert peaks[0][1] == pytest.approx(pxx.max())


def test_notes_say_when_the_figures_are_uncertain():
    p = _sine_path(3.5, 4.0)
    status = np.array(["ok"] * len(p), dtype=object)
    status[::3] = "weak"
    status[5] = "failed"
    notes = uncertainty_notes(_summary_of(p, status=status.astype(str), fov_deg=None))
    text = " ".join(notes)
    assert "not reliable" in text and "stand-in" in text and "fov_deg" in text
    assert uncertainty_notes(_summary_of(p)) == []
    # A peak near the Nyquist frequency may be faster vibration folded down.
    near = uncertainty_notes(_summary_of(_sine_path(13.5, 2.0)))
    assert any("aliased" in n for n in near)


def _ground_truth_figures(clip: SyntheticClip, fov_deg: float) -> dict:
    """The shake figures of the synthetic camera's exact path, by the same functions."""
    gt = clip.ground_truth()
    path = accumulate(gt["inter_frame"], gt["cut"])
    readout = similarity_readout(path, frame_centre(clip.width, clip.height))
    return path_figures(readout, gt["cut"], fps=clip.fps, above_hz=1.0, width=clip.width,
                        fov_deg=fov_deg, bands=True)


@pytest.mark.parametrize("f_hz", [3.5, pytest.param(6.0, marks=pytest.mark.slow)])
def test_shake_of_an_encoded_clip_matches_the_ground_truth(f_hz, tmp_path):
    """End to end: a 10 s, 30 fps clip with one sinusoidal shake over a pan, encoded as H.264,
    measured, and compared with the exact camera path's figures (about 5 s per clip)."""
    fov = 60.0
    spec = SceneSpec(style="truss", width=320, height=180, fps=30.0, duration_s=10.0, seed=1,
                     shake=ShakeSpec(sinusoids=(Sinusoid(f_hz, x_px=3.0, y_px=2.0),)),
                     motion=MotionSpec(pan_px_s=20.0), noise_sigma=1.0, hfov_deg=fov)
    clip = SyntheticClip(spec)
    path = write_clip(tmp_path / "sine.mp4", (f for _, f in clip.frames()), spec.fps)
    s = stabilize.measure(path, fov_deg=fov).summary
    truth = _ground_truth_figures(clip, fov)
    assert s["frames_failed"] == 0 and s["fps"] == pytest.approx(30.0)
    for axis in ("x", "y"):
        assert s[f"dominant_hz_{axis}"] == pytest.approx(f_hz, abs=0.1)
        assert truth[f"dominant_hz_{axis}"] == pytest.approx(f_hz, abs=0.1)
        for unit in ("px", "deg"):
            assert s[f"jitter_rms_{axis}_{unit}"] == pytest.approx(
                truth[f"jitter_rms_{axis}_{unit}"], rel=0.05)
    # The ground truth itself is the sine's RMS, amplitude / sqrt(2).
    assert truth["jitter_rms_x_px"] == pytest.approx(3.0 / math.sqrt(2), rel=0.05)
    f_px = 160.0 / math.tan(math.radians(fov / 2))
    assert s["jitter_rms_x_deg"] == pytest.approx(
        math.degrees(math.atan(s["jitter_rms_x_px"] / f_px)))


# ------------------------------------------------------------------ real time
def _irregular_times(n, lo_s, hi_s, seed=0):
    """Frame times whose intervals are drawn evenly between ``lo_s`` and ``hi_s``."""
    dt = np.random.default_rng(seed).uniform(lo_s, hi_s, size=n - 1)
    return np.r_[0.0, np.cumsum(dt)]


def test_frame_rate_is_the_mean_rate_of_the_timestamps():
    regular = np.arange(300) / 30.0
    assert frame_rate(regular, 30.0) == 30.0  # the container's rate, when the times agree
    assert frame_rate(regular, 25.0) == pytest.approx(30.0, rel=1e-9)  # a wrong container
    assert not timestamps_irregular(regular)
    # Intervals of 0.33-0.73 s, as in a clip whose container says 15 fps.
    t = _irregular_times(68, 0.33, 0.73)
    assert frame_rate(t, 15.0) == pytest.approx(67 / (t[-1] - t[0]), rel=1e-12)
    assert 1.8 < frame_rate(t, 15.0) < 2.6
    assert timestamps_irregular(t)
    # Two frames' times swapped: one step backwards does not change the rate.
    swapped = regular.copy()
    swapped[[100, 101]] = swapped[[101, 100]]
    assert np.diff(swapped).min() < 0
    assert frame_rate(swapped, 25.0) == pytest.approx(30.0, rel=1e-9)
    assert not timestamps_irregular(swapped)
    # One gap of two seconds (frames missing) is not part of the rate.
    gap = np.r_[np.arange(100) / 25.0, 6.0 + np.arange(100) / 25.0]
    assert frame_rate(gap, 30.0) == pytest.approx(25.0, rel=1e-9)
    assert not timestamps_irregular(gap)
    assert frame_rate(np.array([0.0]), 24.0) == 24.0  # nothing to go by


def test_resample_even_puts_a_series_on_an_even_grid():
    t = _irregular_times(200, 0.05, 0.25, seed=3)
    grid, v = resample_even(t, 2.0 * t + 1.0, 5.0)
    assert np.allclose(np.diff(grid), 0.2) and grid[0] == t[0] and grid[-1] <= t[-1]
    assert np.allclose(v, 2.0 * grid + 1.0)  # a straight line is interpolated exactly


def _path_from_x(x, y=None):
    zero = np.zeros_like(x)
    y = zero if y is None else y
    return from_similarity(np.stack([x, y, zero, zero], axis=1), frame_centre(640, 360))


def test_irregular_clip_is_measured_in_real_time():
    """A 1.5 Hz shake sampled at irregular times (mean 6 fps) in a container that says
    15 fps: at 15 fps it would read 3.75 Hz, above the real Nyquist frequency."""
    t = _irregular_times(361, 0.1, 0.2333, seed=1)
    rate = 360 / (t[-1] - t[0])
    p = _path_from_x(3.0 * np.sin(2 * np.pi * 1.5 * t) + 4.0 * t)
    h = np.repeat(np.eye(3)[None], len(p), axis=0)
    s = summarise(matrices=h, path=p, status=np.array(["ok"] * len(p)), fps=15.0,
                  width=640, height=360, above_hz=0.5, fov_deg=None, time_s=t)
    assert s["fps"] == pytest.approx(rate) and s["fps_nominal"] == 15.0
    assert s["timestamps_irregular"] is True
    assert s["nyquist_hz"] == pytest.approx(rate / 2)
    assert s["dominant_hz_x"] == pytest.approx(1.5, abs=0.1)
    # The spline through the frames keeps a 1.5 Hz sine at about 6 samples per second
    # (straight lines between them lost a fifth of it).
    assert s["jitter_rms_x_px"] == pytest.approx(3.0 / math.sqrt(2), rel=0.04)
    assert s["jitter_p2p_x_px"] == pytest.approx(6.0, rel=0.04)
    assert s["trust"] == "rough"
    assert any("irregular" in r and "15 fps" in r for r in s["trust_reasons"])
    # The same frames taken as evenly spaced at the container's rate read wrong.
    wrong = summarise(matrices=h, path=p, status=np.array(["ok"] * len(p)), fps=15.0,
                      width=640, height=360, above_hz=0.5, fov_deg=None)
    assert wrong["dominant_hz_x"] == pytest.approx(1.5 * 15.0 / rate, abs=0.15)


def test_frames_missing_are_found_as_gaps():
    gap = np.r_[np.arange(100) / 25.0, 6.0 + np.arange(100) / 25.0]
    assert [(t, round(d, 9), n) for t, d, n in frame_gaps(gap)] == [(3.96, 2.04, 50)]
    missing = missing_before(gap, len(gap))
    assert np.flatnonzero(missing).tolist() == [100] and missing[100] == 50
    assert frame_gaps(np.arange(300) / 30.0) == [] and not missing_before(None, 5).any()
    # Intervals that vary throughout are irregular times, not gaps.
    assert frame_gaps(_irregular_times(68, 0.1, 0.73)) == []


def test_a_clip_missing_frames_is_measured_in_real_time():
    """A 3 Hz shake over a 40 px/s pan at 30 fps, 10 s, with half a second of frames
    missing (a recorder that dropped them). Taken as consecutive frames, the pan over the
    gap counted as one frame's jump, and the spectrum's time axis slipped there: the x
    shake read 1.98 px RMS against 1.41 px for the same clip whole, 19.8 px peak-to-peak
    against 3.84 px, and no clear peak (measured before gaps were read in real time; on a
    drawn, encoded clip with the same gap: 16 % more RMS, 49 % more peak-to-peak)."""
    fps = 30.0
    t_all = np.arange(300) / fps
    keep = np.ones(300, bool)
    keep[140:155] = False

    def path(t):
        return _path_from_x(2.0 * np.sin(2 * np.pi * 3.0 * t) + 40.0 * t,
                            1.0 * np.sin(2 * np.pi * 3.0 * t + 1.0))

    def figures(t, time_s):
        p = path(t)
        h = np.repeat(np.eye(3)[None], len(p), axis=0)
        h[1:] = p[1:] @ np.linalg.inv(p[:-1])
        return summarise(matrices=h, path=p, status=np.array(["first"] + ["ok"] * (len(p) - 1)),
                         fps=fps, width=640, height=360, above_hz=1.0, fov_deg=None,
                         time_s=time_s)

    whole, gapped = figures(t_all, t_all), figures(t_all[keep], t_all[keep])
    assert gapped["frames_missing"] == 15 and whole["frames_missing"] == 0
    assert gapped["gaps"] == [[round(139 / fps, 3), 0.533]] and whole["gaps"] == []
    assert gapped["timestamps_irregular"] is False and gapped["fps"] == fps
    for key in ("jitter_rms_x_px", "jitter_rms_y_px"):
        assert gapped[key] == pytest.approx(whole[key], rel=0.05)
    assert gapped["jitter_p2p_x_px"] == pytest.approx(whole["jitter_p2p_x_px"], rel=0.1)
    assert gapped["dominant_hz_x"] == pytest.approx(3.0, abs=0.1)
    # A twentieth of the frames missing is said, not held against the figures ...
    assert gapped["trust"] == "sound"
    assert any("15 frame(s) are missing" in n for n in uncertainty_notes(gapped))
    # ... a fifth of them is.
    keep[100:170] = False
    most = figures(t_all[keep], t_all[keep])
    assert most["frames_missing"] == 70 and most["trust"] == "rough"
    assert any("missing" in r for r in most["trust_reasons"])


# -------------------------------------------------------------- dominant peak
@pytest.mark.parametrize("fps, seconds", [(30.0, 10.0), (25.0, 60.0), (10.0, 120.0)])
def test_noise_and_drift_have_no_dominant_frequency(fps, seconds):
    n = int(fps * seconds)
    found = {"white": 0, "random walk": 0, "double random walk": 0}
    for seed in range(20):
        rng = np.random.default_rng([seed, n])
        series = {"white": rng.normal(size=n), "random walk": np.cumsum(rng.normal(size=n)),
                  "double random walk": np.cumsum(np.cumsum(rng.normal(size=n)))}
        for name, x in series.items():
            found[name] += dominant_hz(shake_component(x, fps, 1.0), fps, 1.0) is not None
    # The test's false-alarm probability is 1 % per series; allow one in twenty.
    assert all(v <= 1 for v in found.values()), found


def test_the_filter_edge_is_no_peak():
    """Below 1.44 × the cut-off the filter's roll-off shapes a hump out of drift; a peak is
    not looked for there, and the hump of a strong random walk is not reported."""
    fps = 30.0
    x = np.cumsum(np.random.default_rng(5).normal(size=9000))  # 5 minutes of drift
    s = shake_component(x, fps, 1.0)
    f, pxx = shake_spectrum(s, fps)
    hump = f[np.argmax(pxx)]
    assert 1.0 < hump < 1.44  # the roll-off's hump, found by the old rule
    assert shake_peaks(s, fps, 1.0) == []


# A clip under 8 s has one Welch segment (ν = 2): its sine must stand further out of the noise.
@pytest.mark.parametrize("f_hz, seconds, amp", [(4.0, 10.0, 2.0), (4.0, 60.0, 0.7),
                                                (2.2, 30.0, 1.0), (9.5, 30.0, 1.0)])
def test_a_sinusoid_over_noise_is_found(f_hz, seconds, amp):
    fps = 30.0
    t = np.arange(int(fps * seconds)) / fps
    for seed in range(10):
        rng = np.random.default_rng(seed)
        x = (amp * np.sin(2 * np.pi * f_hz * t + rng.uniform(0, 6)) + rng.normal(size=len(t))
             + 0.3 * np.cumsum(rng.normal(size=len(t))))
        assert dominant_hz(shake_component(x, fps, 1.0), fps, 1.0) == pytest.approx(
            f_hz, abs=0.1)


def test_a_static_shot_has_no_peak_and_is_steady():
    """A locked-off camera: the per-frame motion is measurement noise only, so its path is
    a random walk of tiny steps."""
    fps, n = 10.0, 800
    rng = np.random.default_rng(2)
    h = np.repeat(np.eye(3)[None], n, axis=0)
    h[1:, 0, 2] = rng.normal(0.0, 0.002, n - 1)
    h[1:, 1, 2] = rng.normal(0.0, 0.002, n - 1)
    a = rng.normal(0.0, 2e-6, n - 1)
    h[1:, 0, 0] = h[1:, 1, 1] = np.cos(a)
    h[1:, 1, 0], h[1:, 0, 1] = np.sin(a), -np.sin(a)
    status = np.array(["ok"] * n)
    from stabilize.raw_path import accumulate

    p = accumulate(h, status == "cut")
    s = summarise(matrices=h, path=p, status=status, fps=fps, width=768, height=576,
                  above_hz=1.0, fov_deg=None, rms_px=np.full(n, 0.08),
                  inliers=np.full(n, 1400))
    assert [s[f"dominant_hz_{a}"] for a in ("x", "y", "rot")] == [None, None, None]
    assert s["jitter_rms_x_px"] > 0
    assert s["stability_translation"] == 1.0 and s["stability_rotation"] == 1.0
    assert s["motion_noise_px"] == NOISE_FLOOR_PX  # 0.08 / sqrt(2800) is below the floor
    assert s["trust"] == "sound" and s["trust_reasons"] == []
    # Without the noise test the same motion scores as very unsteady.
    dx = similarity_readout(h, frame_centre(768, 576))[1:, 0]
    assert stability(dx) < 0.05


# ------------------------------------------------------------------ stability
def _moving_log(n=600, fps=30.0):
    """Per-frame motion of a slow sway (steady in the score's sense), as transforms."""
    t = np.arange(n) / fps
    h = np.repeat(np.eye(3)[None], n, axis=0)
    h[1:, 0, 2] = 2.0 * np.sin(2 * np.pi * 0.1 * t[1:])
    h[1:, 1, 2] = 1.5 * np.cos(2 * np.pi * 0.1 * t[1:])
    return h


def test_stability_leaves_out_cuts_and_stand_ins():
    h = _moving_log()
    n = len(h)
    status = np.array(["ok"] * n, dtype="<U6")
    status[[200, 400]] = "cut"
    status[300:305] = "failed"
    h[200, 0, 2], h[400, 1, 2] = 300.0, -250.0  # motion across a cut is no camera motion
    h[300:305, 0, 2] = 40.0  # a bad stand-in
    from stabilize.raw_path import accumulate

    p = accumulate(h, status == "cut")
    s = summarise(matrices=h, path=p, status=status, fps=30.0, width=640, height=360,
                  above_hz=1.0, fov_deg=None)
    keep = np.ones(n, dtype=bool)
    keep[[0, 200, 400]] = False
    keep[300:305] = False
    dxy = similarity_readout(h, frame_centre(640, 360))[keep]
    assert s["stability_translation"] == pytest.approx(
        min(stability(dxy[:, 0]), stability(dxy[:, 1])))
    assert s["stability_translation"] > 0.9
    assert stability(similarity_readout(h, frame_centre(640, 360))[:, 0]) < 0.5  # all frames


def test_stability_of_the_output_is_not_spoilt_by_cuts():
    """A steadied clip with cuts: the output's motion across a cut is no shake."""
    h = _moving_log()
    n = len(h)
    status = np.array(["ok"] * n, dtype="<U6")
    status[300] = "cut"
    h[300, 0, 2] = 200.0
    from stabilize.raw_path import accumulate

    p = accumulate(h, status == "cut")
    s = summarise(matrices=h, path=p, status=status, fps=30.0, width=640, height=360,
                  above_hz=1.0, fov_deg=None, corrections=p,
                  smooth_readout=np.zeros((n, 4)))
    # C_t = P_t holds every frame at its shot's first: the output does not move at all.
    assert s["stability_translation_out"] == 1.0
    assert s["stability_translation_in"] > 0.9


# -------------------------------------------------------------- peak-to-peak
def test_peak_to_peak_leaves_out_the_filter_ends():
    fps = 30.0
    t = np.arange(300) / fps
    x = 2.0 * np.sin(2 * np.pi * 3.5 * t) + 3.0 * t**2  # an accelerating pan
    s = shake_component(x, fps, 1.0)
    assert np.ptp(s) > 4.2  # the ends ring: 2.0 amplitude reads as more than 4.2
    assert peak_to_peak([s], fps, 1.0) == pytest.approx(4.0, rel=0.03)
    fig = _summary_of(_path_from_x(x))
    assert fig["jitter_p2p_x_px"] == pytest.approx(4.0, rel=0.03)
    short = s[:100]  # shorter than 4 s: counted whole
    assert peak_to_peak([short], fps, 1.0) == pytest.approx(np.ptp(short))


# -------------------------------------------------------------------- verdict
def test_verdict_levels_and_reasons():
    base = {"frames": 100, "frames_weak": 0, "frames_failed": 0}
    assert trust_verdict(base) == {"trust": "sound", "trust_reasons": []}
    assert trust_verdict(base | {"frames_weak": 15})["trust"] == "rough"
    assert trust_verdict(base | {"frames_weak": 20, "frames_failed": 15})["trust"] == \
        "unreliable"
    fg = trust_verdict(base | {"frames_foreground": 12})
    assert fg["trust"] == "rough" and "moving object" in fg["trust_reasons"][0]
    plain = trust_verdict(base | {"frames_textureless": 40})
    assert plain["trust"] == "unreliable" and "texture" in plain["trust_reasons"][0]
    assert trust_verdict(base | {"output_steadier": True})["trust"] == "sound"
    out = trust_verdict(base | {"output_steadier": False})
    assert out["trust"] == "rough" and "no steadier" in out["trust_reasons"][0]
    # After a render whose output could not be measured enough (output_pairs_measured
    # given, output_steadier null), nothing vouches for the video; a measuring run that
    # rendered nothing (neither key) says nothing of it.
    unchecked = trust_verdict(base | {"output_steadier": None, "output_pairs_measured": 0.45})
    assert unchecked["trust"] == "rough"
    assert "could not be checked (45%" in unchecked["trust_reasons"][0]
    assert trust_verdict(base | {"output_steadier": None,
                                 "output_pairs_measured": None})["trust"] == "sound"
    both = trust_verdict(base | {"frames_failed": 40, "output_steadier": False,
                                 "timestamps_irregular": True, "fps": 2.3,
                                 "fps_nominal": 15.0})
    assert both["trust"] == "unreliable" and len(both["trust_reasons"]) == 3


def test_a_path_brightness_changes_may_have_moved_is_called_rough_then_unreliable():
    base = {"frames": 100, "frames_weak": 0, "frames_failed": 0}
    assert trust_verdict(base | {"brightness_drift_px": None})["trust"] == "sound"
    assert trust_verdict(base | {"brightness_drift_px": 0.33})["trust"] == "sound"
    rough = trust_verdict(base | {"brightness_drift_px": 0.8})
    assert rough["trust"] == "rough"
    assert "brightness" in rough["trust_reasons"][0] and "0.8 px" in rough["trust_reasons"][0]
    assert trust_verdict(base | {"brightness_drift_px": 2.4})["trust"] == "unreliable"


def test_a_check_reading_shake_the_log_has_not_says_either_may_be_wrong():
    """A box slid across the table before a still camera: the log gives the source 0.01 px
    of shake, the render's check of the frames read 1.15 px (it followed the box), and the
    output was no steadier. The reason names both readings' possible faults; where the two
    agree, the plain reason stands."""
    base = {"frames": 100, "frames_weak": 0, "frames_failed": 0, "output_steadier": False,
            "jitter_rms_x_px": 0.007, "jitter_rms_y_px": 0.010}
    box = base | {"jitter_rms_x_px_src_check": 1.155, "jitter_rms_y_px_src_check": 1.06}
    assert unlogged_source_shake(box)
    verdict = trust_verdict(box)
    assert verdict["trust"] == "rough"
    assert "moving in front" in verdict["trust_reasons"][0]
    assert "missed the camera's motion" in verdict["trust_reasons"][0]
    agree = base | {"jitter_rms_x_px": 1.0, "jitter_rms_x_px_src_check": 1.155,
                    "jitter_rms_y_px_src_check": 1.06}
    assert not unlogged_source_shake(agree)
    assert "moving in front" not in trust_verdict(agree)["trust_reasons"][0]
    tiny = base | {"jitter_rms_x_px_src_check": 0.05, "jitter_rms_y_px_src_check": 0.04}
    assert not unlogged_source_shake(tiny)  # within the check's noise
    assert not unlogged_source_shake({"jitter_rms_x_px": 0.0})


def test_reasons_are_counted_and_the_notes_repeat_the_verdict():
    p = _sine_path(3.5, 4.0)
    n = len(p)
    reasons = np.array([""] * n, dtype="<U12")
    reasons[:40] = "foreground"
    reasons[40:45] = "textureless"
    reasons[45:50] = "few_inliers"
    h = np.repeat(np.eye(3)[None], n, axis=0)
    s = summarise(matrices=h, path=p, status=np.array(["ok"] * n), fps=30.0, width=640,
                  height=360, above_hz=1.0, fov_deg=90.0, reasons=reasons)
    assert s["frames_foreground"] == 40 and s["frames_textureless"] == 5
    assert s["trust"] == "rough"
    notes = uncertainty_notes(s)
    assert notes[:len(s["trust_reasons"])] == s["trust_reasons"]
    assert "frames_foreground" not in _summary_of(p)  # unknown without the analysis' word


def test_frames_held_still_count_as_foreground_for_the_verdict():
    """Frames held still (the tracks were an object's, the camera taken as still) are
    counted on their own and with the foreground frames the verdict weighs."""
    p = _sine_path(3.5, 4.0)
    n = len(p)
    reasons = np.array([""] * n, dtype="<U12")
    reasons[:10] = "foreground"
    reasons[10:60] = "held_still"
    h = np.repeat(np.eye(3)[None], n, axis=0)
    s = summarise(matrices=h, path=p, status=np.array(["ok"] * n), fps=30.0, width=640,
                  height=360, above_hz=1.0, fov_deg=90.0, reasons=reasons)
    assert s["frames_held_still"] == 50 and s["frames_foreground"] == 60
    # 60 of 300 frames: over the 10 % share, under the 30 % one.
    assert n == 300 and s["trust"] == "rough"
    assert any("large moving object" in r for r in s["trust_reasons"])


def test_unconfirmed_frames_are_weighed_on_their_own():
    """Frames tracked on a part of the picture that nothing in the plain rest confirmed are
    counted on their own and give their own reason, rough over a tenth of the clip and
    unreliable over three tenths; they are not counted again as weak frames."""
    p = _sine_path(3.5, 4.0)
    n = len(p)
    h = np.repeat(np.eye(3)[None], n, axis=0)
    for share, trust in ((0.05, "sound"), (0.2, "rough"), (0.5, "unreliable")):
        reasons = np.array([""] * n, dtype="<U12")
        status = np.array(["ok"] * n, dtype="<U6")
        k = int(share * n)
        reasons[n - k:], status[n - k:] = "unconfirmed", "weak"
        s = summarise(matrices=h, path=p, status=status, fps=30.0, width=640, height=360,
                      above_hz=1.0, fov_deg=90.0, reasons=reasons)
        assert s["frames_unconfirmed"] == k and s["frames_weak"] == k
        assert s["trust"] == trust, (share, s["trust_reasons"])
        said = [r for r in s["trust_reasons"] if "plain rest" in r]
        assert len(said) == (share > 0.1)
        assert not any("weak or failed" in r for r in s["trust_reasons"])
