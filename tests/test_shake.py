"""Shake figures against synthetic paths with known sinusoidal shake."""

import math

import numpy as np
import pytest

from stabilize.log import frame_centre
from stabilize.path import from_similarity
from stabilize.shake import (
    correction_figures,
    dominant_hz,
    shake_component,
    stability,
    summarise,
)


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
