"""Real clips of a fixed camera, shaken by a known camera motion: real pictures and real
movement in front of the camera, with exact ground truth.

Each frame of a real clip whose camera did not move is warped by a shake of our own (a sum
of three sines per axis at 1.5–8 Hz, a drone's band, and as much rotation about the centre),
zoomed just enough that the moved-in borders never show, and encoded with H.264 at CRF 18 at
30 fps. The scene's true motion from frame t−1 to t is then W_t·W_{t−1}⁻¹ with W_t the
warp of frame t: what the log must give, whatever moves in front (pedestrians, a box moved
by hand, a talking man).

Measured 2026-12-05: ``vtest.avi`` (±4 px, ±0.3°) median 0.019 px, worst 0.07 px, path
0.13 px off at the centre after 300 frames; ``box.mp4`` (±8 px, ±0.5°) 0.042 / 0.23 /
0.39 px over its 455 frames. Made hazy with a burnt-in telemetry line, ``vtest.avi`` is
also the real counterpart of the drawn hazy scenes of ``tests/test_tracking_accuracy.py``.
"""

from __future__ import annotations

from pathlib import Path

import cv2
import numpy as np
import pytest

import stabilize
from stabilize.io import VideoWriter, iter_frames
from stabilize.synthetic import grid_transfer_error

from ..test_output_check import true_rms

pytestmark = pytest.mark.slow

FPS = 30.0


def _shake(n: int, amp_px: float, amp_deg: float, seed: int) -> np.ndarray:
    """(n, 3) shake x, y (pixels) and rotation (degrees): per axis three sines of random
    frequency (1.5–8 Hz), phase and weight, peaking at most at the amplitude."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / FPS
    out = []
    for amp in (amp_px, amp_px, amp_deg):
        f, ph, w = rng.uniform(1.5, 8.0, 3), rng.uniform(0, 2 * np.pi, 3), rng.uniform(0.3, 1, 3)
        out.append(amp * (w[:, None] * np.sin(2 * np.pi * f[:, None] * t + ph[:, None])
                          ).sum(axis=0) / w.sum())
    return np.stack(out, axis=1)


def _hazy(image: np.ndarray, contrast: float, index: int) -> np.ndarray:
    """``image`` blended toward a light grey (``contrast`` of its own spread about its mean
    left) with sensor noise of σ 1.5 grey levels: a hazy view, uint8."""
    f = image.astype(np.float32)
    noise = np.random.default_rng(index).normal(0.0, 1.5, f.shape)
    return np.clip(160.0 + contrast * (f - f.mean()) + noise, 0, 255).astype(np.uint8)


def _telemetry(image: np.ndarray, index: int) -> None:
    """Burn a telemetry line of our own (height, speed, time, position; the numbers change
    from frame to frame) in full contrast into the bottom tenth of ``image``, in place."""
    h, w = image.shape[:2]
    image[int(0.9 * h):] = 20
    text = (f"ALT {120 + index * 0.1:6.1f} m  SPD {3 + (index % 7) * 0.3:4.1f} m/s  "
            f"T+{index / FPS:7.2f}s  GPS 47.{3810 + index:04d}N")
    cv2.putText(image, text, (6, h - 8), cv2.FONT_HERSHEY_SIMPLEX, 0.45 * w / 640,
                (235, 235, 235), 1, cv2.LINE_AA)


def shaken_clip(source: Path, out: Path, *, amp_px: float, amp_deg: float, seed: int,
                frames: int, haze: float | None = None, telemetry: bool = False,
                crf: int = 18, start: int = 0) -> np.ndarray:
    """Write ``frames`` frames of ``source`` from frame ``start`` on, shaken (module
    docstring), to ``out``,
    with ``haze`` (:func:`_hazy`) and a burnt-in ``telemetry`` line (:func:`_telemetry`)
    laid on after the shake, at ``crf``; return the scene's true inter-frame motion (frames,
    3, 3), pixels, identity first."""
    images = []
    for frame in iter_frames(source):
        if frame.index >= start + frames:
            break
        if frame.index >= start:
            images.append(frame.image)
    h, w = images[0].shape[:2]
    shake = _shake(len(images), amp_px, amp_deg, seed)
    zoom = 1.0 + 2.5 * (amp_px + np.radians(amp_deg) * w / 2) / min(w, h)
    c = np.array([(w - 1) / 2, (h - 1) / 2])
    warps = []
    for dx, dy, deg in shake:
        a = np.radians(deg)
        r = zoom * np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
        m = np.eye(3)
        m[:2, :2], m[:2, 2] = r, c - r @ c + (dx, dy)
        warps.append(m)
    with VideoWriter(out, w, h, FPS, crf=crf, preset="medium") as writer:
        for i, (image, m) in enumerate(zip(images, warps, strict=True)):
            moved = cv2.warpAffine(image, m[:2], (w, h), flags=cv2.INTER_CUBIC,
                                   borderMode=cv2.BORDER_REFLECT)
            if haze is not None:
                moved = _hazy(moved, haze, i)
            if telemetry:
                _telemetry(moved, i)
            writer.write(moved)
    return np.array([np.eye(3)] + [warps[i] @ np.linalg.inv(warps[i - 1])
                                   for i in range(1, len(warps))])


def _errors(log, truth: np.ndarray) -> tuple[np.ndarray, float]:
    """Per-frame grid transfer error (pixels) and the largest distance between the logged
    and the true path at the frame centre (pixels)."""
    w, h = log.size
    err = grid_transfer_error(truth[1:], log.matrices[1:], w, h)
    centre = np.array([(w - 1) / 2, (h - 1) / 2, 1.0])
    logged, true, worst = np.eye(3), np.eye(3), 0.0
    for m, t in zip(log.matrices[1:], truth[1:], strict=True):
        logged, true = m @ logged, t @ true
        p, q = logged @ centre, true @ centre
        worst = max(worst, float(np.hypot(*(p[:2] / p[2] - q[:2] / q[2]))))
    return err, worst


@pytest.mark.parametrize("name, amp_px, amp_deg, frames, median_px, path_px", [
    ("vtest.avi", 4.0, 0.3, 300, 0.05, 0.5),
    ("box.mp4", 8.0, 0.5, 455, 0.08, 1.5),
])
def test_a_shaken_real_clip_is_measured_to_its_known_shake(tmp_path, real_clip, name, amp_px,
                                                           amp_deg, frames, median_px, path_px):
    truth = shaken_clip(real_clip(name), tmp_path / f"shaken {name}.mp4", amp_px=amp_px,
                        amp_deg=amp_deg, seed=1 if name == "vtest.avi" else 2, frames=frames)
    log = stabilize.measure(tmp_path / f"shaken {name}.mp4")
    err, path = _errors(log, truth)
    print(f"{name}: median {np.median(err):.4f} px, worst {err.max():.3f} px, path {path:.3f} px")
    assert np.median(err) <= median_px
    assert err.max() <= 0.5
    assert path <= path_px
    assert (log.status[1:] == "ok").mean() >= 0.95


def test_a_hazy_real_scene_with_a_burnt_in_strip_at_ffmpegs_default_quality(tmp_path,
                                                                            real_clip):
    """``vtest.avi`` shaken, blended toward grey to a tenth of its contrast with sensor
    noise, a telemetry line burnt in over its bottom tenth in full contrast (it holds the
    strongest corners of the frame), H.264 at CRF 23, x264's default. The strip must be
    found and left out, and the log must give the shake within 0.15 px at the median
    (measured: 0.117 px, worst 0.33 px, the strip found; seed 2 0.104 px)."""
    clip = tmp_path / "hazy vtest.mp4"
    truth = shaken_clip(real_clip("vtest.avi"), clip, amp_px=4.0, amp_deg=0.3, seed=1,
                        frames=240, haze=0.1, telemetry=True, crf=23)
    log = stabilize.measure(clip)
    err, path = _errors(log, truth)
    found = log.extra["excluded"]["static_overlay"]
    print(f"median {np.median(err):.4f} px, worst {err.max():.3f} px, path {path:.3f} px; "
          f"overlays {found}")
    assert np.median(err) <= 0.15
    assert found and all(y >= 0.85 * log.size[1] for _, y, _, _ in found)
    assert (log.status[1:] == "ok").mean() >= 0.95


@pytest.mark.xfail(strict=True, reason=(
    "known limit (DEVELOPERS.md, Known limits): a talking man over most of a 176x144 frame, "
    "zoomed 10 % and shaken 6 px; his head tilt carries the similarity fit (-0.8 deg a frame "
    "over 9 frames) and the path strays about 28 px"))
def test_carphone_shaken_follows_the_car_not_the_man(tmp_path, real_clip):
    truth = shaken_clip(real_clip("carphone_pristine.mp4"), tmp_path / "shaken carphone.mp4",
                        amp_px=6.0, amp_deg=0.0, seed=2, frames=120)
    log = stabilize.measure(tmp_path / "shaken carphone.mp4")
    _, path = _errors(log, truth)
    assert path <= 2.0, f"carphone shaken: path {path:.2f} px off the car's"


@pytest.mark.xfail(strict=True, reason=(
    "known limit (DEVELOPERS.md, Known limits): a head over most of the frame before a dark, "
    "defocused room, the camera shaken 4 px; the room's smooth faint detail matches where it "
    "was better than where the head's fits put it, the camera is held still and its shake "
    "is lost from the log"))
def test_megamind_last_shot_shaken_keeps_the_shake(tmp_path, real_clip):
    """The last shot of ``Megamind.avi`` (frames 200–269, a still camera before a man whose
    head and shoulders fill most of the frame) shaken ±4 px, ±0.3°. The log must keep the
    camera's shake: a median error of at most 0.3 px a frame."""
    clip = tmp_path / "shaken last shot.mp4"
    truth = shaken_clip(real_clip("Megamind.avi"), clip, amp_px=4.0, amp_deg=0.3, seed=1,
                        frames=70, start=200)
    log = stabilize.measure(clip)
    err, _ = _errors(log, truth)
    held = log.extra["frame_reasons"].get("held_still", [])
    print(f"median {np.median(err):.3f} px; {len(held)} frames held still")
    assert np.median(err) <= 0.3


def test_box_shaken_and_steadied_gives_the_outputs_own_figures(tmp_path, real_clip):
    """``box.mp4`` shaken (±8 px, ±0.5°) and steadied: the figures after steadying must be
    the written video's own, within 25 % of its true residual shake or 0.1 px. The render's
    check of the frames followed the box, in the source and so in the output, and read
    1.15 / 1.26 px against a true 0.031 / 0.024 px, until it was told the log's scene."""
    clip = tmp_path / "shaken box.mp4"
    truth = shaken_clip(real_clip("box.mp4"), clip, amp_px=8.0, amp_deg=0.5, seed=2,
                        frames=455)
    log = stabilize.steady(clip, tmp_path / "shaken box.steady.mp4")
    s = log.summary
    true_x, true_y = true_rms(log, truth)
    print(f"after steadying: read x {s['jitter_rms_x_px_out']:.3f}, y "
          f"{s['jitter_rms_y_px_out']:.3f} px; true x {true_x:.3f}, y {true_y:.3f} px")
    assert abs(s["jitter_rms_x_px_out"] - true_x) <= 0.25 * true_x + 0.1
    assert abs(s["jitter_rms_y_px_out"] - true_y) <= 0.25 * true_y + 0.1
