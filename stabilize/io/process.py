"""The bundled ffmpeg as a child process: where it is, how it is given paths, start and stop.

ffmpeg is the binary bundled with imageio-ffmpeg (no system install needed) and is always
called with argument lists, never through a shell. Every child runs in its own process group,
so a Ctrl-C at the terminal reaches only this process, which stops its children itself
(:func:`stop_children`). Paths are handed to ffmpeg as ``file:`` URLs, so names with a leading
dash or a colon (``12:30 flight.mp4``) are never read as options or protocols.
"""

from __future__ import annotations

import os
import select
import subprocess
import threading
from pathlib import Path

import imageio_ffmpeg

try:
    import fcntl
except ImportError:  # not a POSIX system: pipes keep their size
    fcntl = None

__all__ = ["PIPE_MAX_BYTES", "ffmpeg_exe", "ffmpeg_path", "read_exact", "reap", "spawn",
           "stop_children", "usable_cores", "widen_pipe"]


def usable_cores() -> int:
    """The cores this process may use: those of its CPU affinity set (at least 1); where
    that cannot be asked (not on Linux), the machine's core count."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:
        return max(1, os.cpu_count() or 1)


def ffmpeg_exe() -> str:
    """Path of the bundled ffmpeg binary.

    Returns
    -------
    The executable's absolute path, as imageio-ffmpeg reports it.
    """
    return imageio_ffmpeg.get_ffmpeg_exe()


def ffmpeg_path(path: str | os.PathLike) -> str:
    """``path`` as ffmpeg must be given it: an absolute ``file:`` URL, never an option.

    Parameters
    ----------
    path : a file name, relative or absolute.

    Returns
    -------
    ``"file:"`` followed by the absolute path.
    """
    return "file:" + os.fspath(Path(path).absolute())


_children_lock = threading.Lock()
_children: set[subprocess.Popen] = set()


def spawn(cmd: list[str], **kwargs) -> subprocess.Popen:
    """Start ffmpeg (argument list, no shell) in its own process group and remember it.

    Parameters
    ----------
    cmd : the command, executable first (:func:`ffmpeg_exe`).
    **kwargs : passed on to :class:`subprocess.Popen` (pipes, environment …).

    Returns
    -------
    The running child; hand it to :func:`reap` when done with it.
    """
    proc = subprocess.Popen(cmd, process_group=0, **kwargs)
    with _children_lock:
        _children.add(proc)
    return proc


def reap(proc: subprocess.Popen) -> None:
    """Stop ``proc`` if it still runs, wait for it, and forget it.

    Parameters
    ----------
    proc : a child from :func:`spawn`.
    """
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
    outlives it.

    Returns
    -------
    How many children were still running.
    """
    with _children_lock:
        procs = list(_children)
    running = 0
    for proc in procs:
        running += proc.poll() is None
        reap(proc)
    return running


#: Largest pipe buffer asked for, bytes (Linux's default limit for a user without privileges).
PIPE_MAX_BYTES = 1 << 20


def widen_pipe(stream, nbytes: int) -> None:
    """Ask the system to let the pipe behind ``stream`` hold ``nbytes`` (at most
    :data:`PIPE_MAX_BYTES`); where it cannot (not Linux, or refused), it stays as it was.

    A raw frame passes a pipe of the usual 64 KiB in pieces: a thread reading it takes the
    interpreter's lock again for every piece (a 960×540 grey frame: eight pieces), and the
    process at the other end is woken for each. What passes is the same either way.

    Parameters
    ----------
    stream : the reading or writing end of a pipe (``fileno``).
    nbytes : bytes wanted, e.g. one raw frame.
    """
    size = getattr(fcntl, "F_SETPIPE_SZ", None)
    if size is None:
        return
    try:
        fcntl.fcntl(stream.fileno(), size, min(int(nbytes), PIPE_MAX_BYTES))
    except (OSError, ValueError):
        pass


def read_exact(stream, count: int, timeout_s: float | None = None) -> bytearray | None:
    """Read exactly ``count`` bytes from a child's pipe.

    Parameters
    ----------
    stream : a binary, unbuffered pipe (``readinto``).
    count : bytes wanted (one raw frame).
    timeout_s : longest wait in seconds for the next bytes (None: no limit).

    Returns
    -------
    The bytes, or None at the end of the stream (a partial frame is dropped).

    Raises
    ------
    TimeoutError
        When nothing arrives for ``timeout_s`` seconds.
    """
    buf = bytearray(count)
    view = memoryview(buf)
    got = 0
    while got < count:
        if timeout_s is not None and not select.select([stream], [], [], timeout_s)[0]:
            raise TimeoutError(f"no data for {timeout_s:g} s")
        chunk = stream.readinto(view[got:])
        if not chunk:
            return None
        got += chunk
    return buf
