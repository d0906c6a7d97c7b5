"""Within-frame row spread measured on the source and on the written frames while rendering.

For each pair of consecutive frames, the shift of every band of rows is measured by phase
correlation (:func:`stabilize.row_bands.band_phase_shifts`) and the frame's row spread is the RMS
of the band shifts about their mean (:func:`stabilize.row_bands.within_frame_spread`): 0 for
a rigid picture, about the within-frame displacement for a rolling-shutter one. Measured
alike on the source frames and on the frames handed to the encoder, it says how much of the
row spread the render removed. The frames are measured on their luma, reduced to at most
:data:`CHECK_WIDTH` px wide, inside a central window (the output's filled borders left out).
"""

from __future__ import annotations

import cv2
import numpy as np

from .io import PlanarImage
from .row_bands import band_phase_shifts, within_frame_spread

__all__ = ["CHECK_BANDS", "CHECK_WIDTH", "RowShiftCheck", "row_spread_figures"]

#: Width (px) the frames are reduced to for the check, and bands per frame (this project's
#: choices: phase correlation keeps a few hundredths of a pixel at this size).
CHECK_WIDTH = 640
CHECK_BANDS = 24
# Share of the width and height left out at each side (filled borders of the output).
_INSET = 0.08


def _luma(image: np.ndarray | PlanarImage) -> np.ndarray:
    if isinstance(image, PlanarImage):
        return image.planes[0]
    if image.ndim == 3:
        return cv2.cvtColor(image, cv2.COLOR_RGB2GRAY)
    return image


class RowShiftCheck:
    """A render check (called with frame index, source frame, output frame, correction)
    measuring each frame's within-frame row spread (px, full resolution) on both frames.

    ``source`` and ``output`` are (frames,) arrays, NaN where not measured (frame 0, or a
    frame whose predecessor was not seen).
    """

    def __init__(self, frames: int) -> None:
        self.source = np.full(frames, np.nan)
        self.output = np.full(frames, np.nan)
        self._prev: tuple[int, np.ndarray, np.ndarray] | None = None

    def _reduce(self, image: np.ndarray | PlanarImage) -> tuple[np.ndarray, float]:
        y = _luma(image)
        h, w = y.shape[:2]
        y = y[int(_INSET * h):h - int(_INSET * h), int(_INSET * w):w - int(_INSET * w)]
        scale = min(1.0, CHECK_WIDTH / y.shape[1])
        if scale < 1.0:
            size = (max(1, round(y.shape[1] * scale)), max(1, round(y.shape[0] * scale)))
            y = cv2.resize(y, size, interpolation=cv2.INTER_AREA)
        return y.astype(np.float32), scale

    def __call__(self, index: int, source: object, output: object,
                 correction: np.ndarray) -> None:
        src, scale = self._reduce(source)
        out, _ = self._reduce(output)
        prev = self._prev
        self._prev = (index, src, out)
        if prev is None or prev[0] != index - 1 or not 0 <= index < len(self.source):
            return
        for frame, before, store in ((src, prev[1], self.source), (out, prev[2], self.output)):
            b = band_phase_shifts(before, frame, n_bands=CHECK_BANDS)
            store[index] = float(within_frame_spread(b.shift_px[None])[0]) / scale


def row_spread_figures(check: RowShiftCheck) -> dict[str, float | None]:
    """Summary keys: ``row_spread_px`` (source) and ``row_spread_px_out`` (written frames), the mean
    per-frame row spread in full-resolution px (None where nothing was measured)."""
    out: dict[str, float | None] = {}
    for key, values in (("row_spread_px", check.source), ("row_spread_px_out", check.output)):
        v = values[np.isfinite(values)]
        out[key] = round(float(v.mean()), 4) if len(v) else None
    return out
