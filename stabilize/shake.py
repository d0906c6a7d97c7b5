"""Shake figures: how much the camera shook, in pixels, degrees and hertz, and how steady the
output is.

Shake is the part of the camera path above ``shake_above_hz``: the path minus its zero-phase
low-pass (4th-order Butterworth run forward and backward, ``scipy.signal.sosfiltfilt``). Every
function takes the frame rate explicitly (``fps``, frames per second).

Time is real time: the rate the figures use is the mean rate of the frames' own timestamps
(:func:`frame_rate`), not the container's nominal rate, and a clip whose frame intervals are
irregular (:func:`timestamps_irregular`) has its path resampled onto an even grid at that
rate before it is filtered or its spectrum taken (:func:`resample_even`).

Vibration faster than half the frame rate (propellers, motors) cannot be resolved from video:
it aliases to a lower frequency or blurs the frames. The figures here describe the motion the
frames sample, nothing faster.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from .geometry import frame_centre, from_similarity, similarity_readout
from .raw_path import accumulate, segments


def _signal():
    """scipy.signal, imported on first use: it costs tens of MiB, which a steady run should
    not hold while it renders."""
    from scipy import signal

    return signal


def prefetch() -> None:
    """Start importing scipy.signal on a background thread.

    The import takes one to one and a half seconds of CPU here (measured), all of it after
    the analysis when done on first use. A job whose analysis runs in worker processes
    starts it while it waits on them instead; the first :func:`_signal` call then waits for
    the import to finish.
    """
    import threading

    threading.Thread(target=_signal, name="prefetch-scipy-signal", daemon=True).start()


#: An interval more than this many times the median interval is a gap (frames missing), not
#: part of the frame rate, when such gaps are rare (:data:`RARE_GAPS` of the intervals at most,
#: or a single one). A rule of thumb of this project.
GAP_FACTOR = 3.0
RARE_GAPS = 0.01
#: Frame intervals whose relative spread (standard deviation over mean, gaps left out) exceeds
#: this are irregular: the path is then resampled onto an even time grid. Jitter of a few
#: percent (a rounded time base, a variable-rate phone clip at a steady rate) stays below it;
#: a rule of thumb of this project.
IRREGULAR_SPREAD = 0.1


def _rate_intervals(time_s: np.ndarray | None) -> np.ndarray | None:
    """The frame intervals (s) that make up the frame rate: those of the times in order (a
    step backwards, as when two frames' timestamps are swapped, then does not count), zero
    steps left out, and rare gaps (:data:`GAP_FACTOR`) left out. None with fewer than two."""
    if time_s is None:
        return None
    t = np.asarray(time_s, dtype=np.float64)
    t = np.sort(t[np.isfinite(t)])
    dt = np.diff(t)
    dt = dt[dt > 0]
    if len(dt) < 2:
        return None
    gaps = dt > GAP_FACTOR * float(np.median(dt))
    if 0 < np.count_nonzero(gaps) <= max(1, RARE_GAPS * len(dt)):
        dt = dt[~gaps]
    return dt


def frame_rate(time_s: np.ndarray | None, nominal_fps: float) -> float:
    """The real mean frame rate (frames per second) of a clip, from its frame timestamps.

    Parameters
    ----------
    time_s : (n,) presentation times in seconds, as in the log's ``time_s``; or None.
    nominal_fps : the container's frame rate, used when the times cannot say (fewer than three
        frames, or no two distinct times), and kept when the times agree with it within 0.1 %.

    Returns
    -------
    float : frames per second. The mean is taken over the intervals of the times in order, so
    a timestamp that steps backwards once does not disturb it, and a single gap (or gaps in at
    most 1 % of the intervals, each over :data:`GAP_FACTOR` times the median interval) is left
    out.

    Examples
    --------
    >>> round(frame_rate(np.array([0.0, 0.4, 0.8, 1.5, 1.9]), 15.0), 3)
    2.105
    """
    dt = _rate_intervals(time_s)
    if dt is None:
        return float(nominal_fps)
    rate = len(dt) / float(dt.sum())
    if nominal_fps and abs(rate - nominal_fps) <= 1e-3 * nominal_fps:
        return float(nominal_fps)
    return float(rate)


def timestamps_irregular(time_s: np.ndarray | None) -> bool:
    """True when the frame intervals spread by more than :data:`IRREGULAR_SPREAD` of their
    mean (standard deviation over mean, of the intervals :func:`frame_rate` uses)."""
    dt = _rate_intervals(time_s)
    if dt is None:
        return False
    return bool(np.std(dt) > IRREGULAR_SPREAD * np.mean(dt))


def resample_even(time_s: np.ndarray, values: np.ndarray,
                  fps: float) -> tuple[np.ndarray, np.ndarray]:
    """A series sampled at uneven times, interpolated onto an even grid.

    The interpolant is a cubic spline through every sample (not-a-knot ends,
    ``scipy.interpolate.CubicSpline``; common practice for resampling smooth motion). A
    straight line between samples would damp the faster motion: a 1.5 Hz sine sampled
    unevenly at about 6 frames per second lost a fifth of its RMS that way, under 3 % with
    the spline (measured).

    Parameters
    ----------
    time_s : (n,) frame times, seconds. A frame whose time does not come after every earlier
        frame's is left out (it cannot be placed on the time axis).
    values : (n,) or (n, k) values per frame.
    fps : rate of the grid, samples per second (the real mean rate, :func:`frame_rate`).

    Returns
    -------
    (grid_s, resampled) : the grid times from the first frame's time, 1 / fps apart, up to the
    last frame's; and the values there.
    """
    from scipy.interpolate import CubicSpline

    t = np.asarray(time_s, dtype=np.float64)
    v = np.asarray(values, dtype=np.float64)
    keep = np.ones(len(t), dtype=bool)
    if len(t) > 1:
        keep[1:] = t[1:] > np.maximum.accumulate(t)[:-1]
    t, v = t[keep], v[keep]
    if len(t) < 2:
        return t.copy(), v.copy()
    m = int(np.floor((t[-1] - t[0]) * fps + 1e-9)) + 1
    grid = t[0] + np.arange(m) / fps
    return grid, CubicSpline(t, v, axis=0)(grid)


def _filterable(n: int, fps: float, above_hz: float) -> bool:
    return n >= 8 and 0 < above_hz < 0.5 * fps


def shake_component(x: np.ndarray, fps: float, above_hz: float) -> np.ndarray | None:
    """The series minus its zero-phase 4th-order Butterworth low-pass at ``above_hz``.

    A straight line through the series is taken out first (its high-pass is zero anyway), so
    a steady pan does not leave filter start-up transients at the clip ends. Returns None when
    the cut-off is not below the Nyquist frequency or the series is too short to filter.
    """
    x = np.asarray(x, dtype=np.float64)
    n = len(x)
    if not _filterable(n, fps, above_hz):
        return None
    t = np.arange(n, dtype=np.float64)
    residual = x - np.polyval(np.polyfit(t, x, 1), t)
    sos = _signal().butter(4, above_hz, btype="low", fs=fps, output="sos")
    pad = min(n - 1, max(3 * (2 * len(sos) + 1), int(round(3.0 * fps / above_hz))))
    return residual - _signal().sosfiltfilt(sos, residual, padlen=pad)


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
    """Unit of a path axis: ``deg`` for the rotation, ``px`` for x and y."""
    return "deg" if axis == "rot" else "px"


def band_key(axis: str, lo_hz: float, hi_hz: float | None) -> str:
    """Summary key of one shake band, e.g. ``shake_power_x_1_3hz_px2`` or
    ``shake_power_rot_above_12hz_deg2`` (power in pixels² or degrees²)."""
    unit = axis_unit(axis) + "2"
    if hi_hz is None:
        return f"shake_power_{axis}_above_{lo_hz:g}hz_{unit}"
    return f"shake_power_{axis}_{lo_hz:g}_{hi_hz:g}hz_{unit}"


def welch_segment(n: int, fps: float) -> int:
    """Welch segment length (frames) for a series of ``n`` frames: 8 s where the clip allows,
    at least 16 frames. Longer segments resolve frequency finer (fps / segment Hz); 8 s is a
    compromise of this project between resolution and averaging for clips of tens of seconds."""
    return int(min(n, max(16, round(8.0 * fps))))


def shake_spectrum(shake: np.ndarray, fps: float) -> tuple[np.ndarray, np.ndarray] | None:
    """One-sided Welch power spectral density of a shake series.

    Welch, "The use of fast Fourier transform for the estimation of power spectra", IEEE
    Trans. Audio and Electroacoustics, 1967; ``scipy.signal.welch`` with a Hann window and
    half-overlapping segments of :func:`welch_segment` frames.

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
    f, pxx = _signal().welch(shake, fs=fps, nperseg=welch_segment(n, fps), detrend="constant")
    return f, pxx


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
    """
    seg = welch_segment(n, fps)
    step = seg - seg // 2
    k = 1 + (n - seg) // step
    w = _signal().get_window("hann", seg)
    energy = float(np.sum(w * w))
    corr = 0.0
    for m in range(1, k):
        lag = m * step
        if lag >= seg:
            break
        rho = float(np.sum(w[:seg - lag] * w[lag:])) / energy
        corr += (1.0 - m / k) * rho * rho
    return 2.0 * k / (1.0 + 2.0 * corr)


def shake_filter_gain(f_hz: np.ndarray, above_hz: float) -> np.ndarray:
    """Power gain of :func:`shake_component` at ``f_hz``: the series minus its 4th-order
    Butterworth low-pass run forward and backward passes (r⁸ / (1 + r⁸))², r = f / above_hz."""
    r8 = (np.asarray(f_hz, dtype=np.float64) / above_hz) ** 8
    return (r8 / (1.0 + r8)) ** 2


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
    """
    from scipy import optimize, special

    half = 0.5 * dof
    nodes, weights = _gauss_legendre(200)
    v = 0.5 * (nodes + 1.0)
    y = special.gammaincinv(half, v) / half  # F⁻¹(v) of χ²_dof / dof
    log_beta = (math.lgamma(rank) + math.lgamma(m - rank + 1) - math.lgamma(m + 1))
    w = 0.5 * weights * np.exp((rank - 1) * np.log(v) + (m - rank) * np.log1p(-v) - log_beta)

    def tail(log_k: float) -> float:
        return float(np.sum(w * special.gammaincc(half, half * math.exp(log_k) * y))) - alpha

    return math.exp(optimize.brentq(tail, 0.0, 20.0, xtol=1e-6))


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
    neighbours (log power); None when no peak stands out of the background."""
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


def _pixels_to_deg(px: float | None, width: int, fov_deg: float | None) -> float | None:
    if px is None or fov_deg is None:
        return None
    f = (width / 2.0) / math.tan(math.radians(fov_deg) / 2.0)
    return math.degrees(math.atan(px / f))


def _shots(values: np.ndarray, cuts: np.ndarray, fps: float, above_hz: float,
           time_s: np.ndarray | None) -> list[tuple[np.ndarray | None, np.ndarray]]:
    """Per shot between scene cuts: (sample times or None, shake series). With ``time_s``
    each shot is first resampled onto an even grid at ``fps`` (:func:`resample_even`)."""
    out = []
    for seg in segments(cuts):
        t, v = None, values[seg]
        if time_s is not None:
            if seg.stop - seg.start < 2:
                continue
            t, v = resample_even(time_s[seg], v, fps)
        part = shake_component(v, fps, above_hz)
        if part is not None:
            out.append((t, part))
    return out


def _segmented_shake(values: np.ndarray, cuts: np.ndarray, fps: float, above_hz: float,
                     time_s: np.ndarray | None = None) -> np.ndarray | None:
    parts = [s for _, s in _shots(values, cuts, fps, above_hz, time_s)]
    return np.concatenate(parts) if parts else None


def peak_to_peak(shots: list[np.ndarray], fps: float, above_hz: float) -> float | None:
    """Largest minus smallest shake over the shots, leaving out 1 / ``above_hz`` seconds at
    each end of every shot at least four times that long: there the zero-phase filter runs
    on its padding (an odd extension of the shot), and its start-up and run-out would count
    as shake. Shorter shots count whole. None when there is no shot."""
    if not shots:
        return None
    edge = int(math.ceil(fps / above_hz))
    parts = [s[edge:len(s) - edge] if len(s) >= 4 * edge else s for s in shots]
    v = np.concatenate(parts)
    return float(np.ptp(v)) if len(v) else None


def path_figures(path_xyd: np.ndarray, cuts: np.ndarray, *, fps: float, above_hz: float,
                 width: int, fov_deg: float | None, suffix: str = "",
                 bands: bool = False, time_s: np.ndarray | None = None) -> dict:
    """Shake figures of a path readout (n, 3+) of x, y (pixels) and angle (degrees).

    Per axis: RMS and peak-to-peak (:func:`peak_to_peak`) of the shake (x and y also in
    degrees when ``fov_deg`` is known, else None) and the dominant frequency (Hz, None when
    no peak stands out, :func:`shake_peaks`). With ``bands``, also the shake power per band
    of :data:`SHAKE_BANDS_HZ` (keys from :func:`band_key`) and the frequency resolution of
    the spectrum, ``spectrum_resolution_hz``. Keys end with ``suffix``.

    ``fps`` is the real mean frame rate; ``time_s`` (the frame times, seconds) is given only
    when they are irregular, and each shot is then resampled onto an even grid at ``fps``
    before it is filtered.
    """
    out: dict = {}
    n_total = 0
    for j, axis in enumerate(AXES):
        shots = [s for _, s in _shots(path_xyd[:, j], cuts, fps, above_hz, time_s)]
        shake = np.concatenate(shots) if shots else None
        unit = axis_unit(axis)
        rms = None if shake is None else float(np.sqrt(np.mean(shake**2)))
        p2p = peak_to_peak(shots, fps, above_hz)
        out[f"jitter_rms_{axis}_{unit}{suffix}"] = rms
        out[f"jitter_p2p_{axis}_{unit}{suffix}"] = p2p
        if axis != "rot":
            out[f"jitter_rms_{axis}_deg{suffix}"] = _pixels_to_deg(rms, width, fov_deg)
            out[f"jitter_p2p_{axis}_deg{suffix}"] = _pixels_to_deg(p2p, width, fov_deg)
        out[f"dominant_hz_{axis}{suffix}"] = (
            None if shake is None else dominant_hz(shake, fps, above_hz)
        )
        if bands:
            for (lo, hi), power in zip(SHAKE_BANDS_HZ, band_powers(shake, fps), strict=True):
                out[band_key(axis, lo, hi) + suffix] = power
            n_total = max(n_total, 0 if shake is None else len(shake))
    if bands:
        out[f"spectrum_resolution_hz{suffix}"] = (
            float(fps / welch_segment(n_total, fps)) if n_total >= 16 else None
        )
    return out


def axis_shake(path_xyd: np.ndarray, cuts: np.ndarray, *, fps: float, above_hz: float,
               time_s: np.ndarray | None = None) -> dict[str, np.ndarray | None]:
    """The shake series of each axis (``x``, ``y`` pixels, ``rot`` degrees) of a path readout,
    per shot between scene cuts and joined; None for an axis too short to filter. With
    ``time_s`` (irregular frame times) each shot is resampled first, as in
    :func:`path_figures`, so the series no longer has one value per frame."""
    return {axis: _segmented_shake(path_xyd[:, j], cuts, fps, above_hz, time_s)
            for j, axis in enumerate(AXES)}


def shake_times(cuts: np.ndarray, time_s: np.ndarray, *, fps: float, above_hz: float,
                resampled: bool) -> np.ndarray | None:
    """The times (s) of the samples of :func:`axis_shake`'s series: the frame times of the
    shots long enough to filter, or with ``resampled`` their even grids."""
    t = np.asarray(time_s, dtype=np.float64)
    if resampled:
        parts = [g for g, _ in _shots(t, cuts, fps, above_hz, t)]
    else:
        parts = [t[seg] for seg in segments(cuts)
                 if _filterable(seg.stop - seg.start, fps, above_hz)]
    return np.concatenate(parts) if parts else None


def measured_frames(status: np.ndarray) -> np.ndarray:
    """(n,) bool: frames whose motion was measured, so not frame 0 (no motion), not a cut
    (motion across it is not camera motion) and not failed (a stand-in)."""
    keep = (status != "cut") & (status != "failed")
    if len(keep):
        keep[0] = False
    return keep


def stability_figures(motion_readout: np.ndarray, suffix: str,
                      noise: tuple[float, float] | None = None) -> dict:
    """Stability scores of per-frame motion (dx, dy, degrees): translation takes the worse.
    ``noise`` is the measurement noise (pixels, degrees) of :func:`motion_noise`."""
    n_px, n_deg = (None, None) if noise is None else noise
    sx = stability(motion_readout[:, 0], n_px)
    sy = stability(motion_readout[:, 1], n_px)
    trans = None if sx is None or sy is None else min(sx, sy)
    return {f"stability_translation{suffix}": trans,
            f"stability_rotation{suffix}": stability(motion_readout[:, 2], n_deg)}


def output_motion(matrices: np.ndarray, corrections: np.ndarray) -> np.ndarray:
    """Inter-frame motion of the output video: C_t · H_t · C_{t−1}⁻¹ (frame 0: identity)."""
    out = np.empty_like(matrices)
    out[0] = np.eye(3)
    if len(matrices) > 1:
        m = corrections[1:] @ matrices[1:] @ np.linalg.inv(corrections[:-1])
        out[1:] = m / m[:, 2:3, 2:3]
    return out


#: Below this share of measured frame pairs, figures of a measured motion are not given.
MIN_MEASURED_SHARE = 0.5


def readout_path(readout: np.ndarray, cuts: np.ndarray, width: int,
                 height: int) -> np.ndarray | None:
    """The path (n, 3) of x, y (pixels) and degrees accumulated from per-frame motion read as
    similarities about the frame centre ((n, 3) dx, dy pixels, degrees; nan where not
    measured), per shot between ``cuts``, as the raw path is from ``H_t``. Gaps are filled by
    linear interpolation over time; None when fewer than :data:`MIN_MEASURED_SHARE` of the
    frame pairs were measured."""
    filled = _filled_motion(readout, cuts)
    if filled is None:
        return None
    centre = frame_centre(width, height)
    q = np.column_stack([filled[:, 0], filled[:, 1], np.radians(filled[:, 2]),
                         np.zeros(len(filled))])
    return similarity_readout(accumulate(from_similarity(q, centre), cuts), centre)[:, :3]


def _filled_motion(readout: np.ndarray, cuts: np.ndarray) -> np.ndarray | None:
    """Measured per-frame motion with its gaps interpolated; the first frame of each shot
    (no predecessor) holds no motion. None when too little was measured."""
    m = np.array(readout, dtype=np.float64)[:, :3]
    start = np.asarray(cuts, bool).copy()
    if len(start):
        start[0] = True
    m[start] = 0.0
    ok = np.isfinite(m).all(axis=1)
    pairs = ~start
    if not pairs.any() or np.mean(ok[pairs]) < MIN_MEASURED_SHARE:
        return None
    t = np.arange(len(m))
    for j in range(3):
        m[~ok, j] = np.interp(t[~ok], t[ok], m[ok, j])
    return m


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
    time_s: np.ndarray | None = None,
    rms_px: np.ndarray | None = None,
    inliers: np.ndarray | None = None,
    reasons: np.ndarray | None = None,
    output_motion_readout: np.ndarray | None = None,
) -> dict:
    """The summary block of the motion log's JSON (see the log format documentation).

    Parameters
    ----------
    matrices, path : (n, 3, 3) inter-frame transforms H_t and raw path P_t.
    status : (n,) frame status (``ok``, ``weak``, ``failed``, ``cut``).
    fps : the container's nominal frame rate, frames per second. With ``time_s`` the figures
        use the real mean rate of the timestamps instead (:func:`frame_rate`).
    width, height : frame size, full-resolution pixels.
    above_hz : the shake cut-off, Hz.
    fov_deg : horizontal field of view, degrees, or None.
    smooth_readout, corrections : after smoothing, the smoothed path read out (n, 4) and
        C_t (n, 3, 3).
    time_s : (n,) frame times, seconds; None takes the frames as evenly spaced at ``fps``.
    rms_px, inliers : (n,) the fit's residual RMS (pixels) and inlier count per frame, for
        the measurement noise the stability score is judged against (:func:`motion_noise`).
    reasons : (n,) strings per frame from the analysis, '' when nothing to say, else a short
        code (``foreground``, ``textureless``, ``few_inliers`` …); counted into
        ``frames_foreground`` and ``frames_textureless``. Without it those keys are left out.
    output_motion_readout : (n, 3) the written video's inter-frame motion as measured on
        its frames (dx, dy pixels, degrees; nan where not measured; see
        :mod:`stabilize.residual`). When given, the ``_out`` figures describe it, and the
        figures of the plan (the smoothed path and the corrections) move to ``_planned``
        keys; the ``_out`` figures are null when too little of the output could be measured.
    """
    centre = frame_centre(width, height)
    cuts = status == "cut"
    motion = similarity_readout(matrices, centre)
    rate = frame_rate(time_s, fps) if time_s is not None else float(fps)
    irregular = timestamps_irregular(time_s)
    uneven = np.asarray(time_s, dtype=np.float64) if irregular else None
    summary: dict = {
        "frames": int(len(status)),
        "frames_weak": int(np.count_nonzero(status == "weak")),
        "frames_failed": int(np.count_nonzero(status == "failed")),
        "cuts": int(np.count_nonzero(cuts)),
        "fps": float(rate),
        "fps_nominal": float(fps),
        "timestamps_irregular": irregular,
        "shake_above_hz": float(above_hz),
        "nyquist_hz": 0.5 * float(rate),
    }
    n = max(1, len(status))
    # The shares say how far the figures can be trusted: weak frames are measured poorly,
    # failed frames carry a stand-in motion interpolated from their neighbours.
    summary["frames_weak_share"] = summary["frames_weak"] / n
    summary["frames_failed_share"] = summary["frames_failed"] / n
    if reasons is not None:
        codes = np.asarray(reasons).astype(str)
        summary["frames_foreground"] = int(np.count_nonzero(codes == "foreground"))
        summary["frames_textureless"] = int(np.count_nonzero(codes == "textureless"))
    summary.update(path_figures(similarity_readout(path, centre), cuts, fps=rate,
                                above_hz=above_hz, width=width, fov_deg=fov_deg, bands=True,
                                time_s=uneven))
    noise = motion_noise(rms_px, inliers, status, width, height)
    summary["motion_noise_px"] = noise[0]
    measured = measured_frames(status)
    has_out = corrections is not None
    summary.update(stability_figures(motion[measured], "_in" if has_out else "", noise))
    if has_out:
        checked = output_motion_readout is not None
        planned = "_planned" if checked else "_out"
        out_motion = similarity_readout(output_motion(matrices, corrections), centre)
        summary.update(stability_figures(out_motion[measured], planned, noise))
        summary.update(correction_figures(corrections))
        if smooth_readout is not None:
            summary.update(path_figures(smooth_readout, cuts, fps=rate, above_hz=above_hz,
                                        width=width, fov_deg=fov_deg, suffix=planned,
                                        time_s=uneven))
        if checked:
            summary.update(_measured_output_figures(
                output_motion_readout, cuts, measured, fps=rate, above_hz=above_hz,
                width=width, height=height, fov_deg=fov_deg, time_s=uneven, noise=noise))
    summary.update(trust_verdict(summary))
    return summary


def _measured_output_figures(readout: np.ndarray, cuts: np.ndarray, measured: np.ndarray, *,
                             fps: float, above_hz: float, width: int, height: int,
                             fov_deg: float | None, time_s: np.ndarray | None,
                             noise: tuple[float, float]) -> dict:
    """The ``_out`` shake and stability figures of the output's measured motion (all null
    when too little of it was measured). The stability score leaves out the frames the input's
    leaves out (``measured``) and is judged against the same measurement noise."""
    filled = _filled_motion(readout, cuts)
    dummy = np.zeros((len(cuts), 3))
    if filled is None:
        figs = path_figures(dummy, cuts, fps=fps, above_hz=above_hz, width=width,
                            fov_deg=fov_deg, suffix="_out")
        figs.update(stability_figures(dummy, "_out"))
        return {k: None for k in figs}
    figs = path_figures(readout_path(filled, cuts, width, height), cuts, fps=fps,
                        above_hz=above_hz, width=width, fov_deg=fov_deg, suffix="_out",
                        time_s=time_s)
    figs.update(stability_figures(filled[measured], "_out", noise))
    return figs


#: Shares of frames above which the figures are called rough, and unreliable: weak or failed
#: frames, frames whose motion could not be told apart from a large moving object, frames
#: with too little texture. Rules of thumb of this project, not from the literature.
ROUGH_SHARE, UNRELIABLE_SHARE = 0.10, 0.30
#: The verdict's levels, best first.
TRUST_LEVELS: tuple[str, ...] = ("sound", "rough", "unreliable")


def trust_verdict(summary: dict) -> dict:
    """A plain verdict on how far one clip's figures can be trusted.

    Parameters
    ----------
    summary : a summary as from :func:`summarise`, possibly with keys added by later stages
        (``output_steadier``).

    Returns
    -------
    dict with ``trust``, one of :data:`TRUST_LEVELS` (the worst level any reason gives), and
    ``trust_reasons``, a list of one-sentence reasons (empty when ``sound``):

    - weak or failed frames over :data:`ROUGH_SHARE` (rough) or :data:`UNRELIABLE_SHARE`
      (unreliable) of the frames;
    - frames whose motion could not be told apart from a large moving object
      (``frames_foreground``), or with too little texture (``frames_textureless``), over
      the same shares;
    - the steadied video measured no steadier than the input (``output_steadier`` false):
      rough;
    - irregular frame times (``timestamps_irregular``): rough, the path was resampled.
    """
    reasons: list[tuple[int, str]] = []
    n = max(1, int(summary.get("frames") or 0))

    def by_share(count: int, rough: str, unreliable: str) -> None:
        share = count / n
        if share > UNRELIABLE_SHARE:
            reasons.append((2, f"{share:.0%} of frames {unreliable}"))
        elif share > ROUGH_SHARE:
            reasons.append((1, f"{share:.0%} of frames {rough}"))

    weak, failed = int(summary.get("frames_weak") or 0), int(summary.get("frames_failed") or 0)
    by_share(weak + failed,
             "were weak or failed: treat these figures as rough estimates.",
             "were weak or failed: these figures are not reliable; check the per-frame strip "
             "and the original footage.")
    by_share(int(summary.get("frames_foreground") or 0),
             "had motion that could not be told apart from a large moving object: the "
             "figures may partly describe that object, not the camera.",
             "had motion that could not be told apart from a large moving object: these "
             "figures may describe that object, not the camera.")
    by_share(int(summary.get("frames_textureless") or 0),
             "had too little texture to measure (plain sky, water, fog or blur).",
             "had too little texture to measure (plain sky, water, fog or blur): these "
             "figures are not reliable.")
    if summary.get("output_steadier") is False:
        reasons.append((1, "The steadied video was measured no steadier than the input: "
                           "check it against the original footage."))
    if summary.get("timestamps_irregular"):
        nominal, rate = summary.get("fps_nominal"), summary.get("fps")
        said = f" (the container says {nominal:.3g} fps)" if nominal else ""
        real = f" of {rate:.3g} fps" if rate else ""
        reasons.append((1, f"The frame times are irregular{said}: the path was resampled "
                           f"onto an even time grid at the real mean rate{real}; motion "
                           "between frames is interpolated, not measured."))
    level = max((lv for lv, _ in reasons), default=0)
    return {"trust": TRUST_LEVELS[level], "trust_reasons": [text for _, text in reasons]}


def uncertainty_notes(summary: dict) -> list[str]:
    """Plain-language notes on how far one clip's figures can be trusted.

    Parameters
    ----------
    summary : a summary as from :func:`summarise`.

    Returns
    -------
    list of one-sentence notes (possibly empty): first the reasons of the verdict
    (:func:`trust_verdict`), then frames with a stand-in motion, scene cuts, a frame rate
    too low for the shake band, a shake peak close to the Nyquist frequency (possibly
    aliased faster vibration), a clip too short to resolve frequency finely, no field of
    view for figures in degrees.
    """
    notes: list[str] = list(trust_verdict(summary)["trust_reasons"])
    failed = int(summary.get("frames_failed") or 0)
    if failed:
        notes.append(f"{failed} frame(s) had no trustworthy motion fit; their motion is a "
                     "stand-in interpolated from the neighbouring frames.")
    if summary.get("cuts"):
        notes.append(f"{summary['cuts']} scene cut(s): the figures are computed per shot and "
                     "pooled; motion across a cut is not counted.")
    nyquist = summary.get("nyquist_hz")
    above = summary.get("shake_above_hz")
    if nyquist and above and nyquist <= above:
        notes.append(f"At {2.0 * nyquist:.3g} frames per second nothing above the shake "
                     f"cut-off of {above:.3g} Hz can be measured (the Nyquist frequency is "
                     f"{nyquist:.3g} Hz): there are no shake figures.")
    elif nyquist and above and nyquist < 2.0 * above:
        notes.append(f"At {2.0 * nyquist:.3g} frames per second only shake between "
                     f"{above:.3g} and {nyquist:.3g} Hz (the Nyquist frequency) can be "
                     "measured; faster shake is missed or folded down.")
    if nyquist:
        for axis in AXES:
            hz = summary.get(f"dominant_hz_{axis}")
            # Within the top fifth of the measurable range a peak may well be a faster
            # vibration folded down (aliased); a rule of thumb of this project.
            if hz is not None and hz > 0.8 * nyquist:
                notes.append(f"The {axis} shake peaks at {hz:.1f} Hz, close to the Nyquist "
                             f"frequency of {nyquist:.1f} Hz: it may be faster vibration "
                             "aliased down, not a real motion at that frequency.")
    res = summary.get("spectrum_resolution_hz")
    if res is not None and res > 0.25:
        notes.append(f"The clip is short: frequencies are resolved only to about {res:.2f} Hz.")
    if summary.get("jitter_rms_x_px") is not None and summary.get("jitter_rms_x_deg") is None:
        notes.append("No field of view was given (--fov-deg): figures in degrees are not "
                     "available.")
    return notes
