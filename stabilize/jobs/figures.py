"""The shake figures of a job's log: the summary block, composed from the shake and
steadiness stages over the log's per-frame arrays."""

from __future__ import annotations

import logging
from typing import Any

import numpy as np

from .. import shake
from ..raw_path import accumulate
from ..steadiness import carried_readout, measured_share, pair_frames, with_carried
from ..steadiness import steadiness as output_against_source

__all__ = ["shake_summary", "warn_if_irregular"]

_log = logging.getLogger("stabilize")


def shake_summary(*, matrices: np.ndarray, status: np.ndarray, time_s: np.ndarray,
                  rms_px: np.ndarray, inliers: np.ndarray, reasons: np.ndarray,
                  width: int, height: int, fps_nominal: float, above_hz: float,
                  fov_deg: float | None, smooth_values: np.ndarray | None = None,
                  corrections: np.ndarray | None = None,
                  output_check: np.ndarray | None = None,
                  source_check: np.ndarray | None = None,
                  steadiness: bool = False) -> dict[str, Any]:
    """Shake figures of one clip (:func:`stabilize.shake.summarise`), in real time (the
    frames' own timestamps), and with ``steadiness`` the comparison of the written video
    with its source (:func:`stabilize.steadiness.steadiness`).

    Parameters
    ----------
    matrices : (n, 3, 3) inter-frame transforms H_t, pixels (conventions of
        :mod:`stabilize.motion_log` and :mod:`stabilize.geometry`).
    status : (n,) per-frame status (``ok``, ``weak``, ``failed``, ``cut``, ``first``).
    time_s : (n,) frame times, s.
    rms_px : (n,) fit residual, px.
    inliers : (n,) counts.
    reasons : (n,) per-frame reason codes ('' for none).
    width, height : frame size, px.
    fps_nominal : the container's rate, frames per second (Hz).
    above_hz : shake cut-off, Hz.
    fov_deg : horizontal field of view, degrees, or None.
    smooth_values : (n, 4) smoothed path readout (x, y px, degrees, scale); None before
        smoothing.
    corrections : (n, 3, 3) C_t; None before smoothing.
    output_check, source_check : (n, 3) dx, dy (px) and degrees measured while rendering, on
        the output and on the source; None before rendering. Output pairs that could not
        be measured on the output take the source's measured motion carried through the
        corrections (:func:`stabilize.steadiness.with_carried`; ``output_pairs_carried``).
    steadiness : whether to add the figures of the written video against its source.

    Returns
    -------
    dict : the summary keys (the verdict is added by the job, over every key it has).
    """
    cuts = status == "cut"
    direct = output_check
    carried = None
    unchecked_weak = None
    if output_check is not None and source_check is not None and corrections is not None:
        output_check, carried = with_carried(
            output_check, carried_readout(source_check, corrections, cuts, width, height), cuts)
    if output_check is not None:
        # A pair of the output that nothing measured, at a frame the log did not measure
        # with confidence, may hold a jump that bridging it would hide: then no figure
        # vouches for the video.
        gaps = pair_frames(cuts) & ~np.isfinite(output_check).all(axis=1) & (status != "ok")
        unchecked_weak = int(np.count_nonzero(gaps))
        if unchecked_weak:
            output_check = np.full_like(output_check, np.nan)
    summary = shake.summarise(
        matrices=matrices, path=accumulate(matrices, cuts), status=status, fps=fps_nominal,
        width=width, height=height, above_hz=above_hz, fov_deg=fov_deg,
        smooth_readout=smooth_values, corrections=corrections, time_s=time_s, rms_px=rms_px,
        inliers=inliers, reasons=reasons, output_motion_readout=output_check,
    )
    if steadiness:
        # Read in real time where the summary's own figures were (irregular or missing
        # frames), so the two streams compare as the figures beside them do.
        real_time = summary["timestamps_irregular"] or summary["frames_missing"]
        summary |= output_against_source(output_check, source_check, cuts=cuts,
                                       fps=summary["fps"], above_hz=above_hz, width=width,
                                       height=height, time_s=time_s if real_time else None)
        if direct is not None:
            summary["output_pairs_measured"] = measured_share(direct, cuts)
            pairs = max(1, int(np.count_nonzero(pair_frames(cuts))))
            summary["output_pairs_carried"] = (None if carried is None else
                                               float(np.count_nonzero(carried) / pairs))
            summary["output_unchecked_weak_frames"] = unchecked_weak
    return summary


def warn_if_irregular(where: Any, summary: dict[str, Any], nominal_fps: float) -> None:
    """Say so when the frame times are irregular (the figures use their real mean rate) or
    frames are missing (gaps in the times).

    Parameters
    ----------
    where : what to name in the warning (the clip or log).
    summary : the shake summary; ``timestamps_irregular``, ``fps`` (Hz), ``frames_missing``
        and ``gaps`` are read.
    nominal_fps : the container's frame rate, Hz.
    """
    if summary.get("timestamps_irregular"):
        _log.warning("%s: the frame times are irregular; the figures and the smoothing use "
                     "their real mean rate of %.3g fps, not the container's %.3g fps",
                     where, summary["fps"], nominal_fps)
    gaps = summary.get("gaps") or []
    if summary.get("frames_missing"):
        listed = ", ".join(f"{length:.2g} s after {t:.3g} s" for t, length in gaps[:5])
        more = f" and {len(gaps) - 5} more" if len(gaps) > 5 else ""
        _log.warning("%s: about %d frame(s) are missing (%s%s); the shake figures read the "
                     "path in real time, interpolated across the gaps", where,
                     summary["frames_missing"], listed, more)
