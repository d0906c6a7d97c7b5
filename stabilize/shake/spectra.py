"""Shake spectra: Welch power densities, band powers and the test for a clear dominant peak.

Every function takes the sampling rate explicitly (``fps``, frames per second); densities
are in unit² per Hz (pixels or degrees).
"""

from __future__ import annotations

import functools
import math

import numpy as np

from .filters import hann, welch_density
from .gamma import gamma_p_inverse, gamma_q
from .timebase import shake_filter_gain

__all__ = [
    "AXES",
    "PEAK_BACKGROUND_BINS",
    "PEAK_FALSE_ALARM",
    "PEAK_MIN_GAIN",
    "SHAKE_BANDS_HZ",
    "axis_unit",
    "band_key",
    "band_powers",
    "dominant_hz",
    "peak_threshold",
    "shake_peaks",
    "shake_spectrum",
    "welch_dof",
    "welch_segment",
]


#: Frequency bands (hertz) in which the shake power is reported, the last one reaching up to
#: the Nyquist frequency. The split is this project's own plain choice, not a standard; it
#: follows common practice in reading flight footage (from memory): slow drift and deliberate
#: motion below about 1 Hz, wind buffeting of small multirotors at 1–3 Hz, gimbal hunting and
#: airframe sway at 3–6 Hz, mount and frame resonances at 6–12 Hz, and what is left above.
SHAKE_BANDS_HZ: tuple[tuple[float, float | None], ...] = (
    (0.0, 1.0), (1.0, 3.0), (3.0, 6.0), (6.0, 12.0), (12.0, None),
)


AXES: tuple[str, ...] = ("x", "y", "rot")


def axis_unit(axis: str) -> str:
    """Unit of a path axis: ``deg`` for the rotation, ``px`` for x and y.

    Parameters
    ----------
    axis : one of :data:`AXES`.

    Returns
    -------
    str : ``"deg"`` or ``"px"``.
    """
    return "deg" if axis == "rot" else "px"


def band_key(axis: str, lo_hz: float, hi_hz: float | None) -> str:
    """Summary key of one shake band, e.g. ``shake_power_x_1_3hz_px2`` or
    ``shake_power_rot_above_12hz_deg2`` (power in pixels² or degrees²).

    Parameters
    ----------
    axis : one of :data:`AXES`.
    lo_hz, hi_hz : the band's edges, Hz; ``hi_hz`` None for the open top band.

    Returns
    -------
    str : the summary key.
    """
    unit = axis_unit(axis) + "2"
    if hi_hz is None:
        return f"shake_power_{axis}_above_{lo_hz:g}hz_{unit}"
    return f"shake_power_{axis}_{lo_hz:g}_{hi_hz:g}hz_{unit}"


def welch_segment(n: int, fps: float) -> int:
    """Welch segment length (frames) for a series of ``n`` frames: 8 s where the clip allows,
    at least 16 frames. Longer segments resolve frequency finer (fps / segment Hz); 8 s is a
    compromise of this project between resolution and averaging for clips of tens of seconds.

    Parameters
    ----------
    n : samples in the series.
    fps : sampling rate, samples per second.

    Returns
    -------
    int : segment length, samples.
    """
    return int(min(n, max(16, round(8.0 * fps))))


def shake_spectrum(shake: np.ndarray, fps: float) -> tuple[np.ndarray, np.ndarray] | None:
    """One-sided Welch power spectral density of a shake series.

    Welch, "The use of fast Fourier transform for the estimation of power spectra", IEEE
    Trans. Audio and Electroacoustics, 1967; as ``scipy.signal.welch`` with a Hann window and
    half-overlapping segments of :func:`welch_segment` frames
    (:func:`stabilize.shake.filters.welch_density`).

    Parameters
    ----------
    shake : (n,) shake series, pixels or degrees, one value per frame.
    fps : frame rate, frames per second (the sampling rate).

    Returns
    -------
    (f, pxx) : frequencies in Hz from 0 to fps / 2, and the density in unit² per Hz; or None
    when the series is too short (fewer than 16 frames) or all zero.
    """
    shake = np.asarray(shake, dtype=np.float64)
    n = len(shake)
    if n < 16 or not np.any(shake):
        return None
    return welch_density(shake, fps, welch_segment(n, fps))


def welch_dof(n: int, fps: float) -> float:
    """Equivalent degrees of freedom of :func:`shake_spectrum`'s Welch estimate of ``n`` frames.

    Each bin of a Welch estimate is distributed about as S(f) · χ²_ν / ν, with ν = 2 K for K
    independent segments; half-overlapping Hann segments are not independent, and ν is

        ν = 2 K / (1 + 2 Σ_{m=1}^{K−1} (1 − m / K) ρ(m s)²),

    with s the step between segments and ρ the window's normalised autocorrelation (Percival
    and Walden, "Spectral Analysis for Physical Applications", Cambridge University Press,
    1993, chapter 6, on Welch's overlapped segment averaging; the formula and its equation
    number, (292b), are recalled from memory).
    The constant taken out of each segment costs a little more, not counted here. Checked by
    simulation of white noise at 30 fps: ν = 13.4 predicted, 13.2 observed for 1,000
    frames; 55.0 and 55.4 for 3,600.

    Parameters
    ----------
    n : samples in the series.
    fps : sampling rate, samples per second.

    Returns
    -------
    float : ν, the equivalent degrees of freedom of each bin.
    """
    seg = welch_segment(n, fps)
    step = seg - seg // 2
    k = 1 + (n - seg) // step
    w = hann(seg)
    energy = float(np.sum(w * w))
    corr = 0.0
    for m in range(1, k):
        lag = m * step
        if lag >= seg:
            break
        rho = float(np.sum(w[:seg - lag] * w[lag:])) / energy
        corr += (1.0 - m / k) * rho * rho
    return 2.0 * k / (1.0 + 2.0 * corr)


#: The peak test's false-alarm probability: the chance, for a spectrum with no peak, that any
#: searched bin passes (Bonferroni over the searched bins). This project's choice.
PEAK_FALSE_ALARM = 0.01


#: A peak is searched for only where the shake filter passes at least this share of the power
#: (f ≥ 1.44 × shake_above_hz): below, the filter's roll-off shapes a hump of its own out of
#: any falling spectrum (drift, a random walk of measurement noise), which is no shake.
PEAK_MIN_GAIN = 0.9


#: The background of a bin is the median of every other bin from 2 to this many bins away on
#: either side (the bin's immediate neighbours hold its own Hann-window leakage). Common
#: practice in picking spectral lines over a smooth background; the width is this project's
#: choice (1.5 Hz each way with 8 s segments).
PEAK_BACKGROUND_BINS = 12


@functools.lru_cache(maxsize=4)
def _gauss_legendre(n: int) -> tuple[np.ndarray, np.ndarray]:
    return np.polynomial.legendre.leggauss(n)


@functools.lru_cache(maxsize=256)
def peak_threshold(dof: float, m: int, rank: int, alpha: float) -> float:
    """The factor k with P(X > k · Y₍rank₎) = ``alpha``, for X and Y₁ … Y_m independent, each
    χ²_dof / dof (a Welch bin over a flat background), Y₍rank₎ the rank-th smallest of the Y.

    The background is itself estimated from ``m`` noisy bins, which widens the ratio's tail
    beyond that of X alone; over u = F(Y₍rank₎), a Beta(rank, m − rank + 1) variable (the
    distribution of an order statistic), P = E[S(k · F⁻¹(u))] with F, S the χ²_dof / dof
    distribution and survival functions, solved for k.

    Parameters
    ----------
    dof : degrees of freedom of the χ² of one Welch bin.
    m : number of background bins.
    rank : which order statistic of the background stands for it (1 = smallest).
    alpha : false-alarm probability per bin, 0 to 1.

    Returns
    -------
    float : the factor k (dimensionless, a ratio of powers), found to within 1e-10 in
    log k; results are cached.
    """
    half = 0.5 * dof
    nodes, weights = _gauss_legendre(200)
    v = 0.5 * (nodes + 1.0)
    y = gamma_p_inverse(half, v) / half  # F⁻¹(v) of χ²_dof / dof
    log_beta = (math.lgamma(rank) + math.lgamma(m - rank + 1) - math.lgamma(m + 1))
    w = 0.5 * weights * np.exp((rank - 1) * np.log(v) + (m - rank) * np.log1p(-v) - log_beta)

    def tail(log_k: float) -> float:
        return float(np.sum(w * gamma_q(half, half * math.exp(log_k) * y))) - alpha

    # The tail falls with k: the Illinois variant of regula falsi on log k over [0, 20]
    # (Dowell and Jarratt, "A modified regula falsi method for computing the root of an
    # equation", BIT 11, 1971), to 1e-10 in log k; scipy's root finders cost a third of a
    # second to import.
    lo, hi = 0.0, 20.0
    f_lo, f_hi = tail(lo), tail(hi)
    if f_lo <= 0.0:
        return 1.0
    if f_hi >= 0.0:
        return math.exp(hi)
    side = 0
    for _ in range(200):
        mid = (lo * f_hi - hi * f_lo) / (f_hi - f_lo)
        f_mid = tail(mid)
        if f_mid > 0.0:
            lo, f_lo = mid, f_mid
            if side == -1:
                f_hi *= 0.5
            side = -1
        else:
            hi, f_hi = mid, f_mid
            if side == 1:
                f_lo *= 0.5
            side = 1
        if hi - lo <= 1e-10 or f_mid == 0.0:
            break
    return math.exp(mid)


def shake_peaks(shake: np.ndarray, fps: float, above_hz: float,
                count: int = 3) -> list[tuple[float, float]]:
    """The clear peaks of a shake series' Welch spectrum, strongest first.

    A bin is a clear peak when all of these hold:

    1. it lies where the shake filter passes at least :data:`PEAK_MIN_GAIN` of the power, so
       not at the lower edge of the band, where the filter's roll-off shapes a hump out of
       any falling spectrum;
    2. it is a local maximum of the spectrum with the filter's roll-off divided out (higher
       than both neighbours; the last bin, at the Nyquist frequency, than the one below);
    3. its power exceeds k times its background, the median of every other bin 2 to
       :data:`PEAK_BACKGROUND_BINS` bins away on either side (as many above as below, from
       ``above_hz`` up; at least four bins), with k from :func:`peak_threshold`: each Welch
       bin is about S · χ²_ν / ν (Welch, "The use of fast Fourier transform for the
       estimation of power spectra", IEEE Trans. Audio and Electroacoustics, 1967; Percival
       and Walden, "Spectral Analysis for Physical Applications", 1993), ν from
       :func:`welch_dof`, and the chance that a bin of a smooth background passes is
       α / M, α = :data:`PEAK_FALSE_ALARM` shared over the M searched bins (Bonferroni).

    Pure noise, drift (a random walk) and the shake filter's edge give no clear peak; a
    sinusoid standing above the noise does. In simulations of white noise, random walks and
    their sums (1,000 series each, 10 s at 30 fps and 120 s at 25 fps) 0–1.5 % of the
    series showed a peak. The price is sensitivity on short clips (ν = 2 below 8 s of
    frames): a sine must stand well clear of the noise there to be named.

    Parameters
    ----------
    shake : (n,) shake series (pixels or degrees), one value per sample at ``fps``.
    fps : sampling rate, samples per second.
    above_hz : the shake cut-off, Hz.
    count : at most this many peaks.

    Returns
    -------
    list of (frequency in Hz, density in unit² per Hz), strongest first; empty when none
    stands out, or the series is too short (fewer than 16 samples) or all zero.
    """
    spec = shake_spectrum(shake, fps)
    if spec is None or not (0 < above_hz):
        return []
    f, pxx = spec
    gain = shake_filter_gain(f, above_hz)
    usable = np.flatnonzero(f >= above_hz)
    search = np.flatnonzero((gain >= PEAK_MIN_GAIN) & (f > 0))
    if len(usable) < 3 or len(search) == 0:
        return []
    first, last = int(usable[0]), len(f) - 1
    q = np.zeros_like(pxx)
    q[first:] = pxx[first:] / gain[first:]
    dof = round(welch_dof(len(shake), fps), 2)
    alpha = PEAK_FALSE_ALARM / len(search)
    found: list[int] = []
    for i in search:
        i = int(i)
        if i - 1 < first or q[i] <= q[i - 1] or (i < last and q[i] <= q[i + 1]):
            continue
        below = min(PEAK_BACKGROUND_BINS, i - first)
        above = min(below, last - i)
        # Every other bin: neighbouring bins of a Hann-windowed estimate are correlated
        # (|ρ|² ≈ 0.44 one bin apart, 0.03 two apart), and the threshold assumes
        # independent background bins.
        ring = np.r_[q[i - below:i - 1][::-1][::2], q[i + 2:i + above + 1][::2]]
        if len(ring) < 4:
            continue
        # The ring is even: its median is the geometric mean of the middle two, which on a
        # power-law background (drift) lies at the bin's own level; the threshold is the
        # one for the lower of the two, so the test errs on the side of no peak.
        rank = len(ring) // 2 - 1
        mid = np.partition(ring, (rank, rank + 1))[rank:rank + 2]
        background = float(np.sqrt(mid[0] * mid[1]))
        if q[i] > peak_threshold(dof, len(ring), rank + 1, alpha) * background:
            found.append(i)
    found.sort(key=lambda j: -pxx[j])
    return [(_refine_peak(f, pxx, i), float(pxx[i])) for i in found[:count]]


def dominant_hz(shake: np.ndarray, fps: float, above_hz: float) -> float | None:
    """Frequency (Hz) of the strongest clear peak of the shake's Welch power spectral density
    (:func:`shake_peaks`), placed between bins by a parabola through the peak bin and its
    neighbours (log power); None when no peak stands out of the background.

    Parameters
    ----------
    shake : (n,) shake series, pixels or degrees.
    fps : sampling rate, samples per second.
    above_hz : the shake cut-off, Hz.

    Returns
    -------
    float or None : Hz.
    """
    peaks = shake_peaks(shake, fps, above_hz, count=1)
    return peaks[0][0] if peaks else None


def _refine_peak(f: np.ndarray, pxx: np.ndarray, i: int) -> float:
    # A parabola through the log power of three bins places a peak between bins; common
    # practice in spectral peak picking.
    if 0 < i < len(f) - 1 and np.all(pxx[i - 1:i + 2] > 0):
        a, b, c = np.log(pxx[i - 1:i + 2])
        denom = a - 2 * b + c
        offset = 0.5 * (a - c) / denom if denom < 0 else 0.0
        return float(f[i] + np.clip(offset, -0.5, 0.5) * (f[1] - f[0]))
    return float(f[i])


def band_powers(shake: np.ndarray | None, fps: float) -> list[float | None]:
    """Shake power (unit²) in each of :data:`SHAKE_BANDS_HZ`, from the Welch density.

    The density is summed over the bins with lo ≤ f < hi (the last band up to and including
    the Nyquist frequency fps / 2) times the bin width, so the bands add up to the shake's
    variance, about its RMS squared. A band that starts at or above the Nyquist frequency
    cannot be measured from the frames and is None, as is every band of a series too short.

    Parameters
    ----------
    shake : (n,) shake series, pixels or degrees, or None.
    fps : sampling rate, samples per second.

    Returns
    -------
    list of float or None : one power per band, unit².
    """
    nyquist = 0.5 * fps
    spec = None if shake is None else shake_spectrum(shake, fps)
    out: list[float | None] = []
    for lo, hi in SHAKE_BANDS_HZ:
        if lo >= nyquist or shake is None:
            out.append(None)
            continue
        if spec is None:  # a series that is all zero has no power anywhere
            out.append(0.0 if len(shake) >= 16 else None)
            continue
        f, pxx = spec
        df = float(f[1] - f[0])
        upper = f <= nyquist if hi is None or hi >= nyquist else f < hi
        out.append(float(pxx[(f >= lo) & upper].sum() * df))
    return out
