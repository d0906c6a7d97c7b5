"""The shake summary of one clip: every figure in one block, the trust verdict and plain notes.
"""

from __future__ import annotations

import numpy as np

from ..geometry import frame_centre, similarity_readout
from .figures import OUTPUT_MIN_MEASURED_SHARE, filled_motion, path_figures, readout_path
from .spectra import AXES
from .stability import (
    correction_figures,
    measured_frames,
    motion_noise,
    output_motion,
    stability_figures,
)
from .timebase import frame_gaps, frame_rate, missing_before, timestamps_irregular

__all__ = [
    "BRIGHTNESS_DRIFT_PX",
    "ROUGH_SHARE",
    "TRUST_LEVELS",
    "UNRELIABLE_SHARE",
    "summarise",
    "trust_verdict",
    "uncertainty_notes",
    "unlogged_source_shake",
]


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
    time_s: np.ndarray | None = None,
    rms_px: np.ndarray | None = None,
    inliers: np.ndarray | None = None,
    reasons: np.ndarray | None = None,
    output_motion_readout: np.ndarray | None = None,
) -> dict:
    """The summary block of the motion log's JSON (see the log format documentation).

    Parameters
    ----------
    matrices, path : (n, 3, 3) inter-frame transforms H_t and raw path P_t.
    status : (n,) frame status (``ok``, ``weak``, ``failed``, ``cut``, ``first``).
    fps : the container's nominal frame rate, frames per second. With ``time_s`` the figures
        use the real mean rate of the timestamps instead (:func:`frame_rate`).
    width, height : frame size, full-resolution pixels.
    above_hz : the shake cut-off, Hz.
    fov_deg : horizontal field of view, degrees, or None.
    smooth_readout, corrections : after smoothing, the smoothed path read out (n, 4) and
        C_t (n, 3, 3).
    time_s : (n,) frame times, seconds; None takes the frames as evenly spaced at ``fps``.
    rms_px, inliers : (n,) the fit's residual RMS (pixels) and inlier count per frame, for
        the measurement noise the stability score is judged against (:func:`motion_noise`).
    reasons : (n,) strings per frame from the analysis, '' when nothing to say, else a short
        code (``foreground``, ``textureless``, ``few_inliers`` …); counted into
        ``frames_foreground`` (with the ``held_still`` ones), ``frames_held_still``,
        ``frames_unconfirmed`` and ``frames_textureless``. Without it those keys are left
        out.
    output_motion_readout : (n, 3) the written video's inter-frame motion as measured on
        its frames (dx, dy pixels, degrees; nan where not measured; see
        :mod:`stabilize.residual`). When given, the ``_out`` figures describe it, and the
        figures of the plan (the smoothed path and the corrections) move to ``_planned``
        keys; the ``_out`` figures are null when too little of the output could be measured.

    Returns
    -------
    dict : the summary block, keys as documented in the motion-log format, with the verdict
    of :func:`trust_verdict`.
    """
    centre = frame_centre(width, height)
    cuts = status == "cut"
    motion = similarity_readout(matrices, centre)
    rate = frame_rate(time_s, fps) if time_s is not None else float(fps)
    irregular = timestamps_irregular(time_s)
    gaps = frame_gaps(time_s)
    # Frames the recorder dropped: the path is read in real time too, or the motion of the
    # gap would count as one frame's shake and the spectrum's time axis would slip there.
    uneven = np.asarray(time_s, dtype=np.float64) if irregular or gaps else None
    summary: dict = {
        "frames": int(len(status)),
        "frames_weak": int(np.count_nonzero(status == "weak")),
        "frames_failed": int(np.count_nonzero(status == "failed")),
        "cuts": int(np.count_nonzero(cuts)),
        "fps": float(rate),
        "fps_nominal": float(fps),
        "timestamps_irregular": irregular,
        "frames_missing": int(sum(missing for _, _, missing in gaps)),
        "gaps": [[round(t, 3), round(length, 3)] for t, length, _ in gaps],
        "shake_above_hz": float(above_hz),
        "nyquist_hz": 0.5 * float(rate),
    }
    n = max(1, len(status))
    # The shares say how far the figures can be trusted: weak frames are measured poorly,
    # failed frames carry a stand-in motion interpolated from their neighbours.
    summary["frames_weak_share"] = summary["frames_weak"] / n
    summary["frames_failed_share"] = summary["frames_failed"] / n
    if reasons is not None:
        codes = np.asarray(reasons).astype(str)
        # Frames held still because detail behind the tracks stayed put are also frames
        # whose tracks were an object's, not the camera's.
        held = int(np.count_nonzero(codes == "held_still"))
        summary["frames_foreground"] = int(np.count_nonzero(codes == "foreground")) + held
        summary["frames_held_still"] = held
        summary["frames_unconfirmed"] = int(np.count_nonzero(codes == "unconfirmed"))
        summary["frames_textureless"] = int(np.count_nonzero(codes == "textureless"))
    summary.update(path_figures(similarity_readout(path, centre), cuts, fps=rate,
                                above_hz=above_hz, width=width, fov_deg=fov_deg, bands=True,
                                time_s=uneven))
    noise = motion_noise(rms_px, inliers, status, width, height)
    summary["motion_noise_px"] = noise[0]
    # The frame after a gap moved over all the frames missing before it: no one frame's.
    measured = measured_frames(status) & (missing_before(time_s, len(status)) == 0)
    has_out = corrections is not None
    summary.update(stability_figures(motion[measured], "_in" if has_out else "", noise))
    if has_out:
        checked = output_motion_readout is not None
        planned = "_planned" if checked else "_out"
        out_motion = similarity_readout(output_motion(matrices, corrections), centre)
        summary.update(stability_figures(out_motion[measured], planned, noise))
        summary.update(correction_figures(corrections))
        if smooth_readout is not None:
            summary.update(path_figures(smooth_readout, cuts, fps=rate, above_hz=above_hz,
                                        width=width, fov_deg=fov_deg, suffix=planned,
                                        time_s=uneven))
        if checked:
            summary.update(_measured_output_figures(
                output_motion_readout, cuts, measured, fps=rate, above_hz=above_hz,
                width=width, height=height, fov_deg=fov_deg, time_s=uneven, noise=noise))
    summary.update(trust_verdict(summary))
    return summary


def _measured_output_figures(readout: np.ndarray, cuts: np.ndarray, measured: np.ndarray, *,
                             fps: float, above_hz: float, width: int, height: int,
                             fov_deg: float | None, time_s: np.ndarray | None,
                             noise: tuple[float, float]) -> dict:
    """The ``_out`` shake and stability figures of the output's measured motion (all null
    when under :data:`~stabilize.shake.figures.OUTPUT_MIN_MEASURED_SHARE` of its pairs were
    measured). The stability score leaves out the frames the input's leaves out
    (``measured``) and is judged against the same measurement noise."""
    filled = filled_motion(readout, cuts, OUTPUT_MIN_MEASURED_SHARE)
    dummy = np.zeros((len(cuts), 3))
    if filled is None:
        figs = path_figures(dummy, cuts, fps=fps, above_hz=above_hz, width=width,
                            fov_deg=fov_deg, suffix="_out")
        figs.update(stability_figures(dummy, "_out"))
        return {k: None for k in figs}
    figs = path_figures(readout_path(filled, cuts, width, height), cuts, fps=fps,
                        above_hz=above_hz, width=width, fov_deg=fov_deg, suffix="_out",
                        time_s=time_s)
    figs.update(stability_figures(filled[measured], "_out", noise))
    return figs


#: Shares of frames above which the figures are called rough, and unreliable: weak or failed
#: frames, frames whose motion could not be told apart from a large moving object, frames
#: with too little texture. Rules of thumb of this project, not from the literature.
ROUGH_SHARE, UNRELIABLE_SHARE = 0.10, 0.30


#: The verdict's levels, best first.
TRUST_LEVELS: tuple[str, ...] = ("sound", "rough", "unreliable")


#: The render's check of the source frames reads "shake the log does not have" when its
#: larger axis reads over this many times the log's larger axis and at least
#: :data:`UNLOGGED_MIN_PX` more (this project's rule of thumb: within a factor of two the two
#: measurements describe the same motion).
UNLOGGED_RATIO = 2.0
UNLOGGED_MIN_PX = 0.1


#: How far changes of brightness alone may have moved the logged path
#: (``brightness_drift_px``, :func:`stabilize.brightness.drift_px`) before the figures are
#: called rough, and unreliable, pixels. Rules of thumb of this project: that figure is a
#: first-order estimate, which read 0.5–1.0 px where drawn exposure ramps moved a still
#: camera's path by 0.5–1.4 px, and 1.5–2.4 px where they moved it by 1.0–3.4 px; the real
#: clips of ``tests/real`` read 0.38 px at most (``cup.mp4``; measured 2026-12-05).
BRIGHTNESS_DRIFT_PX = (0.5, 2.0)


def unlogged_source_shake(summary: dict) -> bool:
    """Whether the render's check of the source frames read clearly more shake than the
    motion log gives the source (``jitter_rms_*_px_src_check`` against ``jitter_rms_*_px``,
    pixels): the log missed the camera's motion, or the check followed an object moving
    before a still camera (a box slid across a table: 1.15 px read on the frames, 0.01 px in
    the log, measured on ``box.mp4``). False when either was not measured."""
    logged = [summary.get(f"jitter_rms_{a}_px") for a in ("x", "y")]
    checked = [summary.get(f"jitter_rms_{a}_px_src_check") for a in ("x", "y")]
    if any(v is None for v in (*logged, *checked)):
        return False
    lg, ck = max(logged), max(checked)
    return bool(ck > UNLOGGED_RATIO * lg and ck - lg >= UNLOGGED_MIN_PX)


def trust_verdict(summary: dict) -> dict:
    """A plain verdict on how far one clip's figures can be trusted.

    Parameters
    ----------
    summary : a summary as from :func:`summarise`, possibly with keys added by later stages
        (``output_steadier``).

    Returns
    -------
    dict with ``trust``, one of :data:`TRUST_LEVELS` (the worst level any reason gives), and
    ``trust_reasons``, a list of one-sentence reasons (empty when ``sound``):

    - weak or failed frames over :data:`ROUGH_SHARE` (rough) or :data:`UNRELIABLE_SHARE`
      (unreliable) of the frames;
    - frames whose motion could not be told apart from a large moving object
      (``frames_foreground``), or with too little texture (``frames_textureless``), over
      the same shares;
    - frames tracked on a part of the picture that nothing in the plain rest confirmed
      (``frames_unconfirmed``, weak but left out of the share above), over the same shares;
    - the steadied video measured no steadier than the input (``output_steadier`` false):
      rough (the reason says when the check also read shake the log does not have,
      :func:`unlogged_source_shake`);
    - the steadied video could not be measured well enough to say (``output_steadier`` null
      after a render: ``output_pairs_measured`` given; ``output_unchecked_weak_frames``
      named): rough, nothing then vouches for it;
    - changes of brightness that may alone have moved the logged path
      (``brightness_drift_px``) by over :data:`BRIGHTNESS_DRIFT_PX` (rough, unreliable);
    - irregular frame times (``timestamps_irregular``): rough, the path was resampled;
    - frames missing (``frames_missing``, gaps in the frame times) over the same shares of
      the frames there should have been.
    """
    reasons: list[tuple[int, str]] = []
    n = max(1, int(summary.get("frames") or 0))

    def by_share(count: int, rough: str, unreliable: str) -> None:
        share = count / n
        if share > UNRELIABLE_SHARE:
            reasons.append((2, f"{share:.0%} of frames {unreliable}"))
        elif share > ROUGH_SHARE:
            reasons.append((1, f"{share:.0%} of frames {rough}"))

    weak, failed = int(summary.get("frames_weak") or 0), int(summary.get("frames_failed") or 0)
    unconfirmed = int(summary.get("frames_unconfirmed") or 0)
    by_share(weak - unconfirmed + failed,
             "were weak or failed: treat these figures as rough estimates.",
             "were weak or failed: these figures are not reliable; check the per-frame strip "
             "and the original footage.")
    by_share(int(summary.get("frames_foreground") or 0),
             "had motion that could not be told apart from a large moving object: the "
             "figures may partly describe that object, not the camera.",
             "had motion that could not be told apart from a large moving object: these "
             "figures may describe that object, not the camera.")
    plain = ("were tracked on detail covering only part of the picture, with nothing in the "
             "plain rest (a bare wall, a clear sky) to tell a moving object before a still "
             "camera from a moving camera")
    by_share(unconfirmed, f"{plain}: treat these figures as rough estimates.",
             f"{plain}: these figures are not reliable (setting plain_surround says which was "
             "assumed).")
    by_share(int(summary.get("frames_textureless") or 0),
             "had too little texture to measure (plain sky, water, fog or blur).",
             "had too little texture to measure (plain sky, water, fog or blur): these "
             "figures are not reliable.")
    if summary.get("output_steadier") is False:
        if unlogged_source_shake(summary):
            reasons.append((1, "The steadied video was measured no steadier than the input, "
                               "and that measurement found shake in the input that the motion "
                               "log does not have: either the log missed the camera's motion "
                               "or the measurement followed something moving in front of a "
                               "still camera; check it against the original footage."))
        else:
            reasons.append((1, "The steadied video was measured no steadier than the input: "
                               "check it against the original footage."))
    elif summary.get("output_steadier") is None and summary.get("output_pairs_measured") \
            is not None:
        share = float(summary["output_pairs_measured"])
        weak = int(summary.get("output_unchecked_weak_frames") or 0)
        gaps = (f", and {weak} frames the log found weak have an output pair that nothing "
                "measured" if weak else "")
        reasons.append((1, f"The steadied video could not be checked ({share:.0%} of its frame "
                           f"pairs could be measured{gaps}): nothing says it is "
                           "steadier than the input, and it may not be; look at it against the "
                           "original footage."))
    drift = summary.get("brightness_drift_px")
    if drift is not None and drift > BRIGHTNESS_DRIFT_PX[0]:
        reasons.append((2 if drift > BRIGHTNESS_DRIFT_PX[1] else 1,
                        f"The picture's brightness changed (automatic exposure, or the light) "
                        f"while the tracked detail was faint: tracking reads such a change as "
                        f"motion, and the logged path may be off by about {drift:.1f} px or "
                        f"more from that alone."))
    if summary.get("timestamps_irregular"):
        nominal, rate = summary.get("fps_nominal"), summary.get("fps")
        said = f" (the container says {nominal:.3g} fps)" if nominal else ""
        real = f" of {rate:.3g} fps" if rate else ""
        reasons.append((1, f"The frame times are irregular{said}: the path was resampled "
                           f"onto an even time grid at the real mean rate{real}; motion "
                           "between frames is interpolated, not measured."))
    missing = int(summary.get("frames_missing") or 0)
    if missing and missing / (n + missing) > ROUGH_SHARE:
        share = missing / (n + missing)
        reasons.append((2 if share > UNRELIABLE_SHARE else 1,
                        f"{share:.0%} of the clip's frames are missing (gaps in its frame "
                        "times): the motion across the gaps is interpolated, not measured."))
    level = max((lv for lv, _ in reasons), default=0)
    return {"trust": TRUST_LEVELS[level], "trust_reasons": [text for _, text in reasons]}


def uncertainty_notes(summary: dict) -> list[str]:
    """Plain-language notes on how far one clip's figures can be trusted.

    Parameters
    ----------
    summary : a summary as from :func:`summarise`.

    Returns
    -------
    list of one-sentence notes (possibly empty): first the reasons of the verdict
    (:func:`trust_verdict`), then frames missing from the clip, frames with a stand-in
    motion, scene cuts, a frame rate too low for the shake band, a shake peak close to the
    Nyquist frequency (possibly aliased faster vibration), a clip too short to resolve
    frequency finely, no field of view for figures in degrees.
    """
    notes: list[str] = list(trust_verdict(summary)["trust_reasons"])
    missing = int(summary.get("frames_missing") or 0)
    n = int(summary.get("frames") or 0)
    if missing and missing / max(1, n + missing) <= ROUGH_SHARE:
        where = ", ".join(f"{length:.2g} s after {t:.3g} s"
                          for t, length in (summary.get("gaps") or [])[:5])
        notes.append(f"{missing} frame(s) are missing from the clip ({where}): the figures "
                     "read the path in real time, interpolated across the gaps.")
    failed = int(summary.get("frames_failed") or 0)
    if failed:
        notes.append(f"{failed} frame(s) had no trustworthy motion fit; their motion is a "
                     "stand-in interpolated from the neighbouring frames.")
    if summary.get("cuts"):
        notes.append(f"{summary['cuts']} scene cut(s): the figures are computed per shot and "
                     "pooled; motion across a cut is not counted.")
    nyquist = summary.get("nyquist_hz")
    above = summary.get("shake_above_hz")
    if nyquist and above and nyquist <= above:
        notes.append(f"At {2.0 * nyquist:.3g} frames per second nothing above the shake "
                     f"cut-off of {above:.3g} Hz can be measured (the Nyquist frequency is "
                     f"{nyquist:.3g} Hz): there are no shake figures.")
    elif nyquist and above and nyquist < 2.0 * above:
        notes.append(f"At {2.0 * nyquist:.3g} frames per second only shake between "
                     f"{above:.3g} and {nyquist:.3g} Hz (the Nyquist frequency) can be "
                     "measured; faster shake is missed or folded down.")
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
        notes.append("No field of view was given (setting 'fov_deg'): figures in degrees are not "
                     "available.")
    return notes
