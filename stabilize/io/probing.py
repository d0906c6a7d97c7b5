"""Probing a clip: what its container says about the first video stream, read from ffmpeg.

ffmpeg is run on the clip with no output; its description of the input (duration, codec,
size, frame rate, time base, rotation, pixel format, colour tags, pixel aspect, audio) is
parsed into a :class:`VideoInfo`. A missing, unreadable, empty, damaged or still-image file
is refused with a :class:`~stabilize.errors.StabilizeError` naming it.
"""

from __future__ import annotations

import math
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

__all__ = ["MAX_PIXELS", "MAX_SIDE", "PROBE_TIMEOUT_S", "VideoInfo", "check_input",
           "constant_rate", "fps_fraction", "probe"]


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
    #: sample (pixel) aspect ratio of the upright picture, width:height of one pixel, as the
    #: stream tags it (1:1 for a square-pixel tag); None when it carries no tag (players then
    #: assume square pixels)
    sar: tuple[int, int] | None = None

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


# Only lines ffmpeg's own header dump writes, anchored at their exact indentation: tags
# (titles, comments) are printed indented under "Metadata:" and a value's line breaks become
# continuation lines, so no tag value can start one of these lines. The input's name is cut out
# of the text before parsing (:func:`_dump_text`).
_DURATION = re.compile(r"^  Duration: (?:(\d+):(\d+):(\d+(?:\.\d+)?)|N/A)", re.MULTILINE)
_STREAM = re.compile(r"^  Stream #0:(\d+)(?:\[0x[0-9a-fA-F]+\])?(?:\([^()\n]*\))?: "
                     r"(Video|Audio|Subtitle|Data|Attachment): (\w+)(.*)$", re.MULTILINE)
_TOP_LEVEL = re.compile(r"^ {0,2}\S", re.MULTILINE)
_SIDE_DATA = re.compile(r"^    Side data:$", re.MULTILINE)
_ROTATION = re.compile(r"^      Display ?Matrix: rotation of (-?\d+(?:\.\d+)?) degrees$",
                       re.MULTILINE | re.IGNORECASE)
_SIZE = re.compile(r"\b(\d{1,5})x(\d{1,5})\b")
_FPS = re.compile(r"([\d.]+)(k?) (?:fps|tbr)")
_TBN = re.compile(r"([\d.]+)(k?) tbn")
# After the codec's name and its parenthesised details: ", yuv420p(tv, bt709, progressive), "
_PIX_FMT = re.compile(r"^[^,]*, ([a-z0-9_]+)(?:\(([^()]*)\))?[,\s]")
# "[SAR 32:27 DAR 16:9]" from the codec; a plain "SAR …" after it is the container's, which
# players follow (ffmpeg prints it only when the two differ, or when the codec has none).
_SAR = re.compile(r"\bSAR (\d+):(\d+) DAR")
_DEMUXER = re.compile(r"^Input #0, (\S+), from ", re.MULTILINE)
#: Largest picture accepted, in pixels (width x height): 8K UHD is 33 Mpx; a header claiming
#: more is damaged or hostile and would need gigabytes per frame (common practice).
MAX_PIXELS = 8192 * 8192
#: Largest side accepted, in pixels.
MAX_SIDE = 16384
# Demuxers that turn any text into pictures (ANSI art, subtitles): never a camera's clip.
_TEXT_DEMUXERS = {"tty", "ansi"}
_TEXT_CODECS = {"ansi", "bintext", "xbin", "idf"}
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
    if not p.is_file():
        # A pipe or a device: ffmpeg would wait on it for ever.
        raise StabilizeError(f"{p}: is not a regular file (a pipe or a device), not a video "
                             "file")
    if not os.access(p, os.R_OK):
        raise StabilizeError(f"{p}: cannot be read (permission denied)")


def _dump_text(p: Path) -> str:
    """ffmpeg's description of input ``p``, with the input's own name cut out.

    The name is printed verbatim (line breaks and all) in the ``Input #0, …, from '…':`` line;
    it is replaced by ``<input>`` so no part of a file name can be read as a header line.
    """
    url = ffmpeg_path(p)
    try:
        proc = subprocess.run(
            [ffmpeg_exe(), "-hide_banner", "-nostdin", "-i", url],
            capture_output=True, check=False, process_group=0, timeout=PROBE_TIMEOUT_S,
        )
    except subprocess.TimeoutExpired:
        raise StabilizeError(f"{p}: reading its header took longer than {PROBE_TIMEOUT_S:.0f} s "
                             "(a file that is not a plain video file, or a stalled disk)") from None
    raw = proc.stderr.replace(f" from '{url}':".encode("utf-8", "surrogateescape"),
                              b" from '<input>':")
    return raw.decode("utf-8", "replace")


#: Seconds ffmpeg may take to describe an input before it is stopped.
PROBE_TIMEOUT_S = 60.0


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
    text = _dump_text(p)
    streams = [(int(m.group(1)), m.group(2), m.group(3), m.group(4), m)
               for m in _STREAM.finditer(text)]
    # A stream in two programs (MPEG-TS) is listed twice, word for word.
    lines = {(s[0], s[4].group(0)) for s in streams}
    durations = _DURATION.findall(text)
    if len({i for i, _ in lines}) != len(lines) or len(durations) > 1:
        # ffmpeg numbers its streams once each and states one duration: a repeat was written
        # by a tag whose name holds line breaks. Nothing in the header can be trusted.
        raise StabilizeError(f"{p}: its tags imitate ffmpeg's own description of the streams; "
                             "the header cannot be read safely")
    videos = sorted((s for s in streams if s[1] == "Video"), key=lambda s: s[0])
    if len(lines) != len(streams):
        streams = list({s[0]: s for s in streams}.values())
    if not videos:
        if _starts_like_mp4(p) and "Input #0" not in text:
            # An MP4 whose index is written last: a recording cut short loses it, or part of
            # it, and nothing can be decoded.
            raise StabilizeError(f"{p}: the file is incomplete or damaged (its index is "
                                 "missing or cut, as when a recording stops short) and cannot "
                                 "be read")
        if "Invalid data found" in text or "Input #0" not in text:
            raise StabilizeError(f"{p}: not a video file ffmpeg can read")
        raise StabilizeError(f"{p}: has no video stream")
    _, _, codec, rest, video = videos[0]
    demuxer = _DEMUXER.search(text)
    if (demuxer is not None and demuxer.group(1) in _TEXT_DEMUXERS) or codec in _TEXT_CODECS:
        raise StabilizeError(f"{p}: not a video file ffmpeg can read (it reads as text)")
    image_demuxer = demuxer is not None and (
        demuxer.group(1) == "image2" or demuxer.group(1).endswith("_pipe"))
    if codec in _STILL_CODECS and ("  Duration: N/A" in text or image_demuxer):
        raise StabilizeError(f"{p}: is a still image, not a video")
    # The codec's part (name, profile, four-character tag) ends at the first ", "; the size,
    # rates and aspect come after it.
    tail = rest.split(", ", 1)[1] if ", " in rest else ""
    size = _SIZE.search(tail)
    if size is None or codec == "none":
        # A header that names a stream but not its codec or size: the index was cut short.
        raise StabilizeError(f"{p}: the video stream is damaged or incomplete (no codec or "
                             "picture size) and cannot be decoded")
    width, height = int(size.group(1)), int(size.group(2))
    if width < 1 or height < 1 or width > MAX_SIDE or height > MAX_SIDE \
            or width * height > MAX_PIXELS:
        raise StabilizeError(f"{p}: its header claims a {width}x{height} picture; at most "
                             f"{MAX_SIDE} px a side and {MAX_PIXELS / 1e6:.0f} Mpx in all are "
                             "read (a damaged file, or not a camera's clip)")
    fps = 0.0
    for value, kilo in _FPS.findall(tail):
        fps = float(value) * (1000.0 if kilo else 1.0)
        if fps > 0:
            break
    if not (fps > 0 and math.isfinite(fps)) or fps > 100000:
        fps = 25.0
    dur = durations[0] if durations else None
    duration = (int(dur[0]) * 3600 + int(dur[1]) * 60 + float(dur[2])
                if dur and dur[0] else 0.0)
    # The rotation is side data of this stream: after its "Side data:" heading, before the
    # next stream's line.
    block_end = _TOP_LEVEL.search(text, video.end() + 1)
    block = text[video.end():block_end.start() if block_end else len(text)]
    side = _SIDE_DATA.search(block)
    rot = _ROTATION.search(block, side.end()) if side else None
    rotation = float(rot.group(1)) if rot else 0.0
    sars = [(int(a), int(b)) for a, b in _SAR.findall(tail) if int(a) > 0 and int(b) > 0]
    sar = sars[-1] if sars else None
    if round(abs(rotation)) % 180 == 90:
        width, height = height, width
        sar = None if sar is None else (sar[1], sar[0])
    audio = next((s for s in streams if s[1] == "Audio"), None)
    tbn = _TBN.search(tail)
    time_base = int(float(tbn.group(1)) * (1000 if tbn.group(2) else 1)) if tbn else 0
    fmt = _PIX_FMT.search(rest)
    return VideoInfo(
        path=str(p), width=width, height=height, fps=fps, fps_text=fps_fraction(fps),
        duration_s=duration, frames_estimate=max(1, int(round(duration * fps))), codec=codec,
        rotation_deg=rotation, audio_codec=audio[2] if audio else None,
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
