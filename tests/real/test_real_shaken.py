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
0.39 px over its 455 frames.
"""

from __future__ import annotations

from pathlib import Path

import cv2
import numpy as np
import pytest

import stabilize
from stabilize.io import VideoWriter, iter_frames
from stabilize.synthetic import grid_transfer_error

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


def shaken_clip(source: Path, out: Path, *, amp_px: float, amp_deg: float, seed: int,
                frames: int) -> np.ndarray:
    """Write the first ``frames`` frames of ``source`` shaken (module docstring) to ``out``;
    return the scene's true inter-frame motion (frames, 3, 3), pixels, identity first."""
    images = []
    for frame in iter_frames(source):
        if frame.index >= frames:
            break
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
    with VideoWriter(out, w, h, FPS, crf=18, preset="medium") as writer:
        for image, m in zip(images, warps, strict=True):
            writer.write(cv2.warpAffine(image, m[:2], (w, h), flags=cv2.INTER_CUBIC,
                                        borderMode=cv2.BORDER_REFLECT))
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
