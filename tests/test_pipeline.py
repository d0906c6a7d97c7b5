"""End-to-end: steady, measure and render on small synthetic clips with known camera motion."""

from __future__ import annotations

import hashlib
import subprocess
from pathlib import Path

import cv2
import numpy as np
import pytest

import stabilize
from stabilize import read_log
from stabilize.framing import covered
from stabilize.io import iter_frames, probe
from stabilize.io.colour import ColourTags
from stabilize.io.process import ffmpeg_exe
from stabilize.synthetic import MotionSpec, SceneSpec, ShakeSpec, SyntheticClip, grid_transfer_error

from .conftest import write_clip


@pytest.fixture(scope="module")
def truss(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("truss")
    clip = SyntheticClip(SceneSpec(style="truss", width=480, height=270, fps=30.0,
                                   duration_s=2.0, seed=3, noise_sigma=1.0))
    path = write_clip(tmp / "truss pass.mp4", (f for _, f in clip.frames()), 30.0, audio=True)
    return path, clip


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_logged_motion_matches_ground_truth(truss):
    path, clip = truss
    log = stabilize.measure(path)
    gt = clip.ground_truth()["inter_frame"]
    err = grid_transfer_error(gt[1:], log.matrices[1:], clip.width, clip.height)
    # Ground truth is exact (synthetic camera); the H.264 round trip and sensor noise are what
    # the estimate has to see through.
    assert np.median(err) < 0.05
    assert err.max() < 0.3
    assert log.status[0] == "first" and (log.status[1:] == "ok").all()
    assert log.corrections is None and log.smooth_values is None


def test_warping_by_the_logged_matrix_reproduces_the_next_frame(truss):
    """The log's convention checked with OpenCV's warpPerspective as the reference."""
    path, clip = truss
    log = stabilize.measure(path)
    frames = [f.image.astype(np.float32) for f in iter_frames(path)]
    for t in (5, 20, 40):
        h = log.matrices[t]
        warped = cv2.warpPerspective(frames[t - 1], h, (clip.width, clip.height),
                                     flags=cv2.INTER_LINEAR, borderValue=(-1, -1, -1))
        valid = (warped >= 0).all(axis=2)
        valid[:8], valid[-8:], valid[:, :8], valid[:, -8:] = False, False, False, False
        diff = np.abs(warped - frames[t])[valid].mean()
        still = np.abs(frames[t - 1] - frames[t])[valid].mean()
        inverse = cv2.warpPerspective(frames[t - 1], np.linalg.inv(h),
                                      (clip.width, clip.height), flags=cv2.INTER_LINEAR)
        wrong_way = np.abs(inverse - frames[t])[valid].mean()
        assert diff < 3.0, diff
        assert diff < 0.3 * still and diff < 0.3 * wrong_way


def test_steady_keeps_audio_frames_fps_and_size(truss, tmp_path):
    path, clip = truss
    out = tmp_path / "out" / "steadied.mp4"
    out.parent.mkdir()
    before = _sha(path)
    log = stabilize.steady(path, out, margin=0.1)
    info_in, info_out = probe(path), probe(out)
    assert (info_out.width, info_out.height) == (info_in.width, info_in.height)
    assert info_out.fps == info_in.fps
    assert info_out.audio_codec == "aac"
    assert sum(1 for _ in iter_frames(out)) == clip.n_frames == log.frames
    # The logs go to the video's folder, named after the video.
    assert (out.parent / "steadied.motion.csv").is_file()
    assert (out.parent / "steadied.motion.json").is_file()
    assert _sha(path) == before
    assert log.corrections.shape == (clip.n_frames, 3, 3)
    assert covered(log.corrections, clip.width, clip.height).all()
    s = log.summary
    assert s["margin"] == 0.1
    assert s["cropping_ratio"] == pytest.approx(0.8, abs=0.02)
    assert s["distortion"] > 0.99
    # The smoothed path keeps little of the input's shake.
    assert s["jitter_rms_x_px_out"] < 0.2 * s["jitter_rms_x_px"]
    assert sorted(p.name for p in out.parent.iterdir()) == [
        "steadied.motion.csv", "steadied.motion.json", "steadied.mp4"]
    # The log returned is the one written, assembled once in memory: reading it back gives
    # the same arrays and the same JSON.
    back = read_log(out.parent / "steadied.motion.csv")
    for name in ("matrices", "corrections", "smooth_values", "time_s", "rms_px"):
        np.testing.assert_array_equal(getattr(log, name), getattr(back, name))
    np.testing.assert_array_equal(log.output_check, back.output_check)
    assert log.to_csv() == back.to_csv()
    assert log.extra["outputs"] == {"video": str(out),
                                    "log_csv": str(out.parent / "steadied.motion.csv"),
                                    "log_json": str(out.parent / "steadied.motion.json")}


def test_steady_keeps_the_sources_colour_tags_and_pixel_shape(truss, tmp_path):
    # 10-bit HLG, as some drones record: the steadied copy (8-bit) must say how its values
    # are to be shown, or players take them for SDR BT.709 and the picture looks washed out.
    path, _ = truss
    hlg = tmp_path / "hlg.mp4"
    subprocess.run([ffmpeg_exe(), "-nostdin", "-loglevel", "error", "-i", str(path), "-vf",
                    "setparams=range=tv:colorspace=bt2020nc:color_primaries=bt2020:"
                    "color_trc=arib-std-b67,setsar=4/3", "-c:v", "libx264", "-pix_fmt",
                    "yuv420p10le",
                    "-preset", "veryfast", "-crf", "12", "-c:a", "copy", str(hlg)],
                   check=True, capture_output=True)
    want = ColourTags("tv", "bt2020nc", "bt2020", "arib-std-b67")
    assert probe(hlg).colour == want
    out = tmp_path / "hlg.steady.mp4"
    stabilize.steady(hlg, out, compare=True)
    # Non-square pixels (here 4:3 wide) keep their shape too.
    for video in (out, tmp_path / "hlg.steady.compare.mp4"):
        assert (probe(video).colour, probe(video).sar) == (want, (4, 3))


@pytest.mark.parametrize("sar", ["1/1", "4/3", None])
def test_steady_carries_the_pixel_aspect_tag_over(truss, tmp_path, sar):
    """A square-pixel tag (1:1) and an anamorphic one (4:3) reach the steadied video and the
    comparison as they were; a clip with no tag gives a video with none."""
    path, _ = truss
    src = tmp_path / "tagged.mp4"
    subprocess.run([ffmpeg_exe(), "-nostdin", "-loglevel", "error", "-i", str(path), "-t", "0.5",
                    "-vf", f"setsar={sar or 0}", "-c:v", "libx264", "-preset", "veryfast",
                    "-crf", "14", "-an", str(src)], check=True, capture_output=True)
    want = None if sar is None else tuple(int(v) for v in sar.split("/"))
    assert probe(src).sar == want
    log = stabilize.steady(src, tmp_path / "tagged.steady.mp4", compare=True, preset="veryfast")
    for role in ("video", "compare"):
        assert probe(log.extra["outputs"][role]).sar == want


def test_steadied_video_is_steadier(truss, tmp_path):
    path, clip = truss
    out = tmp_path / "s.mp4"
    stabilize.steady(path, out, margin=0.1)
    measured = stabilize.measure(out)
    raw = stabilize.measure(path)
    assert (measured.summary["jitter_rms_x_px"]
            < 0.35 * raw.summary["jitter_rms_x_px"])


def test_equal_seeds_give_identical_logs(truss, tmp_path):
    path, _ = truss
    a = stabilize.measure(path, seed=7, model="homography")
    b = stabilize.measure(path, seed=7, model="homography")
    assert a.to_csv() == b.to_csv()


def test_render_from_a_saved_log_and_from_a_proxy(truss, tmp_path):
    path, clip = truss
    first = stabilize.measure(path)
    csv_path, _ = first.save(tmp_path / "truss.motion.csv")
    out = tmp_path / "rendered.mp4"
    log = stabilize.render(path, csv_path, out, margin=0.05)
    assert sum(1 for _ in iter_frames(out)) == clip.n_frames
    np.testing.assert_array_equal(log.matrices, read_log(csv_path).matrices)
    assert log.summary["margin"] == 0.05

    # A half-size proxy: its log renders the full-size clip with the motion scaled up.
    proxy = write_clip(tmp_path / "proxy.mp4",
                       (cv2.resize(f.image, (240, 136), interpolation=cv2.INTER_AREA)
                        for f in iter_frames(path)), 30.0)
    proxy_log = stabilize.measure(proxy)
    proxy_csv, _ = proxy_log.save(tmp_path / "proxy.motion.csv")
    (tmp_path / "full").mkdir()
    full = stabilize.render(path, proxy_csv, tmp_path / "full" / "from_proxy.mp4")
    gt = clip.ground_truth()["inter_frame"]
    err = grid_transfer_error(gt[1:], full.matrices[1:], clip.width, clip.height)
    assert np.median(err) < 0.25


def test_one_frame_clip_passes_through(tmp_path):
    one = write_clip(tmp_path / "one.mp4", [np.full((90, 160, 3), 128, np.uint8)], 25.0)
    log = stabilize.steady(one, tmp_path / "one.out.mp4")
    assert list(log.status) == ["failed"]
    assert _sha(tmp_path / "one.out.mp4") == _sha(one)


def test_tiny_clip_passes_through(tmp_path):
    frames = [np.full((16, 16, 3), 10 * i, np.uint8) for i in range(6)]
    tiny = write_clip(tmp_path / "tiny.mp4", frames, 25.0)
    log = stabilize.steady(tiny)
    assert (log.status == "failed").all() and log.frames == 6
    assert (tmp_path / "tiny.steady.mp4").is_file()


def test_a_clip_missing_frames_is_steadied_and_summarised_in_real_time(tmp_path, caplog):
    """Half a second of frames dropped from a drawn pan (40 px/s) with drone shake, their
    timestamps kept (as a recorder that dropped them writes them). Taken as consecutive
    frames (measured before gaps were read in real time): the pan over the gap was one
    frame's jump, so the x shake read 2.96 px RMS and 17.5 px peak-to-peak against 2.11 and
    7.41 px for the clip whole; and the smoother, counting frames, spread that jump over its
    window, moving the picture up to 10.6 px off the raw path around the gap (6.9 px at
    most elsewhere, as for the clip whole)."""
    spec = SceneSpec(style="truss", width=480, height=270, fps=30.0, duration_s=6.0, seed=2,
                     noise_sigma=1.0, motion=MotionSpec(pan_px_s=40.0),
                     shake=ShakeSpec.drone())
    whole = write_clip(tmp_path / "whole.mp4", (f for _, f in SyntheticClip(spec).frames()),
                       30.0, crf=18)
    gapped = tmp_path / "dropped.mkv"
    subprocess.run([ffmpeg_exe(), "-hide_banner", "-nostdin", "-loglevel", "error", "-y",
                    "-i", str(whole), "-vf", r"select='not(between(n\,80\,94))'",
                    "-fps_mode", "passthrough", "-c:v", "libx264", "-crf", "18", "-preset",
                    "veryfast", str(gapped)], check=True, capture_output=True)
    with caplog.at_level("WARNING", logger="stabilize"):
        log = stabilize.steady(gapped, tmp_path / "dropped.steady.mp4")
    ref = stabilize.steady(whole, tmp_path / "whole.steady.mp4")
    s = log.summary
    assert s["frames_missing"] == 15 and len(s["gaps"]) == 1
    assert s["gaps"][0] == pytest.approx([79 / 30.0, 16 / 30.0], abs=0.002)
    assert any("15 frame(s) are missing" in r.getMessage() for r in caplog.records)
    # The source's shake reads as the whole clip's (2.18 against 2.11 px RMS in x).
    for axis in ("x", "y"):
        assert s[f"jitter_rms_{axis}_px"] == pytest.approx(
            ref.summary[f"jitter_rms_{axis}_px"], rel=0.05)
        assert s[f"jitter_p2p_{axis}_px"] == pytest.approx(
            ref.summary[f"jitter_p2p_{axis}_px"], rel=0.1)

    def off_path(motion_log):
        return np.abs(motion_log.readouts()["path"][:, 0] - motion_log.smooth_values[:, 0])

    # The smoothing runs in real time across the gap: no more correction there than the
    # clip whole needs anywhere.
    assert off_path(log).max() <= 1.1 * off_path(ref).max()
    # The steadied video, measured on its frames, is as steady as the whole clip's.
    assert s["shake_reduction_x"] > 0.95 and s["shake_reduction_y"] > 0.95
    # It keeps the frames' own times, gap included.
    times = [f.time_s for f in iter_frames(tmp_path / "dropped.steady.mp4", gray=True,
                                           size=(48, 27))]
    assert len(times) == 165 and times[80] - times[79] == pytest.approx(0.533, abs=0.002)


def test_irregular_frame_times_are_summarised_in_real_time_with_a_warning(caplog):
    """Frames 0.33-0.73 s apart in a container that says 15 fps: the job warns and gives the
    real mean rate, and the verdict says why the figures are rough."""
    from stabilize.config import Settings
    from stabilize.jobs.analysis import FrameMotion

    n = 80
    t = np.r_[0.0, np.cumsum(np.random.default_rng(8).uniform(0.33, 0.73, n - 1))]
    h = np.repeat(np.eye(3)[None], n, axis=0)
    h[1:, 0, 2] = 0.4 * np.sin(np.arange(1, n))
    motion = FrameMotion(time_s=t, matrices=h, tracked=np.full(n, 300),
                         inliers=np.full(n, 250), inlier_ratio=np.full(n, 250 / 300),
                         rms_px=np.full(n, 0.2), rounds=np.full(n, 30),
                         status=np.array(["ok"] * n), reasons=np.full(n, "", "<U12"),
                         source={"path": "late.avi", "width": 320, "height": 240, "fps": 15.0,
                                 "frames": n})
    with caplog.at_level("WARNING", logger="stabilize"):
        s = motion.figures(Settings(shake_above_hz=0.5), 15.0)
    rate = (n - 1) / (t[-1] - t[0])
    assert s["fps"] == pytest.approx(rate) and s["fps_nominal"] == 15.0
    assert s["timestamps_irregular"] is True and s["trust"] == "rough"
    warned = [r.getMessage() for r in caplog.records if r.levelname == "WARNING"]
    assert len(warned) == 1 and "late.avi" in warned[0] and f"{rate:.3g} fps" in warned[0]
