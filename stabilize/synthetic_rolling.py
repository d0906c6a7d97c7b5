"""Render rolling-shutter frames of a drawn scene under a known shaking, vibrating camera path.

A CMOS sensor reads its rows one after another, so row ``y`` of frame ``t`` is exposed at

    τ(t, y) = t / fps + y · readout_s / height            (seconds)

and sees the camera where it was at that instant. :func:`render_rolling` reproduces this by
sampling every output row with the camera position at its own instant (one ``cv2.remap`` per
frame with per-row offsets), so the ground truth is the continuous path itself.

Path convention
---------------
The path ``p(τ) = (x, y)`` (px, x right, y down) is the *image-plane position of the scene*:
a scene point drawn at world pixel ``W`` appears at frame pixel ``W − origin + p(τ)`` in the row
exposed at ``τ``. So a point seen in frame ``t − 1`` and again in frame ``t`` at (nearly) the same
row moves by ``p(τ) − p(τ − 1/fps)`` pixels: the one-frame displacement difference that the
row-band measurements sample. Pixel coordinates follow :mod:`stabilize.geometry` (origin at the
centre of the top-left pixel).

The scene is this project's own: blurred multi-scale noise with scattered discs and bars, drawn
from a seed. A readout of 0 gives global-shutter frames of the same scene and path.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import cv2
import numpy as np

__all__ = [
    "VibratingPath",
    "draw_world",
    "one_frame_difference",
    "render_rolling",
    "row_times",
]

PathFn = Callable[[np.ndarray], np.ndarray]


@dataclass(frozen=True)
class VibratingPath:
    """A hand-held or mounted camera: slow shake plus one sinusoidal vibration.

    Parameters
    ----------
    shake_hz : frequencies of the slow shake components (Hz), e.g. 2–3 Hz.
    shake_px : (x, y) amplitude of every shake component (px).
    vibration_hz : frequency of the vibration (Hz); 0 for none.
    vibration_px : amplitude of the vibration along ``vibration_deg`` (px, zero to peak).
    vibration_deg : direction of the vibration in the image, degrees from +x towards +y.
    drift_px_s : constant pan (x, y) in px/s.
    seed : seeds the phases of every component.
    """

    shake_hz: tuple[float, ...] = (2.1, 2.9)
    shake_px: tuple[float, float] = (6.0, 4.0)
    vibration_hz: float = 47.0
    vibration_px: float = 1.5
    vibration_deg: float = 30.0
    drift_px_s: tuple[float, float] = (8.0, 0.0)
    seed: int = 0

    def _phases(self) -> np.ndarray:
        rng = np.random.default_rng(self.seed)
        return rng.uniform(0.0, 2.0 * np.pi, size=(len(self.shake_hz) + 1, 2))

    def shake(self, times_s: np.ndarray) -> np.ndarray:
        """Slow part of the path (shake and drift), (n, 2) px at ``times_s`` (n,) s."""
        t = np.asarray(times_s, dtype=np.float64)
        ph = self._phases()
        out = np.outer(t, np.asarray(self.drift_px_s, dtype=np.float64))
        for i, f in enumerate(self.shake_hz):
            out += np.asarray(self.shake_px) * np.sin(2.0 * np.pi * f * t[:, None] + ph[i])
        return out

    def vibration(self, times_s: np.ndarray) -> np.ndarray:
        """Vibration part of the path, (n, 2) px at ``times_s`` (n,) s."""
        t = np.asarray(times_s, dtype=np.float64)
        if self.vibration_hz <= 0 or self.vibration_px == 0:
            return np.zeros((len(t), 2))
        a = np.radians(self.vibration_deg)
        s = self.vibration_px * np.sin(2.0 * np.pi * self.vibration_hz * t + self._phases()[-1, 0])
        return np.stack([s * np.cos(a), s * np.sin(a)], axis=1)

    def __call__(self, times_s: np.ndarray) -> np.ndarray:
        """The whole path p(τ), (n, 2) px at ``times_s`` (n,) s."""
        return self.shake(times_s) + self.vibration(times_s)

    def reach_px(self, duration_s: float) -> float:
        """A bound on |p(τ)| over [0, duration_s] (px), for sizing the world canvas."""
        return (float(np.hypot(*self.shake_px)) * len(self.shake_hz) + abs(self.vibration_px)
                + float(np.hypot(*self.drift_px_s)) * duration_s)


def row_times(n_frames: int, height: int, fps: float, readout_s: float) -> np.ndarray:
    """Exposure instant of every row of every frame, (n_frames, height) s.

    Row ``y`` of frame ``t`` is exposed at ``t / fps + y · readout_s / height``.
    """
    t = np.arange(n_frames, dtype=np.float64)[:, None] / fps
    return t + np.arange(height, dtype=np.float64)[None, :] * (readout_s / height)


def one_frame_difference(path: PathFn, times_s: np.ndarray, fps: float) -> np.ndarray:
    """True displacement over one frame interval, p(τ) − p(τ − 1/fps), (n, 2) px."""
    t = np.asarray(times_s, dtype=np.float64)
    return path(t) - path(t - 1.0 / fps)


def draw_world(width: int, height: int, seed: int = 0) -> np.ndarray:
    """A procedurally drawn grey scene rich in texture at many scales, (height, width) uint8.

    Sum of Gaussian-blurred noise at three scales, plus scattered filled discs and bars of
    random grey levels (blurred slightly, so subpixel shifts stay smooth).
    """
    rng = np.random.default_rng(seed)
    img = np.zeros((height, width), np.float32)
    for sigma, weight in ((1.5, 0.6), (6.0, 1.0), (24.0, 1.2)):
        n = rng.standard_normal((height, width)).astype(np.float32)
        n = cv2.GaussianBlur(n, (0, 0), sigma)
        img += weight * n / (n.std() + 1e-6)
    img = 128.0 + 22.0 * img
    n_shapes = max(20, width * height // 6000)
    xs = rng.uniform(0, width, n_shapes).astype(int)
    ys = rng.uniform(0, height, n_shapes).astype(int)
    sizes = rng.uniform(4, 40, n_shapes).astype(int)
    greys = rng.uniform(20, 235, n_shapes)
    kinds = rng.integers(0, 2, n_shapes)
    for x, y, s, g, k in zip(xs, ys, sizes, greys, kinds, strict=True):
        if k == 0:
            cv2.circle(img, (int(x), int(y)), int(s), float(g), -1, cv2.LINE_AA)
        else:
            cv2.rectangle(img, (int(x), int(y)), (int(x + 2 * s), int(y + s // 2 + 2)),
                          float(g), -1, cv2.LINE_AA)
    img = cv2.GaussianBlur(img, (0, 0), 0.8)
    return np.clip(img, 0, 255).astype(np.uint8)


def render_rolling(world: np.ndarray, path: PathFn, *, width: int, height: int, fps: float,
                   n_frames: int, readout_s: float, noise_sigma: float = 0.0,
                   seed: int = 0) -> np.ndarray:
    """Rolling-shutter frames of ``world`` seen along ``path``, (n_frames, height, width) uint8.

    Parameters
    ----------
    world : (H, W) uint8 grey scene, larger than the frame by the path's reach on every side.
    path : maps times (n,) s to image-plane positions (n, 2) px (see the module docstring).
    width, height : frame size (px).
    fps : frame rate (frames per second).
    n_frames : number of frames.
    readout_s : time from the first row to the last row (s); 0 for a global shutter.
    noise_sigma : standard deviation of added Gaussian sensor noise (grey levels).
    seed : seeds the noise.

    Returns
    -------
    (n_frames, height, width) uint8 frames. Frame ``t`` row ``y`` shows world pixel
    ``(u + ox − p_x(τ), y + oy − p_y(τ))`` with ``τ`` from :func:`row_times` and the origin
    ``(ox, oy)`` centring the frame in the world.
    """
    wh, ww = world.shape
    ox, oy = (ww - width) / 2.0, (wh - height) / 2.0
    times = row_times(n_frames, height, fps, readout_s)
    pos = path(times.ravel()).reshape(n_frames, height, 2)
    reach = float(np.abs(pos).max()) if pos.size else 0.0
    if reach + 2 > min(ox, oy):
        raise ValueError(f"the world ({ww}×{wh}) is too small for a path reaching {reach:.1f} px")
    u = np.arange(width, dtype=np.float32)[None, :]
    rows = np.arange(height, dtype=np.float32)[:, None]
    rng = np.random.default_rng(seed)
    out = np.empty((n_frames, height, width), np.uint8)
    src = world.astype(np.float32)
    for t in range(n_frames):
        mx = (u + np.float32(ox) - pos[t, :, 0:1].astype(np.float32))
        my = np.broadcast_to(rows + np.float32(oy) - pos[t, :, 1:2].astype(np.float32),
                             (height, width))
        frame = cv2.remap(src, mx, np.ascontiguousarray(my), cv2.INTER_LINEAR,
                          borderMode=cv2.BORDER_REFLECT)
        if noise_sigma > 0:
            frame += rng.normal(0.0, noise_sigma, frame.shape).astype(np.float32)
        out[t] = np.clip(np.rint(frame), 0, 255).astype(np.uint8)
    return out
