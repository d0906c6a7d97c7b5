"""A clip's rolling shutter: its readout time, vibration figures and within-frame motion.

The analysis measures, for every fitted frame ``t``, the shift of each band of rows since
frame ``t − 1`` (:func:`stabilize.row_bands.track_band_shifts`). With a rolling shutter each
band was exposed at its own instant, ``t / fps + row · readout / height``, so these samples
follow the camera far above the frame rate. This stage turns them into

* the readout time: as given, or estimated from the footage
  (:func:`stabilize.vibration.estimate_readout`; calibration-free, after Grundmann, Kwatra,
  Castro and Essa, "Calibration-free rolling shutter removal", ICCP 2012), with its
  one-sigma uncertainty;
* the dominant vibration with its false-alarm probability and the blind spots near
  multiples of the frame rate (:func:`stabilize.vibration.estimate_vibration`);
* each frame's within-frame displacement ``w_t(y)`` relative to its middle row
  (:func:`stabilize.row_motion.within_frame_motion`), which the render undoes.

A readout of 0 (a global shutter, or one the footage does not reveal) gives no vibration and
no within-frame motion. Frame instants are taken as ``t / fps`` at the nominal rate.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .row_bands import band_centres
from .row_motion import RowMotion, within_frame_motion
from .vibration import Vibration, estimate_readout, estimate_vibration

__all__ = [
    "MIN_VIBRATION_PX",
    "READOUT_FRAMES",
    "READOUT_GAIN",
    "RollingShutter",
    "analyse_rolling",
    "band_samples",
    "rolling_figures",
    "within_frame",
]

#: Smallest vibration reported (px, zero to peak): below a twentieth of a pixel the band
#: shifts' own structure (tracking noise smoothed across neighbouring bands, compression)
#: passes the white-noise test of :mod:`stabilize.vibration` on global-shutter footage
#: (0.003 px at 75 Hz measured on a drawn one). This project's choice.
MIN_VIBRATION_PX = 0.05

#: An estimated readout is taken only when timing the band samples with it leaves at most
#: this share of the residual RMS that a global shutter (readout 0) leaves: the search's
#: own test (a parabola through its best points) also finds a minimum in the shallow
#: residual of global-shutter footage (1.7 % below readout 0 on a drawn clip, against 80 %
#: on a rolling-shutter one). This project's choice.
READOUT_GAIN = 0.8

#: The readout is estimated from at most this many frames from the middle of the clip (its
#: search refits the whole sample set for each readout tried, so its cost grows with the
#: clip; 5 s at 30 fps hold 3600 band samples, ample for a millisecond). This project's choice.
READOUT_FRAMES = 150
#: The vibration spectrum is taken over at most this many frames from the middle of the
#: clip (20 s at 30 fps): its cost grows with samples times frequencies, and the frequency
#: step with the span, so a whole long clip would take minutes and gigabytes. Vibration is
#: a steady property of a flight's airframe, so a middle stretch stands for the clip (this
#: project's choice; the summary states the span in ``vibration_span_s``).
VIBRATION_FRAMES = 600


@dataclass(frozen=True)
class RollingShutter:
    """The rolling-shutter analysis of a clip.

    ``readout_s`` the readout used (s; 0: none); ``readout_sigma_s`` its one-sigma
    uncertainty when estimated (NaN when given); ``readout_source`` ``"given"``,
    ``"estimated"`` or ``"not_found"`` (asked to estimate, but the footage showed no readout:
    then 0 is used); ``band_shift_px`` (n, bands, 2) px and ``band_support`` (n, bands) as
    the analysis measured them (NaN / 0 where a frame has none); ``width``, ``height`` px;
    ``fps`` the nominal frame rate (Hz); ``vibration`` the dominant vibration (None with no
    readout).
    """

    readout_s: float
    readout_sigma_s: float
    readout_source: str
    band_shift_px: np.ndarray
    band_support: np.ndarray
    width: int
    height: int
    fps: float
    vibration: Vibration | None

    @property
    def n_bands(self) -> int:
        """Bands per frame."""
        return int(self.band_shift_px.shape[1])

    @property
    def band_s(self) -> float:
        """Exposure-time span of one band (s): band height × readout / height."""
        return self.readout_s / self.n_bands

    @property
    def rows_px(self) -> np.ndarray:
        """(bands,) the band centre rows (px)."""
        return band_centres(self.height, self.n_bands)


def band_samples(band_shift_px: np.ndarray, band_support: np.ndarray,
                 height: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The measured band samples of a clip, flattened.

    Parameters
    ----------
    band_shift_px : (n, bands, 2) band shifts (px), NaN where not measured.
    band_support : (n, bands) their support.
    height : frame height (px).

    Returns
    -------
    ``(frame, row_px, shift_px, support)``: (m,) int, (m,) px, (m, 2) px, (m,) of the
    samples with a finite shift and positive support.
    """
    s = np.asarray(band_shift_px, dtype=np.float64)
    w = np.asarray(band_support, dtype=np.float64)
    n, nb = s.shape[:2]
    frame = np.repeat(np.arange(n), nb)
    rows = np.tile(band_centres(height, nb), n)
    d = s.reshape(-1, 2)
    w = w.reshape(-1)
    ok = np.isfinite(d).all(axis=1) & np.isfinite(w) & (w > 0)
    return frame[ok], rows[ok], d[ok], w[ok]


def analyse_rolling(band_shift_px: np.ndarray, band_support: np.ndarray, *, fps: float,
                    width: int, height: int, readout_ms: float | str,
                    fov_deg: float | None = None) -> RollingShutter:
    """Readout and vibration of a clip from its row-band shifts.

    Parameters
    ----------
    band_shift_px : (n, bands, 2) band shifts from the previous frame (px), NaN where none.
    band_support : (n, bands) the evidence behind each (summed track weights).
    fps : nominal frame rate (Hz).
    width, height : frame size (px).
    readout_ms : the readout (ms) as the settings give it: a number, or ``"auto"`` to
        estimate it.
    fov_deg : horizontal field of view (degrees), for the vibration amplitude as an angle.

    Returns
    -------
    :class:`RollingShutter`.
    """
    frame, rows, d, _ = band_samples(band_shift_px, band_support, height)
    nb = int(np.shape(band_shift_px)[1])
    nan = float("nan")
    if readout_ms == "auto":
        readout, sigma, source = 0.0, nan, "not_found"
        if len(np.unique(frame)) >= 8:
            take = _middle(frame, READOUT_FRAMES)
            est = estimate_readout(frame[take], rows[take], height, d[take], fps,
                                   band_s_per_readout=1.0 / nb)
            explains = (est.grid_s[0] == 0
                        and est.score.min() <= READOUT_GAIN * est.score[0])
            if est.found and est.readout_s > 0 and explains:
                readout, sigma, source = est.readout_s, est.sigma_s, "estimated"
    else:
        readout, sigma, source = float(readout_ms) / 1000.0, nan, "given"
    vib = None
    if readout > 0 and len(frame):
        take = _middle(frame, VIBRATION_FRAMES)
        times = frame[take] / fps + rows[take] * (readout / height)
        vib = estimate_vibration(times, d[take], fps, frame_index=frame[take],
                                 band_s=readout / nb, width=width, hfov_deg=fov_deg)
    return RollingShutter(readout, sigma, source, np.asarray(band_shift_px, dtype=np.float64),
                          np.asarray(band_support, dtype=np.float64), int(width), int(height),
                          float(fps), vib)


def _middle(frame: np.ndarray, most: int) -> np.ndarray:
    """(m,) bool: the samples of at most ``most`` frames from the middle of the clip."""
    lo, hi = int(frame.min()), int(frame.max())
    if hi - lo + 1 <= most:
        return np.ones(len(frame), bool)
    start = (lo + hi + 1 - most) // 2
    return (frame >= start) & (frame < start + most)


def within_frame(r: RollingShutter) -> RowMotion | None:
    """Every frame's within-frame displacement relative to its middle row (None when the
    readout is 0 or nothing was measured)."""
    frame, rows, d, w = band_samples(r.band_shift_px, r.band_support, r.height)
    if r.readout_s <= 0 or not len(frame):
        return None
    n = len(r.band_shift_px)
    return within_frame_motion(frame, rows, d, fps=r.fps, height=r.height,
                               readout_s=r.readout_s, band_s=r.band_s, weight=w,
                               frames=np.arange(n))


def _num(v: float, digits: int) -> float | None:
    return round(float(v), digits) if np.isfinite(v) else None


def rolling_figures(r: RollingShutter) -> dict[str, Any]:
    """The log summary's rolling-shutter keys (see docs/motion-log.md, "Rolling shutter").

    Returns
    -------
    dict: ``readout_ms``, ``readout_ms_sigma``, ``readout_source``, ``row_bands``,
    ``vibration_found``, ``vibration_hz``, ``vibration_px``, ``vibration_x_px``,
    ``vibration_y_px``, ``vibration_deg``, ``vibration_false_alarm``,
    ``vibration_searched_hz`` ([lo, hi]), ``vibration_blind_hz`` ([[lo, hi], …]) and
    ``vibration_span_s`` (the stretch of the clip the spectrum covers, s). A
    peak that passes the false-alarm test but is smaller than :data:`MIN_VIBRATION_PX` is
    not reported as a vibration.
    """
    v = r.vibration
    found = bool(v is not None and v.found and v.amplitude_px >= MIN_VIBRATION_PX)
    spec = None if v is None else v.spectrum
    searched = None
    if spec is not None and len(spec.freqs_hz):
        searched = [_num(spec.freqs_hz[0], 2), _num(spec.freqs_hz[-1], 2)]
    return {
        "readout_ms": _num(1000.0 * r.readout_s, 3),
        "readout_ms_sigma": _num(1000.0 * r.readout_sigma_s, 3),
        "readout_source": r.readout_source,
        "row_bands": r.n_bands,
        "vibration_found": found,
        "vibration_hz": _num(v.frequency_hz, 3) if found else None,
        "vibration_px": _num(v.amplitude_px, 4) if found else None,
        "vibration_x_px": _num(v.axis_px[0], 4) if found else None,
        "vibration_y_px": _num(v.axis_px[1], 4) if found else None,
        "vibration_deg": _num(v.amplitude_deg, 5) if found else None,
        "vibration_false_alarm": None if v is None else float(f"{v.false_alarm:.3g}"),
        "vibration_searched_hz": searched,
        "vibration_blind_hz": [] if spec is None else [[round(a, 2), round(b, 2)]
                                                       for a, b in spec.blind_hz],
        "vibration_span_s": None if spec is None else _num(spec.duration_s, 2),
    }
