"""Camera motion inside each rolling-shutter frame, recovered from row-band shifts.

Row ``y`` of frame ``t`` is exposed at ``τ = t / fps + y · R / H`` (readout ``R``, height
``H``; :mod:`stabilize.synthetic_rolling`), and the shift of the band around row ``y`` since
frame ``t − 1`` samples ``d(τ) = x(τ) − x(τ − 1/fps)``, the camera's image-plane displacement
over one frame interval (:mod:`stabilize.row_bands`). This module recovers, for each frame
``t`` and row ``y``, the *within-frame* displacement

    w_t(y) = x(t / fps + y · R / H) − x(t / fps + y_ref · R / H)          (px, x and y)

relative to a reference row ``y_ref`` (the middle row by default): how far the content of row
``y`` sits from where it would be had the whole frame been exposed at the reference instant.
The frame-level motion (where the reference row went) stays with the per-frame pipeline.

Why a fit, not a sum
--------------------
``d`` cannot simply be integrated: ``x(τ) = x(τ − 1/fps) + d(τ)`` links each row only to the
same row one frame earlier, so measurement noise accumulates frame after frame, and anything
that repeats every frame (the blind spots at multiples of fps, :mod:`stabilize.vibration`)
is invisible. The path is instead modelled as one continuous curve: a uniform cubic B-spline
with knots a fraction of the readout apart (fine enough for vibration well above the frame
rate), fitted to the band samples by regularised least squares with a roughness penalty
``λ ∫ x''(τ)² dτ`` (discretised as P-spline second differences of the coefficients: Eilers and
Marx, "Flexible smoothing with B-splines and penalties", Statistical Science 11, 1996). The
penalty decides what the data cannot: among paths that explain the samples equally well it
takes the smoothest, so the within-frame shear of shake follows from the frame-to-frame
displacement (smooth motion through the blanking gap between readouts), and the part of a
vibration that looks the same in every frame (a few % over a window of 24 frames, away from
the blind spots) is the only part lost. Each band sample is the box average of the path over
the band's exposure span (three-point Gauss–Legendre), so band averaging is not mistaken for
a weaker vibration.

This is the continuous-time camera of Ringaby and Forssén, "Efficient video rectification
and stabilisation for cell-phones", International Journal of Computer Vision 96, 2012
(there a rotation spline through key-frames), and the calibration-free idea of Grundmann,
Kwatra, Castro and Essa, "Calibration-free rolling shutter removal", ICCP 2012 (there a
mixture of per-band homographies), reduced to the translation per band that carries
vibration.

Bounded memory
--------------
The clip is solved in overlapping windows of ``window_frames`` frames; each window keeps the
frames away from its ends (``margin_frames`` on each side), so one solve touches a fixed
number of samples and spline coefficients however long the clip. :func:`within_frame_motion`
takes a ``frames`` selection, so a render pass can ask for a chunk at a time.

Limits
------
The readout must be right: with a readout assumed where there is none (a global shutter),
the smooth frame-to-frame motion is read as a within-frame shear of velocity × readout error
(:func:`stabilize.vibration.estimate_readout` reports when no readout is observable; then
pass 0). Vibration within a few Hz of a multiple of the frame rate repeats in every frame
and is not recovered (the blind spots of :mod:`stabilize.vibration`). Only translation per
row is modelled: in-plane rotation within the readout (a row-dependent rotation) is left.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "RowMotion",
    "RowMotionSettings",
    "fit_path_window",
    "path_at",
    "within_frame_motion",
]


@dataclass(frozen=True)
class RowMotionSettings:
    """Settings of the within-frame motion fit.

    ``window_frames``: frames of band samples per least-squares solve; ``margin_frames``:
    frames at each end of a window whose result is taken from the next window instead (the
    window's edges are less constrained); ``knots_per_readout``: spline knots per readout
    time (the fastest motion followed has a period of about 3 knot spacings);
    ``min_knot_s``: the knot spacing never falls below this (s), which bounds the size of one
    solve for very short readouts; ``roughness``: λ of the penalty ``λ ∫ x''² dτ`` (s³; data
    residuals in px², path in px); ``ridge``: a whisper of ``Σ c²`` that pins the path's
    free offset. Values are this project's own choices, tuned on drawn scenes (common
    practice for P-splines: a penalty small enough to leave the signal band untouched).
    """

    window_frames: int = 24
    margin_frames: int = 6
    knots_per_readout: float = 12.0
    min_knot_s: float = 0.0005
    roughness: float = 1e-10
    ridge: float = 1e-9


@dataclass(frozen=True)
class RowMotion:
    """Within-frame displacement of every frame, sampled on a set of rows.

    ``frames`` (n,) frame indices; ``rows_px`` (r,) rows of the frame (px, pixel-centre
    convention of :mod:`stabilize.geometry`); ``shift_px`` (n, r, 2) ``w_t(y)`` (dx, dy) px:
    where the content of row ``y`` sits minus where it would sit at the reference instant
    (0 at ``ref_row_px``); ``readout_s`` the readout the samples were timed with (s).
    Rows between samples are interpolated by a cubic spline
    (:func:`stabilize.row_warp.row_shift_at`).
    """

    frames: np.ndarray
    rows_px: np.ndarray
    shift_px: np.ndarray
    ref_row_px: float
    readout_s: float


def _basis(times_s: np.ndarray, t0: float, knot_s: float,
           n_coef: int) -> tuple[np.ndarray, np.ndarray]:
    """Uniform cubic B-spline basis at ``times_s`` (m,): first coefficient index (m,) and the
    four weights (m, 4) of coefficients ``i .. i + 3``."""
    u = (np.asarray(times_s, dtype=np.float64) - t0) / knot_s
    i = np.clip(np.floor(u).astype(np.int64), 0, n_coef - 4)
    f = u - i
    f2, f3 = f * f, f * f * f
    b = np.stack([(1.0 - f) ** 3, 3.0 * f3 - 6.0 * f2 + 4.0,
                  -3.0 * f3 + 3.0 * f2 + 3.0 * f + 1.0, f3], axis=1) / 6.0
    return i, b


def _design(times_s: np.ndarray, fps: float, band_s: float, t0: float, knot_s: float,
            n_coef: int):
    """One-frame difference of the band-averaged spline basis, a sparse (m, n_coef) matrix."""
    # lazy: scipy.sparse is only needed by the within-frame fit.
    from scipy.sparse import csr_matrix
    m = len(times_s)
    rows, cols, vals = [], [], []
    # Three-point Gauss–Legendre over the band's span: exact for a cubic piece.
    nodes = (np.array([-np.sqrt(0.6), 0.0, np.sqrt(0.6)]) * 0.5 * band_s
             if band_s > 0 else np.zeros(1))
    weights = np.array([5.0, 8.0, 5.0]) / 18.0 if band_s > 0 else np.ones(1)
    for node, wq in zip(nodes, weights, strict=True):
        for lag, sign in ((0.0, 1.0), (1.0 / fps, -1.0)):
            i, b = _basis(times_s + node - lag, t0, knot_s, n_coef)
            rows.append(np.repeat(np.arange(m), 4))
            cols.append((i[:, None] + np.arange(4)).ravel())
            vals.append((sign * wq * b).ravel())
    return csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                      shape=(m, n_coef))


def fit_path_window(times_s: np.ndarray, diff_px: np.ndarray, fps: float, t_lo: float,
                    t_hi: float, knot_s: float, *, band_s: float = 0.0,
                    weight: np.ndarray | None = None, roughness: float = 1e-10,
                    ridge: float = 1e-9) -> tuple[float, np.ndarray]:
    """Fit a continuous path x(τ) over [t_lo, t_hi] to one-frame differences.

    Minimises ``Σ_i w_i |d_i − (x̄(τ_i) − x̄(τ_i − 1/fps))|² + λ Σ_j |Δ²c_j|² / h³ +
    ε Σ_j |c_j|²`` with ``x̄`` the path averaged over the band span ``band_s``, ``c`` the
    coefficients of a uniform cubic B-spline with knot spacing ``h = knot_s``.

    Parameters
    ----------
    times_s : (m,) exposure instants of the band samples (s), in [t_lo + 1/fps, t_hi].
    diff_px : (m, 2) band shifts from the previous frame (px); rows with NaN are skipped.
    fps : frame rate (Hz).
    t_lo, t_hi : time span of the path (s).
    knot_s : knot spacing (s).
    band_s : exposure-time span averaged by one band sample (s).
    weight : (m,) sample weights (default 1).
    roughness : λ (s³).
    ridge : ε.

    Returns
    -------
    ``(t0, coef)``: the spline's origin (s) and coefficients (n, 2); evaluate with
    :func:`path_at`.
    """
    t = np.asarray(times_s, dtype=np.float64)
    d = np.asarray(diff_px, dtype=np.float64).reshape(len(t), 2)
    w = np.ones(len(t)) if weight is None else np.asarray(weight, dtype=np.float64)
    ok = np.isfinite(d).all(axis=1) & np.isfinite(t) & np.isfinite(w) & (w > 0)
    t, d, w = t[ok], d[ok], w[ok]
    n_int = max(1, int(np.ceil((t_hi - t_lo) / knot_s)))
    n_coef = n_int + 3
    # lazy: scipy.linalg is only needed by the within-frame fit.
    from scipy.linalg import solveh_banded
    a = _design(t, fps, band_s, t_lo, knot_s, n_coef)
    aw = a.multiply(w[:, None]).tocsr()
    normal = (aw.T @ a).tocoo()
    # The normal matrix is banded (a sample couples coefficients about one frame apart), so
    # it is solved in banded form: linear in the window's length.
    bw = max(2, int(np.abs(normal.row - normal.col).max()) if normal.nnz else 2)
    ab = np.zeros((bw + 1, n_coef))
    upper = normal.col >= normal.row
    np.add.at(ab, (bw + normal.row[upper] - normal.col[upper], normal.col[upper]),
              normal.data[upper])
    pen = roughness / knot_s ** 3
    # Second differences DᵀD: diagonals 1, −4, 6, −4, 1 (edges trimmed).
    diag0 = np.full(n_coef, 6.0)
    diag0[[0, -1]] = 1.0
    diag0[[1, -2]] = 5.0
    diag1 = np.full(n_coef - 1, -4.0)
    diag1[[0, -1]] = -2.0
    ab[bw] += pen * diag0 + ridge
    ab[bw - 1, 1:] += pen * diag1
    ab[bw - 2, 2:] += pen
    coef = solveh_banded(ab, np.asarray(aw.T @ d))
    return t_lo, coef


def path_at(times_s: np.ndarray, t0: float, knot_s: float, coef: np.ndarray) -> np.ndarray:
    """The fitted path at ``times_s`` (...,), shape (..., 2) px."""
    t = np.asarray(times_s, dtype=np.float64)
    i, b = _basis(t.ravel(), t0, knot_s, len(coef))
    idx = i[:, None] + np.arange(4)
    x = np.einsum("mk,mkc->mc", b, coef[idx])
    return x.reshape(*t.shape, 2)


def _knot_s(readout_s: float, fps: float, s: RowMotionSettings) -> float:
    if readout_s <= 0:
        return 1.0 / fps
    return max(readout_s / s.knots_per_readout, s.min_knot_s)


def within_frame_motion(frame_index: np.ndarray, row_px: np.ndarray, diff_px: np.ndarray,
                        *, fps: float, height: int, readout_s: float, band_s: float = 0.0,
                        weight: np.ndarray | None = None, rows_px: np.ndarray | None = None,
                        ref_row_px: float | None = None, frames: np.ndarray | None = None,
                        settings: RowMotionSettings | None = None) -> RowMotion:
    """Within-frame displacement ``w_t(y)`` of every frame from a clip's band samples.

    Parameters
    ----------
    frame_index : (m,) frame ``t`` of each band sample (its shift is from ``t − 1`` to ``t``).
        Frame ``t`` starts its readout at ``t / fps``.
    row_px : (m,) band centre rows (px).
    diff_px : (m, 2) band shifts (dx, dy) from the previous frame (px); NaN rows are skipped.
    fps : frame rate (Hz).
    height : frame height (px).
    readout_s : first-to-last-row readout time (s); 0 (a global shutter) gives ``w = 0``.
    band_s : exposure-time span of one band sample (s): band height × readout / height.
    weight : (m,) relative sample weights, e.g. the band support (default 1); rescaled to a
        mean of 1 over the clip, so the roughness penalty keeps its meaning.
    rows_px : (r,) rows at which to report ``w`` (default 33 rows from 0 to height − 1).
    ref_row_px : reference row (default the middle row, (height − 1) / 2).
    frames : (n,) frames wanted (default every frame from one before the first sample to the
        last); frames outside that range get ``w = 0``.
    settings : :class:`RowMotionSettings`.

    Returns
    -------
    :class:`RowMotion`.
    """
    s = settings or RowMotionSettings()
    fi = np.asarray(frame_index, dtype=np.int64)
    rows = np.asarray(row_px, dtype=np.float64)
    d = np.asarray(diff_px, dtype=np.float64).reshape(len(fi), 2)
    wt = np.ones(len(fi)) if weight is None else np.asarray(weight, dtype=np.float64)
    good = np.isfinite(wt) & (wt > 0)
    wt = wt / (float(wt[good].mean()) if good.any() else 1.0)
    out_rows = (np.linspace(0.0, height - 1.0, 33) if rows_px is None
                else np.asarray(rows_px, dtype=np.float64))
    ref = (height - 1) / 2.0 if ref_row_px is None else float(ref_row_px)
    first, last = (int(fi.min()) - 1, int(fi.max())) if len(fi) else (0, -1)
    want = (np.arange(first, last + 1) if frames is None
            else np.asarray(frames, dtype=np.int64))
    shift = np.zeros((len(want), len(out_rows), 2))
    if readout_s <= 0 or not len(fi) or not len(want):
        return RowMotion(want, out_rows, shift, ref, readout_s)
    dt = 1.0 / fps
    knot = _knot_s(readout_s, fps, s)
    nw = max(2 * s.margin_frames + 1, s.window_frames)
    hop = nw - 2 * s.margin_frames
    # Window k serves frames [first + k·hop + margin, first + (k + 1)·hop + margin) (the
    # first and last windows also serve up to the clip's ends) from the samples of frames
    # [first + k·hop, first + k·hop + nw), moved back to end at the last frame if need be.
    sel = want[(want >= first) & (want <= last)]
    if not len(sel):
        return RowMotion(want, out_rows, shift, ref, readout_s)
    n_windows = max(1, (last - first - s.margin_frames) // hop + 1)
    k_of = np.clip((sel - first - s.margin_frames) // hop, 0, n_windows - 1)
    times = fi * dt + rows * (readout_s / height)
    offs = out_rows * (readout_s / height)
    ref_off = ref * (readout_s / height)
    for k in np.unique(k_of):
        start = first + int(k) * hop
        serve_lo = start + s.margin_frames if k > 0 else first
        serve_hi = start + s.margin_frames + hop - 1 if k < n_windows - 1 else last
        here = (want >= serve_lo) & (want <= serve_hi)
        b = min(start + nw, last + 1)
        a = max(first, b - nw)
        take = (fi >= a) & (fi < b)
        if not take.any():
            continue
        pad = 2.0 * knot + band_s
        t_lo = (a - 1) * dt - pad
        t_hi = (b - 1) * dt + readout_s + pad
        t0, coef = fit_path_window(times[take], d[take], fps, t_lo, t_hi, knot, band_s=band_s,
                                   weight=wt[take], roughness=s.roughness, ridge=s.ridge)
        base = want[here] * dt
        x = path_at(base[:, None] + offs[None, :], t0, knot, coef)
        x0 = path_at(base + ref_off, t0, knot, coef)
        shift[here] = x - x0[:, None, :]
    return RowMotion(want, out_rows, shift, ref, readout_s)
