"""Report plots: the camera path, its shake spectrum, the motion fit and a few frames, as PNG.

A stage over arrays: each function takes the per-frame arrays it draws and returns PNG bytes.
matplotlib draws on its Agg canvas (no display, no global backend switch, no pyplot).
"""

from __future__ import annotations

import io
import textwrap
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import shake
from .errors import StabilizeError
from .io import iter_frames, probe
from .report_page import fmt_sig, hz_text

__all__ = [
    "INK", "LAYOUTS", "MIN_FONT_PT", "MUTED", "NARROW", "RAW", "SMOOTH", "STATUS_COLOURS",
    "WIDE", "Layout", "pick_frames", "plot_fit", "plot_frames", "plot_path", "plot_spectrum",
    "plot_vibration", "read_frame_pairs",
]

#: Plot colours: this project's own plain palette (ink, raw path, smoothed path, and one colour
#: per frame status), chosen to stay apart for the common kinds of colour blindness.
INK = "#24323f"
RAW = "#1f6f8b"
SMOOTH = "#e07b39"
MUTED = "#9aa5b1"
STATUS_COLOURS = {"first": "#9aa5b1", "ok": "#8cc084", "weak": "#f2c14e", "failed": "#c8453b",
                  "cut": "#6c5b9e"}




@dataclass(frozen=True)
class Layout:
    """How a plot is drawn for one kind of screen.

    Attributes
    ----------
    name : ``wide`` (laptops, desktops) or ``narrow`` (phones).
    width_in : figure width, inches.
    dpi : dots per inch of the PNG (its width in pixels is ``width_in * dpi``).
    wrap : characters per line of a title or axis label before it wraps.
    """

    name: str
    width_in: float
    dpi: float
    wrap: int


#: The two layouts every plot is drawn in. A page shows the ``narrow`` one on screens up to
#: 40 rem (640 CSS px) wide and the ``wide`` one above.
WIDE = Layout("wide", 8.0, 110.0, 110)
NARROW = Layout("narrow", 3.6, 200.0, 34)
LAYOUTS = {"wide": WIDE, "narrow": NARROW}

#: The smallest font of any text in a plot, points (titles are larger). Text of ``pt`` points
#: in a figure ``width_in`` inches wide, shown ``D`` CSS pixels wide, is pt / 72 · D /
#: width_in CSS pixels tall (its em size): 9 pt in the narrow layout at 353 px (a 390-px
#: phone screen) gives 12 px, in the wide layout at 591 px (a 641-px screen) 9.2 px. About
#: 9 CSS px is the smallest text that reads comfortably (a rule of thumb of this project).
MIN_FONT_PT = 9.0
TITLE_PT = 10.5


def _layout(name: str) -> Layout:
    try:
        return LAYOUTS[name]
    except KeyError:
        raise ValueError(f"unknown plot layout {name!r}; use one of {sorted(LAYOUTS)}") from None


def _wrapped(text: str, lay: Layout) -> str:
    """A title or label broken into lines that fit the layout's width."""
    return "\n".join(textwrap.wrap(text, lay.wrap)) or text


def _title(ax, text: str, lay: Layout) -> None:
    ax.set_title(_wrapped(text, lay), loc="left", fontsize=TITLE_PT, color=INK)


def _uneven(time_s: np.ndarray) -> np.ndarray | None:
    """The frame times when they are irregular (the shake is then resampled), else None."""
    return time_s if shake.timestamps_irregular(time_s) else None


def _figure(lay: Layout, height_in: float, *, dpi: float | None = None):
    """A matplotlib figure on the Agg canvas, without pyplot (no global state is touched),
    as wide as the layout says (inches), ``height_in`` tall."""
    try:  # lazy: matplotlib, an optional dependency only the report needs
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:  # an optional dependency: say how to get it
        raise StabilizeError(
            "the report needs matplotlib: pip install matplotlib") from None
    fig = Figure(figsize=(lay.width_in, height_in), dpi=dpi or lay.dpi, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _style(ax, ylabel: str) -> None:
    ax.set_ylabel(ylabel, color=INK, fontsize=MIN_FONT_PT)
    ax.tick_params(colors=INK, labelsize=MIN_FONT_PT)
    ax.grid(True, color="#e3e7eb", linewidth=0.7)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(MUTED)


def _png(fig, image_format: str = "png") -> bytes:
    """The figure as PNG (or JPEG, quality 85, for ``image_format="jpeg"``) bytes."""
    buf = io.BytesIO()
    extra = {"pil_kwargs": {"quality": 85}} if image_format == "jpeg" else {}
    fig.savefig(buf, format=image_format, facecolor="white", **extra)
    return buf.getvalue()


_AXIS_LABEL = {"x": "x (px)", "y": "y (px)", "rot": "rotation (deg)"}
_AXIS_TITLE = {"x": "horizontal", "y": "vertical", "rot": "rotation"}


def plot_path(*, time_s: np.ndarray, raw: np.ndarray, smooth: np.ndarray | None,
              cuts: np.ndarray, fps: float, above_hz: float, layout: str = "wide") -> bytes:
    """Raw and (when given) smoothed camera path per axis against time, each above its shake
    (the path minus its low-pass at ``above_hz``). One legend for the figure, above the
    panels, so that no curve is hidden under it.

    Parameters
    ----------
    time_s : (n,) frame times, s. raw, smooth : (n, 4) raw and smoothed path read as
        similarities (x, y px, degrees, scale); smooth may be None.
    cuts : (n,) bool scene cuts. fps : real frame rate, Hz. above_hz : shake cut-off, Hz.
    layout : ``wide`` or ``narrow`` (:data:`LAYOUTS`).

    Returns
    -------
    bytes : PNG.
    """
    lay = _layout(layout)
    uneven = _uneven(time_s)
    shakes = shake.axis_shake(raw, cuts, fps=fps, above_hz=above_hz, time_s=uneven)
    t = time_s - time_s[0]
    t_shake = shake.shake_times(cuts, time_s, fps=fps, above_hz=above_hz,
                                resampled=uneven is not None)
    fig = _figure(lay, 10.5 if lay is WIDE else 13.0)
    axes = fig.subplots(6, 1, sharex=True)
    handles = []
    for j, axis in enumerate(shake.AXES):
        ax_path, ax_shake = axes[2 * j], axes[2 * j + 1]
        unit = shake.axis_unit(axis)
        handles = ax_path.plot(t, raw[:, j], color=RAW, linewidth=1.3, label="raw path")
        if smooth is not None:
            handles += ax_path.plot(t, smooth[:, j], color=SMOOTH, linewidth=1.6,
                                    label="smoothed path")
        _title(ax_path, f"{_AXIS_TITLE[axis]}: camera path", lay)
        _style(ax_path, _AXIS_LABEL[axis])
        s = shakes[axis]
        if s is not None and t_shake is not None and len(s) == len(t_shake):
            rms = float(np.sqrt(np.mean(s**2)))
            ax_shake.plot(t_shake - time_s[0], s, color=INK, linewidth=0.9)
            for sign in (-1, 1):
                ax_shake.axhline(sign * rms, color=SMOOTH, linewidth=0.9, linestyle="--")
            _title(ax_shake, f"{_AXIS_TITLE[axis]}: shake above {above_hz:g} Hz "
                             f"(dashed: ±RMS {fmt_sig(rms)} {unit})", lay)
        else:
            ax_shake.text(0.5, 0.5, _wrapped("too short to separate shake from motion", lay),
                          transform=ax_shake.transAxes, ha="center", color=MUTED,
                          fontsize=MIN_FONT_PT)
        _style(ax_shake, _AXIS_LABEL[axis])
        for tc in t[cuts]:
            ax_path.axvline(tc, color=STATUS_COLOURS["cut"], linewidth=1.0)
    fig.legend(handles=handles, loc="outside upper left", ncols=len(handles),
               fontsize=MIN_FONT_PT, frameon=False)
    axes[-1].set_xlabel("time (s)", color=INK, fontsize=MIN_FONT_PT)
    return _png(fig)


def plot_spectrum(*, time_s: np.ndarray, raw: np.ndarray, cuts: np.ndarray, fps: float,
                  above_hz: float, resolution_hz: float | None,
                  layout: str = "wide") -> bytes:
    """Welch power spectral density of the shake per axis, peaks labelled, from 0 Hz to the
    Nyquist frequency; the range below ``above_hz`` is shaded (not counted as shake).

    Parameters
    ----------
    time_s : (n,) frame times, s. raw : (n, 4) raw path read as similarities.
    cuts : (n,) bool. fps : real frame rate, Hz. above_hz : shake cut-off, Hz.
    resolution_hz : the spectrum's resolution, Hz, for the axis label (None: not stated).
    layout : ``wide`` or ``narrow`` (:data:`LAYOUTS`).

    Returns
    -------
    bytes : PNG.
    """
    shakes = shake.axis_shake(raw, cuts, fps=fps, above_hz=above_hz, time_s=_uneven(time_s))
    nyquist = 0.5 * fps
    lay = _layout(layout)
    fig = _figure(lay, 7.5 if lay is WIDE else 8.5)
    axes = fig.subplots(3, 1, sharex=True)
    for ax, axis in zip(axes, shake.AXES, strict=True):
        unit = shake.axis_unit(axis)
        spec = None if shakes[axis] is None else shake.shake_spectrum(shakes[axis], fps)
        ax.axvspan(0, above_hz, color="#eef1f4", linewidth=0)
        for lo, _ in shake.SHAKE_BANDS_HZ[1:]:
            if lo < nyquist:
                ax.axvline(lo, color="#d5dbe1", linewidth=0.8)
        if spec is None:
            ax.text(0.5, 0.5, _wrapped("no shake spectrum (clip too short or no motion)",
                                       lay),
                    transform=ax.transAxes, ha="center", color=MUTED, fontsize=MIN_FONT_PT)
        else:
            f, pxx = spec
            floor = max(float(pxx.max()) * 1e-6, 1e-12)
            ax.semilogy(f, np.maximum(pxx, floor), color=RAW, linewidth=1.3)
            ax.set_ylim(floor, float(pxx.max()) * 30.0)
            placed: list[tuple[float, int]] = []
            peaks = shake.shake_peaks(shakes[axis], fps, above_hz, count=3)
            if not peaks:
                ax.text(0.98, 0.92, "no clear peak", transform=ax.transAxes, ha="right",
                        va="top", fontsize=MIN_FONT_PT, color=MUTED)
            for k, (hz, dens) in enumerate(peaks):
                # Lift a label to the next free row when an earlier one sits close by, so
                # that neighbouring peaks stay readable.
                xfrac = hz / nyquist
                level = 0
                near = 0.12 if lay is WIDE else 0.25
                while any(lv == level and abs(xf - xfrac) < near for xf, lv in placed):
                    level += 1
                placed.append((xfrac, level))
                colour = SMOOTH if k == 0 else INK
                ax.plot([hz], [dens], marker="v", color=colour, markersize=6)
                # Written as the page writes it: to the spectrum's resolution.
                label = hz_text(hz, resolution_hz).replace("\u00a0", " ")
                ax.annotate(label, (hz, dens), xytext=(4, 4 + 12 * level),
                            textcoords="offset points", fontsize=MIN_FONT_PT, color=colour,
                            fontweight="bold" if k == 0 else "normal",
                            arrowprops=None if level == 0 else dict(
                                arrowstyle="-", color=MUTED, linewidth=0.6))
        _title(ax, f"{_AXIS_TITLE[axis]}: shake spectrum", lay)
        _style(ax, f"{unit}²/Hz")
        ax.set_xlim(0, nyquist)
    res = resolution_hz
    res_text = "" if res is None else f", resolution {res:.2f} Hz"
    axes[-1].set_xlabel(_wrapped(f"frequency (Hz) — up to the Nyquist frequency "
                                 f"{nyquist:g} Hz{res_text}; faster vibration cannot be "
                                 "measured", lay), color=INK, fontsize=MIN_FONT_PT)
    return _png(fig)


def plot_vibration(*, freqs_hz: np.ndarray, amplitude_px: np.ndarray, usable: np.ndarray,
                   blind_hz: list[tuple[float, float]], fps: float,
                   peak_hz: float | None, peak_px: float | None,
                   false_alarm: float | None, readout_ms: float,
                   layout: str = "wide") -> bytes:
    """Vibration spectrum from a rolling shutter's row bands: the path's vibration amplitude
    implied at each frequency up to the band rate, blind spots near multiples of the frame
    rate shaded, the dominant vibration marked when one passed the significance test.

    Parameters
    ----------
    freqs_hz : (f,) Hz. amplitude_px : (f,) zero-to-peak amplitude, px. usable : (f,) bool.
    blind_hz : blind intervals (Hz). fps : frame rate, Hz. peak_hz, peak_px : the reported
    vibration (None: none). false_alarm : its false-alarm probability. readout_ms : the
    readout the bands were timed with (ms). layout : ``wide`` or ``narrow``
    (:data:`LAYOUTS`).

    Returns
    -------
    bytes : PNG.
    """
    lay = _layout(layout)
    fig = _figure(lay, 3.4 if lay is WIDE else 3.8)
    ax = fig.subplots(1, 1)
    f = np.asarray(freqs_hz, dtype=np.float64)
    a = np.where(np.asarray(usable, bool), np.asarray(amplitude_px, dtype=np.float64), np.nan)
    for lo, hi in blind_hz:
        ax.axvspan(lo, hi, color="#eef1f4", linewidth=0)
    if len(f):
        ax.plot(f, a, color=RAW, linewidth=0.9)
        ax.set_xlim(0, float(f[-1]))
    title = f"vibration from row bands (readout {readout_ms:.1f} ms)"
    if peak_hz is not None and peak_px is not None:
        ax.plot([peak_hz], [peak_px], marker="v", color=SMOOTH, markersize=7)
        if false_alarm is not None:
            title += f"; the peak's false-alarm probability {fmt_sig(false_alarm, 2)}"
        # Room above the highest point for the peak's label, inside the panel.
        top = float(np.nanmax(np.r_[a[np.isfinite(a)], peak_px]))
        ax.set_ylim(0, 1.3 * top if top > 0 else 1.0)
        right = peak_hz > 0.6 * float(f[-1] if len(f) else 1.0)  # label left of the peak
        ax.annotate(f"{peak_hz:.1f} Hz, {peak_px:.2f} px", (peak_hz, peak_px),
                    xytext=(-6 if right else 6, 6), textcoords="offset points",
                    fontsize=MIN_FONT_PT, color=SMOOTH, fontweight="bold",
                    ha="right" if right else "left")
    else:
        ax.text(0.98, 0.92, "no vibration stands out of the noise", transform=ax.transAxes,
                ha="right", va="top", fontsize=MIN_FONT_PT, color=MUTED)
    _title(ax, title, lay)
    _style(ax, "amplitude (px)")
    ax.set_xlabel(_wrapped(f"frequency (Hz); grey: blind within a few Hz of multiples of "
                           f"{fps:g} Hz", lay), color=INK, fontsize=MIN_FONT_PT)
    return _png(fig)


def plot_fit(*, time_s: np.ndarray, tracked: np.ndarray, inlier_ratio: np.ndarray,
             status: np.ndarray, layout: str = "wide") -> bytes:
    """Per-frame inlier share of the motion fit, over a strip of frame status; the status
    legend below the strip.

    Parameters
    ----------
    time_s : (n,) frame times, s. tracked : (n,) correspondences offered.
    inlier_ratio : (n,) inlier share. status : (n,) frame status.
    layout : ``wide`` or ``narrow`` (:data:`LAYOUTS`).

    Returns
    -------
    bytes : PNG.
    """
    # lazy: matplotlib, an optional dependency only the report needs
    from matplotlib.colors import ListedColormap
    from matplotlib.patches import Patch

    t = time_s - time_s[0]
    lay = _layout(layout)
    fig = _figure(lay, 3.4 if lay is WIDE else 4.2)
    ax, strip = fig.subplots(2, 1, sharex=True, height_ratios=[4, 1])
    ratio = np.where(tracked > 0, inlier_ratio, np.nan)
    ax.plot(t, ratio, color=RAW, linewidth=1.2)
    ax.set_ylim(0, 1.05)
    _title(ax, "motion fit: share of tracked points that agree (inliers)", lay)
    _style(ax, "inlier share")
    order = list(STATUS_COLOURS)
    codes = np.array([order.index(s) if s in order else 0 for s in status])[None, :]
    dt = float(np.median(np.diff(t))) if len(t) > 1 else 1.0
    strip.imshow(codes, aspect="auto", interpolation="nearest",
                 cmap=ListedColormap([STATUS_COLOURS[s] for s in order]), vmin=-0.5,
                 vmax=len(order) - 0.5, extent=(t[0] - dt / 2, t[-1] + dt / 2, 0, 1))
    strip.set_yticks([])
    strip.set_xlabel("time (s)", color=INK, fontsize=MIN_FONT_PT)
    strip.tick_params(colors=INK, labelsize=MIN_FONT_PT)
    counts = {s: int(np.count_nonzero(status == s)) for s in order}
    fig.legend(handles=[Patch(color=STATUS_COLOURS[s], label=f"{s} ({counts[s]})")
                        for s in order], loc="outside lower center",
               ncols=5 if lay is WIDE else 3, fontsize=MIN_FONT_PT, frameon=False)
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


def read_frame_pairs(wanted: list[int], clip: Path | None, steadied: Path | None,
                     width: int = 480) -> tuple[dict[int, np.ndarray], dict[int, np.ndarray]]:
    """The frames ``wanted`` of the source clip and of the steadied video, reduced to
    ``width`` pixels wide (RGB), read once for every layout of :func:`plot_frames`.

    Parameters
    ----------
    wanted : frame indices (:func:`pick_frames`).
    clip, steadied : the source clip and the steadied video, or None.
    width : width to reduce the frames to, px.

    Returns
    -------
    (before, after) : frames by index; empty when a video is missing or cannot be read.
    """
    if clip is None or not wanted:
        return {}, {}
    try:
        before = _read_frames(clip, wanted, width)
        after = _read_frames(steadied, wanted, width) if steadied is not None else {}
    except StabilizeError:
        return {}, {}
    return before, after


def plot_frames(*, time_s: np.ndarray, wanted: list[int],
                pairs: tuple[dict[int, np.ndarray], dict[int, np.ndarray]],
                layout: str = "wide", image_format: str = "png") -> bytes | None:
    """The frames ``wanted`` as shot and, when the steadied video is at hand, as steadied,
    with the same thin grid over both so that the motion between them can be seen.

    Parameters
    ----------
    time_s : (n,) frame times, s. wanted : frame indices (:func:`pick_frames`).
    pairs : the frames as shot and as steadied, by index (:func:`read_frame_pairs`).
    layout : ``wide`` (each frame as shot beside its steadied copy) or ``narrow`` (the two
        one above the other) (:data:`LAYOUTS`).
    image_format : ``png`` or ``jpeg`` (a photograph in a fifth of the bytes).

    Returns
    -------
    bytes or None : the image, or None when no frame could be read.
    """
    before, after = pairs
    rows = [i for i in wanted if i in before]
    if not rows:
        return None
    lay = _layout(layout)
    panels: list[tuple[str, int, np.ndarray | None]] = []
    for i in rows:
        panels.append(("as shot", i, before[i]))
        if after:
            panels.append(("steadied", i, after.get(i)))
    # Wide: each frame as shot beside its steadied copy; narrow: one column.
    cols = 2 if after and lay is WIDE else 1
    grid_rows = len(panels) // cols
    h, w = before[rows[0]].shape[:2]
    title_in = 0.3 if lay is WIDE else 0.35
    # Photographs need fewer dots than line art: the narrow layout's frames stay near 480 px.
    dpi = lay.dpi if lay is WIDE else 130.0
    fig = _figure(lay, grid_rows * (lay.width_in / cols * h / w + title_in), dpi=dpi)
    axes = fig.subplots(grid_rows, cols, squeeze=False).ravel()
    t0 = time_s[0]
    for ax, (label, i, img) in zip(axes, panels, strict=True):
        ax.set_xticks([])
        ax.set_yticks([])
        for side in ax.spines.values():
            side.set_color(MUTED)
        ax.set_title(f"{label}, frame {i} ({time_s[i] - t0:.2f} s)", fontsize=MIN_FONT_PT,
                     color=INK, loc="left")
        if img is None:
            ax.text(0.5, 0.5, "frame missing", transform=ax.transAxes, ha="center",
                    fontsize=MIN_FONT_PT)
            continue
        ax.imshow(img)
        ih, iw = img.shape[:2]
        for k in (1, 2):
            ax.axhline(k * ih / 3, color="white", linewidth=0.6, alpha=0.8)
            ax.axvline(k * iw / 3, color="white", linewidth=0.6, alpha=0.8)
    return _png(fig, image_format)
