"""The shake figures' low-pass filter and power spectrum in numpy alone.

``scipy.signal`` costs about 0.8 s of processor time to import (measured here), which is half
the time of decoding a 240-frame 1080p clip; the figures need three of its functions. This
module gives the same results (checked against ``scipy.signal`` to 1e-10 of the signal in
``tests/test_shake_filters.py``):

* :func:`butterworth_lowpass`: the digital Butterworth low-pass of ``scipy.signal.butter``
  as zeros, poles and gain (Butterworth, "On the theory of filter amplifiers", Wireless
  Engineer, 1930; the analog prototype's poles on the unit circle, pre-warped and mapped by
  the bilinear transform, as in Oppenheim and Schafer, "Discrete-Time Signal Processing",
  Prentice Hall, 1989, section 7.1);
* :func:`zero_phase_lowpass`: that filter run forward and backward over the series
  extended by odd reflection, each pass started in the steady state of its first sample,
  as ``scipy.signal.sosfiltfilt`` does (Gustafsson's forward-backward filtering with
  matched initial conditions, "Determining the initial states in forward-backward
  filtering", IEEE Trans. Signal Processing, 1996, is the idea behind the starting states).
  Each pass is a convolution with the filter's impulse response, found in closed form from
  its poles (partial fractions) and taken until it has decayed below 1e-17 of its peak, done
  by FFT; the start in the steady state of x₀ adds x₀ times the part of the step response
  not yet reached;
* :func:`welch_density`: Welch's averaged periodogram with half-overlapping periodic Hann
  segments, each with its mean taken out, scaled as a one-sided density (Welch, "The use of
  fast Fourier transform for the estimation of power spectra", IEEE Trans. Audio and
  Electroacoustics, 1967), as ``scipy.signal.welch`` with ``detrend="constant"``.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["butterworth_lowpass", "hann", "welch_density", "zero_phase_lowpass"]

#: The impulse response is used until it has decayed to this share of its first value.
DECAY = 1e-17


def butterworth_lowpass(order: int, cutoff_hz: float, fs_hz: float
                        ) -> tuple[np.ndarray, np.ndarray, float]:
    """Zeros, poles and gain of the digital Butterworth low-pass (``scipy.signal.butter``).

    Parameters
    ----------
    order : filter order (the series is filtered twice: twice this in all).
    cutoff_hz : −3 dB frequency, Hz; below ``fs_hz / 2``.
    fs_hz : sampling rate, samples per second.

    Returns
    -------
    zeros : (order,) complex, all at −1 (z-plane).
    poles : (order,) complex, inside the unit circle.
    gain : float, so that the gain at 0 Hz is 1.
    """
    m = np.arange(-order + 1, order, 2)
    analog = -np.exp(1j * np.pi * m / (2 * order))            # unit-circle prototype
    fs = 2.0                                                   # frequencies as a share of Nyquist
    warped = 2.0 * fs * math.tan(math.pi * (2.0 * cutoff_hz / fs_hz) / fs)
    p = analog * warped
    k = warped ** order
    fs2 = 2.0 * fs
    poles = (fs2 + p) / (fs2 - p)
    zeros = -np.ones(order, complex)
    gain = float(k * np.real(1.0 / np.prod(fs2 - p)))
    return zeros, poles, gain


def _impulse_response(zeros: np.ndarray, poles: np.ndarray, gain: float) -> np.ndarray:
    """h[n] of k·Π(1 − z_i q)/Π(1 − p_i q), q = z⁻¹, distinct poles, as many zeros as poles:
    h[0] = k, h[n] = Σ r_i p_i^n (n ≥ 1), r_i the residues at the poles."""
    r = np.empty(len(poles), complex)
    for i, pi in enumerate(poles):
        others = np.delete(poles, i)
        r[i] = gain * np.prod(1.0 - zeros / pi) / np.prod(1.0 - others / pi)
    rho = float(np.max(np.abs(poles)))
    length = 2 + int(math.ceil(math.log(DECAY) / math.log(rho))) if rho > 0 else 2
    n = np.arange(length)
    h = np.real(np.exp(np.outer(n, np.log(poles.astype(complex)))) @ r)
    h[0] = gain
    return h


def _fft_convolve(x: np.ndarray, h: np.ndarray) -> np.ndarray:
    """The first len(x) samples of the full convolution of x with h."""
    n = len(x) + len(h) - 1
    size = 1 << (n - 1).bit_length()
    y = np.fft.irfft(np.fft.rfft(x, size) * np.fft.rfft(h, size), size)
    return y[:len(x)]


def _one_pass(x: np.ndarray, h: np.ndarray, step: np.ndarray) -> np.ndarray:
    """The filter with impulse response ``h`` over x, started as if x₀ had always been the
    input: y = h * x + x₀ (G − S), S the step response so far, G its final value."""
    y = _fft_convolve(x, h)
    m = min(len(x), len(step))
    y[:m] += x[0] * (step[-1] - step[:m])
    return y


def zero_phase_lowpass(x: np.ndarray, cutoff_hz: float, fs_hz: float, *, order: int = 4,
                       padlen: int) -> np.ndarray:
    """``x`` low-passed forward and backward (``scipy.signal.sosfiltfilt`` of the
    Butterworth filter of :func:`butterworth_lowpass`, ``padlen`` samples of odd
    extension at each end).

    Parameters
    ----------
    x : (n,) series, any unit; n > ``padlen``.
    cutoff_hz : −3 dB frequency of one pass, Hz. fs_hz : sampling rate, Hz.
    order : Butterworth order of one pass.
    padlen : samples of odd reflection added at each end before filtering.

    Returns
    -------
    (n,) float64 low-passed series, same unit.
    """
    x = np.asarray(x, dtype=np.float64)
    n = len(x)
    if not 0 <= padlen < n:
        raise ValueError(f"padlen {padlen} must be below the series length {n}")
    zeros, poles, gain = butterworth_lowpass(order, cutoff_hz, fs_hz)
    h = _impulse_response(zeros, poles, gain)
    step = np.cumsum(h)
    if padlen:
        ext = np.concatenate([2 * x[0] - x[padlen:0:-1], x,
                              2 * x[-1] - x[-2:-padlen - 2:-1]])
    else:
        ext = x
    y = _one_pass(ext, h, step)
    y = _one_pass(y[::-1].copy(), h, step)[::-1]
    return y[padlen:padlen + n] if padlen else y


def hann(length: int) -> np.ndarray:
    """The periodic Hann window of ``length`` samples (``scipy.signal.get_window("hann")``).

    Parameters
    ----------
    length : samples.

    Returns
    -------
    (length,) float64 window.
    """
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(length) / length)


def welch_density(x: np.ndarray, fs_hz: float, segment: int) -> tuple[np.ndarray, np.ndarray]:
    """One-sided Welch power spectral density, half-overlapping Hann segments, each with its
    mean taken out (``scipy.signal.welch(x, fs, nperseg=segment, detrend="constant")``).

    Parameters
    ----------
    x : (n,) series, unit u; n ≥ ``segment``.
    fs_hz : sampling rate, Hz.
    segment : samples per segment.

    Returns
    -------
    f : (segment // 2 + 1,) frequencies, Hz, from 0 to fs / 2.
    pxx : the density at f, u² per Hz.
    """
    x = np.asarray(x, dtype=np.float64)
    step = segment - segment // 2
    count = 1 + (len(x) - segment) // step
    w = hann(segment)
    idx = np.arange(segment)[None, :] + step * np.arange(count)[:, None]
    seg = x[idx]
    seg = seg - seg.mean(axis=1, keepdims=True)
    spec = np.abs(np.fft.rfft(seg * w, axis=1)) ** 2 / (fs_hz * np.sum(w * w))
    if segment % 2:
        spec[:, 1:] *= 2.0
    else:
        spec[:, 1:-1] *= 2.0
    return np.fft.rfftfreq(segment, 1.0 / fs_hz), spec.mean(axis=0)
