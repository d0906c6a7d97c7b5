"""Whether the written video is steadier than its source: the figures of the render pass's
motion check (:mod:`stabilize.residual`) on the output against those on the source."""

from __future__ import annotations

import numpy as np

from . import shake
from .geometry import frame_centre, from_similarity, similarity_readout

__all__ = ["KEPT_FLOOR_PX_PER_1000", "KEPT_SHARE", "MIN_DIRECT_SHARE", "STEADIER_RATIO",
           "STEADY_FLOOR_PX_PER_1000", "carried_readout", "measured_share", "pair_frames",
           "steadiness", "with_carried"]


#: The output counts as steadier than the source when its measured shake RMS, on the axis
#: where it is larger, is below this share of the source's on the axis where that is larger
#: (a rule of thumb of this project: a tenth less is the least change worth the warp).
STEADIER_RATIO = 0.9
#: ... or when it is below this many pixels per 1000 pixels of frame width: motion that
#: small is at the check's own noise (measured on still synthetic clips through H.264, about
#: a fifth of this), and nothing is left to steady.
STEADY_FLOOR_PX_PER_1000 = 0.25
#: A steadier video still *keeps* shake when, on either axis, its measured shake RMS is over
#: this share of the source's (a tenth: the residual a steadied video may keep, this
#: project's rule of thumb) ...
KEPT_SHARE = 0.1
#: ... and over this many pixels per 1000 pixels of frame width (four times the floor above:
#: less is hard to see, a rule of thumb of this project with no source).
KEPT_FLOOR_PX_PER_1000 = 1.0


#: The source's measured motion, carried into the output through the corrections applied,
#: stands in for output pairs that could not be measured on the output only when at least
#: this share of the output's pairs was measured on its own frames: the figures after
#: steadying are then mostly the written video's own (this project's choice).
MIN_DIRECT_SHARE = 0.5


def carried_readout(source_readout: np.ndarray, corrections: np.ndarray, cuts: np.ndarray,
                    width: int, height: int) -> np.ndarray:
    """The source's measured motion carried into the output: C_t·S_t·C_{t−1}⁻¹.

    The output frame t is the source frame t resampled by the correction C_t, so where the
    source pair t−1 → t was measured (S_t, a similarity read as dx, dy, degrees about the
    centre; scale 1, as the check reads it), the output pair moved by C_t·S_t·C_{t−1}⁻¹.
    Where the output's own corners are too few to measure a pair (a flat picture cropped by
    the correction), this is what the output did, as far as the source's frames and the
    warp actually applied tell.

    Parameters
    ----------
    source_readout : (n, 3) dx, dy (pixels) and degrees of the source's motion as the
        render's check measured it (:class:`stabilize.residual.RenderCheck`), nan where not.
    corrections : (n, 3, 3) C_t, source to output pixels.
    cuts : (n,) bool, frames that start a new shot.
    width, height : frame size, pixels.

    Returns
    -------
    (n, 3) dx, dy (pixels) and degrees of the output's motion about its centre; nan where
    the source pair was not measured, at frame 0 and at cuts.
    """
    r = np.asarray(source_readout, np.float64).reshape(-1, 3)
    c = np.asarray(corrections, np.float64).reshape(-1, 3, 3)
    out = np.full((len(r), 3), np.nan)
    if len(r) < 2:
        return out
    centre = frame_centre(width, height)
    q = np.zeros((len(r) - 1, 4))
    q[:, :2] = np.nan_to_num(r[1:, :2])
    q[:, 2] = np.radians(np.nan_to_num(r[1:, 2]))
    m = c[1:] @ from_similarity(q, centre) @ np.linalg.inv(c[:-1])
    read = similarity_readout(m, centre)[:, :3]
    ok = np.isfinite(r[1:]).all(axis=1) & ~np.asarray(cuts, bool)[1:]
    out[1:][ok] = read[ok]
    return out


def with_carried(output_readout: np.ndarray, carried: np.ndarray, cuts: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray]:
    """The output's measured motion, its unmeasured pairs filled from ``carried``
    (:func:`carried_readout`) when at least :data:`MIN_DIRECT_SHARE` of its pairs were
    measured on it.

    Parameters
    ----------
    output_readout : (n, 3) dx, dy (pixels), degrees measured on the output, nan where not.
    carried : (n, 3) the same carried from the source, nan where not known.
    cuts : (n,) bool, frames that start a new shot.

    Returns
    -------
    filled : (n, 3) a new array.
    from_source : (n,) bool, the pairs filled from ``carried``.
    """
    out = np.array(output_readout, np.float64, copy=True).reshape(-1, 3)
    gap = ~np.isfinite(out).all(axis=1) & np.isfinite(carried).all(axis=1)
    if measured_share(out, cuts) < MIN_DIRECT_SHARE:
        gap[:] = False
    out[gap] = carried[gap]
    return out, gap


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
    ``output_pairs_measured`` (share of frame pairs measured on the output, 0–1), and
    ``output_keeps_shake`` (true when, on either axis, the output's shake RMS is over
    :data:`KEPT_SHARE` of the source's and over :data:`KEPT_FLOOR_PX_PER_1000` px per 1000 px
    of width: steadier, perhaps, but not steady; None when not measured).
    """
    out: dict = {"output_steadier": None, "shake_reduction_x": None, "shake_reduction_y": None,
                 "jitter_rms_x_px_src_check": None, "jitter_rms_y_px_src_check": None,
                 "output_pairs_measured": None, "output_keeps_shake": None}
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
    kept = KEPT_FLOOR_PX_PER_1000 * width / 1000.0
    out["output_keeps_shake"] = bool(any(o > KEPT_SHARE * src and o > kept
                                         for o, src in ((ox, sx), (oy, sy))))
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
    pairs = pair_frames(cuts)
    if not pairs.any():
        return 0.0
    return float(np.mean(np.isfinite(readout[pairs]).all(axis=1)))


def pair_frames(cuts: np.ndarray) -> np.ndarray:
    """(n,) bool: the frames that end a pair of consecutive frames of one shot (not the
    first frame, not a cut), given the (n,) bool scene cuts."""
    pairs = ~np.asarray(cuts, bool)
    pairs[:1] = False
    return pairs
