"""Streaming video in and out through the ffmpeg binary bundled with imageio-ffmpeg.

Nothing else in the package knows about ffmpeg. Frames are streamed one at a time through
pipes, so memory does not grow with clip length. ffmpeg is always called with argument lists,
never through a shell.

Frames are numpy arrays, ``(height, width, 3)`` uint8 RGB or ``(height, width)`` uint8 grey,
upright (ffmpeg applies a container rotation flag while decoding); the render pass instead
asks for :class:`PlanarImage` frames in the encoder's own planar YUV layout, so neither the
decoder nor the encoder converts colours and each frame is half the bytes of RGB.

Every ffmpeg child runs in its own process group, so a Ctrl-C at the terminal reaches only
this process, which stops its children itself (:func:`stop_children`) and removes what they
were writing. Paths are handed to ffmpeg as ``file:`` URLs, so names with a leading dash or a
colon (``12:30 flight.mp4``) are never read as options or protocols.
"""

from __future__ import annotations

import os
import re
import subprocess
import threading
from collections import deque
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path

import numpy as np

from .errors import StabilizeError
from .files import discard, publish, temp_path_for

# Audio codecs an MP4 file can carry as they are; others are re-encoded to AAC (with a warning).
MP4_AUDIO = {"aac", "mp3", "ac3", "eac3", "opus", "alac", "flac", "mp2"}
ENCODERS = {"h264": "libx264", "h265": "libx265", "ffv1": "ffv1"}


def ffmpeg_exe() -> str:
    """Path of the bundled ffmpeg binary (no system install needed)."""
    import imageio_ffmpeg

    return imageio_ffmpeg.get_ffmpeg_exe()


def ffmpeg_path(path: str | os.PathLike) -> str:
    """``path`` as ffmpeg must be given it: an absolute ``file:`` URL, never an option."""
    return "file:" + os.fspath(Path(path).absolute())


_children_lock = threading.Lock()
_children: set[subprocess.Popen] = set()


def _spawn(cmd: list[str], **kwargs) -> subprocess.Popen:
    """Start ffmpeg (argument list, no shell) in its own process group and remember it."""
    proc = subprocess.Popen(cmd, process_group=0, **kwargs)
    with _children_lock:
        _children.add(proc)
    return proc


def _reap(proc: subprocess.Popen) -> None:
    """Stop ``proc`` if it still runs, wait for it, and forget it."""
    try:
        if proc.poll() is None:
            proc.kill()
        proc.wait()
    finally:
        with _children_lock:
            _children.discard(proc)


def stop_children() -> int:
    """Kill and wait for every ffmpeg this process started that is still running.

    The command line calls this when a run fails or is interrupted, so no encoder or decoder
    outlives it; returns how many were still running.
    """
    with _children_lock:
        procs = list(_children)
    running = 0
    for proc in procs:
        running += proc.poll() is None
        _reap(proc)
    return running


#: Names the encoder side (ffmpeg's ``setparams`` filter) takes for each colour property, as
#: ffmpeg prints them for a stream. A name outside these is not copied to an output.
COLOUR_NAMES: dict[str, frozenset[str]] = {
    "range": frozenset({"tv", "pc"}),
    "space": frozenset({"bt709", "fcc", "bt470bg", "smpte170m", "smpte240m", "ycgco",
                        "bt2020nc", "bt2020c", "smpte2085", "chroma-derived-nc",
                        "chroma-derived-c", "ictcp"}),
    "primaries": frozenset({"bt709", "bt470m", "bt470bg", "smpte170m", "smpte240m", "film",
                            "bt2020", "smpte428", "smpte431", "smpte432", "ebu3213"}),
    "trc": frozenset({"bt709", "gamma22", "gamma28", "smpte170m", "smpte240m", "linear",
                      "log100", "log316", "iec61966-2-4", "bt1361e", "iec61966-2-1",
                      "bt2020-10", "bt2020-12", "smpte2084", "smpte428", "arib-std-b67"}),
}


@dataclass(frozen=True)
class ColourTags:
    """How a stream's pixel values are to be read, as its header says (None: not said).

    ``range`` is ``"tv"`` (limited: luma 16–235) or ``"pc"`` (full); ``space`` is the YUV
    matrix, ``primaries`` and ``trc`` (transfer characteristic) describe the light, in
    ffmpeg's names (``bt709``, ``bt2020nc``, ``arib-std-b67`` for HLG …).
    """

    range: str | None = None
    space: str | None = None
    primaries: str | None = None
    trc: str | None = None

    def setparams_filter(self) -> str | None:
        """An ffmpeg ``setparams`` filter stamping these tags on frames (the encoder writes
        them into the stream), or None when there is nothing to stamp. Unknown names are
        left out."""
        parts = []
        for key, option in (("range", "range"), ("space", "colorspace"),
                            ("primaries", "color_primaries"), ("trc", "color_trc")):
            value = getattr(self, key)
            if value in COLOUR_NAMES[key]:
                parts.append(f"{option}={value}")
        return "setparams=" + ":".join(parts) if parts else None


_FIELD_ORDER = ("progressive", "top first", "bottom first", "top coded first",
                "bottom coded first")


def parse_colour(pix_fmt_details: str) -> ColourTags:
    """Colour tags from the parenthesis after the pixel format in ffmpeg's stream line, e.g.
    ``"tv, bt709, progressive"`` or ``"tv, bt2020nc/bt2020/arib-std-b67, progressive"``
    (one name stands for all three of matrix, primaries and transfer)."""
    tags: dict[str, str | None] = {}
    for item in (x.strip() for x in pix_fmt_details.split(",")):
        if not item or item.endswith("bpc") or item.startswith(_FIELD_ORDER):
            continue
        if item in COLOUR_NAMES["range"]:
            tags["range"] = item
            continue
        names = item.split("/")
        if len(names) == 1:
            names = names * 3
        if len(names) == 3:
            for key, name in zip(("space", "primaries", "trc"), names, strict=True):
                tags[key] = None if name in ("unknown", "reserved") else name
    return ColourTags(**tags)


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
_TBN = re.compile(r"([\d.]+)(k?) tbn")
# After the codec's name and its parenthesised details: ", yuv420p(tv, bt709, progressive), "
_PIX_FMT = re.compile(r"^[^,]*, ([a-z0-9_]+)(?:\(([^()]*)\))?[,\s]")
_ROTATION = re.compile(r"rotation of (-?[\d.]+) degrees")
# "[SAR 32:27 DAR 16:9]" from the codec; a plain "SAR …" after it is the container's, which
# players follow (ffmpeg prints it only when the two differ, or when the codec has none).
_SAR = re.compile(r"\bSAR (\d+):(\d+) DAR")
_DEMUXER = re.compile(r"Input #0, (\S+), from")
_STILL_CODECS = {"png", "mjpeg", "bmp", "tiff", "webp", "gif", "jpegxl", "jpeg2000", "qoi"}


def _fps_fraction(fps: float) -> str:
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
    """Refuse a path that is not there, is a folder, or cannot be read (before any work)."""
    p = Path(path)
    if not p.exists():
        raise StabilizeError(f"{p}: no such file")
    if p.is_dir():
        raise StabilizeError(f"{p}: is a folder, not a video file")
    if not os.access(p, os.R_OK):
        raise StabilizeError(f"{p}: cannot be read (permission denied)")


def probe(path: str | os.PathLike) -> VideoInfo:
    """Read a clip's header. Raises StabilizeError for a missing, unreadable or non-video file."""
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
        path=str(p), width=width, height=height, fps=fps, fps_text=_fps_fraction(fps),
        duration_s=duration, frames_estimate=max(1, int(round(duration * fps))), codec=codec,
        rotation_deg=rotation, audio_codec=audio.group(1) if audio else None,
        time_base=time_base, pix_fmt=fmt.group(1) if fmt else "",
        colour=parse_colour(fmt.group(2) or "") if fmt else ColourTags(), sar=sar,
    )


def output_colour(info: VideoInfo) -> ColourTags:
    """The tags of a steadied copy of ``info``'s clip rendered in planar YUV: always limited
    range (the render pass decodes to it), the source's primaries and transfer (HLG, PQ and
    wide-gamut footage keeps its meaning), and its YUV matrix when the source is YUV-coded
    (an RGB-coded source is converted with ffmpeg's default matrix, which is not tagged).
    Untagged properties stay untagged: players then assume what they assumed of the source.
    """
    c = info.colour
    yuv_coded = info.pix_fmt.startswith(("yuv", "nv", "p0", "p2", "p4"))
    return ColourTags(range="tv", space=c.space if yuv_coded else None,
                      primaries=c.primaries, trc=c.trc)


#: Planar YUV layouts the render pass works in, with their chroma subsampling (x, y).
YUV_FORMATS: dict[str, tuple[int, int]] = {"yuv420p": (2, 2), "yuv444p": (1, 1)}
#: Black in limited ("TV") range YUV, the range planar frames are decoded to: (Y, U, V).
YUV_BLACK = (16, 128, 128)


def plane_sizes(pix_fmt: str, width: int, height: int) -> list[tuple[int, int]]:
    """(width, height) in pixels of the Y, U and V planes of a ``pix_fmt`` frame.

    Chroma planes are the luma size divided by the subsampling, rounded up (ffmpeg's rule, so
    odd sizes keep their last column and row).
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
    convention of :mod:`stabilize.motion_log` in each plane's own pixels. Frames decoded by
    :func:`iter_frames` are limited range: Y 16–235, U and V 16–240 with 128 neutral.
    """

    pix_fmt: str
    data: np.ndarray
    y: np.ndarray
    u: np.ndarray
    v: np.ndarray

    @classmethod
    def wrap(cls, buf: bytearray | np.ndarray, pix_fmt: str, width: int,
             height: int) -> PlanarImage:
        """Views of the planes of ``buf`` (the frame's bytes; shared, not copied)."""
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
        """A new frame, uninitialised, or with every plane set to ``fill`` (Y, U, V)."""
        image = cls.wrap(np.empty(frame_bytes(pix_fmt, width, height), np.uint8), pix_fmt,
                         width, height)
        if fill is not None:
            for plane, value in zip(image.planes, fill, strict=True):
                plane.fill(value)
        return image

    @property
    def planes(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return self.y, self.u, self.v

    @property
    def width(self) -> int:
        return self.y.shape[1]

    @property
    def height(self) -> int:
        return self.y.shape[0]

    @property
    def subsampling(self) -> tuple[int, int]:
        """Chroma subsampling (x, y): luma pixels per chroma pixel along each axis."""
        return YUV_FORMATS[self.pix_fmt]


def frame_bytes(pix_fmt: str, width: int, height: int) -> int:
    """Bytes of one raw ``pix_fmt`` frame (``rgb24``, ``gray`` or a :data:`YUV_FORMATS`)."""
    if pix_fmt == "rgb24":
        return 3 * width * height
    if pix_fmt == "gray":
        return width * height
    return sum(w * h for w, h in plane_sizes(pix_fmt, width, height))


def output_pix_fmt(codec: str, width: int, height: int) -> str:
    """The pixel format :class:`VideoWriter` encodes ``codec`` in at this size.

    4:2:0 for H.264 and H.265 when both sides are even (it needs even sizes); 4:4:4 for odd
    sizes, which keep their exact size, and for the lossless FFV1.
    """
    if codec in ("h264", "h265") and width % 2 == 0 and height % 2 == 0:
        return "yuv420p"
    return "yuv444p"


@dataclass(frozen=True)
class Frame:
    """One decoded frame: its 0-based index, presentation time in seconds, and pixels
    (an RGB or grey array, or a :class:`PlanarImage` when decoded to planar YUV)."""

    index: int
    time_s: float
    image: np.ndarray | PlanarImage


@dataclass
class DecodeStats:
    """What one decoding pass saw, filled in by :func:`iter_frames` as it goes.

    ``frames`` decoded so far; ``last_time_s`` the last one's presentation time in seconds;
    ``errors`` how many complaints the decoder or demuxer printed (``last_error`` the last);
    ``finished`` is True once the stream ran to its end (not stopped early by the caller).
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
    """
    if not stats.finished or stats.frames == 0:
        return False
    if stats.frames >= info.frames_estimate - max(1.0, 0.02 * info.frames_estimate):
        return False
    end_s = (stats.last_time_s or 0.0) + 1.0 / info.fps
    short_s = info.duration_s - end_s
    return stats.errors > 0 or (short_s > 0.5 and end_s < 0.9 * info.duration_s)


def constant_rate(times_s: Sequence[float] | np.ndarray, fps: float) -> bool:
    """True when every frame interval is within 1 % of 1 / ``fps`` (seconds)."""
    t = np.asarray(times_s, dtype=np.float64)
    if len(t) < 2:
        return True
    return bool(np.all(np.abs(np.diff(t) * fps - 1.0) < 0.01))


_SHOWINFO = re.compile(r"\bn:\s*(\d+)\s+pts:\s*(-?\d+)\s+pts_time:\s*(-?[0-9.eE+-]+)")
_TIME_BASE = re.compile(r"config in time_base:\s*(\d+)/(\d+)")
_FFMPEG_PREFIX = re.compile(r"^(?:\[[^\]]*\]\s*)+")
# What the demuxer and decoders print about damaged or cut-short data.
_DECODE_ERROR = re.compile(
    r"partial file|invalid data|invalid nal|error while decoding|error splitting|"
    r"decoding error|corrupt|concealing|truncat|missing picture|no frame!", re.IGNORECASE,
)


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
        self.errors = 0
        self.last_error: str | None = None

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
                if "Parsed_showinfo" not in line and _DECODE_ERROR.search(line):
                    self.errors += 1
                    # Without ffmpeg's "[h264 @ 0x55…]" prefixes: plain words for the warning.
                    self.last_error = _FFMPEG_PREFIX.sub("", line) or line
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
    yuv : a planar format of :data:`YUV_FORMATS` (``"yuv420p"``, ``"yuv444p"``): yield
        :class:`PlanarImage` frames in limited range instead of RGB (see :func:`_raw_output`).
    decode_threads : threads the decoder may use (None: ffmpeg's choice, about one per core);
        each frame-decoding thread holds pictures of its own, so fewer save memory on large
        frames.
    stats : filled in while decoding (frames, last time, decoder complaints, whether the end
        was reached); pass one to find out afterwards whether the clip was cut short
        (:func:`looks_truncated`).

    Every decoded frame is yielded once (no frames dropped or duplicated for variable frame
    rate). A clip truncated part-way ends early; the caller sees fewer frames than estimated.
    Close the generator (``contextlib.closing``) when stopping early, so ffmpeg stops at once.
    """
    info = info or probe(path)
    w, h = size or (info.width, info.height)
    pix_fmt, filters, nbytes, wrap = _raw_output(w, h, info, gray=gray, yuv=yuv)
    threads = [] if decode_threads is None else ["-threads", str(int(decode_threads))]
    cmd = [
        ffmpeg_exe(), "-hide_banner", "-nostdin", "-loglevel", "info",
        *threads, "-i", ffmpeg_path(path),
        "-map", "0:v:0", "-an", "-sn", "-dn", "-fps_mode", "passthrough",
        "-vf", ",".join(filters), "-f", "rawvideo", "-pix_fmt", pix_fmt, *_RAW_QUEUE, "pipe:1",
    ]
    proc = _spawn(
        cmd, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        bufsize=0,
    )
    reader = _StderrReader(proc.stderr)
    reader.start()
    stats = stats if stats is not None else DecodeStats()
    n = 0
    try:
        while True:
            buf = _read_exact(proc.stdout, nbytes)
            if buf is None:
                stats.finished = True
                break
            image = wrap(buf)
            time_s = reader.time_of(n, n / info.fps)
            n += 1
            stats.frames, stats.last_time_s = n, time_s
            yield Frame(n - 1, time_s, image)
    finally:
        _reap(proc)
        reader.join(timeout=5.0)
        proc.stdout.close()
        proc.stderr.close()
        stats.errors, stats.last_error = reader.errors, reader.last_error
        stats.messages = list(reader.tail)
    if n == 0:
        detail = (_FFMPEG_PREFIX.sub("", reader.tail[-1]) if reader.tail
                  else "no frames could be decoded")
        raise StabilizeError(f"{path}: no video frames could be decoded ({detail})")


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
    (:data:`YUV_BLACK`) whatever the source.
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
    aspect ratio (width:height of one pixel) players are told, for non-square-pixel sources.

    ``fps`` is a number or an exact ratio string such as ``"30000/1001"``. Audio of
    ``audio_from`` is copied through unchanged when the container allows it. If the block raises,
    the temporary file is removed and nothing appears under the final name.

    ``times_s`` (seconds, one per frame, increasing) gives every frame its own presentation
    time, for variable frame rate clips; ``time_base`` (ticks per second, e.g. the source
    stream's) is the clock those times are written in, 90000 when not given. Frames beyond
    ``times_s`` continue at the last interval.
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
        sar: tuple[int, int] = (1, 1),
    ) -> None:
        if codec not in ENCODERS:
            raise StabilizeError(f"option --codec: {codec!r} is not one of {', '.join(ENCODERS)}")
        if input_pix_fmt != "rgb24" and input_pix_fmt not in YUV_FORMATS:
            raise ValueError(f"input_pix_fmt must be rgb24 or one of {', '.join(YUV_FORMATS)}")
        self.input_pix_fmt = input_pix_fmt
        # Filters that only label the frames (colour, pixel shape) for the encoder.
        tags = [colour.setparams_filter() if colour is not None else None,
                f"setsar={int(sar[0])}/{int(sar[1])}" if tuple(sar) != (1, 1) else None]
        self._tag = ",".join(t for t in tags if t) or None
        self.path = Path(path)
        self.width, self.height = int(width), int(height)
        self.fps = fps if isinstance(fps, str) else _fps_fraction(float(fps))
        self.codec, self.crf, self.preset = codec, int(crf), preset
        self.audio_from = audio_from
        self.audio_codec = audio_codec
        self.times_s = None if times_s is None else np.asarray(times_s, dtype=np.float64)
        self.time_base = int(time_base) if time_base and time_base > 0 else 90000
        self.frames_written = 0
        self._proc: subprocess.Popen | None = None
        self._tmp: Path | None = None
        self._script: Path | None = None
        self._reader: _StderrReader | None = None

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
            self._proc = _spawn(
                self._command(self._tmp), stdin=subprocess.PIPE, stdout=subprocess.DEVNULL,
                stderr=subprocess.PIPE, env=_encoder_env(),
            )
        except BaseException:
            discard(self._tmp)
            if self._script is not None:
                discard(self._script)
            raise
        self._reader = _StderrReader(self._proc.stderr)
        self._reader.start()
        return self

    def write(self, frame: np.ndarray | PlanarImage) -> None:
        """Append one frame: a (height, width, 3) uint8 RGB array, or a :class:`PlanarImage`
        of this writer's ``input_pix_fmt`` and size.

        The frame's bytes are in the pipe when this returns, so its buffer may be reused.
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
            _reap(proc)
            if self._reader is not None:
                self._reader.join(timeout=5.0)
            if tmp is not None:
                discard(tmp)
            if self._script is not None:
                discard(self._script)



# Packets listed past the wanted frame: B-frame reordering moves a packet a few places
# (H.264 allows 16 reference frames), so this margin settles the presentation times up to
# the wanted frame and half the margin beyond it.
_LIST_MARGIN = 64


def iter_frame_range(
    path: str | os.PathLike,
    start: int,
    stop: int | None = None,
    *,
    size: tuple[int, int] | None = None,
    gray: bool = False,
    yuv: str | None = None,
    info: VideoInfo | None = None,
    decode_threads: int | None = None,
) -> Iterator[Frame]:
    """Decode frames ``[start, stop)`` of a clip (``stop`` None: to the end), with the indices,
    timestamps and pixels :func:`iter_frames` gives them (``size``, ``gray``, ``yuv`` and
    ``decode_threads`` as there).

    Frame ``start`` is reached without decoding what comes before it: the packets'
    presentation timestamps are listed (demuxing only, no decoding) to learn which timestamp
    frame ``start`` has; decoding then starts at a keyframe at least a second before it (so no
    frame kept depends on a picture from before the seek) with the container timestamps kept,
    and each decoded frame is identified by its timestamp. Timestamps are reported as
    :func:`iter_frames` reports them (the container's start time subtracted, in the stream's
    time base). When the decoded timestamps do not line up with the listing (a damaged or
    unusual file), the clip is decoded from its start and the frames before ``start`` dropped:
    slower, always exact.
    """
    info = info or probe(path)
    w, h = size or (info.width, info.height)
    ts_of: dict[float, int] = {}
    shift = 0
    if start > 0:
        listing = _spawn(
            [ffmpeg_exe(), "-hide_banner", "-nostdin", "-loglevel", "info", "-copyts",
             "-i", ffmpeg_path(path), "-map", "0:v:0", "-c", "copy", "-f", "framecrc",
             "pipe:1"],
            stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
            text=True, errors="replace",
        )
        list_tb: Fraction | None = None
        pts_list: list[int] = []
        cut_short = False
        try:
            for line in listing.stdout:
                if line.startswith("#tb 0:"):
                    num, den = line.split(":", 1)[1].strip().split("/")
                    list_tb = Fraction(int(num), int(den))
                elif line.startswith("0,"):
                    pts = line.split(",")[2].strip()
                    if pts.lstrip("-").isdigit():
                        pts_list.append(int(pts))
                    # Reordering (B-frames) moves a packet only a few places, so a margin
                    # past ``start`` settles the first presentation times.
                    if len(pts_list) > start + _LIST_MARGIN:
                        cut_short = True
                        break
        finally:
            if listing.poll() is None:
                listing.kill()
            listing.communicate()
            _reap(listing)
        times = sorted(pts_list)
        if list_tb is not None and len(times) > start and len(set(times)) == len(times):
            # iter_frames reports timestamps shifted by a start offset ffmpeg works out for
            # the streams in use; it is learnt from frame 0 rather than re-derived.
            head = iter_frames(path, size=(w, h), gray=True, info=info)
            frame0 = next(head, None)
            head.close()
            if frame0 is not None:
                shift = times[0] - round(Fraction(frame0.time_s) / list_tb)
                # The last presentation times of a listing cut short are not settled: a
                # packet still to come may sort in among them. Only settled ones identify
                # frames; past them, frames are counted on.
                settled = len(times) - _LIST_MARGIN // 2 if cut_short else len(times)
                ts_of = {float(Fraction(p) * list_tb): k
                         for k, p in enumerate(times[:settled])}
                seek_s = max(0.0, float(Fraction(times[start] - shift) * list_tb) - 1.0)
                # Frames between the keyframe and frame ``start`` must be decoded but need
                # not be scaled, converted and piped: a select filter ahead of the others
                # drops them (threshold halfway to the frame before, in seconds).
                first_s = float(Fraction(times[start - 1] + times[start], 2) * list_tb)

    at_end = [False]
    threads = [] if decode_threads is None else ["-threads", str(int(decode_threads))]

    def decode() -> Iterator[Frame]:
        pix_fmt, filters, nbytes, wrap = _raw_output(w, h, info, gray=gray, yuv=yuv)
        filters = [f"select=gte(t\\,{first_s:.9f})", *filters]
        cmd = [ffmpeg_exe(), "-hide_banner", "-nostdin", "-loglevel", "info",
               *threads, "-noaccurate_seek", "-ss", f"{seek_s:.6f}", "-copyts",
               "-i", ffmpeg_path(path),
               "-map", "0:v:0", "-an", "-sn", "-dn", "-fps_mode", "passthrough",
               "-vf", ",".join(filters), "-f", "rawvideo", "-pix_fmt", pix_fmt, *_RAW_QUEUE,
               "pipe:1"]
        proc = _spawn(cmd, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                      stderr=subprocess.PIPE, bufsize=0)
        reader = _StderrReader(proc.stderr)
        reader.start()
        n, index = 0, -1
        try:
            while True:
                buf = _read_exact(proc.stdout, nbytes)
                if buf is None:
                    at_end[0] = index >= start
                    return
                raw_s = reader.time_of(n, float("nan"))
                n += 1
                known = ts_of.get(raw_s)
                if index < start:
                    if known is None or known < start:
                        continue  # before the wanted frame (the listing covers these)
                    if known != start:
                        return
                    index = start
                else:
                    index += 1
                    if known is not None and known != index:
                        return
                if reader.time_base != list_tb:
                    return
                time_s = float((round(Fraction(raw_s) / list_tb) - shift) * list_tb)
                yield Frame(index, time_s, wrap(buf))
        finally:
            _reap(proc)
            reader.join(timeout=5.0)
            proc.stdout.close()
            proc.stderr.close()

    expected = start
    if ts_of:
        frames = decode()
        try:
            for f in frames:
                if stop is not None and f.index >= stop:
                    return
                yield f
                expected += 1
        finally:
            frames.close()
        if at_end[0]:
            return
    # Exact path: decode from the start (also what finishes a seek that went astray).
    for f in iter_frames(path, size=size, gray=gray, yuv=yuv, info=info,
                         decode_threads=decode_threads):
        if f.index < expected:
            continue
        if stop is not None and f.index >= stop:
            return
        yield f
