"""Warping and encoding: one resampling per frame, straight from source to output.

Each output frame is ``cv2.warpPerspective(source, C_t)`` with the correction of
:mod:`stabilize.framing`; pixels the source does not cover are filled as ``--fill`` says.
The render pass works in the encoder's planar YUV (:class:`stabilize.io.frames.PlanarImage`):
each plane is warped on its own, the chroma planes by the correction carried into their
coarser pixel grid (:func:`plane_matrix`), straight into the output frame's buffer.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Iterable

import cv2
import numpy as np

from .geometry import rescale
from .io import Frame, PlanarImage, VideoWriter
from .io.frames import YUV_BLACK
from .prefetch import WriteBehind, read_ahead
from .row_warp import warp_rows

__all__ = [
    "BORDERS", "QUEUE_FRAMES", "compare_size", "plane_matrix", "render", "side_by_side", "warp",
    "warp_planes",
]

# Frames waiting between the decoding, warping and encoding threads. Every extra one is a
# whole frame in memory (12 MiB at 4K); one each way ran as fast as two at 1080p and 4K
# (measured), the encoder's pipe and ffmpeg's own queues taking up the jitter.
QUEUE_FRAMES = 1

BORDERS = {
    "black": cv2.BORDER_CONSTANT,
    "reflect": cv2.BORDER_REFLECT_101,
    "replicate": cv2.BORDER_REPLICATE,
}


def warp(image: np.ndarray, correction: np.ndarray, fill: str = "black") -> np.ndarray:
    """Resample ``image`` (h, w, 3) uint8 RGB by the 3×3 correction (source -> output pixels)."""
    h, w = image.shape[:2]
    return cv2.warpPerspective(
        image, correction, (w, h), flags=cv2.INTER_LINEAR, borderMode=BORDERS[fill],
        borderValue=(0, 0, 0),
    )


def plane_matrix(correction: np.ndarray, sub_x: int, sub_y: int) -> np.ndarray:
    """The correction as it acts on a plane subsampled by (sub_x, sub_y): D·C·D⁻¹.

    D maps luma pixel coordinates to the plane's own, both under the pixel-centre convention
    of :mod:`stabilize.motion_log`: x_c = (x + 0.5) / sub_x − 0.5,
    y_c = (y + 0.5) / sub_y − 0.5. The result maps source plane pixels to output plane pixels;
    (1, 1) gives C itself.

    This assumes centre-sited chroma: a chroma sample at the centre of the luma pixels it
    covers. Other sitings (H.264's usual 4:2:0 puts chroma on the left luma column) differ
    from D by a constant shift τ of a quarter chroma pixel; for a correction with linear part
    A the chroma warp is then off by (I − A)·τ chroma pixels, exactly zero for a translation
    and a small fraction of a chroma pixel for the rotations and zooms a correction makes
    (about τ·θ for a rotation of θ radians, τ·|1 − s| for a scale s).
    """
    if (sub_x, sub_y) == (1, 1):
        return np.asarray(correction, dtype=np.float64)
    return rescale(correction, (1.0 / sub_x, 1.0 / sub_y), normalised=False)


def warp_planes(image: PlanarImage, correction: np.ndarray, fill: str = "black",
                out: PlanarImage | None = None) -> PlanarImage:
    """Resample a planar YUV frame by the 3×3 correction (source -> output luma pixels).

    Each plane is warped by its own matrix (:func:`plane_matrix`) with bilinear
    interpolation. ``black`` fills limited-range black (:data:`stabilize.io.frames.YUV_BLACK`),
    ``reflect`` and ``replicate`` extend each plane by its own edge. The planes are written
    into ``out`` (same format and size; a new frame when None), which is returned.
    """
    if out is None:
        out = PlanarImage.empty(image.pix_fmt, image.width, image.height)
    sub_x, sub_y = image.subsampling
    chroma = plane_matrix(correction, sub_x, sub_y)
    for k, (src, dst) in enumerate(zip(image.planes, out.planes, strict=True)):
        cv2.warpPerspective(
            src, correction if k == 0 else chroma, (dst.shape[1], dst.shape[0]), dst=dst,
            flags=cv2.INTER_LINEAR, borderMode=BORDERS[fill], borderValue=YUV_BLACK[k],
        )
    return out


def compare_size(width: int, height: int) -> tuple[int, int]:
    """(width, height) of the side-by-side video: the source's size rounded down to even."""
    return max(4, width // 2 * 2), max(2, height // 2 * 2)


def _halves(width: int, height: int, sub_x: int = 1,
            sub_y: int = 1) -> tuple[int, int, int, int, int]:
    """Canvas width, height, and each half's width, height and top row (luma pixels) of the
    side-by-side picture; the halves are multiples of the chroma subsampling, so the chroma
    planes split at the same places."""
    cw, ch = compare_size(width, height)
    half_w = cw // 2 // sub_x * sub_x
    half_h = max(sub_y, ch // 2 // sub_y * sub_y)
    top = (ch - half_h) // 2 // sub_y * sub_y
    return cw, ch, half_w, half_h, top


def side_by_side(before: np.ndarray | PlanarImage, after: np.ndarray | PlanarImage,
                 out: np.ndarray | PlanarImage | None = None) -> np.ndarray | PlanarImage:
    """Before (left) and after (right) at half size, letterboxed into :func:`compare_size`.

    RGB arrays give an RGB array; planar frames give a planar frame of the same format, each
    plane resized on its own. ``out``, a canvas from an earlier call (same format and size),
    is filled in place; its letterbox is left as it is.
    """
    if isinstance(before, PlanarImage):
        sub_x, sub_y = before.subsampling
        cw, ch, half_w, half_h, top = _halves(before.width, before.height, sub_x, sub_y)
        if out is None:
            out = PlanarImage.empty(before.pix_fmt, cw, ch, fill=YUV_BLACK)
        for k, canvas in enumerate(out.planes):
            sx, sy = (1, 1) if k == 0 else (sub_x, sub_y)
            hw, hh, t = half_w // sx, half_h // sy, top // sy
            for i, img in enumerate((before, after)):
                cv2.resize(img.planes[k], (hw, hh), dst=canvas[t:t + hh, i * hw:(i + 1) * hw],
                           interpolation=cv2.INTER_AREA)
        return out
    cw, ch, half_w, half_h, top = _halves(before.shape[1], before.shape[0])
    canvas = np.zeros((ch, cw, 3), np.uint8) if out is None else out
    for i, img in enumerate((before, after)):
        small = cv2.resize(img, (half_w, half_h), interpolation=cv2.INTER_AREA)
        canvas[top:top + half_h, i * half_w:(i + 1) * half_w] = small
    return canvas


class _Recycled:
    """Output frames lent to a write-behind thread and taken back once written, so a pass
    reuses a handful of buffers instead of allocating (and page-faulting) one per frame.

    :meth:`get` never blocks: with none free it makes a new one; the write-behind queue's
    depth already bounds how many are out at once.
    """

    def __init__(self, make: Callable[[], object]) -> None:
        self._make = make
        self._free: deque = deque()

    def get(self):
        try:
            return self._free.pop()
        except IndexError:
            return self._make()

    def sink(self, write: Callable[[object], None]) -> Callable[[object], None]:
        def write_and_return(item: object) -> None:
            try:
                write(item)
            finally:
                self._free.append(item)

        return write_and_return


def render(
    frames: Iterable[Frame],
    corrections: np.ndarray,
    writer: VideoWriter,
    *,
    fill: str,
    compare: VideoWriter | None = None,
    on_frame: Callable[[int], None] | None = None,
    check: Callable[[int, object, object, np.ndarray], None] | None = None,
    within_frame: Callable[[int], tuple[np.ndarray, np.ndarray] | None] | None = None,
) -> int:
    """Warp every frame by its correction and write it; returns the number of frames written.

    Frames are planar YUV (:class:`PlanarImage`, the writers fed the same format) or RGB
    arrays. Decoding runs ahead and encoding behind the warp (see :mod:`stabilize.prefetch`).
    Frames beyond the corrections (a clip that decodes longer than its log) reuse the last one.
    ``check`` is called with (frame index, source frame, output frame, correction) for every
    frame, before the output is handed to the encoder (its buffer is reused afterwards), e.g.
    a :class:`stabilize.residual.RenderCheck` measuring the motion left in the output.
    ``within_frame`` gives a frame's within-frame displacement (rows (r,), shifts (r, 2) px,
    :mod:`stabilize.row_motion`) or None: such a frame is resampled by
    :func:`stabilize.row_warp.warp_rows` (rolling shutter undone) instead of the plain warp.
    """
    n = 0
    last = len(corrections) - 1
    outs: _Recycled | None = None
    # side_by_side makes a fresh canvas when handed None, so recycling needs no maker.
    canvases = _Recycled(lambda: None)
    out_q = cmp_q = None
    try:
        for frame in read_ahead(frames, depth=QUEUE_FRAMES):
            image = frame.image
            c = corrections[min(frame.index, last)]
            if out_q is None:
                if isinstance(image, PlanarImage):
                    outs = _Recycled(lambda im=image: PlanarImage.empty(
                        im.pix_fmt, im.width, im.height))
                out_q = WriteBehind(writer.write if outs is None else outs.sink(writer.write),
                                    depth=QUEUE_FRAMES)
                if compare is not None:
                    cmp_q = WriteBehind(canvases.sink(compare.write), depth=QUEUE_FRAMES)
            rows = None if within_frame is None else within_frame(frame.index)
            if rows is not None:
                fills = YUV_BLACK if outs is not None else (0, 0, 0)
                out = warp_rows(image, c, *rows, border=BORDERS[fill], fills=fills,
                                out=None if outs is None else outs.get())
            elif outs is not None:
                out = warp_planes(image, c, fill, out=outs.get())
            else:
                out = warp(image, c, fill)
            if check is not None:
                check(frame.index, image, out, c)
            out_q.put(out)
            if cmp_q is not None:
                cmp_q.put(side_by_side(image, out, out=canvases.get()))
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
