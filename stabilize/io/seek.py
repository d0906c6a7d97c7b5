"""Seeking: decoding a range of a clip's frames without decoding what comes before it.

The packets' presentation timestamps are listed first (demuxing only, no decoding) to learn
which timestamp the first wanted frame has; decoding then starts at a keyframe at least a
second before it, and each decoded frame is identified by its timestamp. Whenever the decoded
timestamps do not line up with the listing, the range is decoded from the clip's start
instead: slower, always exact.
"""

from __future__ import annotations

import math
import os
import subprocess
from collections.abc import Iterator
from dataclasses import dataclass
from fractions import Fraction

from .decode import DecodeStats, iter_frames, raw_frames
from .frames import Frame
from .probing import VideoInfo, probe
from .process import ffmpeg_exe, ffmpeg_path, reap, spawn

__all__ = ["iter_frame_range"]

# Packets listed past the wanted frame: B-frame reordering moves a packet a few places
# (H.264 allows 16 reference frames), so this margin settles the presentation times up to
# the wanted frame and half the margin beyond it.
_LIST_MARGIN = 64


@dataclass(frozen=True)
class _Seek:
    """Where to seek for frame ``start`` and how to know the frames decoded from there.

    ``time_base`` is the stream's (a fraction of a second); ``shift`` the start offset, in
    time-base ticks, between container timestamps and those :func:`iter_frames` reports;
    ``index_of`` maps a settled container time (seconds) to its frame's 0-based index;
    ``seek_s`` is where decoding starts and ``first_s`` the container time (seconds) before
    which frames are dropped inside ffmpeg.
    """

    time_base: Fraction
    shift: int
    index_of: dict[float, int]
    seek_s: float
    first_s: float


def _packet_times(path: str | os.PathLike, start: int) -> tuple[Fraction | None, list[int], bool]:
    """The stream's time base, the sorted presentation timestamps (ticks) of its first
    packets up to ``start`` and a margin beyond, and whether the listing stopped there."""
    listing = spawn(
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
        reap(listing)
    return list_tb, sorted(pts_list), cut_short


def _plan_seek(path: str | os.PathLike, start: int, size: tuple[int, int],
               info: VideoInfo) -> _Seek | None:
    """How to reach frame ``start`` (> 0) by seeking; None when the listing cannot say."""
    list_tb, times, cut_short = _packet_times(path, start)
    if list_tb is None or len(times) <= start or len(set(times)) != len(times):
        return None
    # iter_frames reports timestamps shifted by a start offset ffmpeg works out for the
    # streams in use; it is learnt from frame 0 rather than re-derived.
    head = iter_frames(path, size=size, gray=True, info=info)
    frame0 = next(head, None)
    head.close()
    if frame0 is None:
        return None
    shift = times[0] - round(Fraction(frame0.time_s) / list_tb)
    # The last presentation times of a listing cut short are not settled: a packet still to
    # come may sort in among them. Only settled ones identify frames; past them, frames are
    # counted on.
    settled = len(times) - _LIST_MARGIN // 2 if cut_short else len(times)
    index_of = {float(Fraction(p) * list_tb): k for k, p in enumerate(times[:settled])}
    seek_s = max(0.0, float(Fraction(times[start] - shift) * list_tb) - 1.0)
    # Frames between the keyframe and frame ``start`` must be decoded but need not be
    # scaled, converted and piped: a select filter ahead of the others drops them
    # (threshold halfway to the frame before, in seconds).
    first_s = float(Fraction(times[start - 1] + times[start], 2) * list_tb)
    return _Seek(list_tb, shift, index_of, seek_s, first_s)


def _frames_from_seek(path: str | os.PathLike, start: int, plan: _Seek, info: VideoInfo,
                      size: tuple[int, int], *, gray: bool, yuv: str | None,
                      decode_threads: int | None, stats: DecodeStats) -> Iterator[Frame]:
    """Frames ``start`` onwards decoded from the seek; stops at the first frame whose
    timestamp or time base does not match the listing (``stats.finished`` is then False)."""
    frames = raw_frames(path, info, size, gray=gray, yuv=yuv, decode_threads=decode_threads,
                        seek_s=plan.seek_s, first_s=plan.first_s, stats=stats)
    index = -1
    try:
        for reported_s, time_base, image in frames:
            raw_s = math.nan if reported_s is None else reported_s
            known = plan.index_of.get(raw_s)
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
            if time_base != plan.time_base:
                return
            time_s = float((round(Fraction(raw_s) / plan.time_base) - plan.shift)
                           * plan.time_base)
            yield Frame(index, time_s, image)
    finally:
        frames.close()


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
    stats: DecodeStats | None = None,
) -> Iterator[Frame]:
    """Decode frames ``[start, stop)`` of a clip without decoding what comes before them.

    Parameters
    ----------
    path : the clip.
    start : 0-based index of the first frame wanted.
    stop : index one past the last frame wanted; None runs to the end.
    size, gray, yuv, info, decode_threads : as for :func:`~stabilize.io.decode.iter_frames`.
    stats : when given, ``errors`` and ``last_error`` gather the decoders' complaints about
        damaged data, ``finished`` says whether the clip's end was reached.

    Yields
    ------
    :class:`~stabilize.io.frames.Frame` records with the indices, timestamps (seconds) and
    pixels :func:`~stabilize.io.decode.iter_frames` gives those frames.

    Frame ``start`` is reached by a seek: decoding starts at a keyframe at least a second
    before it (so no frame kept depends on a picture from before the seek) with the container
    timestamps kept, and each decoded frame is identified by its timestamp in a listing of
    the packets. Timestamps are reported as :func:`~stabilize.io.decode.iter_frames` reports
    them (the container's start time subtracted, in the stream's time base). When the decoded
    timestamps do not line up with the listing (a damaged or unusual file), the clip is
    decoded from its start and the frames before ``start`` (and any the seek already gave)
    dropped: slower, always exact.
    """
    info = info or probe(path)
    w, h = size or (info.width, info.height)
    plan = _plan_seek(path, start, (w, h), info) if start > 0 else None
    expected = start
    if plan is not None and plan.index_of:
        seen = DecodeStats()
        frames = _frames_from_seek(path, start, plan, info, (w, h), gray=gray, yuv=yuv,
                                   decode_threads=decode_threads, stats=seen)
        try:
            for f in frames:
                if stop is not None and f.index >= stop:
                    return
                yield f
                expected += 1
        finally:
            frames.close()
            _gather(stats, seen)
        if seen.finished and expected > start:
            return
    # Exact path: decode from the start (also what finishes a seek that went astray).
    exact = DecodeStats()
    try:
        for f in iter_frames(path, size=size, gray=gray, yuv=yuv, info=info,
                             decode_threads=decode_threads, stats=exact):
            if f.index < expected:
                continue
            if stop is not None and f.index >= stop:
                return
            yield f
    finally:
        _gather(stats, exact)


def _gather(total: DecodeStats | None, part: DecodeStats) -> None:
    """Add one decoder's complaints and end to ``total`` (when there is one)."""
    if total is None:
        return
    total.errors += part.errors
    total.last_error = part.last_error or total.last_error
    total.finished = part.finished
