"""End to end: the figures after steadying describe the written video.

The outside reference decodes the written video with imageio and measures its frame-to-frame
motion with OpenCV's own tracker and robust fit (``cv2.estimateAffinePartial2D``), independent
of the project's tracker, estimator and motion check.
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import cv2
import imageio.v3 as iio
import numpy as np
import pytest

import stabilize
from stabilize import read_log, shake
from stabilize.synthetic import SceneSpec, SyntheticClip, grid_transfer_error

from .conftest import write_clip

FPS = 30.0
ROOT = Path(__file__).resolve().parents[1]


def reference_motion(video: Path) -> np.ndarray:
    """(n, 3) dx, dy (pixels) and degrees of each frame pair of ``video`` read as a similarity
    about the frame centre (nan for frame 0 and unmeasured pairs): Shi–Tomasi corners at full
    resolution, OpenCV's pyramidal Lucas–Kanade, ``cv2.estimateAffinePartial2D`` (RANSAC)."""
    out, prev = [], None
    for rgb in iio.imiter(video):  # imageio's own reader (its ffmpeg plugin)
        grey = cv2.cvtColor(rgb, cv2.COLOR_RGB2GRAY)
        row = [math.nan] * 3
        if prev is not None:
            pts = cv2.goodFeaturesToTrack(prev, maxCorners=600, qualityLevel=0.002,
                                          minDistance=4, blockSize=5)
            if pts is not None:
                nxt, st, _ = cv2.calcOpticalFlowPyrLK(prev, grey, pts, None, winSize=(21, 21),
                                                      maxLevel=4)
                ok = st.ravel() == 1
                if ok.sum() >= 8:
                    m, _ = cv2.estimateAffinePartial2D(pts[ok], nxt[ok], method=cv2.RANSAC,
                                                       ransacReprojThreshold=1.0)
                    if m is not None:
                        h, w = grey.shape
                        c = np.array([(w - 1) / 2.0, (h - 1) / 2.0])
                        d = m[:, :2] @ c + m[:, 2] - c
                        deg = math.degrees(math.atan2(m[1, 0] - m[0, 1], m[0, 0] + m[1, 1]))
                        row = [d[0], d[1], deg]
        out.append(row)
        prev = grey
    return np.array(out)


def reference_rms(motion: np.ndarray) -> tuple[float, float]:
    """Shake RMS (pixels) of the path summed from per-frame motion, x and y, by the summary's
    own definition of shake (:func:`stabilize.shake.shake_component`)."""
    m = np.nan_to_num(motion[:, :2])
    path = np.cumsum(m, axis=0)
    return tuple(float(np.sqrt(np.mean(shake.shake_component(path[:, j], FPS, 1.0) ** 2)))
                 for j in range(2))


@pytest.fixture(scope="module")
def truss(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("truss")
    clip = SyntheticClip(SceneSpec(style="truss", width=480, height=270, fps=FPS,
                                   duration_s=4.0, seed=3, noise_sigma=1.0))
    path = write_clip(tmp / "truss.mp4", (f for _, f in clip.frames()), FPS)
    return path, clip


def true_rms(log, inter_frame: np.ndarray) -> tuple[float, float]:
    """Shake RMS (pixels) of the output's true motion C_t·H_t·C_{t−1}⁻¹, with the exact
    inter-frame motion H_t of the synthetic camera."""
    c = log.corrections
    m = c[1:] @ inter_frame[1:] @ np.linalg.inv(c[:-1])
    m /= m[:, 2:3, 2:3]
    d = np.einsum("nij,j->ni", m[:, :2, :2], log.centre) + m[:, :2, 2] - log.centre
    return reference_rms(np.vstack([[np.nan] * 3, np.column_stack([d, np.zeros(len(d))])]))


def test_steady_output_is_steady_and_measured_so(truss, tmp_path):
    path, clip = truss
    log = stabilize.steady(path, tmp_path / "out.mp4")
    s = log.summary
    assert s["output_steadier"] is True
    assert s["output_pairs_measured"] > 0.95
    ref = reference_rms(reference_motion(tmp_path / "out.mp4"))
    truth = true_rms(log, np.array(clip.inter_frame))
    for j, axis in enumerate(("x", "y")):
        shaky = s[f"jitter_rms_{axis}_px"]
        got = s[f"jitter_rms_{axis}_px_out"]
        assert shaky > 1.0
        # Steady by both measures: the check and the outside reference.
        assert got < 0.1 * shaky
        assert ref[j] < 0.1 * shaky
        # And the figure is the output's: within 25 % of the outside reference and of the
        # exact residual (about a hundredth of a pixel here; 0.005 px allowed for the noise
        # of the measurements at that level).
        assert abs(got - ref[j]) <= 0.25 * ref[j] + 0.005, (got, ref[j])
        assert abs(got - truth[j]) <= 0.25 * truth[j] + 0.005, (got, truth[j])
        # The source measured by the check agrees with the analysis that made the log.
        assert s[f"jitter_rms_{axis}_px_src_check"] == pytest.approx(shaky, rel=0.1)
        assert s[f"shake_reduction_{axis}"] > 0.9
    back = read_log(log.extra["outputs"]["log_csv"])
    np.testing.assert_array_equal(back.output_check, log.output_check)
    assert np.isnan(back.output_check[0]).all() and np.isfinite(back.output_check[1:]).all()


def test_figures_after_steadying_agree_with_the_written_video(truss, tmp_path):
    """A light smoothing leaves shake in the output: the figures after steadying must be
    those of the written video (within 25 % of the outside reference), not of the plan."""
    path, clip = truss
    log = stabilize.steady(path, tmp_path / "light.mp4", window_s=0.15)
    s = log.summary
    ref = reference_rms(reference_motion(tmp_path / "light.mp4"))
    truth = true_rms(log, np.array(clip.inter_frame))
    for j, axis in enumerate(("x", "y")):
        got = s[f"jitter_rms_{axis}_px_out"]
        assert ref[j] > 0.3                      # enough left to compare
        assert got == pytest.approx(ref[j], rel=0.25)
        assert got == pytest.approx(truth[j], rel=0.25)
        # The plan's figure is another thing: what the log promised, not what was written.
        assert s[f"jitter_rms_{axis}_px_planned"] is not None
    # Per frame too: the check's output motion follows the reference's.
    ref_motion = reference_motion(tmp_path / "light.mp4")
    both = np.isfinite(ref_motion[:, 0]) & np.isfinite(log.output_check[:, 0])
    err = np.abs(ref_motion[both, :2] - log.output_check[both, :2])
    assert np.median(err) < 0.1


def _bad_log(good_csv: Path, bad_csv: Path, sigma_px: float, seed: int = 0) -> None:
    """The log with its matrices replaced by big random shifts (no scene cuts)."""
    log = read_log(good_csv)
    rng = np.random.default_rng(seed)
    log.matrices = np.repeat(np.eye(3)[None], log.frames, axis=0)
    log.matrices[1:, :2, 2] = rng.normal(0.0, sigma_px, (log.frames - 1, 2))
    log.status[:] = "ok"
    log.save(bad_csv)


def _cli(*args: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-m", "stabilize", *args], capture_output=True,
                          text=True, env=env, timeout=600)


def test_render_from_a_wrong_log_says_the_output_is_not_steadier(truss, tmp_path):
    path, _ = truss
    good = tmp_path / "good.motion.csv"
    assert _cli("measure", str(path), "--log", str(good), "--quiet").returncode == 0
    bad = tmp_path / "bad.motion.csv"
    _bad_log(good, bad, sigma_px=10.0)
    out = tmp_path / "wrong.mp4"
    run = _cli("render", str(path), "--log", str(bad), "-o", str(out), "--quiet")
    assert run.returncode == 0, run.stderr
    assert "not steadier than the source" in run.stderr
    doc = json.loads((tmp_path / "wrong.motion.json").read_text())
    s = doc["summary"]
    assert s["output_steadier"] is False
    assert s["shake_reduction_x"] < 0 or s["shake_reduction_y"] < 0
    # The plan (smoothing a made-up path) would have looked fine: that is what misled.
    assert s["jitter_rms_x_px_planned"] < s["jitter_rms_x_px_out"]
    ref = reference_rms(reference_motion(out))
    assert s["jitter_rms_x_px_out"] == pytest.approx(ref[0], rel=0.25)
    assert s["jitter_rms_y_px_out"] == pytest.approx(ref[1], rel=0.25)


# ------------------------------------------------------------ flat colour patterns
def flat_pattern(n: int, *, width: int = 480, height: int = 270, seed: int = 0,
                 shake_px: float = 6.0, movers: int = 3, mover_scale: float = 1.0):
    """Large flat-coloured rectangles and ellipses on a plain ground, seen by a shaking,
    slowly panning camera (two sinusoids per axis at 1.5–7 Hz, ``shake_px`` peak), with
    ``movers`` flat rectangles moving across the frame on their own (bouncing off its edges).
    Procedurally drawn. Returns a generator of RGB frames and the camera position (n, 2)
    pixels: the background of frame t is the world shifted by minus it, so the true
    inter-frame motion of the background is a translation by cam[t−1] − cam[t]."""
    rng = np.random.default_rng(seed)
    ww, wh = width + 200, height + 200
    world = np.empty((wh, ww, 3), np.uint8)
    world[:] = rng.integers(60, 200, 3)
    for _ in range(25):
        colour = tuple(int(c) for c in rng.integers(0, 256, 3))
        x, y = (int(v) for v in rng.integers(0, (ww, wh)))
        if rng.random() < 0.5:
            x1, y1 = x + int(rng.integers(20, 120)), y + int(rng.integers(20, 120))
            cv2.rectangle(world, (x, y), (x1, y1), colour, -1, cv2.LINE_AA)
        else:
            axes = (int(rng.integers(10, 60)), int(rng.integers(10, 60)))
            cv2.ellipse(world, (x, y), axes, float(rng.uniform(0, 180)), 0, 360, colour, -1,
                        cv2.LINE_AA)
    t = np.arange(n) / FPS
    f1, f2 = rng.uniform(1.5, 3.0, 2)
    ph = rng.uniform(0, 2 * np.pi, 4)
    sx = shake_px * (np.sin(2 * np.pi * f1 * t + ph[0])
                     + 0.5 * np.sin(2 * np.pi * 2.3 * f1 * t + ph[1]))
    sy = shake_px * (0.7 * np.sin(2 * np.pi * f2 * t + ph[2])
                     + 0.4 * np.sin(2 * np.pi * 1.7 * f2 * t + ph[3]))
    cam = np.stack([20.0 * t + sx, sy], axis=1)
    boxes = []
    for _ in range(movers):
        size = np.array([rng.integers(40, 90), rng.integers(30, 70)], float) * mover_scale
        colour = tuple(int(c) for c in rng.integers(0, 256, 3))
        boxes.append((size, colour, rng.uniform(0, [width - size[0], height - size[1]]),
                      rng.uniform(-120, 120, 2)))

    def frames():
        for i in range(n):
            m = np.float64([[1, 0, -100 - cam[i, 0]], [0, 1, -100 - cam[i, 1]]])
            img = cv2.warpAffine(world, m, (width, height), flags=cv2.INTER_LINEAR)
            for size, colour, p0, v in boxes:
                span = np.array([width, height], float) - size
                p = np.abs((p0 + v * t[i]) % (2 * span))
                p = np.where(p > span, 2 * span - p, p)
                cv2.rectangle(img, (int(p[0]), int(p[1])),
                              (int(p[0] + size[0]), int(p[1] + size[1])), colour, -1,
                              cv2.LINE_AA)
            yield img

    return frames(), cam


def true_output_rms(log, cam: np.ndarray) -> tuple[float, float]:
    """Shake RMS (pixels) of the output's true background motion, from the camera position
    of :func:`flat_pattern`."""
    h = np.repeat(np.eye(3)[None], len(cam), axis=0)
    h[1:, :2, 2] = cam[:-1] - cam[1:]
    return true_rms(log, h)


@pytest.mark.parametrize("seed, mover_scale, movers, shake_px",
                         [(1, 1.0, 3, 6.0), (1, 2.5, 3, 6.0), (15, 3.0, 2, 10.0),
                          (13, 3.0, 2, 12.0), (17, 2.8, 2, 14.0)])
def test_flat_colour_patterns_with_movers_are_steadied_or_said_not_to_be(
        tmp_path, caplog, seed, mover_scale, movers, shake_px):
    """Either the output is steady (a tenth of the input's shake or less, measured on its
    frames) or the run says it is not; and the figures after steadying, where given, are
    the written video's within 25 %.

    Seed 15: two flat movers over a third of the frame each leave the output's check so
    few corners that it measured 76 % of the pairs; a frame the log got 7 px wrong lay in
    an unmeasured stretch, and the figures after steadying read 0.08 px against the
    output's true 0.69 px (measured before the check had to cover 90 % of the pairs).
    Seeds 13 and 17: 45 % and 81 % of the output's pairs measured, and no figures, before
    the check looked for weaker corners in sparse pictures and took the source's measured
    motion where the output's own corners were too few; seed 13 then read 1.35 / 0.74 px
    against a true 1.36 / 0.65 px (weak frames at its start, 6–9 px off), steadier but not
    steady, and said so (measured 2026-12-05)."""
    frames, cam = flat_pattern(120, seed=seed, mover_scale=mover_scale, movers=movers,
                               shake_px=shake_px)
    clip = write_clip(tmp_path / "flat.mp4", frames, FPS)
    out = tmp_path / "flat.steady.mp4"
    with caplog.at_level("WARNING", logger="stabilize"):
        log = stabilize.steady(clip, out)
    s = log.summary
    said_not = any("not steadier" in r.message or "could not be checked" in r.message
                   or "not steady" in r.message for r in caplog.records)
    if s["output_steadier"] and not s["output_keeps_shake"]:
        assert not said_not
        for axis in ("x", "y"):
            # Residual at most a tenth of the input's, both measured on frames by the check
            # (or under the floor of 1 px per 1000 px of width).
            assert s[f"jitter_rms_{axis}_px_out"] <= max(
                0.1 * s[f"jitter_rms_{axis}_px_src_check"], 0.48)
    else:
        assert said_not
    truth = true_output_rms(log, cam)
    print(f"seed {seed}: measured {s['output_pairs_measured']:.2f}, carried "
          f"{s['output_pairs_carried']}; out {s['jitter_rms_x_px_out']} / "
          f"{s['jitter_rms_y_px_out']} px, true {truth[0]:.3f} / {truth[1]:.3f} px")
    for j, axis in enumerate(("x", "y")):
        got = s[f"jitter_rms_{axis}_px_out"]
        if got is None:
            assert said_not
            continue
        # Within 25 % of the output's true residual shake, or, where that is a few
        # hundredths of a pixel, within the check's own noise (0.1 px) of it.
        assert abs(got - truth[j]) <= 0.25 * truth[j] + 0.1, (got, truth[j])


def test_flat_colour_patterns_with_a_mover_sliding_along_its_edge_are_not_held_still(tmp_path):
    """Two flat movers over a third of the frame each, one sliding along its own long edge
    while the camera shakes (±12 px): the faint fringe beside that edge stayed put and was
    taken for still detail of a wall, so the camera was held still on most frames and the
    log was off by 4.3 px at the median (0.07 px since, measured). The log must follow the
    camera."""
    frames, cam = flat_pattern(120, seed=13, mover_scale=3.0, movers=2, shake_px=12.0)
    log = stabilize.measure(write_clip(tmp_path / "flat.mp4", frames, FPS))
    truth = np.repeat(np.eye(3)[None], len(cam), axis=0)
    truth[1:, :2, 2] = cam[:-1] - cam[1:]
    err = grid_transfer_error(truth[1:], log.matrices[1:], *log.size)
    print(f"median error {np.median(err):.3f} px; reasons {sorted(log.extra['frame_reasons'])}")
    assert "held_still" not in log.extra["frame_reasons"]
    assert np.median(err) < 0.15


@pytest.mark.slow
def test_flat_colour_patterns_light_smoothing_figures_are_the_outputs(tmp_path):
    """With shake left in the output, the figures after steadying agree within 25 % with the
    output's true residual shake and with the outside reference."""
    frames, cam = flat_pattern(120, seed=1, mover_scale=2.5)
    clip = write_clip(tmp_path / "flat.mp4", frames, FPS)
    out = tmp_path / "flat.light.mp4"
    log = stabilize.steady(clip, out, window_s=0.15)
    s = log.summary
    truth = true_output_rms(log, cam)
    ref = reference_rms(reference_motion(out))
    for j, axis in enumerate(("x", "y")):
        got = s[f"jitter_rms_{axis}_px_out"]
        assert truth[j] > 0.5
        assert got == pytest.approx(truth[j], rel=0.25)
        assert got == pytest.approx(ref[j], rel=0.25)
