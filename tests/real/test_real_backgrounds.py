"""A still camera before real scenes, with an object waved in front of it.

The background is one frame of a real clip, held still (so the true camera path is exactly
zero); an object drawn by the test covers 0.3–0.45 of the frame and moves in front of it:
a densely textured board, a dark board dotted with highlights, or a smooth, shaded blob
with a few dark marks (the way a face or a hand offers few corners). Sensor noise
(σ 1.5 grey levels) on every frame, H.264 at CRF 20. The real pictures bring what drawn
backgrounds lack: a defocused room, a table, a street, with their own mix of strong and
faint detail.

Measured 2026-12-05 on a sweep of 45 such clips (five backgrounds × three objects × waved,
slid or turned): the logged path stayed within 0.04 px of zero on every one. The four kept
here span the backgrounds and objects.
"""

from __future__ import annotations

from pathlib import Path

import cv2
import numpy as np
import pytest

import stabilize
from stabilize.io import VideoWriter, iter_frames

pytestmark = pytest.mark.slow

FPS = 25.0
FRAMES = 150


def _background(clip: Path, index: int) -> np.ndarray:
    for frame in iter_frames(clip):
        if frame.index == index:
            return frame.image.astype(np.float32)
    raise AssertionError(f"{clip.name}: no frame {index}")


def _object(kind: str, bw: int, bh: int, rng: np.random.Generator
            ) -> tuple[np.ndarray, np.ndarray]:
    """The object's picture (bh, bw, 3) and its coverage (bh, bw), 0–1."""
    cover = np.ones((bh, bw), np.float32)
    if kind == "textured":
        face = cv2.resize(rng.integers(0, 255, (bh // 6 + 1, bw // 6 + 1, 3)).astype(np.uint8),
                          (bw, bh), interpolation=cv2.INTER_CUBIC).astype(np.float32)
    elif kind == "dotted":
        face = np.full((bh, bw, 3), 40, np.float32)
        for _ in range(15):
            x, y = (int(v) for v in rng.integers(8, (bw - 8, bh - 8)))
            cv2.circle(face, (x, y), int(rng.integers(2, 8)), (float(rng.integers(60, 200)),) * 3,
                       -1, cv2.LINE_AA)
    else:  # "smooth": an oval, shaded, with a few dark marks
        yy, xx = np.mgrid[0:bh, 0:bw].astype(np.float32)
        grey = 90 + 60 * np.exp(-(((xx - bw / 2) / (0.35 * bw)) ** 2
                                  + ((yy - bh / 2) / (0.4 * bh)) ** 2))
        face = np.stack([grey * 0.8, grey * 0.9, grey * 1.1], axis=2)
        for _ in range(6):
            x, y = (int(v) for v in rng.integers(8, (bw - 8, bh - 8)))
            cv2.ellipse(face, (x, y), (int(rng.integers(6, 20)), int(rng.integers(3, 8))), 0, 0,
                        360, (50, 50, 60), -1, cv2.LINE_AA)
        cover = ((((xx - bw / 2) / (0.5 * bw)) ** 2 + ((yy - bh / 2) / (0.5 * bh)) ** 2) <= 1
                 ).astype(np.float32)
    return face, cover


def _still_camera_clip(dest: Path, background: np.ndarray, kind: str, share: float,
                       motion: str, seed: int = 0, auto_exposure: bool = False) -> Path:
    """Write the clip: the background held still, the object moved over it (``"wave"``:
    ±80 px across at 0.7 Hz and a third of that up and down; ``"slide"``: across the whole
    frame once; ``"turn"``: ±15° at 0.5 Hz while swaying ±18 px). ``auto_exposure``: the
    camera's gain brings the picture's mean back toward the first frame's, 15 % of the way
    each frame, as a camera's exposure loop answers a dark object coming into view (a
    first-order loop; the rate is our own choice)."""
    rng = np.random.default_rng(seed)
    h, w = background.shape[:2]
    bw, bh = int(np.sqrt(share) * w * 0.8), int(np.sqrt(share) * h * 1.2)
    face, cover = _object(kind, bw, bh, rng)
    gain, target = 1.0, None
    with VideoWriter(dest, w, h, FPS, crf=20, preset="medium") as out:
        for i in range(FRAMES):
            t = i / FPS
            angle = 0.0
            if motion == "wave":
                cx = w / 2 + 80 * np.sin(2 * np.pi * 0.7 * t)
                cy = h / 2 + 32 * np.sin(2 * np.pi * 1.1 * t + 1.0)
            elif motion == "slide":
                cx, cy = w * (0.1 + 0.8 * i / FRAMES), h / 2 + 10 * np.sin(t)
            else:
                cx, cy = w / 2 + 18 * np.sin(2 * np.pi * 0.4 * t), h / 2
                angle = 15 * np.sin(2 * np.pi * 0.5 * t)
            m = cv2.getRotationMatrix2D((bw / 2, bh / 2), angle, 1.0)
            m[:, 2] += [cx - bw / 2, cy - bh / 2]
            layer = cv2.warpAffine(face, m, (w, h), flags=cv2.INTER_LINEAR)
            alpha = cv2.warpAffine(cover, m, (w, h), flags=cv2.INTER_LINEAR)[..., None]
            img = background * (1 - alpha) + layer * alpha
            if auto_exposure:
                mean = float(img.mean())
                target = mean if target is None else target
                gain += 0.15 * (target / max(mean, 1.0) - gain)
                img = img * gain
            out.write(np.clip(img + rng.normal(0, 1.5, img.shape), 0, 255).astype(np.uint8))
    return dest


@pytest.mark.parametrize("name, index, kind, share, motion", [
    ("box.mp4", 0, "dotted", 0.45, "wave"),         # a table and a pen
    ("vtest.avi", 0, "smooth", 0.4, "slide"),       # a square, a fountain, benches
    ("bikes.mp4", 5, "textured", 0.3, "turn"),      # a street, parked cars
    ("Megamind.avi", 205, "textured", 0.45, "wave"),  # a dark, defocused room
])
def test_a_still_camera_before_a_real_scene_stays_still(tmp_path, real_clip, name, index, kind,
                                                       share, motion):
    background = _background(real_clip(name), index)
    clip = _still_camera_clip(tmp_path / f"still before {Path(name).stem}.mp4", background,
                              kind, share, motion)
    log = stabilize.measure(clip)
    path = np.abs(log.readouts()["path"][:, :2]).max()
    statuses = dict(zip(*np.unique(log.status, return_counts=True), strict=True))
    print(f"{name} frame {index}, {kind} object over {share} ({motion}): path within "
          f"{path:.3f} px of zero; {statuses}; {log.summary['trust']}")
    # The limit for such clips is 2 px; each of these measured 0.04 px or less.
    assert path <= 0.5, f"{name}: the path strays {path:.2f} px from a still camera"
    # Frames the analysis could not vouch for are said to be weak, never passed off as
    # measured: a frame is `ok` only when its fit is the still background's.
    ok = log.status == "ok"
    assert np.all(np.abs(log.matrices[ok, :2, 2]) < 0.5)


@pytest.mark.parametrize("name, index, share, motion", [
    ("box.mp4", 0, 0.45, "slide"),                 # a table and a pen
    ("carphone_pristine.mp4", 0, 0.4, "wave"),     # a car's window, seats, a man
    ("bikes.mp4", 5, 0.3, "slide"),                # a street, parked cars
])
def test_a_still_camera_under_automatic_exposure_stays_near_still(tmp_path, real_clip, name,
                                                                 index, share, motion):
    """A dark board before a still camera whose exposure answers it (the gain rises to 1.47,
    1.20 and 1.28 times its first value as the board comes into view): the change of
    brightness pulls faint windows along, so the path moves a little, but far less than over
    a faint drawn wall (up to 3.7 px, `tests/test_motion.py`), and the summary reads the
    change. Measured 2026-12-05: 0.41, 0.24 and 0.64 px (`brightness_drift_px` 0.07, 0.17,
    0.49), all `sound`; without the exposure change, 0.01–0.04 px."""
    background = _background(real_clip(name), index)
    clip = _still_camera_clip(tmp_path / f"exposure before {Path(name).stem}.mp4", background,
                              "dotted", share, motion, seed=1, auto_exposure=True)
    log = stabilize.measure(clip)
    path = np.abs(log.readouts()["path"][:, :2]).max()
    drift = log.summary["brightness_drift_px"]
    print(f"{name} under automatic exposure: path within {path:.3f} px of zero; brightness "
          f"drift {drift}; {log.summary['trust']}")
    # The limit for a still camera before an object is 2 px.
    assert path <= 1.0, f"{name}: the path strays {path:.2f} px from a still camera"
    assert drift is not None and drift > 0.02, "the change of brightness went unread"
    assert log.summary["trust"] != "unreliable"
