"""Shake figures: how much the camera shook, in pixels, degrees and hertz, and how steady the
output is.

Shake is the part of the camera path above ``shake_above_hz``: the path minus its zero-phase
low-pass (4th-order Butterworth run forward and backward, ``scipy.signal.sosfiltfilt``). Every
function takes the frame rate explicitly (``fps``, frames per second).

Vibration faster than half the frame rate (propellers, motors) cannot be resolved from video:
it aliases to a lower frequency or blurs the frames. The figures here describe the motion the
frames sample, nothing faster.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import signal

from .log import frame_centre, similarity_readout
from .path import segments


def shake_component(x: np.ndarray, fps: float, above_hz: float) -> np.ndarray | None:
    """The series minus its zero-phase 4th-order Butterworth low-pass at ``above_hz``.

    A straight line through the series is taken out first (its high-pass is zero anyway), so
    a steady pan does not leave filter start-up transients at the clip ends. Returns None when
    the cut-off is not below the Nyquist frequency or the series is too short to filter.
    """
    x = np.asarray(x, dtype=np.float64)
    n = len(x)
    if n < 8 or not (0 < above_hz < 0.5 * fps):
        return None
    t = np.arange(n, dtype=np.float64)
    residual = x - np.polyval(np.polyfit(t, x, 1), t)
    sos = signal.butter(4, above_hz, btype="low", fs=fps, output="sos")
    pad = min(n - 1, max(3 * (2 * len(sos) + 1), int(round(3.0 * fps / above_hz))))
    return residual - signal.sosfiltfilt(sos, residual, padlen=pad)


def dominant_hz(shake: np.ndarray, fps: float, above_hz: float) -> float | None:
    """Frequency (Hz) of the largest peak of the shake's Welch power spectral density above
    ``above_hz``, refined by a parabola through the peak bin and its neighbours (log power)."""
    n = len(shake)
    if n < 16 or not np.any(shake):
        return None
    nperseg = int(min(n, max(16, round(8.0 * fps))))
    f, pxx = signal.welch(shake, fs=fps, nperseg=nperseg, detrend="constant")
    band = f >= above_hz
    if not band.any() or not np.any(pxx[band] > 0):
        return None
    i = int(np.flatnonzero(band)[np.argmax(pxx[band])])
    if 0 < i < len(f) - 1 and np.all(pxx[i - 1:i + 2] > 0):
        a, b, c = np.log(pxx[i - 1:i + 2])
        denom = a - 2 * b + c
        offset = 0.5 * (a - c) / denom if denom < 0 else 0.0
        return float(f[i] + np.clip(offset, -0.5, 0.5) * (f[1] - f[0]))
    return float(f[i])


def stability(series: np.ndarray) -> float | None:
    """Low-frequency energy share of a per-frame motion series, after Liu, Yuan, Tan and Sun,
    "Bundled camera paths for video stabilization", SIGGRAPH 2013: squared FFT magnitudes of
    the 2nd to 6th components (the 1st being DC) over all components but DC. 1 = steady."""
    x = np.asarray(series, dtype=np.float64)
    if len(x) < 12:
        return None
    energy = np.abs(np.fft.rfft(x)) ** 2
    total = energy[1:].sum()
    if total <= 1e-24:
        return 1.0
    return float(energy[1:6].sum() / total)


def _pixels_to_deg(px: float | None, width: int, fov_deg: float | None) -> float | None:
    if px is None or fov_deg is None:
        return None
    f = (width / 2.0) / math.tan(math.radians(fov_deg) / 2.0)
    return math.degrees(math.atan(px / f))


def _segmented_shake(values: np.ndarray, cuts: np.ndarray, fps: float,
                     above_hz: float) -> np.ndarray | None:
    parts = []
    for seg in segments(cuts):
        part = shake_component(values[seg], fps, above_hz)
        if part is not None:
            parts.append(part)
    return np.concatenate(parts) if parts else None


def path_figures(path_xyd: np.ndarray, cuts: np.ndarray, *, fps: float, above_hz: float,
                 width: int, fov_deg: float | None, suffix: str = "") -> dict:
    """RMS, peak-to-peak and dominant frequency of the shake in a path readout (n, 3+)
    of x, y (pixels) and angle (degrees)."""
    out: dict = {}
    for j, axis in enumerate(("x", "y", "rot")):
        shake = _segmented_shake(path_xyd[:, j], cuts, fps, above_hz)
        unit = "deg" if axis == "rot" else "px"
        rms = None if shake is None else float(np.sqrt(np.mean(shake**2)))
        p2p = None if shake is None else float(np.ptp(shake))
        out[f"jitter_rms_{axis}_{unit}{suffix}"] = rms
        out[f"jitter_p2p_{axis}_{unit}{suffix}"] = p2p
        if axis != "rot":
            out[f"jitter_rms_{axis}_deg{suffix}"] = _pixels_to_deg(rms, width, fov_deg)
        out[f"dominant_hz_{axis}{suffix}"] = (
            None if shake is None else dominant_hz(shake, fps, above_hz)
        )
    return out


def stability_figures(motion_readout: np.ndarray, suffix: str) -> dict:
    """Stability scores of per-frame motion (dx, dy, degrees): translation takes the worse."""
    sx, sy = stability(motion_readout[:, 0]), stability(motion_readout[:, 1])
    trans = None if sx is None or sy is None else min(sx, sy)
    return {f"stability_translation{suffix}": trans,
            f"stability_rotation{suffix}": stability(motion_readout[:, 2])}


def output_motion(matrices: np.ndarray, corrections: np.ndarray) -> np.ndarray:
    """Inter-frame motion of the output video: C_t · H_t · C_{t−1}⁻¹ (frame 0: identity)."""
    out = np.empty_like(matrices)
    out[0] = np.eye(3)
    if len(matrices) > 1:
        m = corrections[1:] @ matrices[1:] @ np.linalg.inv(corrections[:-1])
        out[1:] = m / m[:, 2:3, 2:3]
    return out


def correction_figures(corrections: np.ndarray) -> dict:
    """Cropping ratio (mean of 1 / scale) and distortion (smallest σ_min / σ_max of the 2×2
    part), after Liu et al., SIGGRAPH 2013."""
    a = corrections[:, :2, :2]
    scale = np.sqrt(np.abs(np.linalg.det(a)))
    sv = np.linalg.svd(a, compute_uv=False)
    return {"cropping_ratio": float(np.mean(1.0 / scale)),
            "distortion": float(np.min(sv[:, 1] / sv[:, 0]))}


def summarise(
    *,
    matrices: np.ndarray,
    path: np.ndarray,
    status: np.ndarray,
    fps: float,
    width: int,
    height: int,
    above_hz: float,
    fov_deg: float | None,
    smooth_readout: np.ndarray | None = None,
    corrections: np.ndarray | None = None,
) -> dict:
    """The summary block of the motion log's JSON (see the log format documentation)."""
    centre = frame_centre(width, height)
    cuts = status == "cut"
    motion = similarity_readout(matrices, centre)
    summary: dict = {
        "frames": int(len(status)),
        "frames_weak": int(np.count_nonzero(status == "weak")),
        "frames_failed": int(np.count_nonzero(status == "failed")),
        "cuts": int(np.count_nonzero(cuts)),
        "fps": float(fps),
        "shake_above_hz": float(above_hz),
        "nyquist_hz": 0.5 * float(fps),
    }
    summary.update(path_figures(similarity_readout(path, centre), cuts, fps=fps,
                                above_hz=above_hz, width=width, fov_deg=fov_deg))
    has_out = corrections is not None
    summary.update(stability_figures(motion, "_in" if has_out else ""))
    if has_out:
        out_motion = similarity_readout(output_motion(matrices, corrections), centre)
        summary.update(stability_figures(out_motion, "_out"))
        summary.update(correction_figures(corrections))
        if smooth_readout is not None:
            summary.update(path_figures(smooth_readout, cuts, fps=fps, above_hz=above_hz,
                                        width=width, fov_deg=fov_deg, suffix="_out"))
    return summary
