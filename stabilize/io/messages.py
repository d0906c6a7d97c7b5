"""Reading what an ffmpeg child prints: frame timestamps, the time base, and its complaints.

ffmpeg writes its messages to stderr; a child whose stderr is not drained blocks once the pipe
fills. :class:`StderrReader` drains it on a thread of its own and keeps what the decoders and
encoders need: the presentation time of every frame (from the ``showinfo`` filter, exact in the
stream's time base), how many complaints about damaged data were printed, and the last lines.
"""

from __future__ import annotations

import io
import re
import threading
from collections import deque
from fractions import Fraction

__all__ = ["StderrReader", "without_prefixes"]

_SHOWINFO = re.compile(r"\bn:\s*(\d+)\s+pts:\s*(-?\d+)\s+pts_time:\s*(-?[0-9.eE+-]+)")
_TIME_BASE = re.compile(r"config in time_base:\s*(\d+)/(\d+)")
_FFMPEG_PREFIX = re.compile(r"^(?:\[[^\]]*\]\s*)+")
# What the demuxer and decoders print about damaged or cut-short data.
_DECODE_ERROR = re.compile(
    r"partial file|invalid data|invalid nal|error while decoding|error splitting|"
    r"decoding error|corrupt|concealing|truncat|missing picture|no frame!", re.IGNORECASE,
)


def without_prefixes(line: str) -> str:
    """``line`` without ffmpeg's ``[h264 @ 0x55…]`` prefixes: plain words for a message.

    Parameters
    ----------
    line : one line ffmpeg printed.

    Returns
    -------
    The line from its first word after the bracketed prefixes ("" when it is only those).
    """
    return _FFMPEG_PREFIX.sub("", line)


class StderrReader(threading.Thread):
    """Drains ffmpeg's stderr so it never blocks, collecting frame times and the last lines.

    Attributes, filled in as the child prints:

    ``times`` maps a frame's 0-based output number to its presentation time in seconds
    (until :meth:`time_of` takes it); ``time_base`` is the stream's time base (a
    :class:`~fractions.Fraction` of a second, None until printed); ``tail`` holds the last 20
    other lines; ``errors`` counts complaints about damaged data and ``last_error`` is the
    last of them without prefixes; ``finished`` is True once the stream closed.
    """

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
        """Read lines until the stream closes (the thread's body)."""
        # An unbuffered pipe's readline asks the system for one byte at a time (a decoder's
        # two lines a frame cost 0.2 ms of processor time, measured); a buffered reader takes
        # what the pipe holds at once, and returns a line as soon as it has arrived. It is
        # detached at the end, so that the pipe is closed by its owner, not by the wrapper.
        stream = self.stream if hasattr(self.stream, "peek") else io.BufferedReader(self.stream)
        try:
            self._read_lines(stream)
        finally:
            if stream is not self.stream:
                try:
                    stream.detach()
                except ValueError:
                    pass
        with self.cond:
            self.finished = True
            self.cond.notify_all()

    def _read_lines(self, stream) -> None:
        """Take in every line of ``stream`` (a buffered binary pipe) until it closes."""
        for raw in iter(stream.readline, b""):
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
                    self.last_error = without_prefixes(line) or line

    def time_of(self, n: int, fallback: float | None) -> float | None:
        """Presentation time of output frame ``n`` in seconds, once printed.

        Parameters
        ----------
        n : the frame's 0-based number in the child's output.
        fallback : returned when the stream ends (or 10 s pass) without it.

        Returns
        -------
        The time in seconds, or ``fallback``.
        """
        with self.cond:
            self.cond.wait_for(lambda: n in self.times or self.finished, timeout=10.0)
            return self.times.pop(n, fallback)
