"""Probing a clip: what its container says about the first video stream, read from ffmpeg.

ffmpeg is run on the clip with no output; its description of the input (duration, codec,
size, frame rate, time base, rotation, pixel format, colour tags, pixel aspect, audio) is
parsed into a :class:`VideoInfo`. A missing, unreadable, empty, damaged or still-image file
is refused with a :class:`~stabilize.errors.StabilizeError` naming it.
"""

from __future__ import annotations

import os
import re
import subprocess
from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

import numpy as np

from ..errors import StabilizeError
from .colour import ColourTags, parse_colour
from .process import ffmpeg_exe, ffmpeg_path

__all__ = ["VideoInfo", "check_input", "constant_rate", "fps_fraction", "probe"]


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
    #: ticks per second of the stream's time base (0 when the container does not say)
    time_base: int = 0
    #: the decoder's pixel format as ffmpeg names it (``yuv420p``, ``yuv420p10le`` …; "" when
    #: not read)
    pix_fmt: str = ""
    colour: ColourTags = ColourTags()
    #: sample (pixel) aspect ratio of the upright picture, width:height of one pixel
    sar: tuple[int, int] = (1, 1)

    @property
    def has_audio(self) -> bool:
        """Whether the clip has an audio stream."""
        return self.audio_codec is not None

    def to_dict(self) -> dict:
        """The fields a motion log records about its source (JSON-ready)."""
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
_TBN = re.compile(r"([\d.]+)(k?) tbn")
# After the codec's name and its parenthesised details: ", yuv420p(tv, bt709, progressive), "
_PIX_FMT = re.compile(r"^[^,]*, ([a-z0-9_]+)(?:\(([^()]*)\))?[,\s]")
_ROTATION = re.compile(r"rotation of (-?[\d.]+) degrees")
# "[SAR 32:27 DAR 16:9]" from the codec; a plain "SAR …" after it is the container's, which
# players follow (ffmpeg prints it only when the two differ, or when the codec has none).
_SAR = re.compile(r"\bSAR (\d+):(\d+) DAR")
_DEMUXER = re.compile(r"Input #0, (\S+), from")
_STILL_CODECS = {"png", "mjpeg", "bmp", "tiff", "webp", "gif", "jpegxl", "jpeg2000", "qoi"}


def fps_fraction(fps: float) -> str:
    """A frame rate as the exact ratio ffmpeg takes, e.g. 29.97 -> ``"30000/1001"``.

    Parameters
    ----------
    fps : frames per second.

    Returns
    -------
    ``"numerator/denominator"``, the nearest ratio with a denominator of at most 1001.
    """
    frac = Fraction(fps).limit_denominator(1001)
    return f"{frac.numerator}/{frac.denominator}"


def _starts_like_mp4(p: Path) -> bool:
    """True when the file opens with an ISO media ``ftyp`` box (MP4, MOV, M4A, 3GP …)."""
    try:
        with open(p, "rb") as fh:
            return fh.read(8)[4:8] == b"ftyp"
    except OSError:
        return False


def check_input(path: str | os.PathLike) -> None:
    """Refuse a path that is not there, is a folder, or cannot be read (before any work).

    Parameters
    ----------
    path : an input clip.

    Raises
    ------
    StabilizeError
        Naming ``path`` and what is wrong with it.
    """
    p = Path(path)
    if not p.exists():
        raise StabilizeError(f"{p}: no such file")
    if p.is_dir():
        raise StabilizeError(f"{p}: is a folder, not a video file")
    if not os.access(p, os.R_OK):
        raise StabilizeError(f"{p}: cannot be read (permission denied)")


def probe(path: str | os.PathLike) -> VideoInfo:
    """Read a clip's header.

    Parameters
    ----------
    path : the clip.

    Returns
    -------
    What the container says about its first video stream (size of the upright picture in
    pixels, nominal frame rate in frames per second, duration in seconds …).

    Raises
    ------
    StabilizeError
        Naming ``path`` when it is missing, unreadable, empty, damaged, a still image, or not
        a video.
    """
    p = Path(path)
    check_input(p)
    if p.stat().st_size == 0:
        raise StabilizeError(f"{p}: is empty (0 bytes), not a video")
    proc = subprocess.run(
        [ffmpeg_exe(), "-hide_banner", "-nostdin", "-i", ffmpeg_path(p)],
        capture_output=True, text=True, errors="replace", check=False, process_group=0,
    )
    text = proc.stderr
    video = _VIDEO.search(text)
    if video is None:
        if _starts_like_mp4(p) and "Input #0" not in text:
            # An MP4 whose index is written last: a recording cut short loses it, or part of
            # it, and nothing can be decoded.
            raise StabilizeError(f"{p}: the file is incomplete or damaged (its index is "
                                 "missing or cut, as when a recording stops short) and cannot "
                                 "be read")
        if "Invalid data found" in text or "Input #0" not in text:
            raise StabilizeError(f"{p}: not a video file ffmpeg can read")
        raise StabilizeError(f"{p}: has no video stream")
    codec, rest = video.group(2), video.group(3)
    demuxer = _DEMUXER.search(text)
    image_demuxer = demuxer is not None and (
        demuxer.group(1) == "image2" or demuxer.group(1).endswith("_pipe"))
    if codec in _STILL_CODECS and ("Duration: N/A" in text or image_demuxer):
        raise StabilizeError(f"{p}: is a still image, not a video")
    size = _SIZE.search(rest)
    if size is None or codec == "none":
        # A header that names a stream but not its codec or size: the index was cut short.
        raise StabilizeError(f"{p}: the video stream is damaged or incomplete (no codec or "
                             "picture size) and cannot be decoded")
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
    sars = [(int(a), int(b)) for a, b in _SAR.findall(rest) if int(a) > 0 and int(b) > 0]
    sar = sars[-1] if sars else (1, 1)
    if round(abs(rotation)) % 180 == 90:
        width, height = height, width
        sar = (sar[1], sar[0])
    audio = _AUDIO.search(text)
    tbn = _TBN.search(rest)
    time_base = int(float(tbn.group(1)) * (1000 if tbn.group(2) else 1)) if tbn else 0
    fmt = _PIX_FMT.search(rest)
    return VideoInfo(
        path=str(p), width=width, height=height, fps=fps, fps_text=fps_fraction(fps),
        duration_s=duration, frames_estimate=max(1, int(round(duration * fps))), codec=codec,
        rotation_deg=rotation, audio_codec=audio.group(1) if audio else None,
        time_base=time_base, pix_fmt=fmt.group(1) if fmt else "",
        colour=parse_colour(fmt.group(2) or "") if fmt else ColourTags(), sar=sar,
    )


def constant_rate(times_s: Sequence[float] | np.ndarray, fps: float) -> bool:
    """Whether frames come at a constant rate.

    Parameters
    ----------
    times_s : (n,) presentation times in seconds.
    fps : the nominal frame rate in frames per second.

    Returns
    -------
    True when every frame interval is within 1 % of 1 / ``fps`` (and for fewer than two
    frames).
    """
    t = np.asarray(times_s, dtype=np.float64)
    if len(t) < 2:
        return True
    return bool(np.all(np.abs(np.diff(t) * fps - 1.0) < 0.01))
