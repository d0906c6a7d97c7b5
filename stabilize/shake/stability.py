"""Stability of per-frame motion: the low-frequency energy score, measurement noise, cropping.

Scores and the cropping and distortion figures after Liu, Yuan, Tan and Sun, "Bundled
camera paths for video stabilization", SIGGRAPH 2013.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = [
    "NOISE_FACTOR",
    "NOISE_FLOOR_PX",
    "correction_figures",
    "measured_frames",
    "motion_noise",
    "output_motion",
    "stability",
    "stability_figures",
]


#: Per-frame motion whose spread (RMS about its mean, per axis) is within this many times the
#: measurement noise cannot be told from that noise: the shot counts as steady (score 1).
#: Three standard deviations, common practice.
NOISE_FACTOR = 3.0


#: The least per-frame measurement noise assumed, full-resolution pixels: a fiftieth of a
#: pixel, about the best sub-pixel registration of real footage. A rule of thumb of this
#: project; the fit's own noise (:func:`motion_noise`) is used when it is larger.
NOISE_FLOOR_PX = 0.02


def stability(series: np.ndarray, noise: float | None = None) -> float | None:
    """Low-frequency energy share of a per-frame motion series, after Liu, Yuan, Tan and Sun,
    "Bundled camera paths for video stabilization", SIGGRAPH 2013: squared FFT magnitudes of
    the 2nd to 6th components (the 1st being DC) over all components but DC. 1 = steady.

    Parameters
    ----------
    series : (n,) per-frame motion (pixels or degrees); frames that are not measured motion
        (cuts, stand-ins) left out beforehand. Non-finite values are left out.
    noise : the per-frame measurement noise in the same unit (:func:`motion_noise`), or None.
        When the series' RMS about its mean is within :data:`NOISE_FACTOR` times it, the
        motion cannot be told from noise and the score is 1: a locked-off shot is steady,
        whatever its noise spectrum.

    Returns
    -------
    float in [0, 1], or None for fewer than 12 values.
    """
    x = np.asarray(series, dtype=np.float64)
    x = x[np.isfinite(x)]
    if len(x) < 12:
        return None
    if noise is not None and float(np.std(x)) <= NOISE_FACTOR * noise:
        return 1.0
    energy = np.abs(np.fft.rfft(x)) ** 2
    total = energy[1:].sum()
    if total <= 1e-24:
        return 1.0
    return float(energy[1:6].sum() / total)


def motion_noise(rms_px: np.ndarray | None, inliers: np.ndarray | None, status: np.ndarray,
                 width: int, height: int) -> tuple[float, float]:
    """The measurement noise of the per-frame motion, per axis: (pixels, degrees).

    A translation found from N inliers whose residuals have a 2-D RMS of r pixels is known to
    about r / sqrt(2 N) pixels per axis (the standard error of a mean of N values of spread
    r / sqrt 2); the clip's figure is the median over its measured frames (not failed, not
    cuts), and never below :data:`NOISE_FLOOR_PX`. A rotation is known to that over the RMS
    distance of points spread evenly over the frame from its centre, sqrt((w² + h²) / 12),
    in radians. Correlated tracking errors make the true noise larger; hence the floor and
    the margin of :data:`NOISE_FACTOR`.

    Parameters
    ----------
    rms_px : (n,) the log's ``rms_px`` (full-resolution pixels), or None (floor only).
    inliers : (n,) the log's ``inliers``, or None.
    status : (n,) frame status.
    width, height : frame size, full-resolution pixels.

    Returns
    -------
    (pixels, degrees) : the noise per axis of translation and of rotation.
    """
    noise = NOISE_FLOOR_PX
    if rms_px is not None and inliers is not None:
        r = np.asarray(rms_px, dtype=np.float64)
        k = np.asarray(inliers, dtype=np.float64)
        good = np.isfinite(r) & (k >= 2) & (status != "failed") & (status != "cut")
        if good.any():
            noise = max(noise, float(np.median(r[good] / np.sqrt(2.0 * k[good]))))
    spread = math.sqrt((width**2 + height**2) / 12.0)
    return noise, math.degrees(noise / spread)


def measured_frames(status: np.ndarray) -> np.ndarray:
    """(n,) bool: frames whose motion was measured, so not frame 0 (no motion), not a cut
    (motion across it is not camera motion) and not failed (a stand-in).

    Parameters
    ----------
    status : (n,) frame status strings.

    Returns
    -------
    (n,) bool
    """
    keep = (status != "cut") & (status != "failed") & (status != "first")
    if len(keep):
        keep[0] = False
    return keep


def stability_figures(motion_readout: np.ndarray, suffix: str,
                      noise: tuple[float, float] | None = None) -> dict:
    """Stability scores of per-frame motion (dx, dy, degrees): translation takes the worse.
    ``noise`` is the measurement noise (pixels, degrees) of :func:`motion_noise`.

    Parameters
    ----------
    motion_readout : (n, 3) per-frame dx, dy (pixels) and angle (degrees) of measured frames.
    suffix : appended to every key.
    noise : (pixels, degrees) or None.

    Returns
    -------
    dict : ``stability_translation`` and ``stability_rotation`` (with ``suffix``) → score or
    None.
    """
    n_px, n_deg = (None, None) if noise is None else noise
    sx = stability(motion_readout[:, 0], n_px)
    sy = stability(motion_readout[:, 1], n_px)
    trans = None if sx is None or sy is None else min(sx, sy)
    return {f"stability_translation{suffix}": trans,
            f"stability_rotation{suffix}": stability(motion_readout[:, 2], n_deg)}


def output_motion(matrices: np.ndarray, corrections: np.ndarray) -> np.ndarray:
    """Inter-frame motion of the output video: C_t · H_t · C_{t−1}⁻¹ (frame 0: identity).

    Parameters
    ----------
    matrices : (n, 3, 3) inter-frame transforms H_t, pixels.
    corrections : (n, 3, 3) corrections C_t.

    Returns
    -------
    (n, 3, 3) normalised to h33 = 1.
    """
    out = np.empty_like(matrices)
    out[0] = np.eye(3)
    if len(matrices) > 1:
        m = corrections[1:] @ matrices[1:] @ np.linalg.inv(corrections[:-1])
        out[1:] = m / m[:, 2:3, 2:3]
    return out


def correction_figures(corrections: np.ndarray) -> dict:
    """Cropping ratio (mean of 1 / scale) and distortion (smallest σ_min / σ_max of the 2×2
    part), after Liu et al., SIGGRAPH 2013.

    Parameters
    ----------
    corrections : (n, 3, 3) corrections C_t.

    Returns
    -------
    dict : ``cropping_ratio`` and ``distortion``, both dimensionless.
    """
    a = corrections[:, :2, :2]
    scale = np.sqrt(np.abs(np.linalg.det(a)))
    sv = np.linalg.svd(a, compute_uv=False)
    return {"cropping_ratio": float(np.mean(1.0 / scale)),
            "distortion": float(np.min(sv[:, 1] / sv[:, 0]))}
