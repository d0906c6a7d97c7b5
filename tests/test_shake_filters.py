"""The shake figures' own low-pass and Welch spectrum (stabilize.shake.filters) against
scipy.signal, the general-purpose reference they replace at import time."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from stabilize.shake.filters import butterworth_lowpass, hann, welch_density, zero_phase_lowpass


@pytest.mark.parametrize("fps, above_hz", [(30.0, 1.0), (25.0, 0.5), (240.0, 0.3),
                                           (59.94, 7.0), (10.0, 4.0)])
def test_butterworth_matches_scipy(fps, above_hz):
    z, p, k = butterworth_lowpass(4, above_hz, fps)
    zr, pr, kr = signal.butter(4, above_hz, btype="low", fs=fps, output="zpk")
    np.testing.assert_allclose(np.sort_complex(p), np.sort_complex(pr), rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(z, zr)
    assert k == pytest.approx(kr, rel=1e-12)


@pytest.mark.parametrize("fps, above_hz, n", [(30.0, 1.0, 240), (25.0, 0.5, 1000),
                                              (240.0, 0.3, 5000), (59.94, 7.0, 100),
                                              (10.0, 4.0, 40), (30.0, 1.0, 12)])
def test_zero_phase_lowpass_matches_sosfiltfilt(fps, above_hz, n):
    rng = np.random.default_rng(int(fps * 100 + n))
    # A drifting path with shake, a step and noise: every part of the series the filter meets.
    t = np.arange(n) / fps
    x = (5 * np.sin(2 * np.pi * 0.2 * t) + 2 * np.sin(2 * np.pi * 3.1 * t)
         + np.cumsum(rng.normal(0, 0.3, n)) + 4.0 * (t > t[n // 2]))
    sos = signal.butter(4, above_hz, btype="low", fs=fps, output="sos")
    for pad in sorted({0, 3, min(n - 1, int(round(3.0 * fps / above_hz))), n - 1}):
        want = signal.sosfiltfilt(sos, x, padlen=pad)
        got = zero_phase_lowpass(x, above_hz, fps, padlen=pad)
        np.testing.assert_allclose(got, want, rtol=0, atol=1e-10 * np.abs(x).max())


def test_zero_phase_lowpass_refuses_a_pad_as_long_as_the_series():
    with pytest.raises(ValueError):
        zero_phase_lowpass(np.zeros(10), 1.0, 30.0, padlen=10)


@pytest.mark.parametrize("n, seg", [(240, 64), (1000, 128), (99, 33), (16, 16), (3600, 256)])
def test_welch_matches_scipy(n, seg):
    x = np.random.default_rng(n).normal(0, 2.0, n) + np.linspace(0, 5, n)
    f, p = welch_density(x, 29.97, seg)
    fr, pr = signal.welch(x, fs=29.97, nperseg=seg, detrend="constant")
    np.testing.assert_allclose(f, fr, rtol=1e-14)
    np.testing.assert_allclose(p, pr, rtol=1e-10, atol=1e-14 * pr.max())
    np.testing.assert_allclose(hann(seg), signal.get_window("hann", seg), atol=1e-15)


@pytest.mark.parametrize("dof, m, rank", [(13.4, 20, 10), (55.0, 24, 12), (4.0, 8, 4)])
def test_peak_threshold_solves_its_equation_as_a_reference_root_finder_does(dof, m, rank):
    # The equation of peak_threshold, solved by scipy.optimize.brentq as the reference.
    import math

    from scipy import optimize, special

    from stabilize.shake.spectra import _gauss_legendre, peak_threshold

    half = 0.5 * dof
    nodes, weights = _gauss_legendre(200)
    v = 0.5 * (nodes + 1.0)
    y = special.gammaincinv(half, v) / half
    log_beta = math.lgamma(rank) + math.lgamma(m - rank + 1) - math.lgamma(m + 1)
    w = 0.5 * weights * np.exp((rank - 1) * np.log(v) + (m - rank) * np.log1p(-v) - log_beta)

    def tail(log_k):
        return float(np.sum(w * special.gammaincc(half, half * math.exp(log_k) * y))) - 0.001

    want = math.exp(optimize.brentq(tail, 0.0, 20.0, xtol=1e-12))
    assert peak_threshold(dof, m, rank, 0.001) == pytest.approx(want, rel=1e-8)


@pytest.mark.parametrize("a", [0.4, 1.0, 2.0, 6.7, 27.5, 150.0, 900.0])
def test_incomplete_gamma_and_its_inverse_match_scipy_special(a):
    from scipy import special

    from stabilize.shake.gamma import gamma_p_inverse, gamma_q

    # The 200 Gauss–Legendre nodes the peak test integrates over, and their tails.
    nodes, _ = np.polynomial.legendre.leggauss(200)
    v = np.concatenate([0.5 * (nodes + 1.0), [1e-9, 1e-4, 0.5, 1 - 1e-4]])
    x = gamma_p_inverse(a, v)
    np.testing.assert_allclose(x, special.gammaincinv(a, v), rtol=1e-10)
    grid = np.concatenate([[0.0], x, x * 1.7, x * 0.3, [a + 1.0, 5.0 * a + 30.0]])
    want = special.gammaincc(a, grid)
    got = gamma_q(a, grid)
    np.testing.assert_allclose(got, want, rtol=1e-10, atol=1e-300)
