"""Shake figures against synthetic paths with known sinusoidal shake."""

import math

import numpy as np
import pytest

import stabilize
from stabilize.log import frame_centre, similarity_readout
from stabilize.path import accumulate, from_similarity
from stabilize.shake import (
    SHAKE_BANDS_HZ,
    band_key,
    band_powers,
    correction_figures,
    dominant_hz,
    path_figures,
    shake_component,
    shake_spectrum,
    spectrum_peaks,
    stability,
    summarise,
    uncertainty_notes,
)
from stabilize.synth import MotionSpec, SceneSpec, ShakeSpec, Sinusoid, SyntheticClip

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


def test_spectrum_peaks_label_both_tones():
    fps = 30.0
    t = np.arange(600) / fps
    x = 2.0 * np.sin(2 * np.pi * 3.5 * t) + 1.0 * np.sin(2 * np.pi * 9.0 * t)
    f, pxx = shake_spectrum(x, fps)
    peaks = spectrum_peaks(f, pxx, 1.0, count=3)
    assert peaks[0][0] == pytest.approx(3.5, abs=0.1)
    assert any(abs(hz - 9.0) < 0.1 for hz, _ in peaks[1:])


def test_notes_say_when_the_figures_are_uncertain():
    p = _sine_path(3.5, 4.0)
    status = np.array(["ok"] * len(p), dtype=object)
    status[::3] = "weak"
    status[5] = "failed"
    notes = uncertainty_notes(_summary_of(p, status=status.astype(str), fov_deg=None))
    text = " ".join(notes)
    assert "not reliable" in text and "stand-in" in text and "--fov-deg" in text
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
