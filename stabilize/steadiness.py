"""Whether the written video is steadier than its source: the figures of the render pass's
motion check (:mod:`stabilize.residual`) on the output against those on the source."""

from __future__ import annotations

import numpy as np

from . import shake

__all__ = ["STEADIER_RATIO", "STEADY_FLOOR_PX_PER_1000", "measured_share", "steadiness"]


#: The output counts as steadier than the source when its measured shake RMS, on the axis
#: where it is larger, is below this share of the source's on the axis where that is larger
#: (a rule of thumb of this project: a tenth less is the least change worth the warp).
STEADIER_RATIO = 0.9
#: ... or when it is below this many pixels per 1000 pixels of frame width: motion that
#: small is at the check's own noise (measured on still synthetic clips through H.264, about
#: a fifth of this), and nothing is left to steady.
STEADY_FLOOR_PX_PER_1000 = 0.25


def steadiness(output_readout: np.ndarray | None, source_readout: np.ndarray | None, *,
               cuts: np.ndarray, fps: float, above_hz: float, width: int, height: int,
               time_s: np.ndarray | None = None) -> dict:
    """Is the written video steadier than its source? Both measured on frames alike.

    Parameters
    ----------
    output_readout, source_readout : (n, 3) measured motion of the output and of the source
        frames (dx, dy pixels, degrees; nan where not measured), as from
        :class:`RenderCheck`; None when not measured.
    cuts : (n,) bool scene cuts. fps : frame rate (Hz). above_hz : shake cut-off (Hz).
    width, height : frame size, pixels.
    time_s : (n,) frame times, seconds, to read both in real time (irregular times, frames
        missing: :func:`stabilize.shake.resample_even`); None takes the frames as evenly
        spaced at ``fps``.

    Returns
    -------
    dict with ``output_steadier`` (true, false, or None when not measured: under
    :data:`~stabilize.shake.OUTPUT_MIN_MEASURED_SHARE` of the output's frame pairs, or under
    :data:`~stabilize.shake.MIN_MEASURED_SHARE` of the source's),
    ``shake_reduction_x``, ``shake_reduction_y`` (1 − output RMS / source RMS of the shake,
    both measured on the frames: 1 = all removed, 0 = none, negative = more shake than the
    source; None when the source has none to reduce), ``jitter_rms_x_px_src_check``,
    ``jitter_rms_y_px_src_check`` (the source's shake RMS as the check measured it) and
    ``output_pairs_measured`` (share of frame pairs measured on the output, 0–1).
    """
    out: dict = {"output_steadier": None, "shake_reduction_x": None, "shake_reduction_y": None,
                 "jitter_rms_x_px_src_check": None, "jitter_rms_y_px_src_check": None,
                 "output_pairs_measured": None}
    if output_readout is None or source_readout is None:
        return out
    out["output_pairs_measured"] = measured_share(output_readout, cuts)
    rms = {}
    for name, readout, least in (("out", output_readout, shake.OUTPUT_MIN_MEASURED_SHARE),
                                 ("src", source_readout, shake.MIN_MEASURED_SHARE)):
        p = shake.readout_path(readout, cuts, width, height, least)
        if p is None:  # too little measured to say
            return out
        figs = shake.path_figures(p, cuts, fps=fps, above_hz=above_hz, width=width,
                                  fov_deg=None, time_s=time_s)
        rms[name] = (figs["jitter_rms_x_px"], figs["jitter_rms_y_px"])
    if any(v is None for pair in rms.values() for v in pair):
        return out
    (ox, oy), (sx, sy) = rms["out"], rms["src"]
    out["jitter_rms_x_px_src_check"], out["jitter_rms_y_px_src_check"] = sx, sy
    floor = STEADY_FLOOR_PX_PER_1000 * width / 1000.0
    for axis, o, s in (("x", ox, sx), ("y", oy, sy)):
        out[f"shake_reduction_{axis}"] = None if s <= 1e-9 else float(1.0 - o / s)
    out["output_steadier"] = bool(max(ox, oy) < STEADIER_RATIO * max(sx, sy)
                                  or max(ox, oy) < floor)
    return out


def measured_share(readout: np.ndarray, cuts: np.ndarray) -> float:
    """Share (0–1) of the frame pairs (frames after the first of each shot) measured.

    Parameters
    ----------
    readout : (n, 3) per-frame dx, dy (pixels) and degrees, nan where not measured.
    cuts : (n,) bool, frames that start a new shot.

    Returns
    -------
    float : share of pairs with all three values finite; 0 when there is no pair.
    """
    readout = np.asarray(readout, np.float64)
    pairs = np.ones(len(readout), bool)
    pairs[0] = False
    pairs &= ~np.asarray(cuts, bool)
    if not pairs.any():
        return 0.0
    return float(np.mean(np.isfinite(readout[pairs]).all(axis=1)))
