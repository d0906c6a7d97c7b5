"""The telemetry strip: an invented drone on-screen display burnt into a synthetic frame.

The readouts are derived from the true deliberate motion, so the digits change from frame
to frame while the strip stays put: a static overlay the analysis must leave out.
"""

from __future__ import annotations

import math

import cv2
import numpy as np

from .camera import MotionSpec

__all__ = ["draw_telemetry", "telemetry_layout", "telemetry_text"]


def telemetry_layout(width: int, height: int, sample: str) -> dict:
    """Where and how large the strip's text is drawn.

    Parameters
    ----------
    width, height : frame size, pixels.
    sample : a line of the strip's text (sets the font scale).

    Returns
    -------
    dict : ``y0`` (first row of the strip), ``font``, ``scale``, ``org`` (text origin, px).
    """
    h, w = height, width
    sh = max(14, round(0.065 * h))
    font = cv2.FONT_HERSHEY_SIMPLEX
    (tw, th), _ = cv2.getTextSize(sample, font, 1.0, 1)
    scale = min(0.55 * sh / th, 0.96 * w / tw)
    return {"y0": h - sh, "font": font, "scale": scale,
            "org": (round(0.02 * w), h - sh + round((sh + th * scale) / 2))}


def telemetry_text(motion: MotionSpec, t: int, fps: float, log_zoom: float) -> str:
    """The strip's text at frame ``t``.

    Parameters
    ----------
    motion : the clip's deliberate motion.
    t : frame index.
    fps : frame rate, frames per second.
    log_zoom : the shake-free camera's natural-log zoom at frame ``t``.

    Returns
    -------
    str : altitude, ground speed, heading, battery and flight time readouts.
    """
    # Invented flight readouts derived from the true deliberate motion, so digits change.
    m = motion
    time_s = t / fps
    alt = 48.0 / math.exp(log_zoom) + 0.4 * math.sin(0.7 * time_s)
    gs = 0.05 * math.hypot(m.pan_px_s, m.climb_px_s) + 0.05 * math.sin(1.3 * time_s)
    hdg = (math.degrees(math.atan2(m.pan_px_s, m.climb_px_s)) + 360.0) % 360.0
    mins, secs = divmod(734.0 + time_s, 60.0)
    return (f"ALT {alt:5.1f}m  GS {gs:4.1f}m/s  HDG {hdg:03.0f}  "
            f"BAT {87 - 0.05 * time_s:4.1f}%  T+{int(mins):02d}:{secs:05.2f}")


def draw_telemetry(frame: np.ndarray, mask: np.ndarray, layout: dict, text: str) -> None:
    """Burn the strip into ``frame`` in place.

    Parameters
    ----------
    frame : (h, w, 3) uint8 RGB, written in place.
    mask : (h, w) bool, set over the strip.
    layout : from :func:`telemetry_layout`.
    text : from :func:`telemetry_text`.
    """
    tel = layout
    frame[tel["y0"]:] = (18, 20, 22)
    cv2.putText(frame, text, tel["org"], tel["font"], tel["scale"],
                (235, 235, 225), 1, cv2.LINE_AA)
    mask[tel["y0"]:] = True
