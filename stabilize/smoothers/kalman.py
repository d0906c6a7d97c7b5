"""Constant-velocity Kalman filter with a Rauch–Tung–Striebel backward pass.

References
----------
R. E. Kalman, "A new approach to linear filtering and prediction problems", Journal of Basic
Engineering, 1960.
H. E. Rauch, F. Tung and C. T. Striebel, "Maximum likelihood estimates of linear dynamic
systems", AIAA Journal, 1965.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["kalman_noise", "kalman_smooth"]

# Frequency where the gain is one half (-6 dB), times window_s. 0.375 matches that point of the
# Gaussian of smoothers.gaussian (sigma = window_s / 2: exp(-2 pi^2 f^2 sigma^2) = 1/2 at
# f = sqrt(2 ln 2) / (pi window_s)), so both smoothers mean the same thing by window_s.
_HALF_GAIN_TIMES_WINDOW = math.sqrt(2.0 * math.log(2.0)) / math.pi


def kalman_noise(fps: float, window_s: float) -> tuple[float, float]:
    """Process and measurement noise of the constant-velocity model for a time scale.

    The RTS smoother of a constant-velocity model driven by white acceleration of spectral
    density ``q`` and observed with noise variance ``r`` is (in steady state, away from the
    ends) the cubic smoothing spline, a low-pass with response 1 / (1 + (ω / ω_c)⁴) where
    ω_c⁴ = q / (r · dt). Choosing ω_c from ``window_s`` fixes the ratio; ``r`` is set to 1
    since only the ratio shapes the smoothed mean.

    Parameters
    ----------
    fps : frame rate, frames per second.
    window_s : smoothing time scale, seconds; the frequency at which the smoother's gain is
        one half (−6 dB; the half-power point of the gain squared is lower) is about
        0.375 / ``window_s`` hertz, as for :func:`stabilize.smoothers.gaussian.gaussian_smooth`.

    Returns
    -------
    (q, r): acceleration spectral density (units² / s³ per unit r) and measurement variance.
    """
    dt = 1.0 / fps
    omega_c = 2.0 * math.pi * _HALF_GAIN_TIMES_WINDOW / window_s
    r = 1.0
    return omega_c**4 * r * dt, r


def kalman_smooth(values: np.ndarray, fps: float, window_s: float) -> np.ndarray:
    """Zero-phase smoothing of each column of ``values`` (n, k) by Kalman filter + RTS pass.

    The state of every column is (position, velocity) under a constant-velocity model with
    white-acceleration process noise (see :func:`kalman_noise`). The model and the noise are
    the same for every column, so the covariances and gains are computed once per frame and
    applied to all columns together; only the recursion over time is a loop. The filter starts
    from a diffuse prior (huge covariance), so the clip ends are not pulled toward any value:
    at the ends the smoother extrapolates the local position and velocity.

    Parameters
    ----------
    values : (n, k) path parameters, one row per frame (units of the parameterisation).
    fps : frame rate, frames per second.
    window_s : time scale, seconds.

    Returns
    -------
    (n, k) smoothed positions (a copy of ``values`` when n < 3).
    """
    values = np.asarray(values, dtype=np.float64)
    n = len(values)
    if n < 3:
        return values.copy()
    dt = 1.0 / fps
    q, r = kalman_noise(fps, window_s)
    f = np.array([[1.0, dt], [0.0, 1.0]])
    qm = q * np.array([[dt**3 / 3.0, dt**2 / 2.0], [dt**2 / 2.0, dt]])
    # Forward filter. x: (2, k) state for all columns; p: (2, 2) shared covariance.
    x_f = np.empty((n, 2, values.shape[1]))
    p_f = np.empty((n, 2, 2))
    p_p = np.empty((n, 2, 2))
    # Diffuse prior: standard deviations of 1e4 units (px, px/s) dwarf any path or pan speed,
    # yet stay small enough that the covariance update loses no precision in float64.
    x = np.vstack([values[0], np.zeros(values.shape[1])])
    p = np.diag([1e8, 1e8]) * r
    for t in range(n):
        if t > 0:
            x = f @ x
            p = f @ p @ f.T + qm
        p_p[t] = p
        # Observation of the position only: H = [1, 0].
        s = p[0, 0] + r
        gain = p[:, 0] / s
        x = x + gain[:, None] * (values[t] - x[0])[None, :]
        p = p - np.outer(gain, p[0, :])
        x_f[t], p_f[t] = x, p
    # Rauch–Tung–Striebel backward pass.
    x_s = x_f[-1]
    out = np.empty_like(values)
    out[-1] = x_s[0]
    for t in range(n - 2, -1, -1):
        g = p_f[t] @ f.T @ np.linalg.inv(p_p[t + 1])
        x_s = x_f[t] + g @ (x_s - f @ x_f[t])
        out[t] = x_s[0]
    return out
