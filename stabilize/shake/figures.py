"""Shake figures of a camera path: per-shot shake series, RMS, peak-to-peak, peaks and bands.

A path is read out as x, y (pixels) and angle (degrees) per frame; its shake is taken per
shot between scene cuts (:func:`stabilize.shake.timebase.shake_component`), after even
resampling when the frame times are irregular.
"""

from __future__ import annotations

import math

import numpy as np

from ..geometry import frame_centre, from_similarity, similarity_readout
from ..raw_path import accumulate, segments
from .spectra import (
    AXES,
    SHAKE_BANDS_HZ,
    axis_unit,
    band_key,
    band_powers,
    dominant_hz,
    welch_segment,
)
from .timebase import filterable, in_gaps, resample_even, shake_component

__all__ = [
    "MIN_MEASURED_SHARE",
    "OUTPUT_MIN_MEASURED_SHARE",
    "axis_shake",
    "path_figures",
    "peak_to_peak",
    "readout_path",
    "shake_times",
]


def _pixels_to_deg(px: float | None, width: int, fov_deg: float | None) -> float | None:
    if px is None or fov_deg is None:
        return None
    f = (width / 2.0) / math.tan(math.radians(fov_deg) / 2.0)
    return math.degrees(math.atan(px / f))


def _shots(values: np.ndarray, cuts: np.ndarray, fps: float, above_hz: float,
           time_s: np.ndarray | None) -> list[tuple[np.ndarray | None, np.ndarray]]:
    """Per shot between scene cuts: (sample times or None, shake series). With ``time_s``
    each shot is first resampled onto an even grid at ``fps`` (:func:`resample_even`)."""
    return [(t, part) for t, part, _ in _shots_measured(values, cuts, fps, above_hz, time_s)]


def _shots_measured(values: np.ndarray, cuts: np.ndarray, fps: float, above_hz: float,
                    time_s: np.ndarray | None
                    ) -> list[tuple[np.ndarray | None, np.ndarray, np.ndarray]]:
    """:func:`_shots` with, per shot, which samples were measured ((m,) bool): all but
    those of the even grid inside a gap of missing frames (:func:`in_gaps`), which the
    resampling only bridges."""
    out = []
    for seg in segments(cuts):
        t, v = None, values[seg]
        if time_s is not None:
            if seg.stop - seg.start < 2:
                continue
            t, v = resample_even(time_s[seg], v, fps)
        part = shake_component(v, fps, above_hz)
        if part is not None:
            measured = np.ones(len(part), bool) if t is None else ~in_gaps(time_s[seg], t)
            out.append((t, part, measured))
    return out


def _segmented_shake(values: np.ndarray, cuts: np.ndarray, fps: float, above_hz: float,
                     time_s: np.ndarray | None = None) -> np.ndarray | None:
    parts = [s for _, s in _shots(values, cuts, fps, above_hz, time_s)]
    return np.concatenate(parts) if parts else None


def peak_to_peak(shots: list[np.ndarray], fps: float, above_hz: float) -> float | None:
    """Largest minus smallest shake over the shots, leaving out 1 / ``above_hz`` seconds at
    each end of every shot at least four times that long: there the zero-phase filter runs
    on its padding (an odd extension of the shot), and its start-up and run-out would count
    as shake. Shorter shots count whole. None when there is no shot.

    Parameters
    ----------
    shots : shake series per shot, pixels or degrees.
    fps : sampling rate, samples per second.
    above_hz : the shake cut-off, Hz.

    Returns
    -------
    float or None : in the unit of the series.
    """
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

    Parameters
    ----------
    path_xyd : (n, 3+) path readout: x, y pixels, angle degrees.
    cuts : (n,) bool, scene cuts.
    fps : real mean frame rate, frames per second.
    above_hz : the shake cut-off, Hz.
    width : frame width, pixels (for degrees).
    fov_deg : horizontal field of view, degrees, or None.
    suffix : appended to every key.
    bands : also the band powers and the spectrum resolution.
    time_s : (n,) frame times, seconds, only when irregular.

    Returns
    -------
    dict : summary key → float or None.
    """
    out: dict = {}
    n_total = 0
    for j, axis in enumerate(AXES):
        parts = _shots_measured(path_xyd[:, j], cuts, fps, above_hz, time_s)
        shake = np.concatenate([s for _, s, _ in parts]) if parts else None
        # The size of the shake is that of the samples measured: a gap of missing frames
        # is bridged for the filter and the spectrum, but holds no shake anybody saw.
        shots = [s[m] for _, s, m in parts]
        unit = axis_unit(axis)
        rms = None if shake is None else float(np.sqrt(np.mean(np.concatenate(shots)**2)))
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
    :func:`path_figures`, so the series no longer has one value per frame.

    Parameters
    ----------
    path_xyd : (n, 3+) path readout: x, y pixels, angle degrees.
    cuts : (n,) bool, scene cuts.
    fps : real mean frame rate, frames per second.
    above_hz : the shake cut-off, Hz.
    time_s : (n,) frame times, seconds, only when irregular.

    Returns
    -------
    dict : ``x``, ``y``, ``rot`` → shake series or None.
    """
    return {axis: _segmented_shake(path_xyd[:, j], cuts, fps, above_hz, time_s)
            for j, axis in enumerate(AXES)}


def shake_times(cuts: np.ndarray, time_s: np.ndarray, *, fps: float, above_hz: float,
                resampled: bool) -> np.ndarray | None:
    """The times (s) of the samples of :func:`axis_shake`'s series: the frame times of the
    shots long enough to filter, or with ``resampled`` their even grids.

    Parameters
    ----------
    cuts : (n,) bool, scene cuts.
    time_s : (n,) frame times, seconds.
    fps : real mean frame rate, frames per second.
    above_hz : the shake cut-off, Hz.
    resampled : whether :func:`axis_shake` resampled (irregular times).

    Returns
    -------
    (m,) times, seconds, or None when no shot can be filtered.
    """
    t = np.asarray(time_s, dtype=np.float64)
    if resampled:
        parts = [g for g, _ in _shots(t, cuts, fps, above_hz, t)]
    else:
        parts = [t[seg] for seg in segments(cuts)
                 if filterable(seg.stop - seg.start, fps, above_hz)]
    return np.concatenate(parts) if parts else None


#: Below this share of measured frame pairs, figures of a measured motion are not given.
MIN_MEASURED_SHARE = 0.5
#: ... and the figures of the written video (the check of the output), which vouch for it,
#: need this share: its unmeasured pairs are bridged by a straight line, which hides any
#: jump there. A drawn flat pattern whose output could be measured on 76 % of its pairs read
#: 0.08 px of shake after steadying while it held a 6.7-px jump (true 0.69 px RMS) in an
#: unmeasured stretch; the real clips of tests/real are measured on 94–100 % of theirs
#: (measured). This project's choice. Pairs the output's own corners could not measure may
#: be known from the source's measurement carried through the corrections
#: (:func:`stabilize.steadiness.with_carried`); they count here.
OUTPUT_MIN_MEASURED_SHARE = 0.9


def readout_path(readout: np.ndarray, cuts: np.ndarray, width: int,
                 height: int, min_share: float = MIN_MEASURED_SHARE) -> np.ndarray | None:
    """The path (n, 3) of x, y (pixels) and degrees accumulated from per-frame motion read as
    similarities about the frame centre ((n, 3) dx, dy pixels, degrees; nan where not
    measured), per shot between ``cuts``, as the raw path is from ``H_t``. Gaps are filled by
    linear interpolation over the frame index; None when fewer than ``min_share`` of the
    frame pairs were measured.

    Parameters
    ----------
    readout : (n, 3) per-frame dx, dy (pixels) and angle (degrees); nan where not measured.
    cuts : (n,) bool, scene cuts.
    width, height : frame size, pixels.
    min_share : least share (0–1) of measured pairs (:data:`MIN_MEASURED_SHARE`; the
        output's check needs :data:`OUTPUT_MIN_MEASURED_SHARE`).

    Returns
    -------
    (n, 3) x, y pixels and degrees, or None.
    """
    filled = filled_motion(readout, cuts, min_share)
    if filled is None:
        return None
    centre = frame_centre(width, height)
    q = np.column_stack([filled[:, 0], filled[:, 1], np.radians(filled[:, 2]),
                         np.zeros(len(filled))])
    return similarity_readout(accumulate(from_similarity(q, centre), cuts), centre)[:, :3]


def filled_motion(readout: np.ndarray, cuts: np.ndarray,
                  min_share: float = MIN_MEASURED_SHARE) -> np.ndarray | None:
    """Measured per-frame motion with its gaps interpolated; the first frame of each shot
    (no predecessor) holds no motion. None when too little was measured.

    Parameters
    ----------
    readout : (n, 3+) per-frame dx, dy (pixels) and angle (degrees); nan where not measured.
    cuts : (n,) bool, scene cuts.
    min_share : least share (0–1) of the pairs measured.

    Returns
    -------
    (n, 3) float64, or None when under ``min_share`` of the pairs were measured.
    """
    m = np.array(readout, dtype=np.float64)[:, :3]
    start = np.asarray(cuts, bool).copy()
    if len(start):
        start[0] = True
    m[start] = 0.0
    ok = np.isfinite(m).all(axis=1)
    pairs = ~start
    if not pairs.any() or np.mean(ok[pairs]) < min_share:
        return None
    t = np.arange(len(m))
    for j in range(3):
        m[~ok, j] = np.interp(t[~ok], t[ok], m[ok, j])
    return m
