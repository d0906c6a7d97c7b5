"""Warping and encoding: one resampling per frame, straight from source to output.

Each output frame is ``cv2.warpPerspective(source, C_t)`` with the correction of
:mod:`stabilize.framing`; pixels the source does not cover are filled as ``--fill`` says.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable

import cv2
import numpy as np

from .overlap import WriteBehind, read_ahead
from .video import Frame, VideoWriter

BORDERS = {
    "black": cv2.BORDER_CONSTANT,
    "reflect": cv2.BORDER_REFLECT_101,
    "replicate": cv2.BORDER_REPLICATE,
}


def warp(image: np.ndarray, correction: np.ndarray, fill: str = "black") -> np.ndarray:
    """Resample ``image`` (h, w, 3) uint8 by the 3×3 correction (source -> output pixels)."""
    h, w = image.shape[:2]
    return cv2.warpPerspective(
        image, correction, (w, h), flags=cv2.INTER_LINEAR, borderMode=BORDERS[fill],
        borderValue=(0, 0, 0),
    )


def compare_size(width: int, height: int) -> tuple[int, int]:
    """(width, height) of the side-by-side video: the source's size rounded down to even."""
    return max(4, width // 2 * 2), max(2, height // 2 * 2)


def side_by_side(before: np.ndarray, after: np.ndarray) -> np.ndarray:
    """Before (left) and after (right) at half size, letterboxed into :func:`compare_size`."""
    h, w = before.shape[:2]
    cw, ch = compare_size(w, h)
    half_w, half_h = cw // 2, max(1, ch // 2)
    canvas = np.zeros((ch, cw, 3), np.uint8)
    top = (ch - half_h) // 2
    for i, img in enumerate((before, after)):
        small = cv2.resize(img, (half_w, half_h), interpolation=cv2.INTER_AREA)
        canvas[top:top + half_h, i * half_w:(i + 1) * half_w] = small
    return canvas


def render(
    frames: Iterable[Frame],
    corrections: np.ndarray,
    writer: VideoWriter,
    *,
    fill: str,
    compare: VideoWriter | None = None,
    on_frame: Callable[[int], None] | None = None,
) -> int:
    """Warp every frame by its correction and write it; returns the number of frames written.

    Decoding runs ahead and encoding behind the warp (see :mod:`stabilize.overlap`). Frames
    beyond the corrections (a clip that decodes longer than its log) reuse the last one.
    """
    n = 0
    last = len(corrections) - 1
    out_q = WriteBehind(writer.write, depth=2)
    cmp_q = WriteBehind(compare.write, depth=2) if compare is not None else None
    try:
        for frame in read_ahead(frames, depth=2):
            out = warp(frame.image, corrections[min(frame.index, last)], fill)
            out_q.put(out)
            if cmp_q is not None:
                cmp_q.put(side_by_side(frame.image, out))
            n += 1
            if on_frame:
                on_frame(1)
    finally:
        # Always drain the writers so an error in one surfaces and no thread is left behind.
        errors = []
        for q in (out_q, cmp_q):
            if q is None:
                continue
            try:
                q.close()
            except BaseException as exc:
                errors.append(exc)
    if errors:
        raise errors[0]
    return n
