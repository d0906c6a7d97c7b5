"""Decoding a clip frame by frame through one ffmpeg pipe, with container timestamps.

One loop reads every decoder's raw frames (:func:`raw_frames`); :func:`iter_frames` numbers
them from the start of a clip and :func:`stabilize.io.seek.iter_frame_range` from a seek.
Frames are streamed one at a time, so memory does not grow with clip length. The decoder's
complaints are counted (:class:`DecodeStats`), so a clip cut short can be told from one that
simply ended (:func:`looks_truncated`).
"""

from __future__ import annotations

import os
import subprocess
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from ..errors import StabilizeError
from .frames import YUV_FORMATS, Frame, PlanarImage, frame_bytes
from .messages import StderrReader, without_prefixes
from .probing import VideoInfo, probe
from .process import ffmpeg_exe, ffmpeg_path, read_exact, reap, spawn, widen_pipe

__all__ = ["FRAME_TIMEOUT_S", "DecodeStats", "analysis_size", "iter_frames", "looks_truncated",
           "raw_frames"]


@dataclass
class DecodeStats:
    """What one decoding pass saw, filled in by :func:`iter_frames` as it goes.

    ``frames`` decoded so far; ``last_time_s`` the last one's presentation time in seconds;
    ``errors`` how many complaints the decoder or demuxer printed (``last_error`` the last);
    ``finished`` is True once the stream ran to its end (not stopped early by the caller);
    ``messages`` the decoder's last lines.
    """

    frames: int = 0
    last_time_s: float | None = None
    errors: int = 0
    last_error: str | None = None
    finished: bool = False
    messages: list[str] = field(default_factory=list)


def looks_truncated(info: VideoInfo, stats: DecodeStats) -> bool:
    """Whether a finished decoding pass stopped well short of what the container announced.

    A clip is taken as cut short when fewer frames decoded than its header implies
    (duration × frame rate, with a tolerance of 2 % or one frame) and either the decoder
    complained (``partial file``, invalid data) or the last frame ends more than half a second
    and 10 % before the container's duration. Asking for both guards against variable frame
    rate clips, whose nominal rate only approximates the count, and against containers whose
    audio runs a little longer than the video.

    Parameters
    ----------
    info : the clip's header.
    stats : what decoding it saw (:func:`iter_frames`).

    Returns
    -------
    True when the pass ran to its end and the clip looks cut short.
    """
    if not stats.finished or stats.frames == 0:
        return False
    if stats.frames >= info.frames_estimate - max(1.0, 0.02 * info.frames_estimate):
        return False
    end_s = (stats.last_time_s or 0.0) + 1.0 / info.fps
    short_s = info.duration_s - end_s
    return stats.errors > 0 or (short_s > 0.5 and end_s < 0.9 * info.duration_s)


def analysis_size(info: VideoInfo, analysis_width: int) -> tuple[int, int]:
    """Size of the reduced copy used for tracking.

    Parameters
    ----------
    info : the clip's header.
    analysis_width : wanted width in pixels; 0 for full size.

    Returns
    -------
    (width, height) in pixels, the height keeping the aspect (at least 2); full size when
    ``analysis_width`` is 0 or not smaller than the clip.
    """
    if analysis_width <= 0 or analysis_width >= info.width:
        return info.width, info.height
    w = int(analysis_width)
    h = max(2, int(round(info.height * w / info.width)))
    return w, h


# Raw frames waiting in ffmpeg for the pipe: the reader keeps its own read-ahead, and at 4K
# each waiting frame is 12 MiB (yuv420p) to 24 MiB (RGB). Two instead of ffmpeg's default
# (8, from memory) took about 80 MiB off a 4K decoder's peak (measured).
_RAW_QUEUE = ["-thread_queue_size", "2"]


def _raw_output(w: int, h: int, info: VideoInfo, *, gray: bool, yuv: str | None,
                ) -> tuple[str, list[str], int, Callable[[bytearray], np.ndarray | PlanarImage]]:
    """What a decoder writing w × h raw frames is asked for: the rawvideo pixel format, the
    filter chain (ending in ``showinfo``, which reports the timestamps), the bytes per frame,
    and a function turning a frame's bytes into the image (a view, no copy).

    Planar YUV is always asked for in limited range: ffmpeg hands a full-range source's
    values through unchanged when only the pixel format is named, and the encoder is fed
    limited range (as its RGB input was converted before), so black is Y = 16, U = V = 128
    (:data:`~stabilize.io.frames.YUV_BLACK`) whatever the source.
    """
    if yuv is not None and yuv not in YUV_FORMATS:
        raise ValueError(f"yuv must be one of {', '.join(YUV_FORMATS)}, got {yuv!r}")
    filters = []
    if (w, h) != (info.width, info.height):
        filters.append(f"scale={w}:{h}:flags=area")
    if yuv is not None:
        filters.append("scale=out_range=limited")
        pix_fmt = yuv
    else:
        pix_fmt = "gray" if gray else "rgb24"
    filters.append("showinfo=checksum=0")
    shape = (h, w) if gray else (h, w, 3)

    def wrap(buf: bytearray) -> np.ndarray | PlanarImage:
        if yuv is not None:
            return PlanarImage.wrap(buf, yuv, w, h)
        return np.frombuffer(buf, np.uint8).reshape(shape)

    return pix_fmt, filters, frame_bytes(pix_fmt, w, h), wrap


#: Longest wait in seconds for the decoder's next frame before the read is given up.
FRAME_TIMEOUT_S = 120.0


def raw_frames(
    path: str | os.PathLike,
    info: VideoInfo,
    size: tuple[int, int],
    *,
    gray: bool = False,
    yuv: str | None = None,
    decode_threads: int | None = None,
    seek_s: float | None = None,
    first_s: float | None = None,
    stats: DecodeStats,
) -> Iterator[tuple[float | None, Fraction | None, np.ndarray | PlanarImage]]:
    """Run one decoder on ``path`` and yield what it writes, frame by frame.

    Parameters
    ----------
    path : the clip.
    info : its header (:func:`~stabilize.io.probing.probe`).
    size : (width, height) in pixels the frames are scaled to (area filter).
    gray, yuv, decode_threads : as for :func:`iter_frames`.
    seek_s : start decoding at the keyframe at or before this container time (seconds), and
        keep the container's timestamps (``-copyts``); None decodes from the start.
    first_s : drop frames before this container time (seconds) inside ffmpeg, before they
        are scaled, converted and piped.
    stats : ``finished``, ``errors``, ``last_error`` and ``messages`` are filled in when the
        decoder stops.

    Yields
    ------
    (time_s, time_base, image): the frame's presentation time in seconds as the decoder
    reported it (None when it did not), the stream's time base (a fraction of a second;
    None when not reported) and the pixels (a view of the frame's own buffer).

    Close the generator when stopping early, so ffmpeg stops at once.
    """
    w, h = size
    pix_fmt, filters, nbytes, wrap = _raw_output(w, h, info, gray=gray, yuv=yuv)
    threads = [] if decode_threads is None else ["-threads", str(int(decode_threads))]
    seek = [] if seek_s is None else ["-noaccurate_seek", "-ss", f"{seek_s:.6f}", "-copyts"]
    if first_s is not None:
        filters = [f"select=gte(t\\,{first_s:.9f})", *filters]
    cmd = [
        ffmpeg_exe(), "-hide_banner", "-nostdin", "-loglevel", "info",
        *threads, *seek, "-i", ffmpeg_path(path),
        "-map", "0:v:0", "-an", "-sn", "-dn", "-fps_mode", "passthrough",
        "-vf", ",".join(filters), "-f", "rawvideo", "-pix_fmt", pix_fmt, *_RAW_QUEUE, "pipe:1",
    ]
    proc = spawn(
        cmd, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        bufsize=0,
    )
    widen_pipe(proc.stdout, nbytes)
    reader = StderrReader(proc.stderr)
    reader.start()
    n = 0
    try:
        while True:
            try:
                buf = read_exact(proc.stdout, nbytes, FRAME_TIMEOUT_S)
            except TimeoutError:
                raise StabilizeError(f"{path}: the decoder gave no frame for "
                                     f"{FRAME_TIMEOUT_S:g} s (a stalled disk or a file that "
                                     "is not a plain video file)") from None
            if buf is None:
                stats.finished = True
                return
            image = wrap(buf)
            time_s = reader.time_of(n, None)
            n += 1
            yield time_s, reader.time_base, image
    finally:
        reap(proc)
        reader.join(timeout=5.0)
        proc.stdout.close()
        proc.stderr.close()
        stats.errors, stats.last_error = reader.errors, reader.last_error
        stats.messages = list(reader.tail)


def iter_frames(
    path: str | os.PathLike,
    *,
    size: tuple[int, int] | None = None,
    gray: bool = False,
    yuv: str | None = None,
    info: VideoInfo | None = None,
    stats: DecodeStats | None = None,
    decode_threads: int | None = None,
) -> Iterator[Frame]:
    """Decode a clip frame by frame, in presentation order, with container timestamps.

    Parameters
    ----------
    path : the clip.
    size : (width, height) to scale to inside ffmpeg (area filter), or None for full size.
        Scaling keeps pixel centres aligned: x_small = (x + 0.5) * w_small / w - 0.5.
    gray : decode to luma only (uint8, 2-D) instead of RGB.
    yuv : a planar format of :data:`~stabilize.io.frames.YUV_FORMATS` (``"yuv420p"``,
        ``"yuv444p"``): yield :class:`~stabilize.io.frames.PlanarImage` frames in limited
        range instead of RGB.
    info : the clip's header, when already probed.
    stats : filled in while decoding (frames, last time, decoder complaints, whether the end
        was reached); pass one to find out afterwards whether the clip was cut short
        (:func:`looks_truncated`).
    decode_threads : threads the decoder may use (None: ffmpeg's choice, about one per core);
        each frame-decoding thread holds pictures of its own, so fewer save memory on large
        frames.

    Yields
    ------
    :class:`~stabilize.io.frames.Frame` records: 0-based index, presentation time in seconds
    (the container's, its start time subtracted; n / fps when the decoder did not say), and
    an (height, width, 3) RGB, (height, width) grey or planar image, all uint8.

    Raises
    ------
    StabilizeError
        Naming ``path`` when not a single frame could be decoded.

    Every decoded frame is yielded once (no frames dropped or duplicated for variable frame
    rate). A clip truncated part-way ends early; the caller sees fewer frames than estimated.
    Close the generator (``contextlib.closing``) when stopping early, so ffmpeg stops at once.
    """
    info = info or probe(path)
    stats = stats if stats is not None else DecodeStats()
    frames = raw_frames(path, info, size or (info.width, info.height), gray=gray, yuv=yuv,
                        decode_threads=decode_threads, stats=stats)
    n = 0
    try:
        for reported_s, _, image in frames:
            time_s = n / info.fps if reported_s is None else reported_s
            n += 1
            stats.frames, stats.last_time_s = n, time_s
            yield Frame(n - 1, time_s, image)
    finally:
        frames.close()
    if n == 0:
        detail = (without_prefixes(stats.messages[-1]) if stats.messages
                  else "no frames could be decoded")
        raise StabilizeError(f"{path}: no video frames could be decoded ({detail})")
