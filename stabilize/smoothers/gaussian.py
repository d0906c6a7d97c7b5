"""Zero-phase Gaussian low-pass of a path, with straight-line reflection at the clip ends."""

from __future__ import annotations

import numpy as np

__all__ = ["gaussian_kernel", "gaussian_smooth"]


def gaussian_kernel(sigma_frames: float) -> np.ndarray:
    """Normalised Gaussian taps of standard deviation ``sigma_frames`` (frames), radius 3σ.

    Parameters
    ----------
    sigma_frames : standard deviation, frames.

    Returns
    -------
    (2r + 1,) taps summing to 1, r = max(1, ⌈3σ⌉) frames.
    """
    radius = max(1, int(np.ceil(3.0 * sigma_frames)))
    x = np.arange(-radius, radius + 1, dtype=np.float64)
    k = np.exp(-0.5 * (x / max(sigma_frames, 1e-9)) ** 2)
    return k / k.sum()


def _end_anchor(values: np.ndarray, span: int) -> np.ndarray:
    """Value at the first sample of a straight line fitted to the first ``span`` samples."""
    span = max(2, min(span, len(values)))
    t = np.arange(span, dtype=np.float64)
    seg = values[:span]
    tc = t - t.mean()
    slope = (tc[:, None] * (seg - seg.mean(axis=0))).sum(axis=0) / (tc**2).sum()
    return seg.mean(axis=0) - slope * t.mean()


def gaussian_smooth(values: np.ndarray, fps: float, window_s: float) -> np.ndarray:
    """Zero-phase Gaussian low-pass of each column of ``values`` (n, k).

    The Gaussian's standard deviation is ``window_s / 2`` seconds, so shake above about
    1 / window_s hertz is removed while slower, deliberate moves pass. At the clip ends the
    series is extended by point reflection about a straight line fitted to the last
    2 · ``window_s`` of samples, which keeps a steady pan straight to the last frame instead of
    pulling the path toward a constant (or toward the shake of the very last frame).

    Parameters
    ----------
    values : (n, k) path parameters, one row per frame (units of the parameterisation).
    fps : frame rate, frames per second (Hz).
    window_s : time scale, seconds.

    Returns
    -------
    (n, k) smoothed values (a copy of ``values`` when n < 3).
    """
    values = np.asarray(values, dtype=np.float64)
    n = len(values)
    if n < 3:
        return values.copy()
    kernel = gaussian_kernel(0.5 * window_s * fps)
    r = len(kernel) // 2
    # Reflection longer than the series would need values that do not exist.
    r_pad = min(r, n - 1)
    span = int(round(2.0 * window_s * fps))
    a0 = _end_anchor(values, span)
    a1 = _end_anchor(values[::-1], span)
    head = 2.0 * a0 - values[r_pad:0:-1]
    tail = 2.0 * a1 - values[-2:-r_pad - 2:-1]
    padded = np.concatenate([head, values, tail])
    if r_pad < r:
        padded = np.pad(padded, ((r - r_pad, r - r_pad), (0, 0)), mode="edge")
    out = np.empty_like(values)
    for j in range(values.shape[1]):
        out[:, j] = np.convolve(padded[:, j], kernel, mode="valid")
    return out
