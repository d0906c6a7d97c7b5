"""The time base of the shake figures: the real frame rate, even resampling, the shake low-pass.

Time is real time: the rate the figures use is the mean rate of the frames' own timestamps
(:func:`frame_rate`, the one place it is worked out), not the container's nominal rate, and a
clip whose frame intervals are irregular (:func:`timestamps_irregular`), or that misses
frames (:func:`frame_gaps`: a recorder that dropped some), has its path resampled onto an
even grid at that rate before it is filtered or its spectrum taken (:func:`resample_even`).

Shake is the part of a series above ``shake_above_hz``: the series minus its zero-phase
low-pass (4th-order Butterworth run forward and backward, as ``scipy.signal.sosfiltfilt``
does it, in numpy: :mod:`stabilize.shake.filters`; :func:`shake_component`). Only the shake
figures use this low-pass, so it lives here.
"""

from __future__ import annotations

import numpy as np

from .filters import zero_phase_lowpass

__all__ = [
    "GAP_FACTOR",
    "IRREGULAR_SPREAD",
    "RARE_GAPS",
    "frame_gaps",
    "frame_rate",
    "in_gaps",
    "missing_before",
    "resample_even",
    "shake_component",
    "shake_filter_gain",
    "timestamps_irregular",
]


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


def _ordered_intervals(time_s: np.ndarray | None) -> tuple[np.ndarray, np.ndarray] | None:
    """The finite times in order and their positive steps (s): (times before each step,
    steps); None with fewer than two steps."""
    if time_s is None:
        return None
    t = np.asarray(time_s, dtype=np.float64)
    t = np.sort(t[np.isfinite(t)])
    dt = np.diff(t)
    pos = dt > 0
    if np.count_nonzero(pos) < 2:
        return None
    return t[:-1][pos], dt[pos]


def _rare_gaps(dt: np.ndarray) -> np.ndarray:
    """Which of the intervals ``dt`` (s, positive) are rare gaps: over :data:`GAP_FACTOR`
    times the median interval, in at most :data:`RARE_GAPS` of the intervals (or a single
    one). All False when there are none or they are not rare (the intervals are then
    irregular throughout)."""
    gaps = dt > GAP_FACTOR * float(np.median(dt))
    if 0 < np.count_nonzero(gaps) <= max(1, RARE_GAPS * len(dt)):
        return gaps
    return np.zeros(len(dt), bool)


def frame_gaps(time_s: np.ndarray | None) -> list[tuple[float, float, int]]:
    """Where a clip misses frames: its rare gaps (each over :data:`GAP_FACTOR` times the
    median interval, in at most :data:`RARE_GAPS` of the intervals or a single one, as
    :func:`frame_rate` leaves them out).

    Parameters
    ----------
    time_s : (n,) frame times, seconds, or None.

    Returns
    -------
    list of (time of the frame before the gap, s; length of the gap, s; frames missing, the
    gap over the median interval, rounded, less one), in time order; empty for None, fewer
    than three usable times, or gaps so common that the times are irregular throughout.

    Examples
    --------
    >>> [(round(t, 3), round(d, 3), n)
    ...  for t, d, n in frame_gaps(np.array([0.0, 0.1, 0.2, 0.8, 0.9, 1.0]))]
    [(0.2, 0.6, 5)]
    """
    steps = _ordered_intervals(time_s)
    if steps is None:
        return []
    t, dt = steps
    med = float(np.median(dt))
    return [(float(t[i]), float(dt[i]), int(round(dt[i] / med)) - 1)
            for i in np.flatnonzero(_rare_gaps(dt))]


def missing_before(time_s: np.ndarray | None, n: int) -> np.ndarray:
    """(n,) int: how many frames are missing right before each frame (the gaps of
    :func:`frame_gaps`; 0 elsewhere). ``time_s``: (n,) frame times, seconds, or None."""
    out = np.zeros(n, int)
    if time_s is None or len(time_s) != n:
        return out
    t = np.asarray(time_s, dtype=np.float64)
    for start, length, count in frame_gaps(t):
        out[np.isclose(t, start + length, rtol=0.0, atol=1e-9)] = count
    return out


def in_gaps(time_s: np.ndarray, grid: np.ndarray) -> np.ndarray:
    """(m,) bool: which of the times ``grid`` (s) fall inside a gap of :func:`frame_gaps` of
    the frame times ``time_s`` (s), strictly between the frames on either side."""
    out = np.zeros(len(grid), bool)
    for start, length, _ in frame_gaps(time_s):
        out |= (grid > start) & (grid < start + length)
    return out


def _rate_intervals(time_s: np.ndarray | None) -> np.ndarray | None:
    """The frame intervals (s) that make up the frame rate: those of the times in order (a
    step backwards, as when two frames' timestamps are swapped, then does not count), zero
    steps left out, and rare gaps (:data:`GAP_FACTOR`) left out. None with fewer than two."""
    steps = _ordered_intervals(time_s)
    if steps is None:
        return None
    dt = steps[1]
    return dt[~_rare_gaps(dt)]


def frame_rate(time_s: np.ndarray | None, nominal_fps: float) -> float:
    """The real mean frame rate (frames per second) of a clip, from its frame timestamps.

    Parameters
    ----------
    time_s : (n,) presentation times in seconds, as in the log's ``time_s``; or None.
    nominal_fps : the container's frame rate, Hz, used when the times cannot say (fewer than
        three distinct finite times), and kept when the times agree with it within 0.1 %.

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
    mean (standard deviation over mean, of the intervals :func:`frame_rate` uses).

    Parameters
    ----------
    time_s : (n,) frame times, seconds, or None.

    Returns
    -------
    bool : False for None or fewer than three usable times.
    """
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
    # lazy: scipy.interpolate is slow to import and only irregular clips need it.
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
    out = CubicSpline(t, v, axis=0)(grid)
    if len(t) > 2:
        # Across a gap (frames missing) the spline swings out between samples far apart; a
        # straight line claims no motion that was not measured.
        for i in np.flatnonzero(_rare_gaps(np.diff(t))):
            inside = (grid > t[i]) & (grid < t[i + 1])
            w = ((grid[inside] - t[i]) / (t[i + 1] - t[i])).reshape((-1,) + (1,) * (v.ndim - 1))
            out[inside] = (1.0 - w) * v[i] + w * v[i + 1]
    return grid, out


def filterable(n: int, fps: float, above_hz: float) -> bool:
    """True when :func:`shake_component` can filter ``n`` samples at ``fps`` (samples per
    second) with a cut-off of ``above_hz`` (Hz): at least 8 samples, and the cut-off between
    0 and the Nyquist frequency.

    Parameters
    ----------
    n : samples.
    fps : sampling rate, samples per second.
    above_hz : the cut-off, Hz.

    Returns
    -------
    bool
    """
    return n >= 8 and 0 < above_hz < 0.5 * fps


def shake_component(x: np.ndarray, fps: float, above_hz: float) -> np.ndarray | None:
    """The series minus its zero-phase 4th-order Butterworth low-pass at ``above_hz``.

    A straight line through the series is taken out first (its high-pass is zero anyway), so
    a steady pan does not leave filter start-up transients at the clip ends. Returns None when
    the cut-off is not below the Nyquist frequency or the series is too short to filter.

    Parameters
    ----------
    x : (n,) series, pixels or degrees, one value per sample.
    fps : sampling rate, samples per second.
    above_hz : the cut-off, Hz.

    Returns
    -------
    (n,) float64 shake in the unit of ``x``, or None.
    """
    x = np.asarray(x, dtype=np.float64)
    n = len(x)
    if not filterable(n, fps, above_hz):
        return None
    t = np.arange(n, dtype=np.float64)
    residual = x - np.polyval(np.polyfit(t, x, 1), t)
    # 3 × (2 sections + 1) is scipy.signal.sosfiltfilt's own least padding for this filter.
    pad = min(n - 1, max(3 * (2 * 2 + 1), int(round(3.0 * fps / above_hz))))
    return residual - zero_phase_lowpass(residual, above_hz, fps, order=4, padlen=pad)


def shake_filter_gain(f_hz: np.ndarray, above_hz: float) -> np.ndarray:
    """Power gain of :func:`shake_component` at ``f_hz``: the series minus its 4th-order
    Butterworth low-pass run forward and backward passes (r⁸ / (1 + r⁸))², r = f / above_hz.

    Parameters
    ----------
    f_hz : frequencies, Hz.
    above_hz : the shake cut-off, Hz.

    Returns
    -------
    array of the shape of ``f_hz``: power gains in [0, 1).
    """
    r8 = (np.asarray(f_hz, dtype=np.float64) / above_hz) ** 8
    return (r8 / (1.0 + r8)) ** 2
