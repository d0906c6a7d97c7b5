"""Warping and encoding: one resampling per frame, straight from source to output.

Each output frame is ``cv2.warpPerspective(source, C_t)`` with the correction of
:mod:`stabilize.framing`; pixels the source does not cover are filled as ``--fill`` says.
The render pass works in the encoder's planar YUV (:class:`stabilize.io.frames.PlanarImage`):
each plane is warped on its own, the chroma planes by the correction carried into their
coarser pixel grid (:func:`plane_matrix`), straight into the output frame's buffer. Pinned
overlays are then copied in from the source frame (:mod:`stabilize.pinning`). The comparison
video (:func:`side_by_side`) shows the input and the output as written, labelled, laid out
without bars (:func:`compare_layout`).
"""

from __future__ import annotations

import functools
import math
from collections import deque
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass

import cv2
import numpy as np

from .geometry import rescale
from .io import Frame, PlanarImage, VideoWriter
from .io.frames import YUV_BLACK
from .pinning import pin
from .prefetch import WriteBehind, read_ahead
from .row_warp import warp_rows

__all__ = [
    "BORDERS", "COMPARE_LABELS", "COMPARE_MAX_SIDE", "COMPARE_SCALE", "COMPARE_SCREEN",
    "QUEUE_FRAMES", "CompareLayout", "compare_layout", "compare_size", "plane_matrix", "render",
    "side_by_side", "warp", "warp_planes",
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
    # An affine correction (no perspective row) goes through OpenCV's affine warp: the same
    # pixels to one grey level of fixed-point rounding (tests/test_render.py) at less than
    # half the time, as it divides by nothing per pixel (measured on 1080p luma, one
    # thread: 1.9 ms against 4.5 ms).
    affine = bool(np.all(np.asarray(correction)[2] == (0.0, 0.0, 1.0)))
    for k, (src, dst) in enumerate(zip(image.planes, out.planes, strict=True)):
        m = correction if k == 0 else chroma
        size = (dst.shape[1], dst.shape[0])
        if affine:
            cv2.warpAffine(src, np.asarray(m, np.float64)[:2], size, dst=dst,
                           flags=cv2.INTER_LINEAR, borderMode=BORDERS[fill],
                           borderValue=YUV_BLACK[k])
        else:
            cv2.warpPerspective(src, m, size, dst=dst, flags=cv2.INTER_LINEAR,
                                borderMode=BORDERS[fill], borderValue=YUV_BLACK[k])
    return out


#: Linear size of each half of the comparison video against the source: the canvas then holds
#: about the source's pixel count (each half half of it), so it costs the encoder about what
#: the steadied video costs. Our choice.
COMPARE_SCALE = 1.0 / math.sqrt(2.0)
#: Display aspect (width / height) the comparison's arrangement is chosen for: a 16:9 screen.
COMPARE_SCREEN = 16.0 / 9.0
#: Largest side of the comparison video, pixels: the width many hardware decoders stop at
#: (recalled from memory); larger sources get smaller halves.
COMPARE_MAX_SIDE = 4096
#: The words drawn on the two halves of the comparison, before and after.
COMPARE_LABELS = ("input", "steadied")


@dataclass(frozen=True)
class CompareLayout:
    """Where the two halves of the comparison video sit.

    ``size`` (width, height) of the canvas, ``half`` (width, height) of each half, both
    pixels and even (4:2:0 chroma splits at the same places); ``stacked`` puts the input on
    top and the steadied frame below, otherwise they sit side by side, input on the left. The
    halves fill the canvas exactly: no bars.
    """

    size: tuple[int, int]
    half: tuple[int, int]
    stacked: bool

    def origin(self, i: int) -> tuple[int, int]:
        """(x, y) in pixels of half ``i`` (0 input, 1 steadied)."""
        return (0, i * self.half[1]) if self.stacked else (i * self.half[0], 0)


def compare_layout(width: int, height: int) -> CompareLayout:
    """The comparison's layout for a ``width`` × ``height`` source (pixels).

    Each half is the source scaled by :data:`COMPARE_SCALE` (less when the canvas would
    exceed :data:`COMPARE_MAX_SIDE`), rounded down to even sizes. The two are stacked when
    the source is at least as wide as :data:`COMPARE_SCREEN` and otherwise put side by side:
    the arrangement whose canvas fills more of such a screen (for a source of aspect r on a
    screen of aspect S, side by side fills min(2r/S, S/2r) of it and stacked min(r/2S, 2S/r)).
    The two tie at r = S, the commonest source; there stacking is chosen, as on a phone held
    upright (a screen narrower than the canvas either way) it shows each half twice as wide.

    Parameters
    ----------
    width, height : source frame size, pixels.

    Returns
    -------
    CompareLayout : canvas and half sizes, arrangement.
    """
    stacked = width >= COMPARE_SCREEN * height * (1.0 - 1e-9)
    cols, rows = (1, 2) if stacked else (2, 1)
    scale = min(COMPARE_SCALE, COMPARE_MAX_SIDE / (cols * width),
                COMPARE_MAX_SIDE / (rows * height))
    hw = max(2, 2 * int(scale * width / 2))
    hh = max(2, 2 * int(scale * height / 2))
    size = (hw, 2 * hh) if stacked else (2 * hw, hh)
    return CompareLayout(size, (hw, hh), stacked)


def compare_size(width: int, height: int) -> tuple[int, int]:
    """(width, height) of the comparison video of a ``width`` × ``height`` source (pixels,
    even): :func:`compare_layout`'s canvas."""
    return compare_layout(width, height).size


@functools.lru_cache(maxsize=8)
def _label(text: str, half_h: int) -> tuple[np.ndarray, int] | None:
    """A label's picture: (h, w) float32 text coverage 0–1 over an opaque box, both sides
    even, and its inset from the half's corner in pixels (even); None when the half is too
    small to hold it. The text is about 1/22 of the half's height (at least 8 px)."""
    text_h = max(8, half_h // 22)
    scale = text_h / 22.0    # HERSHEY_SIMPLEX's capitals are about 22 px at scale 1
    thick = max(1, int(round(1.6 * scale)))
    (tw, th), base = cv2.getTextSize(text, cv2.FONT_HERSHEY_SIMPLEX, scale, thick)
    pad = max(2, text_h // 3 // 2 * 2)
    w = (tw + 2 * pad + 1) // 2 * 2
    h = (th + base + 2 * pad + 1) // 2 * 2
    if h > half_h // 3:
        return None
    canvas = np.zeros((h, w), np.uint8)
    cv2.putText(canvas, text, (pad, pad + th), cv2.FONT_HERSHEY_SIMPLEX, scale, 255, thick,
                cv2.LINE_AA)
    return canvas.astype(np.float32) / 255.0, pad


def _draw_labels(canvas: np.ndarray | PlanarImage, layout: CompareLayout) -> None:
    """Draw :data:`COMPARE_LABELS` in the top-left corner of each half (in place): white text
    on an opaque black box; limited-range values on planar frames."""
    hw, hh = layout.half
    for i, text in enumerate(COMPARE_LABELS):
        made = _label(text, hh)
        if made is None or made[0].shape[1] + 2 * made[1] > hw:
            continue
        cover, pad = made
        h, w = cover.shape
        x, y = layout.origin(i)
        x, y = x + pad, y + pad
        if isinstance(canvas, PlanarImage):
            sub_x, sub_y = canvas.subsampling
            canvas.y[y:y + h, x:x + w] = np.rint(16.0 + 219.0 * cover).astype(np.uint8)
            for plane in (canvas.u, canvas.v):
                plane[y // sub_y:(y + h) // sub_y, x // sub_x:(x + w) // sub_x] = 128
        else:
            canvas[y:y + h, x:x + w] = np.rint(255.0 * cover).astype(np.uint8)[..., None]


def side_by_side(before: np.ndarray | PlanarImage, after: np.ndarray | PlanarImage,
                 out: np.ndarray | PlanarImage | None = None) -> np.ndarray | PlanarImage:
    """The comparison frame: before and after at :func:`compare_layout`'s size and places,
    each labelled (:data:`COMPARE_LABELS`).

    RGB arrays give an RGB array; planar frames give a planar frame of the same format, each
    plane resized on its own. ``out``, a canvas from an earlier call (same format and size),
    is filled in place.
    """
    planar = isinstance(before, PlanarImage)
    w, h = (before.width, before.height) if planar else (before.shape[1], before.shape[0])
    layout = compare_layout(w, h)
    (cw, ch), (hw, hh) = layout.size, layout.half
    if planar:
        sub_x, sub_y = before.subsampling
        if out is None:
            out = PlanarImage.empty(before.pix_fmt, cw, ch)
        for k, canvas in enumerate(out.planes):
            sx, sy = (1, 1) if k == 0 else (sub_x, sub_y)
            for i, img in enumerate((before, after)):
                x, y = layout.origin(i)
                cv2.resize(img.planes[k], (hw // sx, hh // sy),
                           dst=canvas[y // sy:(y + hh) // sy, x // sx:(x + hw) // sx],
                           interpolation=cv2.INTER_AREA)
    else:
        if out is None:
            out = np.zeros((ch, cw, 3), np.uint8)
        for i, img in enumerate((before, after)):
            x, y = layout.origin(i)
            out[y:y + hh, x:x + hw] = cv2.resize(img, (hw, hh), interpolation=cv2.INTER_AREA)
    _draw_labels(out, layout)
    return out


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
    pinned: Sequence[tuple[int, int, int, int]] | Callable[[], Sequence[tuple[int, int, int, int]]]
    | None = None,
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
    ``pinned`` lists (x, y, w, h) rectangles (pixels, even coordinates) copied unwarped from
    each source frame into its output frame (:mod:`stabilize.pinning`), or is called once, at
    the first frame, for that list. ``check`` sees the output before they are copied in: it
    measures the steadied picture, and a pinned overlay, still by construction, would only
    pull the measured motion toward zero. The comparison shows the output as written.
    """
    n = 0
    last = len(corrections) - 1
    outs: _Recycled | None = None
    # side_by_side makes a fresh canvas when handed None, so recycling needs no maker.
    canvases = _Recycled(lambda: None)
    out_q = cmp_q = None
    rects: Sequence[tuple[int, int, int, int]] | None = None
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
            if rects is None:
                rects = (pinned() if callable(pinned) else pinned) or ()
            pin(out, image, rects)
            out_q.put(out)
            if cmp_q is not None:
                cmp_q.put(side_by_side(image, out, out=canvases.get()))
            n += 1
            if on_frame:
                on_frame(1)
    except BaseException:
        # The output is dropped: what is still queued is not fed to the encoders (which may
        # take nothing more; they are stopped by their own context managers).
        for q in (out_q, cmp_q):
            if q is not None:
                q.abort()
        raise
    # Drain the writers so an error in one surfaces and no thread is left behind.
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
