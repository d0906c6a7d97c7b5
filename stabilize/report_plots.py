"""Report plots: the camera path, its shake spectrum, the motion fit and a few frames, as PNG.

A stage over arrays: each function takes the per-frame arrays it draws and returns PNG bytes.
matplotlib draws on its Agg canvas (no display, no global backend switch, no pyplot).
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from . import shake
from .errors import StabilizeError
from .io import iter_frames, probe
from .report_page import fmt_sig

__all__ = [
    "INK", "MUTED", "RAW", "SMOOTH", "STATUS_COLOURS", "pick_frames", "plot_fit", "plot_frames",
    "plot_path", "plot_spectrum", "plot_vibration",
]

#: Plot colours: this project's own plain palette (ink, raw path, smoothed path, and one colour
#: per frame status), chosen to stay apart for the common kinds of colour blindness.
INK = "#24323f"
RAW = "#1f6f8b"
SMOOTH = "#e07b39"
MUTED = "#9aa5b1"
STATUS_COLOURS = {"ok": "#8cc084", "weak": "#f2c14e", "failed": "#c8453b", "cut": "#6c5b9e"}


def _uneven(time_s: np.ndarray) -> np.ndarray | None:
    """The frame times when they are irregular (the shake is then resampled), else None."""
    return time_s if shake.timestamps_irregular(time_s) else None


def _figure(width_in: float, height_in: float):
    """A matplotlib figure on the Agg canvas, without pyplot (no global state is touched)."""
    try:  # lazy: matplotlib, an optional dependency only the report needs
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:  # an optional dependency: say how to get it
        raise StabilizeError(
            "the report needs matplotlib: pip install matplotlib") from None
    fig = Figure(figsize=(width_in, height_in), dpi=110, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _style(ax, ylabel: str) -> None:
    ax.set_ylabel(ylabel, color=INK, fontsize=9)
    ax.tick_params(colors=INK, labelsize=8)
    ax.grid(True, color="#e3e7eb", linewidth=0.7)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(MUTED)


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", facecolor="white")
    return buf.getvalue()


_AXIS_LABEL = {"x": "x (px)", "y": "y (px)", "rot": "rotation (deg)"}
_AXIS_TITLE = {"x": "horizontal", "y": "vertical", "rot": "rotation"}


def plot_path(*, time_s: np.ndarray, raw: np.ndarray, smooth: np.ndarray | None,
              cuts: np.ndarray, fps: float, above_hz: float) -> bytes:
    """Raw and (when given) smoothed camera path per axis against time, each above its shake
    (the path minus its low-pass at ``above_hz``).

    Parameters
    ----------
    time_s : (n,) frame times, s. raw, smooth : (n, 4) raw and smoothed path read as
        similarities (x, y px, degrees, scale); smooth may be None.
    cuts : (n,) bool scene cuts. fps : real frame rate, Hz. above_hz : shake cut-off, Hz.

    Returns
    -------
    bytes : PNG.
    """
    uneven = _uneven(time_s)
    shakes = shake.axis_shake(raw, cuts, fps=fps, above_hz=above_hz, time_s=uneven)
    t = time_s - time_s[0]
    t_shake = shake.shake_times(cuts, time_s, fps=fps, above_hz=above_hz,
                                resampled=uneven is not None)
    fig = _figure(8.0, 10.0)
    axes = fig.subplots(6, 1, sharex=True)
    for j, axis in enumerate(shake.AXES):
        ax_path, ax_shake = axes[2 * j], axes[2 * j + 1]
        ax_path.plot(t, raw[:, j], color=RAW, linewidth=1.3, label="raw path")
        if smooth is not None:
            ax_path.plot(t, smooth[:, j], color=SMOOTH, linewidth=1.6,
                         label="smoothed path")
        ax_path.set_title(f"{_AXIS_TITLE[axis]}: camera path", loc="left", fontsize=10,
                          color=INK)
        _style(ax_path, _AXIS_LABEL[axis])
        ax_path.legend(loc="best", fontsize=8, frameon=False)
        s = shakes[axis]
        if s is not None and t_shake is not None and len(s) == len(t_shake):
            rms = float(np.sqrt(np.mean(s**2)))
            ax_shake.plot(t_shake - time_s[0], s, color=INK, linewidth=0.9)
            for sign in (-1, 1):
                ax_shake.axhline(sign * rms, color=SMOOTH, linewidth=0.9, linestyle="--")
            ax_shake.set_title(f"{_AXIS_TITLE[axis]}: shake above {above_hz:g}"
                               f" Hz (dashed: ±RMS {fmt_sig(rms)})", loc="left", fontsize=10,
                               color=INK)
        else:
            ax_shake.text(0.5, 0.5, "too short to separate shake from motion",
                          transform=ax_shake.transAxes, ha="center", color=MUTED)
        _style(ax_shake, _AXIS_LABEL[axis])
        for tc in t[cuts]:
            ax_path.axvline(tc, color=STATUS_COLOURS["cut"], linewidth=1.0)
    axes[-1].set_xlabel("time (s)", color=INK, fontsize=9)
    return _png(fig)


def plot_spectrum(*, time_s: np.ndarray, raw: np.ndarray, cuts: np.ndarray, fps: float,
                  above_hz: float, resolution_hz: float | None) -> bytes:
    """Welch power spectral density of the shake per axis, peaks labelled, from 0 Hz to the
    Nyquist frequency; the range below ``above_hz`` is shaded (not counted as shake).

    Parameters
    ----------
    time_s : (n,) frame times, s. raw : (n, 4) raw path read as similarities.
    cuts : (n,) bool. fps : real frame rate, Hz. above_hz : shake cut-off, Hz.
    resolution_hz : the spectrum's resolution, Hz, for the axis label (None: not stated).

    Returns
    -------
    bytes : PNG.
    """
    shakes = shake.axis_shake(raw, cuts, fps=fps, above_hz=above_hz, time_s=_uneven(time_s))
    nyquist = 0.5 * fps
    fig = _figure(8.0, 7.5)
    axes = fig.subplots(3, 1, sharex=True)
    for ax, axis in zip(axes, shake.AXES, strict=True):
        unit = shake.axis_unit(axis)
        spec = None if shakes[axis] is None else shake.shake_spectrum(shakes[axis], fps)
        ax.axvspan(0, above_hz, color="#eef1f4", linewidth=0)
        for lo, _ in shake.SHAKE_BANDS_HZ[1:]:
            if lo < nyquist:
                ax.axvline(lo, color="#d5dbe1", linewidth=0.8)
        if spec is None:
            ax.text(0.5, 0.5, "no shake spectrum (clip too short or no motion)",
                    transform=ax.transAxes, ha="center", color=MUTED)
        else:
            f, pxx = spec
            floor = max(float(pxx.max()) * 1e-6, 1e-12)
            ax.semilogy(f, np.maximum(pxx, floor), color=RAW, linewidth=1.3)
            ax.set_ylim(floor, float(pxx.max()) * 30.0)
            placed: list[tuple[float, int]] = []
            peaks = shake.shake_peaks(shakes[axis], fps, above_hz, count=3)
            if not peaks:
                ax.text(0.98, 0.92, "no clear peak", transform=ax.transAxes, ha="right",
                        va="top", fontsize=8, color=MUTED)
            for k, (hz, dens) in enumerate(peaks):
                # Lift a label to the next free row when an earlier one sits close by, so
                # that neighbouring peaks stay readable.
                xfrac = hz / nyquist
                level = 0
                while any(lv == level and abs(xf - xfrac) < 0.12 for xf, lv in placed):
                    level += 1
                placed.append((xfrac, level))
                colour = SMOOTH if k == 0 else INK
                ax.plot([hz], [dens], marker="v", color=colour, markersize=6)
                ax.annotate(f"{hz:.2f} Hz", (hz, dens), xytext=(4, 4 + 11 * level),
                            textcoords="offset points", fontsize=8, color=colour,
                            fontweight="bold" if k == 0 else "normal",
                            arrowprops=None if level == 0 else dict(
                                arrowstyle="-", color=MUTED, linewidth=0.6))
        ax.set_title(f"{_AXIS_TITLE[axis]}: shake spectrum", loc="left", fontsize=10,
                     color=INK)
        _style(ax, f"{unit}²/Hz")
        ax.set_xlim(0, nyquist)
    res = resolution_hz
    res_text = "" if res is None else f", resolution {res:.2f} Hz"
    axes[-1].set_xlabel(f"frequency (Hz) — up to the Nyquist frequency {nyquist:g} Hz"
                        f"{res_text}; faster vibration cannot be measured", color=INK,
                        fontsize=9)
    return _png(fig)


def plot_vibration(*, freqs_hz: np.ndarray, amplitude_px: np.ndarray, usable: np.ndarray,
                   blind_hz: list[tuple[float, float]], fps: float,
                   peak_hz: float | None, peak_px: float | None,
                   false_alarm: float | None, readout_ms: float) -> bytes:
    """Vibration spectrum from a rolling shutter's row bands: the path's vibration amplitude
    implied at each frequency up to the band rate, blind spots near multiples of the frame
    rate shaded, the dominant vibration marked when one passed the significance test.

    Parameters
    ----------
    freqs_hz : (f,) Hz. amplitude_px : (f,) zero-to-peak amplitude, px. usable : (f,) bool.
    blind_hz : blind intervals (Hz). fps : frame rate, Hz. peak_hz, peak_px : the reported
    vibration (None: none). false_alarm : its false-alarm probability. readout_ms : the
    readout the bands were timed with (ms).

    Returns
    -------
    bytes : PNG.
    """
    fig = _figure(8.0, 3.4)
    ax = fig.subplots(1, 1)
    f = np.asarray(freqs_hz, dtype=np.float64)
    a = np.where(np.asarray(usable, bool), np.asarray(amplitude_px, dtype=np.float64), np.nan)
    for lo, hi in blind_hz:
        ax.axvspan(lo, hi, color="#eef1f4", linewidth=0)
    if len(f):
        ax.plot(f, a, color=RAW, linewidth=0.9)
        ax.set_xlim(0, float(f[-1]))
    if peak_hz is not None and peak_px is not None:
        ax.plot([peak_hz], [peak_px], marker="v", color=SMOOTH, markersize=7)
        fa = "" if false_alarm is None else f", false alarm {fmt_sig(false_alarm, 2)}"
        ax.annotate(f"{peak_hz:.1f} Hz, {peak_px:.2f} px{fa}", (peak_hz, peak_px),
                    xytext=(5, 4), textcoords="offset points", fontsize=8, color=SMOOTH,
                    fontweight="bold")
    else:
        ax.text(0.98, 0.92, "no vibration stands out of the noise", transform=ax.transAxes,
                ha="right", va="top", fontsize=8, color=MUTED)
    ax.set_title(f"vibration from row bands (readout {readout_ms:.1f} ms)", loc="left",
                 fontsize=10, color=INK)
    _style(ax, "amplitude (px)")
    ax.set_xlabel(f"frequency (Hz); grey: blind within a few Hz of multiples of {fps:g} Hz",
                  color=INK, fontsize=9)
    return _png(fig)


def plot_fit(*, time_s: np.ndarray, tracked: np.ndarray, inlier_ratio: np.ndarray,
             status: np.ndarray) -> bytes:
    """Per-frame inlier share of the motion fit, over a strip of frame status.

    Parameters
    ----------
    time_s : (n,) frame times, s. tracked : (n,) correspondences offered.
    inlier_ratio : (n,) inlier share. status : (n,) frame status.

    Returns
    -------
    bytes : PNG.
    """
    # lazy: matplotlib, an optional dependency only the report needs
    from matplotlib.colors import ListedColormap
    from matplotlib.patches import Patch

    t = time_s - time_s[0]
    fig = _figure(8.0, 3.2)
    ax, strip = fig.subplots(2, 1, sharex=True, height_ratios=[4, 1])
    ratio = np.where(tracked > 0, inlier_ratio, np.nan)
    ax.plot(t, ratio, color=RAW, linewidth=1.2)
    ax.set_ylim(0, 1.05)
    ax.set_title("motion fit: share of tracked points that agree (inliers)", loc="left",
                 fontsize=10, color=INK)
    _style(ax, "inlier share")
    order = list(STATUS_COLOURS)
    codes = np.array([order.index(s) if s in order else 0 for s in status])[None, :]
    dt = float(np.median(np.diff(t))) if len(t) > 1 else 1.0
    strip.imshow(codes, aspect="auto", interpolation="nearest",
                 cmap=ListedColormap([STATUS_COLOURS[s] for s in order]), vmin=-0.5,
                 vmax=len(order) - 0.5, extent=(t[0] - dt / 2, t[-1] + dt / 2, 0, 1))
    strip.set_yticks([])
    strip.set_xlabel("time (s)", color=INK, fontsize=9)
    strip.tick_params(colors=INK, labelsize=8)
    counts = {s: int(np.count_nonzero(status == s)) for s in order}
    fig.legend(handles=[Patch(color=STATUS_COLOURS[s], label=f"{s} ({counts[s]})")
                        for s in order], loc="outside lower center", ncols=4, fontsize=8,
               frameon=False)
    return _png(fig)


def pick_frames(raw: np.ndarray, cuts: np.ndarray, *, fps: float, above_hz: float,
                count: int = 3) -> list[int]:
    """Frames worth comparing before and after: in each of ``count`` equal stretches of the
    clip, the frame whose shake moves the picture furthest.

    Parameters
    ----------
    raw : (n, 4) raw path read as similarities. cuts : (n,) bool.
    fps : real frame rate, Hz. above_hz : shake cut-off, Hz. count : stretches.

    Returns
    -------
    list of frame indices, sorted.
    """
    shakes = shake.axis_shake(raw, cuts, fps=fps, above_hz=above_hz)
    n = len(raw)
    if shakes["x"] is not None and shakes["y"] is not None and len(shakes["x"]) == n:
        size = np.hypot(shakes["x"], shakes["y"])
    else:
        size = np.zeros(n)
    picks = []
    for part in np.array_split(np.arange(n), min(count, n)):
        if len(part):
            picks.append(int(part[np.argmax(size[part])]))
    return sorted(set(picks))


def _read_frames(video: Path, wanted: list[int], width: int) -> dict[int, np.ndarray]:
    info = probe(video)
    size = (width, max(2, int(round(info.height * width / info.width))))
    if width >= info.width:
        size = (info.width, info.height)
    got: dict[int, np.ndarray] = {}
    last = max(wanted)
    for frame in iter_frames(video, size=size, info=info):
        if frame.index in wanted:
            got[frame.index] = frame.image.copy()
        if frame.index >= last:
            break
    return got


def plot_frames(*, time_s: np.ndarray, wanted: list[int], clip: Path | None,
                steadied: Path | None) -> bytes | None:
    """The frames ``wanted`` as shot and, when the steadied video is at hand, as steadied,
    side by side, with the same thin grid over both so that the motion between them can be
    seen.

    Parameters
    ----------
    time_s : (n,) frame times, s. wanted : frame indices (:func:`pick_frames`).
    clip, steadied : the source clip and the steadied video, or None.

    Returns
    -------
    bytes or None : PNG, or None when no frame could be read.
    """
    if clip is None:
        return None
    try:
        before = _read_frames(clip, wanted, 480)
        after = _read_frames(steadied, wanted, 480) if steadied is not None else {}
    except StabilizeError:
        return None
    rows = [i for i in wanted if i in before]
    if not rows:
        return None
    cols = 2 if after else 1
    h, w = before[rows[0]].shape[:2]
    fig = _figure(4.0 * cols, 4.0 * cols * h / w * len(rows) / cols + 0.4 * len(rows))
    axes = np.atleast_2d(fig.subplots(len(rows), cols, squeeze=False))
    t0 = time_s[0]
    for r, i in enumerate(rows):
        pairs = [("as shot", before[i])]
        if after:
            pairs.append(("steadied", after.get(i)))
        for c, (label, img) in enumerate(pairs):
            ax = axes[r, c]
            ax.set_xticks([])
            ax.set_yticks([])
            for side in ax.spines.values():
                side.set_color(MUTED)
            if img is None:
                ax.text(0.5, 0.5, "frame missing", transform=ax.transAxes, ha="center")
                continue
            ax.imshow(img)
            ih, iw = img.shape[:2]
            for k in (1, 2):
                ax.axhline(k * ih / 3, color="white", linewidth=0.6, alpha=0.8)
                ax.axvline(k * iw / 3, color="white", linewidth=0.6, alpha=0.8)
            ax.set_title(f"{label}, frame {i} ({time_s[i] - t0:.2f} s)", fontsize=9,
                         color=INK, loc="left")
    return _png(fig)
