"""Per-row-band translations between consecutive frames, for rolling-shutter timing.

With a rolling shutter each band of rows is exposed at its own instant, so the shift of the
band around row ``y`` between frames ``t − 1`` and ``t`` samples the camera's displacement over
one frame interval at that instant (see :mod:`stabilize.synthetic_rolling` for the timing and
:mod:`stabilize.vibration` for the spectrum). A per-band motion in place of one motion per frame
follows Grundmann, Kwatra, Castro and Essa, "Calibration-free rolling shutter removal", ICCP
2012 (there a mixture of per-band homographies; here a translation per band, the part that
carries vibration), and the row-timed camera of Ringaby and Forssén, "Efficient video
rectification and stabilisation for cell-phones", IJCV 2012.

Two measurements are offered:

* :func:`fit_band_shifts` from tracked point pairs: a band_tie-penalised, robust
  (Huber, by iteratively reweighted least squares) fit of one translation per band, so a band
  with few tracks borrows from its neighbours.
* :func:`band_phase_shifts` directly from two grey frames by phase correlation of each band
  (Kuglin and Hines, "The phase correlation image alignment method", IEEE Conf. Cybernetics
  and Society, 1975): a check on the tracks, and a way to measure row spread on output video
  (:func:`within_frame_spread`).

Pixels are full-resolution, (x, y) with y = row, origin at the centre of the top-left pixel
(:mod:`stabilize.geometry`). Row ``y`` of frame ``t`` is exposed at
``frame_time_s + y · readout_s / height``.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

__all__ = [
    "BandSettings",
    "BandShifts",
    "band_centres",
    "band_phase_shifts",
    "exposure_times",
    "fit_band_shifts",
    "track_band_shifts",
    "within_frame_spread",
    "BAND_REACH",
]

#: The tracks a band fit takes, beyond those a frame's consensus kept as the scene: pairs
#: within this many consensus thresholds of the frame's own fit. A rolling shutter moves rows
#: a few pixels away from the one motion a frame is fitted with, so the consensus inliers
#: alone would keep only the rows that happen to agree with it; objects the consensus set
#: aside stay out. This project's choice.
BAND_REACH = 4.0


@dataclass(frozen=True)
class BandSettings:
    """Settings of the per-band fit.

    ``n_bands``: bands of equal height over the frame; ``band_tie``: weight of the penalty
    on differences between neighbouring bands, in units of one full-weight track (a band with
    far fewer tracks than this leans on its neighbours; one with many hardly does);
    ``huber_px``: residual (px) beyond which a track's weight falls as 1/residual (Huber 1964,
    "Robust estimation of a location parameter", Ann. Math. Statist.); ``iterations``:
    reweighting rounds. Values are this project's own choices (common practice for the
    Huber threshold: about the tracking noise).
    """

    n_bands: int = 24
    band_tie: float = 2.0
    huber_px: float = 0.3
    iterations: int = 6


@dataclass(frozen=True)
class BandShifts:
    """Band translations between frame ``t − 1`` and frame ``t``.

    ``row_px`` (n_bands,) band centre rows in frame ``t``; ``shift_px`` (n_bands, 2) the
    band's displacement (dx, dy) px from frame ``t − 1`` to ``t`` (NaN when nothing was
    measured); ``support`` (n_bands,) the evidence behind each band (summed track weights, or
    the phase-correlation response 0–1); ``time_s`` (n_bands,) the band centre's exposure
    instant in frame ``t``.
    """

    row_px: np.ndarray
    shift_px: np.ndarray
    support: np.ndarray
    time_s: np.ndarray


def band_centres(height: int, n_bands: int) -> np.ndarray:
    """Centre rows (n_bands,) px of ``n_bands`` equal bands over ``height`` rows."""
    edges = np.linspace(-0.5, height - 0.5, n_bands + 1)
    return 0.5 * (edges[:-1] + edges[1:])


def exposure_times(frame_time_s: np.ndarray | float, row_px: np.ndarray, height: int,
                   readout_s: float) -> np.ndarray:
    """Exposure instant (s) of rows ``row_px`` in frames starting at ``frame_time_s``.

    ``frame_time_s + row_px · readout_s / height``, broadcast over both arguments.
    """
    return np.asarray(frame_time_s, dtype=np.float64) + np.asarray(row_px) * (readout_s / height)


def _hat_weights(rows: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray,
                                                                  np.ndarray]:
    """Linear interpolation between band centres: lower band index (k,) and the two weights."""
    nb = len(centres)
    pos = np.interp(rows, centres, np.arange(nb, dtype=np.float64))
    i0 = np.clip(np.floor(pos).astype(int), 0, max(nb - 2, 0))
    a1 = np.clip(pos - i0, 0.0, 1.0) if nb > 1 else np.zeros_like(pos)
    return i0, 1.0 - a1, a1


def fit_band_shifts(src: np.ndarray, dst: np.ndarray, height: int, *,
                    inliers: np.ndarray | None = None, frame_time_s: float = 0.0,
                    readout_s: float = 0.0,
                    settings: BandSettings | None = None) -> BandShifts:
    """Fit one translation per band of rows to tracked pairs from frame ``t − 1`` to ``t``.

    The band shifts ``s_b`` (2,) are the knots of a piecewise-linear function of the row;
    they minimise ``Σ_i w_i |dst_i − src_i − s(y_i)|² + λ Σ_b |s_{b+1} − s_b|²`` with ``y_i``
    the row of ``dst_i``, ``λ = settings.band_tie`` and Huber weights ``w_i`` refreshed by
    iteratively reweighted least squares.

    Parameters
    ----------
    src, dst : (k, 2) matched points in frames ``t − 1`` and ``t``, full-resolution px.
    height : frame height (px).
    inliers : (k,) bool, the pairs that moved with the camera (e.g. from the consensus);
        all pairs when None.
    frame_time_s : start of frame ``t``'s readout (s).
    readout_s : first-to-last-row readout time (s).
    settings : :class:`BandSettings`.

    Returns
    -------
    :class:`BandShifts`; all-NaN shifts when no pair is usable.
    """
    s = settings or BandSettings()
    nb = s.n_bands
    centres = band_centres(height, nb)
    times = exposure_times(frame_time_s, centres, height, readout_s)
    src = np.asarray(src, dtype=np.float64).reshape(-1, 2)
    dst = np.asarray(dst, dtype=np.float64).reshape(-1, 2)
    use = np.isfinite(src).all(axis=1) & np.isfinite(dst).all(axis=1)
    if inliers is not None:
        use &= np.asarray(inliers, dtype=bool)
    if not use.any():
        return BandShifts(centres, np.full((nb, 2), np.nan), np.zeros(nb), times)
    u = dst[use] - src[use]
    i0, a0, a1 = _hat_weights(dst[use, 1], centres)
    i1 = np.minimum(i0 + 1, nb - 1)
    # Second-difference-free band_tie: λ·DᵀD with D the first difference between bands.
    pen = np.zeros((nb, nb))
    if nb > 1:
        d = np.diff(np.eye(nb), axis=0)
        pen = s.band_tie * d.T @ d
    # A whisper of ridge towards the weighted mean keeps the system solvable with empty ends.
    ridge = 1e-6 * np.eye(nb)
    w = np.ones(len(u))
    shift = np.zeros((nb, 2))
    for _ in range(max(1, s.iterations)):
        normal = np.zeros(nb * nb)
        for ia, wa in ((i0, a0), (i1, a1)):
            for ib, wb in ((i0, a0), (i1, a1)):
                normal += np.bincount(ia * nb + ib, weights=w * wa * wb, minlength=nb * nb)
        rhs = np.stack([np.bincount(i0, weights=w * a0 * u[:, c], minlength=nb)
                        + np.bincount(i1, weights=w * a1 * u[:, c], minlength=nb)
                        for c in range(2)], axis=1)
        mean = (w[:, None] * u).sum(axis=0) / w.sum()
        shift = np.linalg.solve(normal.reshape(nb, nb) + pen + ridge, rhs + 1e-6 * mean)
        model = a0[:, None] * shift[i0] + a1[:, None] * shift[i1]
        r = np.linalg.norm(u - model, axis=1)
        w = np.where(r <= s.huber_px, 1.0, s.huber_px / np.maximum(r, 1e-12))
    support = np.bincount(i0, weights=w * a0, minlength=nb) + np.bincount(i1, weights=w * a1,
                                                                         minlength=nb)
    return BandShifts(centres, shift, support, times)


def band_phase_shifts(prev: np.ndarray, cur: np.ndarray, *, n_bands: int = 24,
                      window_rows: int | None = None, frame_time_s: float = 0.0,
                      readout_s: float = 0.0) -> BandShifts:
    """Band translations from frame ``t − 1`` (``prev``) to ``t`` (``cur``) by phase correlation.

    Each band is measured in a strip of ``window_rows`` rows (default: twice the band height,
    at least 32) centred on it, moved inwards at the top and bottom so every strip has the
    same size; the strip's centre row is the band's row. A Hann window tapers the strip.

    Parameters
    ----------
    prev, cur : (h, w) grey frames (uint8 or float), full resolution.
    n_bands : number of bands.
    window_rows : strip height (px).
    frame_time_s, readout_s : as in :func:`fit_band_shifts`.

    Returns
    -------
    :class:`BandShifts` with the phase-correlation response (0–1) as ``support``.
    """
    h, w = prev.shape[:2]
    band_h = h / n_bands
    win = int(window_rows or max(32, round(2 * band_h)))
    win = min(win, h)
    starts = np.clip(np.rint(band_centres(h, n_bands) - (win - 1) / 2.0).astype(int), 0, h - win)
    rows = starts + (win - 1) / 2.0
    a = np.asarray(prev, dtype=np.float32)
    b = np.asarray(cur, dtype=np.float32)
    hann = cv2.createHanningWindow((w, win), cv2.CV_32F)
    shift = np.empty((n_bands, 2))
    resp = np.empty(n_bands)
    for k, y0 in enumerate(starts):
        (dx, dy), r = cv2.phaseCorrelate(a[y0:y0 + win], b[y0:y0 + win], hann)
        shift[k] = dx, dy
        resp[k] = r
    return BandShifts(rows, shift, resp, exposure_times(frame_time_s, rows, h, readout_s))


def within_frame_spread(shift_px: np.ndarray) -> np.ndarray:
    """Within-frame row spread: RMS (px) of band shifts about each frame's mean shift.

    Parameters
    ----------
    shift_px : (n_frames, n_bands, 2) band shifts (px); NaN bands are skipped.

    Returns
    -------
    (n_frames,) RMS over bands of |s_b − mean_b s_b| in px (NaN for a frame with no band).
    A global-shutter camera on a rigid, distant scene gives 0 up to measurement noise.
    """
    s = np.asarray(shift_px, dtype=np.float64)
    ok = np.isfinite(s).all(axis=2)
    n = ok.sum(axis=1)
    filled = np.where(ok[..., None], s, 0.0)
    mean = filled.sum(axis=1) / np.maximum(n, 1)[:, None]
    dev = np.where(ok, ((filled - mean[:, None, :]) ** 2).sum(axis=2), 0.0)
    with np.errstate(invalid="ignore"):
        return np.where(n > 0, np.sqrt(dev.sum(axis=1) / np.maximum(n, 1)), np.nan)


def track_band_shifts(src: np.ndarray, dst: np.ndarray, matrix: np.ndarray, height: int,
                      inlier_px: float, settings: BandSettings | None = None) -> BandShifts:
    """Band shifts of one frame from the tracks its consensus kept as the scene.

    Parameters
    ----------
    src, dst : (k, 2) pairs from frame ``t − 1`` to ``t`` that the frame's consensus took as
        the scene (moving objects left out), full-resolution px.
    matrix : (3, 3) the frame's fitted motion (``t − 1`` -> ``t``, full-resolution px).
    height : frame height (px).
    inlier_px : the consensus threshold (px); pairs farther than :data:`BAND_REACH` of it
        from ``matrix`` are dropped, the rest weighed by the robust fit.
    settings : :class:`BandSettings`.

    Returns
    -------
    :class:`BandShifts` timed with readout 0 and frame time 0 (the caller times them).
    """
    src = np.asarray(src, dtype=np.float64).reshape(-1, 2)
    dst = np.asarray(dst, dtype=np.float64).reshape(-1, 2)
    m = np.asarray(matrix, dtype=np.float64)
    p = src @ m[:2, :2].T + m[:2, 2]
    den = src @ m[2, :2] + m[2, 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        err = np.linalg.norm(p / den[:, None] - dst, axis=1)
    keep = np.isfinite(err) & (err < BAND_REACH * inlier_px)
    return fit_band_shifts(src, dst, height, inliers=keep, settings=settings)
