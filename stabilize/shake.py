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

from .log import frame_centre, similarity_readout
from .path import accumulate, from_similarity, segments


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


def dominant_hz(shake: np.ndarray, fps: float, above_hz: float) -> float | None:
    """Frequency (Hz) of the largest peak of the shake's Welch power spectral density above
    ``above_hz``, refined by a parabola through the peak bin and its neighbours (log power)."""
    spec = shake_spectrum(shake, fps)
    if spec is None:
        return None
    f, pxx = spec
    band = f >= above_hz
    if not band.any() or not np.any(pxx[band] > 0):
        return None
    i = int(np.flatnonzero(band)[np.argmax(pxx[band])])
    return _refine_peak(f, pxx, i)


def _refine_peak(f: np.ndarray, pxx: np.ndarray, i: int) -> float:
    # A parabola through the log power of three bins places a peak between bins; common
    # practice in spectral peak picking.
    if 0 < i < len(f) - 1 and np.all(pxx[i - 1:i + 2] > 0):
        a, b, c = np.log(pxx[i - 1:i + 2])
        denom = a - 2 * b + c
        offset = 0.5 * (a - c) / denom if denom < 0 else 0.0
        return float(f[i] + np.clip(offset, -0.5, 0.5) * (f[1] - f[0]))
    return float(f[i])


def spectrum_peaks(f: np.ndarray, pxx: np.ndarray, above_hz: float,
                   count: int = 3) -> list[tuple[float, float]]:
    """The ``count`` most prominent peaks of a power spectral density above ``above_hz``.

    Parameters
    ----------
    f, pxx : frequencies (Hz) and density (unit² per Hz), as from :func:`shake_spectrum`.
    above_hz : peaks below this frequency are left out (motion there is not shake).
    count : at most this many peaks.

    Returns
    -------
    list of (frequency in Hz, density) pairs, strongest first. A peak must stand out by at
    least a tenth of the largest density (a rule of thumb of this project) so that the
    ripple of the estimate is not labelled.
    """
    band = f >= above_hz
    if not band.any() or not np.any(pxx[band] > 0):
        return []
    top = float(pxx[band].max())
    idx, props = _signal().find_peaks(pxx, prominence=0.1 * top)
    keep = [(int(i), float(p)) for i, p in zip(idx, props["prominences"], strict=True)
            if f[i] >= above_hz]
    # A peak on the first or last bin is not found by find_peaks; the largest bin always is.
    best = int(np.flatnonzero(band)[np.argmax(pxx[band])])
    if best not in {i for i, _ in keep}:
        keep.append((best, top))
    keep.sort(key=lambda ip: -pxx[ip[0]])
    return [(_refine_peak(f, pxx, i), float(pxx[i])) for i, _ in keep[:count]]


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
                 width: int, fov_deg: float | None, suffix: str = "",
                 bands: bool = False) -> dict:
    """Shake figures of a path readout (n, 3+) of x, y (pixels) and angle (degrees).

    Per axis: RMS and peak-to-peak of the shake (x and y also in degrees when ``fov_deg`` is
    known, else None) and the dominant frequency (Hz). With ``bands``, also the shake power
    per band of :data:`SHAKE_BANDS_HZ` (keys from :func:`band_key`) and the frequency
    resolution of the spectrum, ``spectrum_resolution_hz``. Keys end with ``suffix``.
    """
    out: dict = {}
    n_total = 0
    for j, axis in enumerate(AXES):
        shake = _segmented_shake(path_xyd[:, j], cuts, fps, above_hz)
        unit = axis_unit(axis)
        rms = None if shake is None else float(np.sqrt(np.mean(shake**2)))
        p2p = None if shake is None else float(np.ptp(shake))
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


def axis_shake(path_xyd: np.ndarray, cuts: np.ndarray, *, fps: float,
               above_hz: float) -> dict[str, np.ndarray | None]:
    """The shake series of each axis (``x``, ``y`` pixels, ``rot`` degrees) of a path readout,
    per shot between scene cuts and joined; None for an axis too short to filter."""
    return {axis: _segmented_shake(path_xyd[:, j], cuts, fps, above_hz)
            for j, axis in enumerate(AXES)}


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
    output_motion_readout: np.ndarray | None = None,
) -> dict:
    """The summary block of the motion log's JSON (see the log format documentation).

    ``output_motion_readout`` (n, 3): the written video's inter-frame motion as measured on
    its frames (dx, dy pixels, degrees; nan where not measured; see
    :mod:`stabilize.residual`). When given, the ``_out`` figures describe it, and the figures
    of the plan (the smoothed path and the corrections) move to ``_planned`` keys; the
    ``_out`` figures are null when too little of the output could be measured.
    """
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
    n = max(1, len(status))
    # The shares say how far the figures can be trusted: weak frames are measured poorly,
    # failed frames carry a stand-in motion interpolated from their neighbours.
    summary["frames_weak_share"] = summary["frames_weak"] / n
    summary["frames_failed_share"] = summary["frames_failed"] / n
    summary.update(path_figures(similarity_readout(path, centre), cuts, fps=fps,
                                above_hz=above_hz, width=width, fov_deg=fov_deg, bands=True))
    has_out = corrections is not None
    summary.update(stability_figures(motion, "_in" if has_out else ""))
    if has_out:
        measured = output_motion_readout is not None
        planned = "_planned" if measured else "_out"
        out_motion = similarity_readout(output_motion(matrices, corrections), centre)
        summary.update(stability_figures(out_motion, planned))
        summary.update(correction_figures(corrections))
        if smooth_readout is not None:
            summary.update(path_figures(smooth_readout, cuts, fps=fps, above_hz=above_hz,
                                        width=width, fov_deg=fov_deg, suffix=planned))
        if measured:
            summary.update(_measured_output_figures(
                output_motion_readout, cuts, fps=fps, above_hz=above_hz, width=width,
                height=height, fov_deg=fov_deg))
    return summary


def _measured_output_figures(readout: np.ndarray, cuts: np.ndarray, *, fps: float,
                             above_hz: float, width: int, height: int,
                             fov_deg: float | None) -> dict:
    """The ``_out`` shake and stability figures of the output's measured motion (all null
    when too little of it was measured)."""
    filled = _filled_motion(readout, cuts)
    dummy = np.zeros((len(cuts), 3))
    if filled is None:
        figs = path_figures(dummy, cuts, fps=fps, above_hz=above_hz, width=width,
                            fov_deg=fov_deg, suffix="_out")
        figs.update(stability_figures(dummy, "_out"))
        return {k: None for k in figs}
    figs = path_figures(readout_path(filled, cuts, width, height), cuts, fps=fps,
                        above_hz=above_hz, width=width, fov_deg=fov_deg, suffix="_out")
    figs.update(stability_figures(filled, "_out"))
    return figs


#: Shares of weak-or-failed frames above which the figures are called rough, and unreliable.
#: Rules of thumb of this project, not from the literature.
ROUGH_SHARE, UNRELIABLE_SHARE = 0.10, 0.30


def uncertainty_notes(summary: dict) -> list[str]:
    """Plain-language notes on how far one clip's figures can be trusted.

    Parameters
    ----------
    summary : a summary as from :func:`summarise`.

    Returns
    -------
    list of one-sentence notes (possibly empty): many weak or failed frames, scene cuts, a
    shake peak close to the Nyquist frequency (possibly aliased faster vibration), a clip too
    short to resolve frequency finely, no field of view for figures in degrees.
    """
    notes: list[str] = []
    n = max(1, int(summary.get("frames") or 0))
    weak, failed = int(summary.get("frames_weak") or 0), int(summary.get("frames_failed") or 0)
    share = (weak + failed) / n
    if share > UNRELIABLE_SHARE:
        notes.append(f"{share:.0%} of frames were weak or failed: these figures are not "
                     "reliable; check the per-frame strip and the original footage.")
    elif share > ROUGH_SHARE:
        notes.append(f"{share:.0%} of frames were weak or failed: treat these figures as "
                     "rough estimates.")
    if failed:
        notes.append(f"{failed} frame(s) had no trustworthy motion fit; their motion is a "
                     "stand-in interpolated from the neighbouring frames.")
    if summary.get("cuts"):
        notes.append(f"{summary['cuts']} scene cut(s): the figures are computed per shot and "
                     "pooled; motion across a cut is not counted.")
    nyquist = summary.get("nyquist_hz")
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
