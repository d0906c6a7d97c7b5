"""The analysis level: a setting, a TOML key, a flag and a log entry; each level's tracking."""

from __future__ import annotations

import json

import cv2
import numpy as np
import pytest

import stabilize
from stabilize.cli import flag_wording
from stabilize.config import ANALYSIS_LEVELS, Settings, build_settings
from stabilize.errors import StabilizeError
from stabilize.frame_fit import REFIT_PASSES
from stabilize.motion_pass import REVISE_ATTEMPTS
from stabilize.track import Tracker, track_settings_for

from .conftest import noise_frames, write_clip


def _texture(h=270, w=480, seed=0):
    rng = np.random.default_rng(seed)
    img = cv2.GaussianBlur(rng.normal(0, 1, (h, w)), (0, 0), 2.5)
    return np.clip(128 + img / img.std() * 45, 0, 255).astype(np.uint8)


def test_default_and_every_level_is_known_everywhere():
    assert Settings().analysis == "balanced"
    for level in ANALYSIS_LEVELS:
        assert track_settings_for(level).max_corners > 0
        assert level in REFIT_PASSES and level in REVISE_ATTEMPTS
    assert track_settings_for("thorough").max_corners > track_settings_for("fast").max_corners
    # Every level checks each track backwards: without it tracks survive scene cuts.
    assert all(track_settings_for(level).backward_check for level in ANALYSIS_LEVELS)


def test_unknown_level_is_refused_in_plain_words(tmp_path):
    with pytest.raises(StabilizeError) as err:
        Settings(analysis="quickest")
    assert "analysis" in str(err.value) and "thorough" in str(err.value)
    assert "--analysis" in flag_wording(str(err.value))
    cfg = tmp_path / "mine.toml"
    cfg.write_text('analysis = "thorough"\n')
    assert build_settings(str(cfg)).analysis == "thorough"
    assert build_settings(str(cfg), {"analysis": "fast"}).analysis == "fast"
    assert build_settings("vibration-survey").analysis == "thorough"


@pytest.mark.parametrize("level", ANALYSIS_LEVELS)
def test_each_level_tracks_a_subpixel_shift(level):
    a = _texture()
    fx = np.fft.fftfreq(a.shape[1])[None, :]
    b = np.real(np.fft.ifft2(np.fft.fft2(a.astype(float)) * np.exp(-2j * np.pi * fx * 0.73)))
    b = np.clip(np.rint(b), 0, 255).astype(np.uint8)
    tr = Tracker(track_settings_for(level))
    tr.step(a)
    pairs = tr.step(b)
    assert 100 < len(pairs) <= track_settings_for(level).max_corners
    np.testing.assert_allclose(np.median(pairs.dst - pairs.src, axis=0), [0.73, 0.0],
                               atol=0.02)


def test_level_reaches_the_log_and_fast_differs_from_thorough(tmp_path):
    clip = write_clip(tmp_path / "pan.mp4", noise_frames(20, 192, 144, shift_px=1.2), 24.0)
    fast = stabilize.measure(clip, analysis="fast")
    thorough = stabilize.measure(clip, analysis="thorough")
    assert fast.settings["analysis"] == "fast" and thorough.settings["analysis"] == "thorough"
    assert (fast.tracked[1:] < thorough.tracked[1:]).all()
    path = tmp_path / "pan.motion.json"
    fast.save(tmp_path / "pan.motion.csv")
    assert json.loads(path.read_text())["settings"]["analysis"] == "fast"
