"""Settings: defaults, TOML presets, precedence and validation messages."""

import pytest

from stabilize.cli import flag_wording
from stabilize.config import Settings, build_settings, preset_names, read_config
from stabilize.errors import StabilizeError


def test_defaults_match_the_interface():
    s = Settings()
    assert (s.model, s.smoother, s.window_s, s.margin, s.fill) == (
        "similarity", "gaussian", 1.0, "auto", "black")
    assert (s.analysis_width, s.inlier_px, s.confidence, s.max_rounds, s.seed) == (
        960, 1.5, 0.999, 2000, 0)
    assert (s.shake_above_hz, s.crf, s.preset, s.codec) == (1.0, 18, "medium", "h264")


def test_presets_exist_and_load():
    names = preset_names()
    for name in ("default", "drone-inspection", "handheld-walking", "vibration-survey"):
        assert name in names
        build_settings(name)
    assert build_settings("vibration-survey").analysis_width == 0


def test_flags_override_file_over_defaults(tmp_path):
    cfg = tmp_path / "mine.toml"
    cfg.write_text('model = "affine"\nwindow-s = 2.5\nmargin = 0.1\n')
    s = build_settings(str(cfg), {"window_s": "0.5"})
    assert s.model == "affine" and s.window_s == 0.5 and s.margin == 0.1
    assert Settings().replace(seed=3).seed == 3


@pytest.mark.parametrize(
    "overrides, name",
    [
        ({"model": "spline"}, "model"),
        ({"inlier_px": "-1"}, "inlier_px"),
        ({"margin": "0.6"}, "margin"),
        ({"margin": "lots"}, "margin"),
        ({"confidence": "1.0"}, "confidence"),
        ({"max_rounds": "0"}, "max_rounds"),
        ({"ignore": ["1,2,3"]}, "ignore"),
        ({"crf": "3.5"}, "crf"),
        ({"window_s": "nan"}, "window_s"),
        ({"pin_overlays": "yes"}, "pin_overlays"),
        ({"pin_overlays": 1}, "pin_overlays"),
    ],
)
def test_bad_values_name_the_setting_and_the_cli_words_it_as_a_flag(overrides, name):
    with pytest.raises(StabilizeError) as err:
        build_settings(None, overrides)
    text = str(err.value)
    assert f"setting '{name}'" in text and "--" not in text and "\n" not in text
    flag = "--" + name.replace("_", "-")
    assert flag_wording(text).startswith(f"option {flag}:")


def test_pin_overlays_defaults_to_found_and_is_read_from_files_and_flags(tmp_path):
    assert Settings().pin_overlays == "found" == build_settings("default").pin_overlays
    cfg = tmp_path / "pins.toml"
    cfg.write_text('pin-overlays = "all"\n')
    assert build_settings(str(cfg)).pin_overlays == "all"
    assert build_settings(str(cfg), {"pin_overlays": "off"}).pin_overlays == "off"
    assert Settings(pin_overlays="off").to_dict()["pin_overlays"] == "off"


def test_unknown_key_and_bad_toml(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("modle = 'affine'\n")
    with pytest.raises(StabilizeError, match="unknown option 'modle'"):
        read_config(str(bad))
    broken = tmp_path / "broken.toml"
    broken.write_text("model = \n")
    with pytest.raises(StabilizeError, match="not valid TOML"):
        read_config(str(broken))
    with pytest.raises(StabilizeError, match="no settings file named"):
        read_config("no-such-preset")


def test_ignore_regions_parse():
    s = build_settings(None, {"ignore": ["0,980,1920,100", "10,10,50,40"]})
    assert s.ignore == ((0, 980, 1920, 100), (10, 10, 50, 40))
    assert s.to_dict()["ignore"] == [[0, 980, 1920, 100], [10, 10, 50, 40]]


def test_plain_surround_defaults_to_hold_and_is_read_from_files_and_flags(tmp_path):
    assert Settings().plain_surround == "hold" == build_settings("default").plain_surround
    cfg = tmp_path / "s.toml"
    cfg.write_text('plain-surround = "follow"\n')
    assert build_settings(str(cfg)).plain_surround == "follow"
    assert build_settings(str(cfg), {"plain_surround": "hold"}).plain_surround == "hold"
    with pytest.raises(StabilizeError, match="plain_surround"):
        Settings(plain_surround="guess")
