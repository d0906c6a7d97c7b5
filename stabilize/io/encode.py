"""Encoding frames to an MP4 file through one ffmpeg pipe, published whole when it succeeds.

:class:`VideoWriter` streams frames (RGB or planar YUV) into an encoding ffmpeg, writes under
a temporary name and renames on success; audio of the source is copied through, colour tags
and pixel aspect are stamped, and variable frame rate clips keep every frame's own time.
:func:`output_pix_fmt` and :func:`output_colour` say what a steadied copy is encoded in.
"""

from __future__ import annotations

import os
import subprocess
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from ..errors import StabilizeError
from .colour import ColourTags
from .frames import YUV_FORMATS, PlanarImage, frame_bytes
from .messages import StderrReader
from .probing import VideoInfo, fps_fraction
from .process import ffmpeg_exe, ffmpeg_path, reap, spawn, usable_cores, widen_pipe
from .publishing import discard, publish, temp_path_for

__all__ = ["ENCODERS", "LARGE_FRAME_LOOKAHEAD", "LARGE_FRAME_PX", "MP4_AUDIO", "VideoWriter",
           "output_colour", "output_pix_fmt", "x264_options"]

# Audio codecs an MP4 file can carry as they are; others are re-encoded to AAC (with a warning).
MP4_AUDIO = {"aac", "mp3", "ac3", "eac3", "opus", "alac", "flac", "mp2"}
ENCODERS = {"h264": "libx264", "h265": "libx265", "ffv1": "ffv1"}


def output_pix_fmt(codec: str, width: int, height: int) -> str:
    """The pixel format :class:`VideoWriter` encodes ``codec`` in at this size.

    4:2:0 for H.264 and H.265 when both sides are even (it needs even sizes); 4:4:4 for odd
    sizes, which keep their exact size, and for the lossless FFV1.

    Parameters
    ----------
    codec : one of :data:`ENCODERS`.
    width, height : the picture size in pixels.

    Returns
    -------
    ``"yuv420p"`` or ``"yuv444p"``.
    """
    if codec in ("h264", "h265") and width % 2 == 0 and height % 2 == 0:
        return "yuv420p"
    return "yuv444p"


def output_colour(info: VideoInfo) -> ColourTags:
    """The tags of a steadied copy of ``info``'s clip rendered in planar YUV: always limited
    range (the render pass decodes to it), the source's primaries and transfer (HLG, PQ and
    wide-gamut footage keeps its meaning), and its YUV matrix when the source is YUV-coded
    (an RGB-coded source is converted with ffmpeg's default matrix, which is not tagged).
    Untagged properties stay untagged: players then assume what they assumed of the source.

    Parameters
    ----------
    info : the source clip's header.

    Returns
    -------
    The tags to give :class:`VideoWriter` for the steadied copy.
    """
    c = info.colour
    yuv_coded = info.pix_fmt.startswith(("yuv", "nv", "p0", "p2", "p4"))
    return ColourTags(range="tv", space=c.space if yuv_coded else None,
                      primaries=c.primaries, trc=c.trc)


#: Frames larger than this (pixels; above twice 1920×1080) are encoded with x264's
#: look-ahead shortened to :data:`LARGE_FRAME_LOOKAHEAD` frames.
LARGE_FRAME_PX = 2 * 1920 * 1080

#: x264's look-ahead (frames) for large frames. The presets from ``medium`` on keep 40
#: frames ahead, each a full frame held by the encoder. At 3840×2160, ``medium``, CRF 18,
#: a lone transcode peaked at 1743 MiB with 40 frames, 1228 with 20 and 1007 with 10; on a
#: drawn 4K drone clip 10 frames gave a file 5.3 % smaller at 0.17 dB lower PSNR (20: 1.3 %,
#: 0.03 dB). Inside ``steady`` (decoders, the tool and the encoder together) 20 frames
#: still peaked at 1643–1735 MiB, over the 1.5 GiB aimed at; hence 10 (measured here).
LARGE_FRAME_LOOKAHEAD = 10


def x264_options(width: int, height: int, cores: int | None = None) -> list[str]:
    """Extra ffmpeg options for libx264 at this frame size (width, height pixels).

    * One encoding thread per core this process may use (``cores``; None: those of
      :func:`~stabilize.io.process.usable_cores`), where x264 would start one and a half
      per core: the render's decoding, warps and checks share those cores, and every
      further frame thread holds frames of its own (measured at 1080p, ``veryfast``, two
      cores: the whole ``steady`` peaked at 477–478 MiB instead of 502–505, its wall time
      within 2 %).
    * A shorter look-ahead for large frames (:data:`LARGE_FRAME_PX`), so that the encoder's
      memory stays bounded at 4K.

    Parameters
    ----------
    width, height : frame size, pixels.
    cores : cores to encode on (None: those this process may use).

    Returns
    -------
    list of ffmpeg command-line words.
    """
    opts = ["-threads", str(max(1, usable_cores() if cores is None else int(cores)))]
    if width * height > LARGE_FRAME_PX:
        opts += ["-x264-params", f"rc-lookahead={LARGE_FRAME_LOOKAHEAD}"]
    return opts


def _encoder_env() -> dict[str, str]:
    """The environment for an encoding ffmpeg: this one, with glibc's malloc told to map
    every block of 1 MiB or more on its own.

    Raw input frames are frame-sized blocks handed between ffmpeg's threads. glibc raises
    its mapping threshold after the first large block is freed, after which freed frames
    seem to stay in its per-thread heaps rather than go back to the system; with the
    threshold fixed, a 4K encoder peaked about 70 MiB lower (1005 against 1040–1100 MiB,
    measured, output unchanged). Other C libraries ignore the setting.
    """
    env = dict(os.environ)
    tunable = "glibc.malloc.mmap_threshold=1048576"
    env["GLIBC_TUNABLES"] = ":".join(filter(None, (env.get("GLIBC_TUNABLES"), tunable)))
    return env


class VideoWriter:
    """Encode frames to a video file, written under a temporary name and renamed on success.

    Use as a context manager::

        with VideoWriter("out.mp4", 640, 360, 30.0, audio_from="in.mp4") as w:
            w.write(frame)      # (360, 640, 3) uint8 RGB

    ``input_pix_fmt`` says what :meth:`write` is fed: ``"rgb24"`` arrays (the default), or
    :class:`PlanarImage` frames in ``"yuv420p"`` / ``"yuv444p"``, limited range. The encoded
    format does not depend on it (:func:`output_pix_fmt`); feeding frames already in that
    format spares the encoder a conversion. ``colour`` tags the stream (:class:`ColourTags`,
    for instance :func:`output_colour` of the source); it describes the values fed, so it
    suits planar YUV input carried through from a decoder, not RGB. ``sar`` is the pixel
    aspect ratio (width:height of one pixel) players are told, the source's tag carried over
    (:attr:`VideoInfo.sar`, square pixels included); None writes no tag.

    ``fps`` is a number or an exact ratio string such as ``"30000/1001"``. Audio of
    ``audio_from`` is copied through unchanged when the container allows it. If the block raises,
    the temporary file is removed and nothing appears under the final name.

    ``times_s`` (seconds, one per frame, increasing) gives every frame its own presentation
    time, for variable frame rate clips; ``time_base`` (ticks per second, e.g. the source
    stream's) is the clock those times are written in, 90000 when not given. Frames beyond
    ``times_s`` continue at the last interval.

    Parameters
    ----------
    path : the output file (MP4); its folder must exist.
    width, height : the picture size in pixels.
    fps : frames per second, a number or an exact ratio string.
    codec : one of :data:`ENCODERS` (``"h264"``, ``"h265"``, ``"ffv1"``).
    crf, preset : the H.264/H.265 encoder's quality (constant rate factor) and speed preset.
    audio_from : a clip whose audio is carried over; ``audio_codec`` is its codec's name.
    times_s : (n,) presentation times in seconds, or None for a constant rate.
    time_base : ticks per second of the clock ``times_s`` is written in (0: 90000).
    input_pix_fmt : ``"rgb24"``, ``"yuv420p"`` or ``"yuv444p"``.
    colour : tags stamped on the stream, or None.
    sar : pixel aspect ratio (width, height of one pixel) to tag, or None for no tag.

    Raises
    ------
    StabilizeError
        When ``codec`` is not supported; on entering, when the output folder does not
        exist.
    """

    def __init__(
        self,
        path: str | os.PathLike,
        width: int,
        height: int,
        fps: float | str,
        *,
        codec: str = "h264",
        crf: int = 18,
        preset: str = "medium",
        audio_from: str | os.PathLike | None = None,
        audio_codec: str | None = None,
        times_s: Sequence[float] | np.ndarray | None = None,
        time_base: int = 0,
        input_pix_fmt: str = "rgb24",
        colour: ColourTags | None = None,
        sar: tuple[int, int] | None = None,
    ) -> None:
        if codec not in ENCODERS:
            raise StabilizeError(f"codec {codec!r} is not one of {', '.join(ENCODERS)}")
        if input_pix_fmt != "rgb24" and input_pix_fmt not in YUV_FORMATS:
            raise ValueError(f"input_pix_fmt must be rgb24 or one of {', '.join(YUV_FORMATS)}")
        self.input_pix_fmt = input_pix_fmt
        # Filters that only label the frames (colour, pixel shape) for the encoder.
        tags = [colour.setparams_filter() if colour is not None else None,
                None if sar is None else f"setsar={int(sar[0])}/{int(sar[1])}"]
        self._tag = ",".join(t for t in tags if t) or None
        self.path = Path(path)
        self.width, self.height = int(width), int(height)
        self.fps = fps if isinstance(fps, str) else fps_fraction(float(fps))
        self.codec, self.crf, self.preset = codec, int(crf), preset
        self.audio_from = audio_from
        self.audio_codec = audio_codec
        self.times_s = None if times_s is None else np.asarray(times_s, dtype=np.float64)
        self.time_base = int(time_base) if time_base and time_base > 0 else 90000
        self.frames_written = 0
        self._proc: subprocess.Popen | None = None
        self._tmp: Path | None = None
        self._script: Path | None = None
        self._reader: StderrReader | None = None

    def _timestamp_filter(self) -> str:
        """A filter chain that gives frame N its own time: ``settb`` to the chosen clock, then
        ``setpts`` with a balanced tree of ``if(lt(N,k),…)`` over the per-frame ticks, so each
        frame costs a handful of comparisons however long the clip."""
        t = self.times_s
        ticks = np.round((t - t[0]) * self.time_base).astype(np.int64)
        # Strictly increasing, as the encoder demands, even for a damaged source's repeats:
        # tick_i = max(tick_i, tick_(i-1) + 1).
        k = np.arange(len(ticks))
        ticks = np.maximum.accumulate(ticks - k) + k
        step = int(ticks[-1] - ticks[-2]) if len(ticks) > 1 else self.time_base // 25
        last = len(ticks) - 1

        def tree(lo: int, hi: int) -> str:
            if hi - lo == 1:
                if lo == last:
                    return f"{int(ticks[lo])}+(N-{last})*{step}"
                return str(int(ticks[lo]))
            mid = (lo + hi) // 2
            return f"if(lt(N\\,{mid})\\,{tree(lo, mid)}\\,{tree(mid, hi)})"

        return f"settb=1/{self.time_base},setpts={tree(0, len(ticks))}"

    def _command(self, tmp: Path) -> list[str]:
        cmd = [
            ffmpeg_exe(), "-hide_banner", "-nostdin", "-y", "-loglevel", "error",
            "-f", "rawvideo", "-pix_fmt", self.input_pix_fmt,
            "-s", f"{self.width}x{self.height}",
            "-framerate", self.fps, "-i", "pipe:0",
        ]
        if self.audio_from is not None:
            cmd += ["-i", ffmpeg_path(self.audio_from), "-map", "0:v:0", "-map", "1:a?"]
            if self.audio_codec is None or self.audio_codec in MP4_AUDIO:
                cmd += ["-c:a", "copy"]
            else:
                cmd += ["-c:a", "aac", "-b:a", "192k"]
        if self._script is not None:
            # The filter is read from a file ("-/vf"): a long clip's tree outgrows the
            # command line.
            cmd += ["-/vf", str(self._script), "-fps_mode", "passthrough",
                    "-enc_time_base", "filter", "-video_track_timescale", str(self.time_base)]
        elif self._tag is not None:
            cmd += ["-vf", self._tag]
        encoder = ENCODERS[self.codec]
        cmd += ["-c:v", encoder]
        pix_fmt = output_pix_fmt(self.codec, self.width, self.height)
        if self.codec in ("h264", "h265"):
            cmd += ["-crf", str(self.crf), "-preset", self.preset, "-pix_fmt", pix_fmt]
            if self.codec == "h264":
                cmd += x264_options(self.width, self.height)
            if self.codec == "h265":
                cmd += ["-tag:v", "hvc1", "-x265-params", "log-level=error"]
        else:
            cmd += ["-level", "3", "-pix_fmt", pix_fmt]
        cmd += ["-movflags", "+faststart", "-f", "mp4", ffmpeg_path(tmp)]
        return cmd

    def __enter__(self) -> VideoWriter:
        if not self.path.parent.is_dir():
            raise StabilizeError(f"{self.path.parent}: output folder does not exist")
        self._tmp = temp_path_for(self.path)
        try:
            if self.times_s is not None and len(self.times_s) > 0:
                self._script = temp_path_for(self.path.with_suffix(".timestamps.txt"))
                chain = [f for f in (self._tag, self._timestamp_filter()) if f]
                self._script.write_text(",".join(chain), encoding="ascii")
            self._proc = spawn(
                self._command(self._tmp), stdin=subprocess.PIPE, stdout=subprocess.DEVNULL,
                stderr=subprocess.PIPE, env=_encoder_env(),
            )
        except BaseException:
            discard(self._tmp)
            if self._script is not None:
                discard(self._script)
            raise
        # A frame goes into the pipe at once, not 64 KiB at a time with the encoder woken
        # for each piece.
        widen_pipe(self._proc.stdin, frame_bytes(self.input_pix_fmt, self.width, self.height))
        self._reader = StderrReader(self._proc.stderr)
        self._reader.start()
        return self

    def write(self, frame: np.ndarray | PlanarImage) -> None:
        """Append one frame: a (height, width, 3) uint8 RGB array, or a :class:`PlanarImage`
        of this writer's ``input_pix_fmt`` and size.

        The frame's bytes are in the pipe when this returns, so its buffer may be reused.

        Parameters
        ----------
        frame : (height, width, 3) uint8 RGB, or a planar image of ``input_pix_fmt``.

        Raises
        ------
        ValueError
            When the frame is not of this writer's kind and size.
        StabilizeError
            Naming the output file when the encoder has stopped.
        """
        if self.input_pix_fmt == "rgb24":
            if (not isinstance(frame, np.ndarray) or frame.dtype != np.uint8
                    or frame.shape != (self.height, self.width, 3)):
                got = (f"{frame.shape} {frame.dtype}" if isinstance(frame, np.ndarray)
                       else type(frame).__name__)
                raise ValueError(f"frame must be ({self.height}, {self.width}, 3) uint8, "
                                 f"got {got}")
            data = np.ascontiguousarray(frame).data
        else:
            if (not isinstance(frame, PlanarImage) or frame.pix_fmt != self.input_pix_fmt
                    or (frame.width, frame.height) != (self.width, self.height)):
                raise ValueError(f"frame must be a {self.width}x{self.height} "
                                 f"{self.input_pix_fmt} PlanarImage")
            data = frame.data.data
        try:
            self._proc.stdin.write(data)
        except BrokenPipeError:
            raise StabilizeError(f"{self.path}: the encoder stopped: {self._error()}") from None
        self.frames_written += 1

    def _error(self) -> str:
        if self._proc is not None and self._proc.poll() is None:
            self._proc.wait(timeout=10)
        if self._reader is not None:
            self._reader.join(timeout=5.0)
            if self._reader.tail:
                return self._reader.tail[-1]
        return "unknown encoder error"

    def __exit__(self, exc_type, exc, tb) -> None:
        proc, tmp = self._proc, self._tmp
        try:
            if exc_type is None:
                proc.stdin.close()
                rc = proc.wait()
                if rc != 0:
                    raise StabilizeError(f"{self.path}: encoding failed: {self._error()}")
                if self.frames_written == 0:
                    raise StabilizeError(f"{self.path}: no frames to write")
                publish(tmp, self.path)
                tmp = None
            else:
                proc.kill()
                proc.wait()
        finally:
            if proc.stdin and not proc.stdin.closed:
                try:
                    proc.stdin.close()
                except OSError:
                    pass
            reap(proc)
            if self._reader is not None:
                self._reader.join(timeout=5.0)
            if tmp is not None:
                discard(tmp)
            if self._script is not None:
                discard(self._script)
