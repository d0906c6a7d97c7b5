"""One decoder feeding two streams: the grey analysis copy and the full-size planar YUV frames.

The clip is decoded once; ffmpeg splits each decoded picture into the analysis chain (scaled
with the area filter, grey) written to one pipe and the render chain (limited-range planar YUV)
written to another. Each chain is the one :func:`stabilize.io.decode.iter_frames` asks for, so
both streams hold the same bytes as two separate decoding passes would. Both pipes must be read
as ffmpeg writes them (it stops when either is full): read them from two threads.
"""

from __future__ import annotations

import os
import subprocess
from collections.abc import Iterator

from ..errors import StabilizeError
from .decode import DecodeStats, _raw_output
from .frames import Frame
from .messages import StderrReader, without_prefixes
from .probing import VideoInfo
from .process import ffmpeg_exe, ffmpeg_path, read_exact, reap, spawn, widen_pipe

__all__ = ["TwinDecoder"]

# As in stabilize.io.decode: two raw frames waiting in ffmpeg for each pipe.
_RAW_QUEUE = ["-thread_queue_size", "2"]


class TwinDecoder:
    """Decode a clip once into two streams (a context manager; ffmpeg runs while open).

    Parameters
    ----------
    path : the clip. info : its header.
    size : (width, height) of the analysis copy, pixels (area filter, grey).
    yuv : planar format of the full-size stream (:data:`stabilize.io.frames.YUV_FORMATS`).
    stats : filled in as the analysis stream is read (as :func:`iter_frames` does).

    :meth:`analysis` yields the grey frames with their times; :meth:`render` the planar
    frames (time 0.0: the analysis stream carries the times). Iterate them in two threads.
    """

    def __init__(self, path: str | os.PathLike, info: VideoInfo, size: tuple[int, int], *,
                 yuv: str, stats: DecodeStats | None = None) -> None:
        self.path, self.info = path, info
        self.stats = stats if stats is not None else DecodeStats()
        w, h = size
        self._a_fmt, a_filters, self._a_bytes, self._a_wrap = _raw_output(
            w, h, info, gray=True, yuv=None)
        self._r_fmt, r_filters, self._r_bytes, self._r_wrap = _raw_output(
            info.width, info.height, info, gray=False, yuv=yuv)
        # One showinfo, before the split, reports each decoded picture's time once.
        chain_a = ",".join(f for f in a_filters if not f.startswith("showinfo")) or "null"
        chain_r = ",".join(f for f in r_filters if not f.startswith("showinfo")) or "null"
        self._graph = (f"[0:v:0]showinfo=checksum=0,split=2[a][r];[a]{chain_a}[ao];"
                       f"[r]{chain_r}[ro]")
        self._proc: subprocess.Popen | None = None
        self._reader: StderrReader | None = None
        self._render_fd: int | None = None

    def __enter__(self) -> TwinDecoder:
        read_fd, write_fd = os.pipe()
        cmd = [
            ffmpeg_exe(), "-hide_banner", "-nostdin", "-loglevel", "info",
            "-i", ffmpeg_path(self.path), "-filter_complex", self._graph,
            "-map", "[ao]", "-an", "-sn", "-dn", "-fps_mode", "passthrough",
            "-f", "rawvideo", "-pix_fmt", self._a_fmt, *_RAW_QUEUE, "pipe:1",
            "-map", "[ro]", "-an", "-sn", "-dn", "-fps_mode", "passthrough",
            "-f", "rawvideo", "-pix_fmt", self._r_fmt, *_RAW_QUEUE, f"pipe:{write_fd}",
        ]
        try:
            self._proc = spawn(cmd, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, bufsize=0, pass_fds=(write_fd,))
        except BaseException:
            os.close(read_fd)
            raise
        finally:
            os.close(write_fd)
        self._render_pipe = os.fdopen(read_fd, "rb", buffering=0)
        widen_pipe(self._proc.stdout, self._a_bytes)
        widen_pipe(self._render_pipe, self._r_bytes)
        self._reader = StderrReader(self._proc.stderr)
        self._reader.start()
        return self

    def close(self) -> None:
        """Stop ffmpeg (if still running) and close the pipes; fills in the stats."""
        if self._proc is None:
            return
        proc, self._proc = self._proc, None
        reap(proc)
        self._reader.join(timeout=5.0)
        proc.stdout.close()
        proc.stderr.close()
        self._render_pipe.close()
        self.stats.errors = self._reader.errors
        self.stats.last_error = self._reader.last_error
        self.stats.messages = list(self._reader.tail)

    def __exit__(self, *exc) -> None:
        self.close()

    def analysis(self) -> Iterator[Frame]:
        """The grey analysis frames, numbered from 0, with their presentation times (s).

        Raises
        ------
        StabilizeError
            Naming the clip when not a single frame could be decoded.
        """
        n = 0
        stats, fps = self.stats, self.info.fps
        proc, reader = self._proc, self._reader
        while True:
            buf = read_exact(proc.stdout, self._a_bytes)
            if buf is None:
                stats.finished = True
                break
            reported = reader.time_of(n, None)
            time_s = n / fps if reported is None else reported
            n += 1
            stats.frames, stats.last_time_s = n, time_s
            yield Frame(n - 1, time_s, self._a_wrap(buf))
        if n == 0:
            reader.join(timeout=5.0)
            detail = (without_prefixes(reader.tail[-1]) if reader.tail
                      else "no frames could be decoded")
            raise StabilizeError(f"{self.path}: no video frames could be decoded ({detail})")

    def render(self) -> Iterator[Frame]:
        """The full-size planar frames, numbered from 0 (time 0.0)."""
        n = 0
        while True:
            try:
                buf = read_exact(self._render_pipe, self._r_bytes)
            except (OSError, ValueError):  # closed under us: the job stopped
                return
            if buf is None:
                return
            yield Frame(n, 0.0, self._r_wrap(buf))
            n += 1
