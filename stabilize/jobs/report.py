"""The report job: shake figures as JSON, plots as PNG, and one self-contained HTML page.

``stabilize report CLIP_OR_LOG`` reads a motion log (or measures the clip first), works out the
shake figures again from the log's per-frame data (:mod:`stabilize.jobs.figures`), draws the
plots (:mod:`stabilize.report_plots`) and writes, into the output folder:

* ``NAME.shake.json``: the summary, the notes on its uncertainty and the settings used;
* ``NAME.path.png``, ``NAME.spectrum.png``, ``NAME.fit.png`` and, when the video is at hand,
  ``NAME.frames.png``;
* ``NAME.report.html``: everything above on one page (:mod:`stabilize.report_page`), the
  images embedded as data URIs, with no network access, readable on a phone.

Every file is written under a temporary name and renamed when complete.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .. import report_plots, shake
from ..config import Settings, logged_settings, resolve_settings
from ..errors import StabilizeError
from ..geometry import similarity_readout
from ..io import all_or_nothing, publish, temp_path_for, write_text_atomic
from ..io.motion_log_files import json_path_for, jsonable, read_log, save_log
from ..io.publishing import naming_errors
from ..motion_log import MotionLog, reasons_of
from ..report_page import CAUTIONS, render_page
from ..rolling import RollingShutter, analyse_rolling, rolling_figures
from ..version import __version__
from .analysis import ProgressFactory, measure_clip
from .figures import shake_summary
from .outputs import check_outputs, log_name, motion_log, report_files, steady_video

__all__ = [
    "FORMAT", "VERSION", "Report", "find_videos", "make_report", "report_figures",
    "report_for_log",
]

FORMAT = "stabilize-shake-report"
VERSION = 1


@dataclass
class Report:
    """What :func:`make_report` wrote: output paths by role, the summary and its notes."""

    outputs: dict[str, Path]
    summary: dict[str, Any]
    notes: list[str]
    settings: dict[str, Any] = field(default_factory=dict)


def _nominal_fps(motion: MotionLog) -> float:
    """The container's frame rate of a log (frames per second): its source's, else the one
    its summary was computed with; 0 when none is known."""
    for fps in (motion.source.get("fps"), motion.summary.get("fps_nominal"),
                motion.summary.get("fps")):
        if isinstance(fps, int | float) and not isinstance(fps, bool) and fps > 0:
            return float(fps)
    return 0.0


def report_figures(motion: MotionLog, settings: Settings) -> tuple[dict[str, Any], float]:
    """The log's summary with the shake figures worked out again from its per-frame data, so a
    report honours the field of view and shake cut-off given now and shows figures added
    since the log was written. Keys only the writing job knows (margin …) are kept.

    Parameters
    ----------
    motion : the motion log (not changed).
    settings : supplies ``fov_deg`` (degrees) and ``shake_above_hz`` (Hz).

    Returns
    -------
    summary : dict, the log's summary with the fresh figures laid over it (pixels, degrees,
        Hz as the keys say).
    fps : float, the real frame rate (Hz) of the log's timestamps
        (:func:`stabilize.shake.frame_rate`).

    Raises
    ------
    StabilizeError
        When the log has no usable frame rate.
    """
    nominal = _nominal_fps(motion)
    fps = shake.frame_rate(motion.time_s, nominal)
    if not fps > 0:
        raise StabilizeError("the motion log has no usable frame rate (source fps missing)")
    w, h = motion.size
    fresh = shake_summary(
        matrices=motion.matrices, status=motion.status, time_s=motion.time_s,
        rms_px=motion.rms_px, inliers=motion.inliers, reasons=reasons_of(motion), width=w,
        height=h, fps_nominal=nominal or fps, above_hz=settings.shake_above_hz,
        fov_deg=settings.fov_deg, smooth_values=motion.smooth_values,
        corrections=motion.corrections, output_check=motion.output_check,
        source_check=motion.source_check,
        steadiness=motion.output_check is not None and motion.corrections is not None)
    out = dict(motion.summary)
    out.update(fresh)
    # Keys only later stages know (output_steadier …) count in the verdict too.
    out.update(shake.trust_verdict(out))
    rolling = log_rolling(motion, settings)
    if rolling is not None:
        out.update(rolling_figures(rolling))
    out["fov_deg"] = settings.fov_deg
    finite = np.isfinite(motion.inlier_ratio) & (motion.tracked > 0)
    out["inlier_ratio_median"] = (float(np.median(motion.inlier_ratio[finite]))
                                  if finite.any() else None)
    good = np.isfinite(motion.rms_px) & (motion.status != "failed")
    out["fit_rms_px_median"] = float(np.median(motion.rms_px[good])) if good.any() else None
    return out, fps


def log_rolling(motion: MotionLog, settings: Settings) -> RollingShutter | None:
    """The rolling-shutter analysis of a log's row bands at the readout it was timed with
    (None without row bands or with readout 0)."""
    rb = motion.row_bands
    fps = _nominal_fps(motion)
    if rb is None or rb.readout_s <= 0 or not fps > 0:
        return None
    w, h = motion.size
    return analyse_rolling(rb.shift_px, rb.support, fps=fps, width=w, height=h,
                           readout_ms=1000.0 * rb.readout_s, fov_deg=settings.fov_deg)


def _vibration_png(rolling: RollingShutter | None, summary: dict[str, Any],
                   layout: str) -> bytes | None:
    if rolling is None or rolling.vibration is None:
        return None
    spec = rolling.vibration.spectrum
    return report_plots.plot_vibration(
        freqs_hz=spec.freqs_hz, amplitude_px=spec.amplitude_px, usable=spec.usable,
        blind_hz=list(spec.blind_hz), fps=rolling.fps, peak_hz=summary.get("vibration_hz"),
        peak_px=summary.get("vibration_px"), false_alarm=summary.get("vibration_false_alarm"),
        readout_ms=1000.0 * rolling.readout_s, layout=layout)


def _existing(path: str | os.PathLike | None, *, base: Path) -> Path | None:
    if not path:
        return None
    p = Path(path)
    if not p.is_absolute() and not p.exists():
        p = base / p
    return p if p.is_file() else None


def find_videos(motion: MotionLog, clip: Path | None, log_csv: Path | None,
            name: str) -> tuple[Path | None, Path | None]:
    """The source clip and the steadied video of a log, where they can still be found.

    Relative paths in the log are tried as they are, then against the log's folder.

    Parameters
    ----------
    motion : the motion log; its ``source["path"]`` and ``extra["outputs"]["video"]`` are read.
    clip : the source clip when already known (then used as it is), or None.
    log_csv : the log's CSV path, or None for a log only in memory (then the current folder).
    name : the clip's name, for the default steadied-video name.

    Returns
    -------
    (clip, steadied) : existing paths, each None when not found.
    """
    base = log_csv.parent if log_csv else Path(".")
    if clip is None:
        clip = _existing(motion.source.get("path"), base=base)
    steadied = _existing(motion.extra.get("outputs", {}).get("video"), base=base)
    if steadied is None:
        for folder in {base, *([clip.parent] if clip else [])}:
            candidate = steady_video(folder, name)
            if candidate.is_file():
                steadied = candidate
                break
    return clip, steadied


def _write_bytes_atomic(final: Path, data: bytes) -> None:
    tmp = temp_path_for(final)
    try:
        with naming_errors(final):
            tmp.write_bytes(data)
        publish(tmp, final)
    finally:
        if tmp.exists():
            tmp.unlink()


def report_for_log(motion: MotionLog, settings: Settings, outputs: dict[str, Path], *,
                   name: str, log_csv: Path | None, clip: Path | None,
                   steadied: Path | None) -> Report:
    """Work out the figures, draw the plots and write the report files of a log in memory.

    ``outputs`` are the files by role (:func:`stabilize.jobs.outputs.report_files`), already
    checked; ``frames_plot`` is dropped when no frame can be read.

    Parameters
    ----------
    motion : the motion log (not changed).
    settings : the report's settings (field of view, degrees; shake cut-off, Hz).
    outputs : output path by role (``json``, ``html``, ``path_plot`` …).
    name : the clip's name, for the page's title.
    log_csv : the log's CSV path, or None when it was not written.
    clip, steadied : the source clip and steadied video for the frames plot, or None.

    Returns
    -------
    Report : the paths written, the summary and the notes on its uncertainty.
    """
    outputs = dict(outputs)
    summary, fps = report_figures(motion, settings)
    notes = shake.uncertainty_notes(summary)
    raw = similarity_readout(motion.path, motion.centre)
    cuts = motion.status == "cut"
    above = settings.shake_above_hz
    rolling = log_rolling(motion, settings) if "vibration_plot" in outputs else None
    wanted = report_plots.pick_frames(raw, cuts, fps=fps, above_hz=above)
    pairs = (report_plots.read_frame_pairs(wanted, clip, steadied)
             if "frames_plot" in outputs else ({}, {}))

    def draw(layout: str) -> dict[str, bytes | None]:
        """Every plot in one layout (:data:`stabilize.report_plots.LAYOUTS`), by role."""
        drawn: dict[str, bytes | None] = {
            "path_plot": report_plots.plot_path(time_s=motion.time_s, raw=raw,
                                                smooth=motion.smooth_values, cuts=cuts,
                                                fps=fps, above_hz=above, layout=layout),
            "spectrum_plot": report_plots.plot_spectrum(
                time_s=motion.time_s, raw=raw, cuts=cuts, fps=fps, above_hz=above,
                resolution_hz=summary.get("spectrum_resolution_hz"), layout=layout),
            "fit_plot": report_plots.plot_fit(time_s=motion.time_s, tracked=motion.tracked,
                                              inlier_ratio=motion.inlier_ratio,
                                              status=motion.status, layout=layout),
        }
        if "vibration_plot" in outputs:
            drawn["vibration_plot"] = _vibration_png(rolling, summary, layout)
        if "frames_plot" in outputs:
            drawn["frames_plot"] = report_plots.plot_frames(
                time_s=motion.time_s, wanted=wanted, pairs=pairs, layout=layout,
                # Photographs: the page's phone copy as JPEG, in a fraction of the bytes.
                image_format="png" if layout == "wide" else "jpeg")
        return drawn

    # The PNG files and the page's large-screen plots are the wide layout; the page shows
    # the narrow one on phones.
    wide = draw("wide")
    for role in ("vibration_plot", "frames_plot"):
        if role in wide and wide[role] is None:
            del outputs[role]
    images = {role: data for role, data in wide.items() if data is not None}
    narrow = {role: data for role, data in draw("narrow").items()
              if data is not None and role in images}
    for role, data in images.items():
        _write_bytes_atomic(outputs[role], data)

    settings_used = settings.to_dict()
    doc = {
        "format": FORMAT, "version": VERSION,
        "source": motion.source, "log": str(log_csv) if log_csv else None,
        "settings": settings_used, "summary": summary, "notes": notes,
        "cautions": list(CAUTIONS),
        "plots": {role: outputs[role].name for role in images},
        "tool_version": __version__,
    }
    write_text_atomic(outputs["json"],
                      json.dumps(jsonable(doc), indent=2, allow_nan=False) + "\n")
    html = render_page(name=name, source=motion.source, summary=summary, notes=notes,
                       settings=settings_used, images=images, narrow_images=narrow,
                       log_name=log_csv.name if log_csv else None, tool_version=__version__)
    write_text_atomic(outputs["html"], html)
    return Report(outputs=outputs, summary=summary, notes=notes, settings=settings_used)


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
    **options : the jobs' options; ``fov_deg`` and ``shake_above_hz`` change the figures,
        ``force`` allows overwriting earlier outputs.

    Returns
    -------
    Report : the paths written, the summary and the notes on its uncertainty.
    """
    src = Path(clip_or_log)
    if not src.is_file():
        raise StabilizeError(f"{src}: no such file")
    name = log_name(src)
    clip: Path | None = None
    log_csv: Path | None = None
    motion: MotionLog | None = None
    if src.suffix.lower() in (".csv", ".json"):
        log_csv = src.with_suffix(".csv") if src.suffix.lower() == ".json" else src
    else:
        clip = src
        beside = motion_log(src.parent, name)
        log_csv = beside if beside.is_file() else None
    if log_csv is not None:
        motion = read_log(log_csv)
        settings = logged_settings(motion.settings, config, options)
    else:
        settings = resolve_settings(config, options)
    folder = Path(out_dir) if out_dir else src.parent
    if folder.exists() and not folder.is_dir():
        raise StabilizeError(f"{folder}: not a folder (the report's outputs need one)")
    folder.mkdir(parents=True, exist_ok=True)

    # Before the (possibly long) measurement, settle every output and refuse clashes.
    if motion is None:
        video_at_hand: tuple[Path | None, Path | None] = (clip, None)
        steady_guess = steady_video(src.parent, name)
        if steady_guess.is_file():
            video_at_hand = (clip, steady_guess)
    else:
        video_at_hand = find_videos(motion, clip, log_csv, name)
    inputs = [p for p in (src, log_csv, *video_at_hand) if p is not None]
    if log_csv is not None:
        inputs.append(json_path_for(log_csv))
    outputs = report_files(folder, name, frames=video_at_hand[0] is not None,
                           log=motion is None,
                           vibration=(motion.row_bands is not None if motion is not None
                                      else settings.readout_ms != 0))
    check_outputs(inputs, outputs, settings.force)

    if motion is None:
        motion = measure_clip(src, settings, progress)
        save_log(motion, outputs["log_csv"])
        log_csv = outputs["log_csv"]
    return report_for_log(motion, settings, outputs, name=name, log_csv=log_csv,
                          clip=video_at_hand[0], steadied=video_at_hand[1])
