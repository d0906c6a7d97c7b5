"""Rolling shutter end to end: drawn rolling-shutter clips written to video files, measured and
steadied by the jobs, the figures compared with the drawn camera path."""

from __future__ import annotations

import json
from contextlib import closing
from pathlib import Path

import numpy as np
import pytest

import stabilize
from stabilize.config import Settings, build_settings
from stabilize.errors import StabilizeError
from stabilize.io import VideoWriter, iter_frames, probe
from stabilize.io.motion_log_files import bands_path_for, read_log
from stabilize.motion import fit_motion
from stabilize.row_bands import band_phase_shifts, within_frame_spread
from stabilize.segments import SegmentTask, fit_segment, merge
from stabilize.synthetic_rolling import VibratingPath, draw_world, render_rolling

FPS, READOUT = 30.0, 0.025


def _write_clip(dest: Path, freq: float, readout_s: float, width: int, height: int,
                n_frames: int) -> Path:
    path = VibratingPath(vibration_hz=freq, seed=int(freq))
    world = draw_world(width + 200, height + 200, seed=int(freq) + 1)
    frames = render_rolling(world, path, width=width, height=height, fps=FPS,
                            n_frames=n_frames, readout_s=readout_s, noise_sigma=1.0,
                            seed=int(freq))
    with VideoWriter(dest, width, height, FPS, crf=12, preset="veryfast") as wr:
        for f in frames:
            wr.write(np.dstack([f, f, f]))
    return dest


def _row_spread_of_video(video: Path) -> float:
    """Mean within-frame row spread (px) of a video file: band shifts by phase correlation in
    the central 80 % of every pair of consecutive decoded frames."""
    frames = [f.image.astype(np.float32) for f in iter_frames(video, gray=True)]
    h, w = frames[0].shape
    crop = (slice(h // 10, h - h // 10), slice(w // 10, w - w // 10))
    shifts = [band_phase_shifts(a[crop], b[crop], n_bands=24).shift_px
              for a, b in zip(frames[:-1], frames[1:], strict=True)]
    return float(np.mean(within_frame_spread(np.array(shifts))))


@pytest.fixture(scope="module")
def small(tmp_path_factory) -> dict[str, Path]:
    d = tmp_path_factory.mktemp("rolling")
    return {"rolling": _write_clip(d / "rolling83.mp4", 83.0, READOUT, 640, 360, 40),
            "global": _write_clip(d / "global83.mp4", 83.0, 0.0, 640, 360, 40)}


@pytest.fixture(scope="module")
def rolling_log(small, tmp_path_factory):
    """The rolling clip measured with its readout, and the log saved."""
    csv_path = tmp_path_factory.mktemp("rolling_log") / "r.motion.csv"
    log = stabilize.measure(small["rolling"], readout_ms=25)
    log.save(csv_path)
    return log, csv_path


def test_readout_setting_takes_auto_numbers_and_refuses_the_rest(tmp_path):
    toml = tmp_path / "drone.toml"
    toml.write_text('readout-ms = "auto"\n')
    assert build_settings(str(toml)).readout_ms == "auto"
    toml.write_text("readout_ms = 21.5\n")
    assert build_settings(str(toml), {"readout_ms": "0"}).readout_ms == 0.0
    assert Settings().readout_ms == 0.0
    assert build_settings(None, {"readout_ms": "auto"}).readout_ms == "auto"
    assert build_settings(None, {"readout_ms": "25"}).readout_ms == 25.0
    for bad in ("-1", "fast", "500", True):
        with pytest.raises(StabilizeError, match="readout_ms"):
            build_settings(None, {"readout_ms": bad})
    # A global shutter, the default, is the key's absence in the log's settings.
    assert "readout_ms" not in Settings().to_dict()
    assert Settings(readout_ms=12.5).to_dict()["readout_ms"] == 12.5


def test_readout_zero_adds_nothing(small, tmp_path):
    log = stabilize.measure(small["rolling"])
    assert log.row_bands is None
    assert not any(k.startswith(("vibration", "readout", "row spread")) for k in log.summary)
    log.save(tmp_path / "a.motion.csv")
    assert not bands_path_for(tmp_path / "a.motion.csv").exists()


def test_vibration_and_band_log_from_a_rolling_clip(small, rolling_log):
    log, csv_path = rolling_log
    s = log.summary
    assert s["readout_source"] == "given" and s["readout_ms"] == 25.0
    assert s["vibration_found"] and abs(s["vibration_hz"] - 83.0) < 1.0
    assert abs(s["vibration_px"] - 1.5) < 0.2 * 1.5
    assert s["vibration_false_alarm"] < 0.01 and s["vibration_deg"] is None
    assert [90 - 4, 90 + 4] in [[round(a), round(b)] for a, b in s["vibration_blind_hz"]]
    doc = json.loads(csv_path.with_suffix(".json").read_text())
    assert doc["row_bands"]["file"] == "r.motion.bands.csv"
    assert doc["settings"]["readout_ms"] == 25.0
    back = read_log(csv_path)
    assert np.allclose(back.row_bands.shift_px, log.row_bands.shift_px, equal_nan=True)
    assert back.row_bands.readout_s == pytest.approx(0.025)
    rows = np.loadtxt(bands_path_for(csv_path), delimiter=",", skiprows=1)
    # Each band's exposure instant: the frame's time plus its row's share of the readout.
    frame, row, when = rows[:, 0].astype(int), rows[:, 2], rows[:, 3]
    assert np.allclose(when, log.time_s[frame] + row * 0.025 / 360)


def test_global_shutter_reports_no_vibration(small):
    given = stabilize.measure(small["global"], readout_ms=25).summary
    assert not given["vibration_found"] and given["vibration_hz"] is None
    auto = stabilize.measure(small["global"], readout_ms="auto").summary
    assert auto["readout_source"] == "not_found" and auto["readout_ms"] == 0.0
    assert not auto["vibration_found"]


def test_segments_measure_the_same_bands(small):
    clip = small["rolling"]
    info = probe(clip)
    settings = Settings(readout_ms=25.0)
    size = (info.width, info.height)
    with closing(iter_frames(clip, gray=True, info=info)) as frames:
        one = fit_motion(frames, full_size=size, analysis_size=size, settings=settings,
                         keyframe_every=16)
    tasks = [SegmentTask(str(clip), info, size, settings, s, e, 16)
             for s, e in ((0, 16), (16, 32), (32, None))]
    parts = merge([fit_segment(t, single_thread=True) for t in reversed(tasks)], settings,
                  size)
    assert one.band_shift_px.shape == (40, 24, 2)
    assert np.array_equal(one.band_shift_px, parts.band_shift_px, equal_nan=True)
    assert np.array_equal(one.band_support, parts.band_support)


@pytest.mark.slow
@pytest.mark.parametrize("freq", [47.0, 83.0, 131.0])
def test_acceptance_at_720p(freq, tmp_path):
    clip = _write_clip(tmp_path / f"c{int(freq)}.mp4", freq, READOUT, 1280, 720, 40)
    out = tmp_path / "steady.mp4"
    log = stabilize.steady(clip, out, readout_ms=25)
    s = log.summary
    assert s["vibration_found"] and abs(s["vibration_hz"] - freq) < 1.0
    assert abs(s["vibration_px"] - 1.5) < 0.2 * 1.5
    before, after = _row_spread_of_video(clip), _row_spread_of_video(out)
    assert before > 1.0
    assert after <= 0.2 * before
    assert s["row_spread_px_out"] <= 0.2 * s["row_spread_px"]
    # Frame-level shake is still removed.
    assert s["output_steadier"]
    assert s["jitter_rms_x_px_out"] < 0.5 * s["jitter_rms_x_px"]
    if freq == 83.0:
        auto = stabilize.measure(clip, readout_ms="auto").summary
        assert auto["readout_source"] == "estimated"
        assert abs(auto["readout_ms"] - 25.0) <= 3.0
        assert 0 < auto["readout_ms_sigma"] < 3.0


def test_report_of_a_rolling_log_has_the_vibration_plot(rolling_log, tmp_path):
    from stabilize.jobs.report import make_report

    _, csv_path = rolling_log
    rep = make_report(csv_path, tmp_path / "rep", fov_deg=60.0)
    png = rep.outputs["vibration_plot"]
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    f = 320.0 / np.tan(np.radians(30.0))
    assert rep.summary["vibration_deg"] == pytest.approx(
        np.degrees(np.arctan(rep.summary["vibration_px"] / f)), rel=1e-3)
    assert "vibration above the frame rate" in rep.outputs["html"].read_text()


def test_render_from_a_rolling_log_removes_the_row_spread(small, rolling_log, tmp_path):
    _, csv_path = rolling_log
    out = tmp_path / "r.steady.mp4"
    s = stabilize.render(small["rolling"], csv_path, out).summary
    assert s["readout_ms"] == 25.0 and s["vibration_found"]
    assert s["row_spread_px"] > 1.0
    assert s["row_spread_px_out"] <= 0.2 * s["row_spread_px"]
    assert _row_spread_of_video(out) <= 0.2 * _row_spread_of_video(small["rolling"])
