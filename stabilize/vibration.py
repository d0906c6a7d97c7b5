"""Camera vibration above the frame rate, from row-band shifts of rolling-shutter footage.

Every band of rows of frame ``t`` is exposed at its own instant ``τ``, and its shift since
frame ``t − 1`` samples ``d(τ) = p(τ) − p(τ − 1/fps)``, the camera's image-plane displacement
over one frame interval (:mod:`stabilize.row_bands`). With many bands per frame, ``d`` is
sampled unevenly but densely in time, so the spectrum of ``p`` can be estimated far above
``fps / 2`` with the Lomb–Scargle periodogram (Lomb, "Least-squares frequency analysis of
unequally spaced data", Astrophys. Space Sci. 39, 1976; Scargle, "Studies in astronomical time
series analysis II", ApJ 263, 1982).

The measurement chain, and what it hides
-----------------------------------------
1. Each frame's mean band shift and its linear trend over the rows are removed. Frame-level
   motion (shake, pans, rotation, zoom: anything that changes slowly from frame to frame)
   then leaves only small patterns that repeat every frame, whose energy lies at whole
   multiples of the frame rate; and a global-shutter clip (all bands of a frame equal)
   leaves nothing at all. This is the design choice that keeps shake from being read as
   vibration (the trend is the within-frame ramp that shake's acceleration draws over the
   readout; without removing it, strong shake leaks past the blind spots).
2. The one-frame difference has gain ``|2 sin(π f / fps)|``: zero at multiples of fps.
3. A band averages the rows it spans: gain ``sinc(f · band_s)`` (band_s = band height × row
   time).

The combined response of 1–3 to a unit sinusoid of the path is computed exactly at the
sample times (:func:`chain_response`) and divided out. Frequencies where it is weak
(``min_gain``) or that lie within ``blind_hz`` of a multiple of fps (where the repeating
frame-level patterns live) are *blind spots*, listed in the result and never reported.

Detection
---------
Under white measurement noise of variance σ², the unnormalised Lomb–Scargle power of one axis
divided by σ² is exponentially distributed (Scargle 1982), so the sum ``z`` over the x and y
axes follows a Gamma(2, 1) law: ``P(z > z0) = (1 + z0) e^{−z0}``. σ² is taken per axis from the
median power over the usable band (median of Exp(1) = ln 2; robust to the peak itself). The
false-alarm probability of the highest peak over ``N`` independent frequencies (usable
bandwidth × clip duration) is ``1 − (1 − (1 + z) e^{−z})^N`` (Scargle 1982, eq. 14, for two
degrees of freedom per axis). A peak with a false-alarm probability above ``false_alarm`` is
not reported.

The readout time can be estimated from the footage itself (:func:`estimate_readout`): the
readout that makes the band shifts most consistent with one continuous, phase-coherent
vibration of the path is the one that concentrates the most power at a single frequency;
a joint non-linear least-squares fit then refines it with an uncertainty.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "ReadoutEstimate",
    "Vibration",
    "VibrationSettings",
    "VibrationSpectrum",
    "blind_spots",
    "chain_response",
    "estimate_readout",
    "estimate_vibration",
    "frame_residual",
    "vibration_spectrum",
]


@dataclass(frozen=True)
class VibrationSettings:
    """Settings of the vibration spectrum and its peak test.

    ``min_hz``, ``max_hz``: frequency range searched (Hz); ``max_hz`` None means half the mean
    sampling rate within a frame (bands per readout), capped at ``cap_hz``. ``blind_hz``:
    half-width (Hz) of the blind spot around every multiple of the frame rate (frame-level
    motion changing at up to this rate leaks there; shake is 1–4 Hz, so 4 Hz is common
    practice for this project). ``min_gain``: weakest chain response (path px to measured px)
    still trusted. ``oversample``: frequency grid step is 1 / (oversample × duration).
    ``false_alarm``: largest false-alarm probability of a reported peak. ``gain_step_hz``:
    the chain response varies slowly with frequency (on the scale of fps and 1 / readout),
    so it is computed on this coarser grid and interpolated.
    """

    min_hz: float = 5.0
    max_hz: float | None = None
    blind_hz: float = 4.0
    min_gain: float = 0.3
    oversample: float = 4.0
    false_alarm: float = 0.01
    cap_hz: float = 300.0
    gain_step_hz: float = 0.25


@dataclass(frozen=True)
class VibrationSpectrum:
    """The vibration spectrum of a clip.

    ``freqs_hz`` (f,); ``power`` (f,) the noise-normalised Lomb–Scargle power z summed over x
    and y (dimensionless; ≈ 2 on average for noise); ``amplitude_px`` (f,) the path's
    vibration amplitude implied at each frequency (px, zero to peak, after dividing out
    ``gain``; meaningless in blind spots); ``gain`` (f,) the chain's RMS response;
    ``usable`` (f,) bool; ``blind_hz`` ((lo, hi), …) the blind intervals inside the searched
    range; ``duration_s`` the time spanned by the samples; ``noise_px`` (2,) the per-axis RMS
    of the residual measurement noise implied by the median power (px).
    """

    freqs_hz: np.ndarray
    power: np.ndarray
    amplitude_px: np.ndarray
    gain: np.ndarray
    usable: np.ndarray
    blind_hz: tuple[tuple[float, float], ...]
    duration_s: float
    noise_px: np.ndarray


@dataclass(frozen=True)
class Vibration:
    """The dominant vibration of a clip, or none.

    ``found``: the peak passed the false-alarm test; ``frequency_hz``; ``amplitude_px`` the
    zero-to-peak amplitude of the path's vibration, ``sqrt(ax² + ay²)`` of the per-axis
    amplitudes ``axis_px`` (2,) (for a straight-line vibration, its amplitude along its
    line); ``amplitude_deg`` the same as a camera angle given a horizontal field of view
    (NaN without one); ``false_alarm`` the peak's false-alarm probability; ``power`` its
    normalised power z; ``spectrum`` the :class:`VibrationSpectrum` it was found in. When
    ``found`` is False the frequency and amplitudes are NaN.
    """

    found: bool
    frequency_hz: float
    amplitude_px: float
    axis_px: np.ndarray
    amplitude_deg: float
    false_alarm: float
    power: float
    spectrum: VibrationSpectrum


@dataclass(frozen=True)
class ReadoutEstimate:
    """Readout time estimated from the footage.

    ``readout_s`` and its one-sigma ``sigma_s`` (s; NaN when not measurable);
    ``frequency_hz`` the vibration frequency fitted jointly; ``grid_s`` (g,) the readouts
    tried and ``score`` (g,) the share of the residual power the best single sinusoid
    explains at each; ``found`` False when no readout explains a significant vibration (the
    readout is then unobservable: without motion faster than a frame, every readout fits).
    """

    found: bool
    readout_s: float
    sigma_s: float
    frequency_hz: float
    grid_s: np.ndarray
    score: np.ndarray


def _frames(times_s: np.ndarray, frame_index: np.ndarray | None,
            fps: float) -> np.ndarray:
    if frame_index is not None:
        return np.asarray(frame_index, dtype=np.int64)
    # Valid when the readout is shorter than a frame and frame 0 starts at time 0.
    return np.floor(np.asarray(times_s) * fps + 1e-9).astype(np.int64)


def frame_residual(diff_px: np.ndarray, frame_index: np.ndarray,
                   within: np.ndarray | None = None) -> np.ndarray:
    """Band shifts minus their frame's mean shift (and, given ``within``, its linear trend).

    Parameters
    ----------
    diff_px : (m, k) band shifts (px).
    frame_index : (m,) which frame each sample belongs to.
    within : (m,) position of each sample within its frame (row, or exposure time); when
        given, each frame's least-squares line over it is removed, not just its mean.

    Returns
    -------
    (m, k) residual (px).
    """
    d = np.asarray(diff_px, dtype=np.float64)
    _, inv = np.unique(frame_index, return_inverse=True)
    flat = d.reshape(len(d), -1)
    return _residual_rows(flat.T, inv, int(inv.max()) + 1, within).T.reshape(d.shape)


def _residual_rows(x: np.ndarray, inv: np.ndarray, n_frames: int,
                   within: np.ndarray | None = None) -> np.ndarray:
    """Per-frame removal of the mean (and the line over ``within``) along the last axis of
    ``x`` (…, m); ``inv`` (m,) frame ids 0..n_frames−1."""
    g = np.zeros((len(inv), n_frames))
    g[np.arange(len(inv)), inv] = 1.0
    n = g.sum(axis=0)
    means = (x @ g) / n
    if within is None:
        return x - means[..., inv]
    u = np.asarray(within, dtype=np.float64)
    u = u - (u @ g / n)[inv]
    s2 = (u * u) @ g
    slope = ((x * u) @ g) / np.where(s2 > 1e-18 * max(float(s2.max()), 1e-300), s2, np.inf)
    return x - means[..., inv] - slope[..., inv] * u


def chain_response(times_s: np.ndarray, frame_index: np.ndarray, fps: float,
                   freqs_hz: np.ndarray, band_s: float = 0.0, detrend: bool = True,
                   chunk: int = 256) -> np.ndarray:
    """Response of the measurement chain to unit sinusoids of the path, (f, 2, 2).

    For a path ``p(τ) = α cos ωτ + β sin ωτ`` (px) the chain (one-frame difference, band
    averaging over ``band_s`` seconds, per-frame mean removal) gives samples whose
    least-squares fit ``a cos ωτ + b sin ωτ`` at the same frequency has
    ``(a, b) = M (α, β)``. Returned: M for each frequency.

    Parameters
    ----------
    times_s : (m,) sample instants (s).
    frame_index : (m,) frame of each sample.
    fps : frame rate (Hz).
    freqs_hz : (f,) frequencies (Hz).
    band_s : exposure-time span of one band (s).
    detrend : the per-frame removal includes each frame's linear trend over time (as in
        :func:`vibration_spectrum`), not only its mean.
    """
    t = np.asarray(times_s, dtype=np.float64)
    within = t if detrend else None
    _, inv = np.unique(frame_index, return_inverse=True)
    nfr = int(inv.max()) + 1
    out = np.zeros((len(freqs_hz), 2, 2))
    dt = 1.0 / fps
    for lo in range(0, len(freqs_hz), chunk):
        f = np.asarray(freqs_hz[lo:lo + chunk], dtype=np.float64)
        w = 2.0 * np.pi * f[:, None]
        c, s = np.cos(w * t), np.sin(w * t)
        cp, sp = np.cos(w * (t - dt)), np.sin(w * (t - dt))
        box = np.sinc(f * band_s)[:, None]
        resp = [_residual_rows(box * (c - cp), inv, nfr, within),
                _residual_rows(box * (s - sp), inv, nfr, within)]
        cc, ss, cs = (c * c).sum(1), (s * s).sum(1), (c * s).sum(1)
        det = cc * ss - cs * cs
        det = np.where(np.abs(det) < 1e-12, np.inf, det)
        for j, r in enumerate(resp):
            rc, rs = (r * c).sum(1), (r * s).sum(1)
            out[lo:lo + chunk, 0, j] = (ss * rc - cs * rs) / det
            out[lo:lo + chunk, 1, j] = (cc * rs - cs * rc) / det
    return out


def blind_spots(lo_hz: float, hi_hz: float, fps: float,
                blind_hz: float) -> tuple[tuple[float, float], ...]:
    """Intervals (Hz) within ``blind_hz`` of a multiple of ``fps`` that meet [lo_hz, hi_hz]."""
    out = []
    for k in range(int(np.floor(lo_hz / fps)), int(np.ceil(hi_hz / fps)) + 1):
        a, b = max(lo_hz, k * fps - blind_hz), min(hi_hz, k * fps + blind_hz)
        if a < b:
            out.append((float(a), float(b)))
    return tuple(out)


#: Samples × frequencies the periodogram works on at once: SciPy's ``lombscargle`` holds
#: arrays of that size, so the frequencies are taken in chunks (about 32 MiB a chunk).
LOMB_CHUNK_ELEMENTS = 4_000_000


def _lomb(t: np.ndarray, y: np.ndarray, freqs_hz: np.ndarray) -> np.ndarray:
    # lazy: scipy.signal takes about a second to import; only vibration analysis needs it.
    from scipy.signal import lombscargle
    w = 2.0 * np.pi * np.asarray(freqs_hz, dtype=np.float64)
    step = max(64, LOMB_CHUNK_ELEMENTS // max(1, len(t)))
    return np.concatenate([lombscargle(t, y, w[lo:lo + step], normalize=False)
                           for lo in range(0, len(w), step)]) if len(w) else np.zeros(0)


def _ls_fit(t: np.ndarray, y: np.ndarray, f: float) -> np.ndarray:
    """Least-squares (a, b) of a cos ωt + b sin ωt for each column of y (m, k) -> (2, k)."""
    w = 2.0 * np.pi * f
    c = np.stack([np.cos(w * t), np.sin(w * t)], axis=1)
    return np.linalg.lstsq(c, y, rcond=None)[0]


def _max_hz(times_s: np.ndarray, inv: np.ndarray, settings: VibrationSettings) -> float:
    if settings.max_hz is not None:
        return settings.max_hz
    order = np.lexsort((times_s, inv))
    step = np.diff(times_s[order])[np.diff(inv[order]) == 0]
    step = step[step > 0]
    if not len(step):
        return 0.0
    return float(min(settings.cap_hz, 0.5 / np.median(step)))


def vibration_spectrum(times_s: np.ndarray, diff_px: np.ndarray, fps: float, *,
                       frame_index: np.ndarray | None = None, band_s: float = 0.0,
                       settings: VibrationSettings | None = None) -> VibrationSpectrum:
    """Lomb–Scargle spectrum of the within-frame part of band shifts, blind spots marked.

    Parameters
    ----------
    times_s : (m,) exposure instants of the band samples (s).
    diff_px : (m, 2) band shifts (dx, dy) from the previous frame (px), NaN rows skipped.
    fps : frame rate (Hz).
    frame_index : (m,) frame of each sample; derived from ``times_s`` when None (valid when
        frame ``t`` starts at ``t / fps`` and the readout is shorter than a frame).
    band_s : exposure-time span of one band (s), for the band-averaging gain.
    settings : :class:`VibrationSettings`.

    Returns
    -------
    :class:`VibrationSpectrum`.
    """
    s = settings or VibrationSettings()
    t = np.asarray(times_s, dtype=np.float64)
    d = np.asarray(diff_px, dtype=np.float64).reshape(len(t), 2)
    ok = np.isfinite(d).all(axis=1) & np.isfinite(t)
    t, d = t[ok], d[ok]
    fi = _frames(times_s, frame_index, fps)[ok]
    _, inv = np.unique(fi, return_inverse=True)
    r = frame_residual(d, inv, t)
    span = float(t.max() - t.min()) if len(t) > 1 else 0.0
    hi = _max_hz(t, inv, s)
    if span <= 0 or hi <= s.min_hz:
        z = np.zeros(0)
        return VibrationSpectrum(z, z, z, z, z.astype(bool), (), span, np.full(2, np.nan))
    freqs = np.arange(s.min_hz, hi, 1.0 / (s.oversample * span))
    coarse = np.arange(s.min_hz, hi + s.gain_step_hz, s.gain_step_hz)
    m = chain_response(t, inv, fps, coarse, band_s)
    gain = np.interp(freqs, coarse, np.sqrt((m ** 2).sum(axis=(1, 2)) / 2.0))
    dist = np.abs(freqs - fps * np.rint(freqs / fps))
    usable = (gain >= s.min_gain) & (dist > s.blind_hz)
    pw = np.stack([_lomb(t, r[:, c], freqs) for c in range(2)], axis=1)
    ref = pw[usable] if usable.any() else pw
    # Median of σ²·Exp(1) is σ²·ln 2.
    sigma2 = np.maximum(np.median(ref, axis=0) / np.log(2.0), 1e-30)
    z = (pw / sigma2).sum(axis=1)
    # LS amplitude of the measured samples is sqrt(4 P / m) (scipy's normalisation).
    amp_meas = np.sqrt(4.0 * pw.sum(axis=1) / len(t))
    amp = amp_meas / np.maximum(gain, 1e-12)
    # Noise variance per axis σ² relates to per-sample RMS directly (P/σ² ~ Exp(1)).
    noise = np.sqrt(sigma2)
    blind = blind_spots(s.min_hz, hi, fps, s.blind_hz)
    return VibrationSpectrum(freqs, z, amp, gain, usable, blind, span, noise)


def _px_to_deg(px: float, width: int | None, hfov_deg: float | None) -> float:
    if width is None or hfov_deg is None:
        return float("nan")
    focal = 0.5 * width / np.tan(np.radians(hfov_deg) / 2.0)
    return float(np.degrees(np.arctan2(px, focal)))


def estimate_vibration(times_s: np.ndarray, diff_px: np.ndarray, fps: float, *,
                       frame_index: np.ndarray | None = None, band_s: float = 0.0,
                       width: int | None = None, hfov_deg: float | None = None,
                       settings: VibrationSettings | None = None) -> Vibration:
    """The dominant vibration of a clip from its band samples, with a false-alarm test.

    Parameters
    ----------
    times_s, diff_px, fps, frame_index, band_s, settings : as in :func:`vibration_spectrum`.
    width : frame width (px), for the amplitude in degrees.
    hfov_deg : horizontal field of view (degrees), for the amplitude in degrees (pinhole
        camera, amplitude read at the image centre).

    Returns
    -------
    :class:`Vibration`. Its amplitude is the least-squares sinusoid fitted at the peak
    frequency, with the chain's 2×2 response (:func:`chain_response`) inverted, so the phase
    dependence of the per-frame mean removal is undone exactly.
    """
    s = settings or VibrationSettings()
    spec = vibration_spectrum(times_s, diff_px, fps, frame_index=frame_index, band_s=band_s,
                              settings=s)
    nan = float("nan")
    if not spec.usable.any():
        return Vibration(False, nan, nan, np.full(2, nan), nan, 1.0, 0.0, spec)
    idx = np.flatnonzero(spec.usable)
    k = idx[np.argmax(spec.power[idx])]
    z = float(spec.power[k])
    bw = float(spec.usable.sum() * (spec.freqs_hz[1] - spec.freqs_hz[0])) \
        if len(spec.freqs_hz) > 1 else 0.0
    n_ind = max(1.0, bw * spec.duration_s)
    single = (1.0 + z) * np.exp(-z)
    fap = float(-np.expm1(n_ind * np.log1p(-min(single, 1.0 - 1e-16))))
    if fap > s.false_alarm:
        return Vibration(False, nan, nan, np.full(2, nan), nan, fap, z, spec)
    f = float(spec.freqs_hz[k])
    if 0 < k < len(spec.power) - 1:
        a, b, c = spec.power[k - 1:k + 2]
        den = a - 2 * b + c
        if den < 0:
            f += 0.5 * (a - c) / den * (spec.freqs_hz[1] - spec.freqs_hz[0])
    t = np.asarray(times_s, dtype=np.float64)
    d = np.asarray(diff_px, dtype=np.float64).reshape(len(t), 2)
    ok = np.isfinite(d).all(axis=1) & np.isfinite(t)
    fi = _frames(times_s, frame_index, fps)[ok]
    t, d = t[ok], d[ok]
    _, inv = np.unique(fi, return_inverse=True)
    r = frame_residual(d, inv, t)
    ab = _ls_fit(t, r, f)                                        # (2, 2): rows a,b; cols x,y
    m = chain_response(t, inv, fps, np.array([f]), band_s)[0]
    alpha_beta = np.linalg.solve(m, ab)
    axis_px = np.hypot(alpha_beta[0], alpha_beta[1])
    amp = float(np.hypot(*axis_px))
    return Vibration(True, f, amp, axis_px, _px_to_deg(amp, width, hfov_deg), fap, z, spec)


def _ls_power(t: np.ndarray, y: np.ndarray, freqs: np.ndarray,
              chunk: int = 256) -> np.ndarray:
    """Power of the least-squares sinusoid (no offset) at each frequency, summed over the
    columns of y (m, k): the classical Lomb (1976) fit, vectorised for the many re-timings of
    the readout search (``scipy.signal.lombscargle`` is far slower per call). Returned as
    the share of ``sum(y²)`` explained, (f,)."""
    out = np.empty(len(freqs))
    total = max(float((y ** 2).sum()), 1e-30)
    t32 = np.asarray(t, dtype=np.float32)
    y32 = np.asarray(y, dtype=np.float32)
    for lo in range(0, len(freqs), chunk):
        w = (2.0 * np.pi * freqs[lo:lo + chunk, None]).astype(np.float32)
        e = np.exp(1j * (w * t32))                                 # complex64, (f, m)
        c, s = e.real, e.imag
        cc, ss, cs = (c * c).sum(1), (s * s).sum(1), (c * s).sum(1)
        det = np.maximum(cc * ss - cs * cs, 1e-12)
        yc, ys = c @ y32, s @ y32                                  # (f, k)
        num = (ss[:, None] * yc ** 2 - 2 * cs[:, None] * yc * ys + cc[:, None] * ys ** 2)
        out[lo:lo + chunk] = num.sum(axis=1) / det / total
    return out


def _path_design(times_s: np.ndarray, fps: float, knots_s: float, t_lo: float,
                 t_hi: float) -> np.ndarray:
    """One-frame differences of a cubic B-spline basis of the slow path, (m, n_basis)."""
    # lazy: scipy.interpolate is only needed for the readout estimate.
    from scipy.interpolate import BSpline
    k = 3
    inner = np.arange(t_lo, t_hi + knots_s, knots_s)
    knots = np.concatenate([[inner[0]] * k, inner, [inner[-1]] * k])
    tt = np.clip(times_s, inner[0], inner[-1])
    tp = np.clip(times_s - 1.0 / fps, inner[0], inner[-1])
    a = BSpline.design_matrix(tt, knots, k).toarray()
    b = BSpline.design_matrix(tp, knots, k).toarray()
    return a - b


def estimate_readout(frame_index: np.ndarray, row_px: np.ndarray, height: int,
                     diff_px: np.ndarray, fps: float, *,
                     grid_s: np.ndarray | None = None, knots_s: float = 0.1,
                     band_s_per_readout: float = 0.0,
                     settings: VibrationSettings | None = None) -> ReadoutEstimate:
    """Readout time from the footage: the one that best explains the band shifts as samples
    of one continuous camera path.

    For each readout ``R`` on ``grid_s`` (default 0–40 ms every 1 ms) the samples are timed
    ``frame / fps + row · R / height`` and the band shifts are fitted, by linear least
    squares, with the one-frame differences of a path made of a slow cubic B-spline (knots
    every ``knots_s`` seconds: shake, pans) plus the sinusoid that explains most of the
    within-frame residual at that readout. The sum of squared residuals is least at the true
    readout; a parabola through the three best grid points refines it, and the curvature
    gives the one-sigma uncertainty (Δ SSE = σ², residuals treated as white noise of
    variance σ²). This is the calibration-free idea of Grundmann et al., ICCP 2012
    (see :mod:`stabilize.row_bands`) with a continuous-time path in place of their mixture.

    A vibration alone cannot fix the readout: (f, R) and (f + k·fps, R·f / (f + k·fps))
    time every band sample identically, so the slow path's within-frame slopes (shake)
    carry the information, and a clip with neither shake nor vibration has no readout to
    find.

    Parameters
    ----------
    frame_index : (m,) frame of each band sample.
    row_px : (m,) band centre rows (px).
    height : frame height (px).
    diff_px : (m, 2) band shifts from the previous frame (px).
    fps : frame rate (Hz).
    grid_s : (g,) readouts to try (s).
    knots_s : knot spacing of the slow path (s).
    band_s_per_readout : band height / frame height (band-averaging gain; 0 to ignore).
    settings : :class:`VibrationSettings` (frequency range and blind spots of the sinusoid).

    Returns
    -------
    :class:`ReadoutEstimate` with ``score`` the residual RMS (px) at each grid readout.
    Not found when the best readout sits at the end of the grid or the curvature is not
    positive.
    """
    s = settings or VibrationSettings()
    grid = np.arange(0.0, 0.0405, 0.001) if grid_s is None else np.asarray(grid_s, float)
    fi = np.asarray(frame_index, dtype=np.int64)
    rows = np.asarray(row_px, dtype=np.float64)
    d = np.asarray(diff_px, dtype=np.float64).reshape(len(fi), 2)
    ok = np.isfinite(d).all(axis=1)
    fi, rows, d = fi[ok], rows[ok], d[ok]
    _, inv = np.unique(fi, return_inverse=True)
    r = frame_residual(d, inv, rows)
    base = fi / fps
    span = float(base.max() - base.min()) + 1.0 / fps
    per_frame = np.bincount(inv).mean()
    hi = s.max_hz if s.max_hz is not None else min(
        s.cap_hz, 0.5 * per_frame / max(float(grid.max()), 1e-6))
    step = 1.0 / span
    freqs = np.arange(s.min_hz, hi, step)
    freqs = freqs[np.abs(freqs - fps * np.rint(freqs / fps)) > s.blind_hz]
    t_lo = float(base.min()) - 1.0 / fps
    t_hi = float(base.max()) + max(float(grid.max()), 1.0 / fps)
    sse = np.full(len(grid), np.inf)
    best_f = np.full(len(grid), np.nan)
    dt = 1.0 / fps
    for i, ro in enumerate(grid):
        t = base + rows * (ro / height)
        cols = [_path_design(t, fps, knots_s, t_lo, t_hi)]
        if ro > 0 and len(freqs):
            ex = _ls_power(t, r, freqs)
            f = float(freqs[int(np.argmax(ex))])
            # The coarse grid (one step per 1 / duration) may straddle the peak: refine.
            near = f + step * np.linspace(-0.5, 0.5, 5)
            f = float(near[int(np.argmax(_ls_power(t, r, near)))])
            w = 2.0 * np.pi * f
            box = np.sinc(f * band_s_per_readout * ro)
            cols.append(box * np.stack([np.cos(w * t) - np.cos(w * (t - dt)),
                                        np.sin(w * t) - np.sin(w * (t - dt))], axis=1))
            best_f[i] = f
        a = np.concatenate(cols, axis=1)
        coef = np.linalg.lstsq(a, d, rcond=None)[0]
        sse[i] = float(((a @ coef - d) ** 2).sum())
    n = d.size
    score = np.sqrt(sse / n)
    nan = float("nan")
    i = int(np.argmin(sse))
    if i == 0 or i == len(grid) - 1:
        return ReadoutEstimate(False, nan, nan, nan, grid, score)
    x = grid[i - 1:i + 2]
    y = sse[i - 1:i + 2]
    c2, c1, _ = np.polyfit(x - x[1], y, 2)
    if c2 <= 0:
        return ReadoutEstimate(False, nan, nan, nan, grid, score)
    ro = float(x[1] - c1 / (2.0 * c2))
    dof = max(1, n - 2 * (a.shape[1]) - 2)
    sigma2 = float(sse[i] / dof)
    sigma = float(np.sqrt(sigma2 / c2))
    return ReadoutEstimate(True, ro, sigma, float(best_f[i]), grid, score)
