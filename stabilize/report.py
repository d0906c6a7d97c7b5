"""The shake report: figures as JSON, plots as PNG, and one self-contained HTML page.

``stabilize report CLIP_OR_LOG`` reads a motion log (or measures the clip first), works out
the shake figures with :mod:`stabilize.shake`, draws the plots with matplotlib's Agg canvas
(no display, no global backend switch) and writes, into the output folder:

* ``NAME.shake.json``: the summary, the notes on its uncertainty and the settings used;
* ``NAME.path.png``, ``NAME.spectrum.png``, ``NAME.fit.png`` and, when the video is at hand,
  ``NAME.frames.png``;
* ``NAME.report.html``: everything above on one page, the images embedded as data URIs, with
  no network access, readable on a phone.

Every file is written under a temporary name and renamed when complete.
"""

from __future__ import annotations

import io
import json
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from . import residual, shake
from .config import Settings
from .errors import StabilizeError
from .geometry import similarity_readout
from .io import (
    all_or_nothing,
    check_writable_folder,
    publish,
    temp_path_for,
    write_text_atomic,
)
from .log import MotionLog, _jsonable, read_log, reasons_of
from .report_page import fmt_sig, render_page

FORMAT = "stabilize-shake-report"
VERSION = 1

#: Plot colours: this project's own plain palette (ink, raw path, smoothed path, and one colour
#: per frame status), chosen to stay apart for the common kinds of colour blindness.
INK = "#24323f"
RAW = "#1f6f8b"
SMOOTH = "#e07b39"
MUTED = "#9aa5b1"
STATUS_COLOURS = {"ok": "#8cc084", "weak": "#f2c14e", "failed": "#c8453b", "cut": "#6c5b9e"}

ProgressFactory = Callable[[str, int | None], Any]


@dataclass
class Report:
    """What :func:`make_report` wrote: output paths by role, the summary and its notes."""

    outputs: dict[str, Path]
    summary: dict[str, Any]
    notes: list[str]
    settings: dict[str, Any] = field(default_factory=dict)


# --------------------------------------------------------------------- inputs
def _is_log(path: Path) -> bool:
    return path.suffix.lower() in (".csv", ".json")


def report_name(path: Path) -> str:
    """NAME of the report's outputs: ``truss.motion.csv`` and ``truss.mp4`` both give
    ``truss``."""
    name = path.name
    for ending in (".motion.csv", ".motion.json"):
        if name.lower().endswith(ending):
            return name[: -len(ending)]
    return path.stem


def _settings_for_log(motion: MotionLog, config: str | None, options: dict[str, Any]) -> Settings:
    """The log's own settings with the options given now laid over them (as ``render`` does):
    a log measured with ``--fov-deg 80`` keeps it unless the report is asked for another."""
    from .pipeline import _settings

    if config:
        return _settings(config, options)
    base = {k: v for k, v in motion.settings.items() if k in Settings.__dataclass_fields__}
    base["ignore"] = tuple(tuple(r) for r in base.get("ignore", ()))
    try:
        logged = Settings(**base)
    except (TypeError, StabilizeError):
        logged = Settings()
    return logged.replace(**{k: v for k, v in options.items() if v is not None})


def _nominal_fps(motion: MotionLog) -> float:
    """The container's frame rate of a log (frames per second): its source's, else the one
    its summary was computed with."""
    for fps in (motion.source.get("fps"), motion.summary.get("fps_nominal"),
                motion.summary.get("fps")):
        if isinstance(fps, int | float) and not isinstance(fps, bool) and fps > 0:
            return float(fps)
    return 0.0


def _frame_rate(motion: MotionLog) -> float:
    """The real mean frame rate of a log (frames per second), from its timestamps
    (:func:`stabilize.shake.frame_rate`), else the container's nominal rate."""
    fps = shake.frame_rate(motion.time_s, _nominal_fps(motion))
    if fps > 0:
        return fps
    raise StabilizeError("the motion log has no usable frame rate (source fps missing)")


def _uneven_times(motion: MotionLog) -> np.ndarray | None:
    """The log's frame times when they are irregular (the shake is then resampled), else
    None."""
    return motion.time_s if shake.timestamps_irregular(motion.time_s) else None


def _existing(path: str | os.PathLike | None, *, base: Path) -> Path | None:
    if not path:
        return None
    p = Path(path)
    if not p.is_absolute() and not p.exists():
        p = base / p
    return p if p.is_file() else None


def _videos(motion: MotionLog, clip: Path | None, log_csv: Path | None,
            name: str) -> tuple[Path | None, Path | None]:
    """The source clip and the steadied video of a log, where they can still be found."""
    base = log_csv.parent if log_csv else Path(".")
    if clip is None:
        clip = _existing(motion.source.get("path"), base=base)
    steadied = _existing(motion.extra.get("outputs", {}).get("video"), base=base)
    if steadied is None:
        for folder in {base, *([clip.parent] if clip else [])}:
            candidate = folder / f"{name}.steady.mp4"
            if candidate.is_file():
                steadied = candidate
                break
    return clip, steadied


# -------------------------------------------------------------------- outputs
def plan_outputs(name: str, out_dir: Path, *, frames: bool, log: bool) -> dict[str, Path]:
    """The files a report writes into ``out_dir``, by role."""
    outs = {"json": out_dir / f"{name}.shake.json", "html": out_dir / f"{name}.report.html",
            "path_plot": out_dir / f"{name}.path.png",
            "spectrum_plot": out_dir / f"{name}.spectrum.png",
            "fit_plot": out_dir / f"{name}.fit.png"}
    if frames:
        outs["frames_plot"] = out_dir / f"{name}.frames.png"
    if log:
        outs["log_csv"] = out_dir / f"{name}.motion.csv"
        outs["log_json"] = out_dir / f"{name}.motion.json"
    return outs


def check_outputs(inputs: list[Path], outputs: dict[str, Path], force: bool) -> None:
    """Refuse, before any work, outputs that would replace an input, exist (without
    ``--force``) or cannot be written."""
    srcs = [p.resolve() for p in inputs]
    for p in outputs.values():
        if p.resolve() in srcs:
            raise StabilizeError(f"{p}: output would overwrite an input; choose another --out")
        if p.is_dir():
            raise StabilizeError(f"{p}: output name is an existing folder")
        if p.exists() and not force:
            raise StabilizeError(f"{p}: already exists (use --force to overwrite)")
        check_writable_folder(p)


def _write_bytes_atomic(final: Path, data: bytes) -> None:
    tmp = temp_path_for(final)
    try:
        tmp.write_bytes(data)
        publish(tmp, final)
    finally:
        if tmp.exists():
            tmp.unlink()


# ---------------------------------------------------------------------- work
@all_or_nothing()
def make_report(clip_or_log: str | os.PathLike, out_dir: str | os.PathLike | None = None, *,
                config: str | None = None, progress: ProgressFactory | None = None,
                **options: Any) -> Report:
    """Write the shake report of a clip or of its motion log.

    Parameters
    ----------
    clip_or_log : a motion log (``NAME.motion.csv`` or its ``.json``), or a clip. For a clip,
        ``NAME.motion.csv`` beside it is read when it exists; otherwise the clip is measured
        first and the new log is written into ``out_dir`` too.
    out_dir : folder for the outputs (created when missing); default: beside the input.
    config : TOML settings file or preset name, as for the other jobs.
    progress : progress-bar factory, as for :func:`stabilize.measure`.
    **options : command-line options; ``fov_deg`` and ``shake_above_hz`` change the figures,
        ``force`` allows overwriting earlier outputs.

    Returns
    -------
    Report : the paths written, the summary and the notes on its uncertainty.
    """
    from . import pipeline

    src = Path(clip_or_log)
    if not src.is_file():
        raise StabilizeError(f"{src}: no such file")
    name = report_name(src)
    clip: Path | None = None
    log_csv: Path | None = None
    motion: MotionLog | None = None
    if _is_log(src):
        log_csv = src.with_suffix(".csv") if src.suffix.lower() == ".json" else src
        motion = read_log(log_csv)
        settings = _settings_for_log(motion, config, options)
    else:
        clip = src
        beside = src.with_name(f"{name}.motion.csv")
        if beside.is_file():
            log_csv = beside
            motion = read_log(beside)
            settings = _settings_for_log(motion, config, options)
        else:
            settings = pipeline._settings(config, dict(options))
    folder = Path(out_dir) if out_dir else src.parent
    if folder.exists() and not folder.is_dir():
        raise StabilizeError(f"{folder}: --out must be a folder")
    folder.mkdir(parents=True, exist_ok=True)

    # Before the (possibly long) measurement, settle every output and refuse clashes.
    if motion is None:
        video_at_hand: tuple[Path | None, Path | None] = (clip, None)
        steady_guess = src.with_name(f"{name}.steady.mp4")
        if steady_guess.is_file():
            video_at_hand = (clip, steady_guess)
    else:
        video_at_hand = _videos(motion, clip, log_csv, name)
    inputs = [p for p in (src, log_csv, *video_at_hand) if p is not None]
    if log_csv is not None:
        inputs.append(log_csv.with_suffix(".json"))
    outputs = plan_outputs(name, folder, frames=video_at_hand[0] is not None,
                           log=motion is None)
    check_outputs(inputs, outputs, settings.force)

    if motion is None:
        motion = pipeline.measure(src, progress=progress, settings=settings)
        motion.save(outputs["log_csv"])
        log_csv = outputs["log_csv"]

    fps = _frame_rate(motion)
    summary = _summary(motion, settings, fps)
    notes = shake.uncertainty_notes(summary)
    images = {
        "path_plot": plot_path(motion, settings, fps),
        "spectrum_plot": plot_spectrum(motion, settings, fps, summary),
        "fit_plot": plot_fit(motion),
    }
    if "frames_plot" in outputs:
        frames_png = plot_frames(motion, settings, fps, *video_at_hand)
        if frames_png is None:
            del outputs["frames_plot"]
        else:
            images["frames_plot"] = frames_png
    for role, data in images.items():
        _write_bytes_atomic(outputs[role], data)

    settings_used = settings.to_dict()
    doc = {
        "format": FORMAT, "version": VERSION,
        "source": motion.source, "log": str(log_csv) if log_csv else None,
        "settings": settings_used, "summary": summary, "notes": notes,
        "cautions": list(CAUTIONS),
        "plots": {role: outputs[role].name for role in images},
    }
    from . import __version__

    doc["tool_version"] = __version__
    write_text_atomic(outputs["json"],
                      json.dumps(_jsonable(doc), indent=2, allow_nan=False) + "\n")
    html = render_page(name=name, source=motion.source, summary=summary, notes=notes,
                       settings=settings_used, cautions=CAUTIONS, images=images,
                       log_name=log_csv.name if log_csv else None, tool_version=__version__)
    write_text_atomic(outputs["html"], html)
    return Report(outputs=outputs, summary=summary, notes=notes, settings=settings_used)


def _summary(motion: MotionLog, settings: Settings, fps: float) -> dict[str, Any]:
    """The log's summary with the shake figures worked out again from its per-frame data, so a
    report honours the ``--fov-deg`` and ``--shake-above-hz`` given now and shows figures
    added since the log was written. Keys only the writing job knows (margin …) are kept."""
    w, h = motion.size
    fresh = shake.summarise(
        matrices=motion.matrices, path=motion.path, status=motion.status,
        fps=_nominal_fps(motion) or fps, width=w, height=h,
        above_hz=settings.shake_above_hz, fov_deg=settings.fov_deg,
        smooth_readout=motion.smooth_values, corrections=motion.corrections,
        time_s=motion.time_s, rms_px=motion.rms_px, inliers=motion.inliers,
        output_motion_readout=motion.output_check, reasons=reasons_of(motion),
    )
    if motion.output_check is not None and motion.corrections is not None:
        fresh |= residual.steadiness(motion.output_check, motion.source_check,
                                     cuts=motion.status == "cut", fps=fresh["fps"],
                                     above_hz=settings.shake_above_hz, width=w, height=h)
    out = dict(motion.summary)
    out.update(fresh)
    # Keys only later stages know (output_steadier …) count in the verdict too.
    out.update(shake.trust_verdict(out))
    out["fov_deg"] = settings.fov_deg
    finite = np.isfinite(motion.inlier_ratio) & (motion.tracked > 0)
    out["inlier_ratio_median"] = (float(np.median(motion.inlier_ratio[finite]))
                                  if finite.any() else None)
    good = np.isfinite(motion.rms_px) & (motion.status != "failed")
    out["fit_rms_px_median"] = float(np.median(motion.rms_px[good])) if good.any() else None
    return out


# ---------------------------------------------------------------------- plots
#: Cautions shown on every page, in plain words (from the README's Cautions section).
CAUTIONS: tuple[str, ...] = (
    "Steadied footage is altered footage: every frame is shifted, rotated, scaled and cropped, "
    "and smoothing can hide real motion (a slowly swaying structure) or invent apparent motion "
    "at the edges. Check anything important in the original footage.",
    "This report is an aid for reviewing video. It is not a substitute for inspection by "
    "qualified people, and not a calibrated measurement of the structure or the aircraft.",
    "Shake figures describe the camera as the frames sample it. Vibration faster than half "
    "the frame rate (propellers, motors: often tens to hundreds of hertz) cannot be measured "
    "from video; it shows up at a false lower frequency or only as blur.",
    "Figures in degrees are only as right as the field of view (--fov-deg) given.",
    "Frames marked weak or failed were measured poorly or not at all; the more of them, the "
    "less certain every figure here.",
    "Flying is governed by local aviation rules. Nothing here changes what you may fly, "
    "where, or how close to a structure.",
)


def _figure(width_in: float, height_in: float):
    """A matplotlib figure on the Agg canvas, without pyplot (no global state is touched)."""
    try:
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


def plot_path(motion: MotionLog, settings: Settings, fps: float) -> bytes:
    """Raw and (when the log has it) smoothed camera path per axis against time, each above
    its shake (the path minus its low-pass at ``shake_above_hz``). PNG bytes."""
    raw = similarity_readout(motion.path, motion.centre)
    cuts = motion.status == "cut"
    uneven = _uneven_times(motion)
    shakes = shake.axis_shake(raw, cuts, fps=fps, above_hz=settings.shake_above_hz,
                              time_s=uneven)
    t = motion.time_s - motion.time_s[0]
    t_shake = shake.shake_times(cuts, motion.time_s, fps=fps,
                                above_hz=settings.shake_above_hz, resampled=uneven is not None)
    fig = _figure(8.0, 10.0)
    axes = fig.subplots(6, 1, sharex=True)
    for j, axis in enumerate(shake.AXES):
        ax_path, ax_shake = axes[2 * j], axes[2 * j + 1]
        ax_path.plot(t, raw[:, j], color=RAW, linewidth=1.3, label="raw path")
        if motion.smooth_values is not None:
            ax_path.plot(t, motion.smooth_values[:, j], color=SMOOTH, linewidth=1.6,
                         label="smoothed path")
        ax_path.set_title(f"{_AXIS_TITLE[axis]}: camera path", loc="left", fontsize=10,
                          color=INK)
        _style(ax_path, _AXIS_LABEL[axis])
        ax_path.legend(loc="best", fontsize=8, frameon=False)
        s = shakes[axis]
        if s is not None and t_shake is not None and len(s) == len(t_shake):
            rms = float(np.sqrt(np.mean(s**2)))
            ax_shake.plot(t_shake - motion.time_s[0], s, color=INK, linewidth=0.9)
            for sign in (-1, 1):
                ax_shake.axhline(sign * rms, color=SMOOTH, linewidth=0.9, linestyle="--")
            ax_shake.set_title(f"{_AXIS_TITLE[axis]}: shake above {settings.shake_above_hz:g}"
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


def plot_spectrum(motion: MotionLog, settings: Settings, fps: float,
                  summary: dict[str, Any]) -> bytes:
    """Welch power spectral density of the shake per axis, peaks labelled, from 0 Hz to the
    Nyquist frequency; the range below ``shake_above_hz`` is shaded (not counted as shake).
    PNG bytes."""
    raw = similarity_readout(motion.path, motion.centre)
    shakes = shake.axis_shake(raw, motion.status == "cut", fps=fps,
                              above_hz=settings.shake_above_hz, time_s=_uneven_times(motion))
    nyquist = 0.5 * fps
    fig = _figure(8.0, 7.5)
    axes = fig.subplots(3, 1, sharex=True)
    for ax, axis in zip(axes, shake.AXES, strict=True):
        unit = shake.axis_unit(axis)
        spec = None if shakes[axis] is None else shake.shake_spectrum(shakes[axis], fps)
        ax.axvspan(0, settings.shake_above_hz, color="#eef1f4", linewidth=0)
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
            peaks = shake.shake_peaks(shakes[axis], fps, settings.shake_above_hz, count=3)
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
    res = summary.get("spectrum_resolution_hz")
    res_text = "" if res is None else f", resolution {res:.2f} Hz"
    axes[-1].set_xlabel(f"frequency (Hz) — up to the Nyquist frequency {nyquist:g} Hz"
                        f"{res_text}; faster vibration cannot be measured", color=INK,
                        fontsize=9)
    return _png(fig)


def plot_fit(motion: MotionLog) -> bytes:
    """Per-frame inlier share of the motion fit, over a strip of frame status. PNG bytes."""
    from matplotlib.colors import ListedColormap
    from matplotlib.patches import Patch

    t = motion.time_s - motion.time_s[0]
    fig = _figure(8.0, 3.2)
    ax, strip = fig.subplots(2, 1, sharex=True, height_ratios=[4, 1])
    ratio = np.where(motion.tracked > 0, motion.inlier_ratio, np.nan)
    ax.plot(t, ratio, color=RAW, linewidth=1.2)
    ax.set_ylim(0, 1.05)
    ax.set_title("motion fit: share of tracked points that agree (inliers)", loc="left",
                 fontsize=10, color=INK)
    _style(ax, "inlier share")
    order = list(STATUS_COLOURS)
    codes = np.array([order.index(s) if s in order else 0 for s in motion.status])[None, :]
    dt = float(np.median(np.diff(t))) if len(t) > 1 else 1.0
    strip.imshow(codes, aspect="auto", interpolation="nearest",
                 cmap=ListedColormap([STATUS_COLOURS[s] for s in order]), vmin=-0.5,
                 vmax=len(order) - 0.5, extent=(t[0] - dt / 2, t[-1] + dt / 2, 0, 1))
    strip.set_yticks([])
    strip.set_xlabel("time (s)", color=INK, fontsize=9)
    strip.tick_params(colors=INK, labelsize=8)
    counts = {s: int(np.count_nonzero(motion.status == s)) for s in order}
    fig.legend(handles=[Patch(color=STATUS_COLOURS[s], label=f"{s} ({counts[s]})")
                        for s in order], loc="outside lower center", ncols=4, fontsize=8,
               frameon=False)
    return _png(fig)


def pick_frames(motion: MotionLog, settings: Settings, fps: float, count: int = 3) -> list[int]:
    """Frames worth comparing before and after: in each of ``count`` equal stretches of the
    clip, the frame whose shake moves the picture furthest."""
    raw = similarity_readout(motion.path, motion.centre)
    shakes = shake.axis_shake(raw, motion.status == "cut", fps=fps,
                              above_hz=settings.shake_above_hz)
    n = motion.frames
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
    from .io import iter_frames, probe

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


def plot_frames(motion: MotionLog, settings: Settings, fps: float, clip: Path | None,
                steadied: Path | None) -> bytes | None:
    """A few frames as shot and, when the steadied video is at hand, as steadied, side by
    side, with the same thin grid over both so that the motion between them can be seen.
    Returns PNG bytes, or None when no frame could be read."""
    if clip is None:
        return None
    wanted = pick_frames(motion, settings, fps)
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
    t0 = motion.time_s[0]
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
            ax.set_title(f"{label}, frame {i} ({motion.time_s[i] - t0:.2f} s)", fontsize=9,
                         color=INK, loc="left")
    return _png(fig)
