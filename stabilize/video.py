"""Streaming video in and out through the ffmpeg binary bundled with imageio-ffmpeg.

Nothing else in the package knows about ffmpeg. Frames are streamed one at a time through
pipes, so memory does not grow with clip length. ffmpeg is always called with argument lists,
never through a shell.

Frames are numpy arrays, ``(height, width, 3)`` uint8 RGB or ``(height, width)`` uint8 grey,
upright (ffmpeg applies a container rotation flag while decoding).
"""

from __future__ import annotations

import os
import re
import subprocess
import threading
from collections import deque
from collections.abc import Iterator
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

import numpy as np

from .errors import StabilizeError
from .files import publish, temp_path_for

# Audio codecs an MP4 file can carry as they are; others are re-encoded to AAC (with a warning).
MP4_AUDIO = {"aac", "mp3", "ac3", "eac3", "opus", "alac", "flac", "mp2"}
ENCODERS = {"h264": "libx264", "h265": "libx265", "ffv1": "ffv1"}


def ffmpeg_exe() -> str:
    """Path of the bundled ffmpeg binary (no system install needed)."""
    import imageio_ffmpeg

    return imageio_ffmpeg.get_ffmpeg_exe()


@dataclass(frozen=True)
class VideoInfo:
    """What the container says about a clip's first video stream.

    ``width`` and ``height`` are of the upright picture (after any rotation flag), in pixels;
    ``fps`` is the stream's nominal frame rate in frames per second (``fps_text`` keeps it as an
    exact ratio for the encoder); ``frames_estimate`` is duration × fps, the real count is
    known only after decoding.
    """

    path: str
    width: int
    height: int
    fps: float
    fps_text: str
    duration_s: float
    frames_estimate: int
    codec: str
    rotation_deg: float
    audio_codec: str | None

    @property
    def has_audio(self) -> bool:
        return self.audio_codec is not None

    def to_dict(self) -> dict:
        return {
            "path": self.path, "width": self.width, "height": self.height, "fps": self.fps,
            "duration_s": self.duration_s, "codec": self.codec,
            "rotation_deg": self.rotation_deg, "audio_codec": self.audio_codec,
        }


_DURATION = re.compile(r"Duration:\s*(\d+):(\d+):(\d+(?:\.\d+)?)")
_VIDEO = re.compile(r"Stream #0:(\d+)[^:]*: Video: (\w+)(.*)")
_AUDIO = re.compile(r"Stream #0:\d+[^:]*: Audio: (\w+)")
_SIZE = re.compile(r"\b(\d{1,5})x(\d{1,5})\b")
_FPS = re.compile(r"([\d.]+)(k?) (?:fps|tbr)")
_ROTATION = re.compile(r"rotation of (-?[\d.]+) degrees")


def _fps_fraction(fps: float) -> str:
    frac = Fraction(fps).limit_denominator(1001)
    return f"{frac.numerator}/{frac.denominator}"


def probe(path: str | os.PathLike) -> VideoInfo:
    """Read a clip's header. Raises StabilizeError for a missing, unreadable or non-video file."""
    p = Path(path)
    if not p.exists():
        raise StabilizeError(f"{p}: no such file")
    if p.is_dir():
        raise StabilizeError(f"{p}: is a folder, not a video file")
    if not os.access(p, os.R_OK):
        raise StabilizeError(f"{p}: cannot be read (permission denied)")
    if p.stat().st_size == 0:
        raise StabilizeError(f"{p}: is empty (0 bytes), not a video")
    proc = subprocess.run(
        [ffmpeg_exe(), "-hide_banner", "-nostdin", "-i", str(p)],
        capture_output=True, text=True, errors="replace", check=False,
    )
    text = proc.stderr
    video = _VIDEO.search(text)
    if video is None:
        if "Invalid data found" in text or "Input #0" not in text:
            raise StabilizeError(f"{p}: not a video file ffmpeg can read")
        raise StabilizeError(f"{p}: has no video stream")
    codec, rest = video.group(2), video.group(3)
    if codec in {"png", "mjpeg", "bmp", "tiff", "webp", "gif"} and "Duration: N/A" in text:
        raise StabilizeError(f"{p}: is a still image, not a video")
    size = _SIZE.search(rest)
    if size is None:
        raise StabilizeError(f"{p}: video stream has no picture size")
    width, height = int(size.group(1)), int(size.group(2))
    fps = 0.0
    for value, kilo in _FPS.findall(rest):
        fps = float(value) * (1000.0 if kilo else 1.0)
        if fps > 0:
            break
    if not fps > 0:
        fps = 25.0
    dur = _DURATION.search(text)
    duration = (
        int(dur.group(1)) * 3600 + int(dur.group(2)) * 60 + float(dur.group(3)) if dur else 0.0
    )
    rot = _ROTATION.search(text)
    rotation = float(rot.group(1)) if rot else 0.0
    if round(abs(rotation)) % 180 == 90:
        width, height = height, width
    audio = _AUDIO.search(text)
    return VideoInfo(
        path=str(p), width=width, height=height, fps=fps, fps_text=_fps_fraction(fps),
        duration_s=duration, frames_estimate=max(1, int(round(duration * fps))), codec=codec,
        rotation_deg=rotation, audio_codec=audio.group(1) if audio else None,
    )


@dataclass(frozen=True)
class Frame:
    """One decoded frame: its 0-based index, presentation time in seconds, and pixels."""

    index: int
    time_s: float
    image: np.ndarray


_SHOWINFO = re.compile(r"\bn:\s*(\d+)\s+pts:\s*(-?\d+)\s+pts_time:\s*(-?[0-9.eE+-]+)")
_TIME_BASE = re.compile(r"config in time_base:\s*(\d+)/(\d+)")


class _StderrReader(threading.Thread):
    """Drains ffmpeg's stderr so it never blocks, collecting frame times and the last lines."""

    def __init__(self, stream) -> None:
        super().__init__(daemon=True)
        self.stream = stream
        self.times: dict[int, float] = {}
        self.tail: deque[str] = deque(maxlen=20)
        self.cond = threading.Condition()
        self.finished = False
        self.time_base: Fraction | None = None

    def run(self) -> None:
        for raw in iter(self.stream.readline, b""):
            line = raw.decode("utf-8", "replace").rstrip()
            m = _SHOWINFO.search(line)
            if m:
                # pts × time base is exact; the printed pts_time is rounded to 6 digits.
                tb = self.time_base
                t = float(int(m.group(2)) * tb) if tb else float(m.group(3))
                with self.cond:
                    self.times[int(m.group(1))] = t
                    self.cond.notify_all()
                continue
            tb_match = _TIME_BASE.search(line)
            if tb_match and int(tb_match.group(2)) > 0:
                self.time_base = Fraction(int(tb_match.group(1)), int(tb_match.group(2)))
            elif line:
                self.tail.append(line)
        with self.cond:
            self.finished = True
            self.cond.notify_all()

    def time_of(self, n: int, fallback: float) -> float:
        with self.cond:
            self.cond.wait_for(lambda: n in self.times or self.finished, timeout=10.0)
            return self.times.pop(n, fallback)


def analysis_size(info: VideoInfo, analysis_width: int) -> tuple[int, int]:
    """Size (w, h) of the reduced copy used for tracking; full size when 0 or not smaller."""
    if analysis_width <= 0 or analysis_width >= info.width:
        return info.width, info.height
    w = int(analysis_width)
    h = max(2, int(round(info.height * w / info.width)))
    return w, h


def iter_frames(
    path: str | os.PathLike,
    *,
    size: tuple[int, int] | None = None,
    gray: bool = False,
    info: VideoInfo | None = None,
) -> Iterator[Frame]:
    """Decode a clip frame by frame, in presentation order, with container timestamps.

    Parameters
    ----------
    path : the clip.
    size : (width, height) to scale to inside ffmpeg (area filter), or None for full size.
        Scaling keeps pixel centres aligned: x_small = (x + 0.5) * w_small / w - 0.5.
    gray : decode to luma only (uint8, 2-D) instead of RGB.

    Every decoded frame is yielded once (no frames dropped or duplicated for variable frame
    rate). A clip truncated part-way ends early; the caller sees fewer frames than estimated.
    """
    info = info or probe(path)
    w, h = size or (info.width, info.height)
    filters = []
    if (w, h) != (info.width, info.height):
        filters.append(f"scale={w}:{h}:flags=area")
    filters.append("showinfo=checksum=0")
    pix_fmt, channels = ("gray", 1) if gray else ("rgb24", 3)
    cmd = [
        ffmpeg_exe(), "-hide_banner", "-nostdin", "-loglevel", "info", "-i", str(path),
        "-map", "0:v:0", "-an", "-sn", "-dn", "-fps_mode", "passthrough",
        "-vf", ",".join(filters), "-f", "rawvideo", "-pix_fmt", pix_fmt, "pipe:1",
    ]
    proc = subprocess.Popen(
        cmd, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        bufsize=0,
    )
    reader = _StderrReader(proc.stderr)
    reader.start()
    frame_bytes = w * h * channels
    shape = (h, w) if gray else (h, w, 3)
    n = 0
    try:
        while True:
            buf = _read_exact(proc.stdout, frame_bytes)
            if buf is None:
                break
            image = np.frombuffer(buf, np.uint8).reshape(shape)
            yield Frame(n, reader.time_of(n, n / info.fps), image)
            n += 1
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.wait()
        reader.join(timeout=5.0)
        proc.stdout.close()
        proc.stderr.close()
    if n == 0:
        detail = reader.tail[-1] if reader.tail else "no frames could be decoded"
        raise StabilizeError(f"{path}: no video frames could be decoded ({detail})")


def _read_exact(stream, count: int) -> bytearray | None:
    """Read exactly ``count`` bytes, or None at end of stream (a partial frame is dropped)."""
    buf = bytearray(count)
    view = memoryview(buf)
    got = 0
    while got < count:
        chunk = stream.readinto(view[got:])
        if not chunk:
            return None
        got += chunk
    return buf


class VideoWriter:
    """Encode RGB frames to a video file, written under a temporary name and renamed on success.

    Use as a context manager::

        with VideoWriter("out.mp4", 640, 360, 30.0, audio_from="in.mp4") as w:
            w.write(frame)      # (360, 640, 3) uint8 RGB

    ``fps`` is a number or an exact ratio string such as ``"30000/1001"``. Audio of
    ``audio_from`` is copied through unchanged when the container allows it. If the block raises,
    the temporary file is removed and nothing appears under the final name.
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
    ) -> None:
        if codec not in ENCODERS:
            raise StabilizeError(f"option --codec: {codec!r} is not one of {', '.join(ENCODERS)}")
        self.path = Path(path)
        self.width, self.height = int(width), int(height)
        self.fps = fps if isinstance(fps, str) else _fps_fraction(float(fps))
        self.codec, self.crf, self.preset = codec, int(crf), preset
        self.audio_from = audio_from
        self.audio_codec = audio_codec
        self.frames_written = 0
        self._proc: subprocess.Popen | None = None
        self._tmp: Path | None = None
        self._reader: _StderrReader | None = None

    def _command(self, tmp: Path) -> list[str]:
        cmd = [
            ffmpeg_exe(), "-hide_banner", "-nostdin", "-y", "-loglevel", "error",
            "-f", "rawvideo", "-pix_fmt", "rgb24", "-s", f"{self.width}x{self.height}",
            "-framerate", self.fps, "-i", "pipe:0",
        ]
        if self.audio_from is not None:
            cmd += ["-i", str(self.audio_from), "-map", "0:v:0", "-map", "1:a?"]
            if self.audio_codec is None or self.audio_codec in MP4_AUDIO:
                cmd += ["-c:a", "copy"]
            else:
                cmd += ["-c:a", "aac", "-b:a", "192k"]
        encoder = ENCODERS[self.codec]
        cmd += ["-c:v", encoder]
        if self.codec in ("h264", "h265"):
            # 4:2:0 needs even sizes; odd-sized clips keep their exact size in 4:4:4.
            even = self.width % 2 == 0 and self.height % 2 == 0
            cmd += ["-crf", str(self.crf), "-preset", self.preset,
                    "-pix_fmt", "yuv420p" if even else "yuv444p"]
            if self.codec == "h265":
                cmd += ["-tag:v", "hvc1", "-x265-params", "log-level=error"]
        else:
            cmd += ["-level", "3", "-pix_fmt", "yuv444p"]
        cmd += ["-movflags", "+faststart", "-f", "mp4", str(tmp)]
        return cmd

    def __enter__(self) -> VideoWriter:
        if not self.path.parent.is_dir():
            raise StabilizeError(f"{self.path.parent}: output folder does not exist")
        self._tmp = temp_path_for(self.path)
        self._proc = subprocess.Popen(
            self._command(self._tmp), stdin=subprocess.PIPE, stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
        )
        self._reader = _StderrReader(self._proc.stderr)
        self._reader.start()
        return self

    def write(self, frame: np.ndarray) -> None:
        """Append one (height, width, 3) uint8 RGB frame."""
        if frame.shape != (self.height, self.width, 3) or frame.dtype != np.uint8:
            raise ValueError(
                f"frame must be ({self.height}, {self.width}, 3) uint8, got "
                f"{frame.shape} {frame.dtype}"
            )
        try:
            self._proc.stdin.write(np.ascontiguousarray(frame).data)
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
            if proc.poll() is None:
                proc.kill()
                proc.wait()
            if self._reader is not None:
                self._reader.join(timeout=5.0)
            if tmp is not None and tmp.exists():
                tmp.unlink()
