"""Frames as arrays: the planar YUV image, the decoded frame record, and their byte layouts.

Frames are numpy arrays, ``(height, width, 3)`` uint8 RGB or ``(height, width)`` uint8 grey,
upright (ffmpeg applies a container rotation flag while decoding); the render pass instead
works in :class:`PlanarImage` frames in the encoder's own planar YUV layout, so neither the
decoder nor the encoder converts colours and each frame is half the bytes of RGB.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["YUV_BLACK", "YUV_FORMATS", "Frame", "PlanarImage", "frame_bytes", "plane_sizes"]


#: Planar YUV layouts the render pass works in, with their chroma subsampling (x, y).
YUV_FORMATS: dict[str, tuple[int, int]] = {"yuv420p": (2, 2), "yuv444p": (1, 1)}
#: Black in limited ("TV") range YUV, the range planar frames are decoded to: (Y, U, V).
YUV_BLACK = (16, 128, 128)


def plane_sizes(pix_fmt: str, width: int, height: int) -> list[tuple[int, int]]:
    """(width, height) in pixels of the Y, U and V planes of a ``pix_fmt`` frame.

    Chroma planes are the luma size divided by the subsampling, rounded up (ffmpeg's rule, so
    odd sizes keep their last column and row).

    Parameters
    ----------
    pix_fmt : one of :data:`YUV_FORMATS`.
    width, height : the luma (picture) size in pixels.

    Returns
    -------
    Three (width, height) pairs in pixels: Y, U, V.
    """
    sx, sy = YUV_FORMATS[pix_fmt]
    cw, ch = -(-width // sx), -(-height // sy)
    return [(width, height), (cw, ch), (cw, ch)]


@dataclass(frozen=True)
class PlanarImage:
    """One frame in planar YUV, as ffmpeg's rawvideo ``yuv420p`` / ``yuv444p`` lays it out.

    ``data`` is the whole frame, one contiguous 1-D uint8 buffer: the Y plane, then U, then V,
    each row by row. ``y``, ``u``, ``v`` are 2-D (rows, columns) views into it, never copies;
    ``y`` is (height, width), ``u`` and ``v`` are :func:`plane_sizes` (height and width divided
    by the subsampling of :data:`YUV_FORMATS`, rounded up). Pixel coordinates follow the
    convention of :mod:`stabilize.geometry` in each plane's own pixels. Frames decoded by
    :func:`stabilize.io.decode.iter_frames` are limited range: Y 16–235, U and V 16–240 with
    128 neutral.
    """

    pix_fmt: str
    data: np.ndarray
    y: np.ndarray
    u: np.ndarray
    v: np.ndarray

    @classmethod
    def wrap(cls, buf: bytearray | np.ndarray, pix_fmt: str, width: int,
             height: int) -> PlanarImage:
        """Views of the planes of ``buf`` (the frame's bytes; shared, not copied).

        Parameters
        ----------
        buf : the frame's :func:`frame_bytes` bytes, Y then U then V, each row by row.
        pix_fmt : one of :data:`YUV_FORMATS`.
        width, height : the picture size in pixels.

        Returns
        -------
        PlanarImage : views into ``buf`` (a NumPy array given is used as it is).

        Raises
        ------
        ValueError
            When ``buf`` is not exactly one frame's bytes.
        """
        data = np.frombuffer(buf, np.uint8) if not isinstance(buf, np.ndarray) else buf
        planes, at = [], 0
        for w, h in plane_sizes(pix_fmt, width, height):
            planes.append(data[at:at + w * h].reshape(h, w))
            at += w * h
        if at != data.size:
            raise ValueError(f"{pix_fmt} {width}x{height} needs {at} bytes, got {data.size}")
        return cls(pix_fmt, data, *planes)

    @classmethod
    def empty(cls, pix_fmt: str, width: int, height: int, *,
              fill: tuple[int, int, int] | None = None) -> PlanarImage:
        """A new frame, uninitialised, or with every plane set to ``fill``.

        Parameters
        ----------
        pix_fmt : one of :data:`YUV_FORMATS`.
        width, height : the picture size in pixels.
        fill : (Y, U, V) values, e.g. :data:`YUV_BLACK`; None leaves the bytes as they are.

        Returns
        -------
        PlanarImage : over a new buffer of :func:`frame_bytes` bytes.
        """
        image = cls.wrap(np.empty(frame_bytes(pix_fmt, width, height), np.uint8), pix_fmt,
                         width, height)
        if fill is not None:
            for plane, value in zip(image.planes, fill, strict=True):
                plane.fill(value)
        return image

    @property
    def planes(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The (Y, U, V) plane views.

        Returns
        -------
        tuple : ``y`` (height, width), ``u`` and ``v`` (:func:`plane_sizes`), uint8 views.
        """
        return self.y, self.u, self.v

    @property
    def width(self) -> int:
        """Picture width in pixels (of the luma plane).

        Returns
        -------
        int : columns of ``y``, pixels.
        """
        return self.y.shape[1]

    @property
    def height(self) -> int:
        """Picture height in pixels (of the luma plane).

        Returns
        -------
        int : rows of ``y``, pixels.
        """
        return self.y.shape[0]

    @property
    def subsampling(self) -> tuple[int, int]:
        """Chroma subsampling (x, y): luma pixels per chroma pixel along each axis.

        Returns
        -------
        (int, int) : (2, 2) for ``yuv420p``, (1, 1) for ``yuv444p`` (:data:`YUV_FORMATS`).
        """
        return YUV_FORMATS[self.pix_fmt]


def frame_bytes(pix_fmt: str, width: int, height: int) -> int:
    """Bytes of one raw ``pix_fmt`` frame.

    Parameters
    ----------
    pix_fmt : ``"rgb24"``, ``"gray"`` or one of :data:`YUV_FORMATS`.
    width, height : the picture size in pixels.

    Returns
    -------
    The frame's size in bytes (one byte per sample).
    """
    if pix_fmt == "rgb24":
        return 3 * width * height
    if pix_fmt == "gray":
        return width * height
    return sum(w * h for w, h in plane_sizes(pix_fmt, width, height))


@dataclass(frozen=True)
class Frame:
    """One decoded frame: its 0-based index, presentation time in seconds, and pixels
    (an RGB or grey array, or a :class:`PlanarImage` when decoded to planar YUV)."""

    index: int
    time_s: float
    image: np.ndarray | PlanarImage
