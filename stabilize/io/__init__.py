"""Input and output at the edges: video through the bundled ffmpeg, and files published whole.

The ffmpeg process, probing, decoding, seeking, encoding, the motion-log files and atomic
publishing live here; nothing outside this package knows a process or a pipe.

A few verbs cover what the rest of the package needs::

    info = probe("flight.mp4")                       # VideoInfo: size, fps, duration …
    for frame in iter_frames("flight.mp4", gray=True):
        ...                                          # Frame: index, time_s, image
    with VideoWriter("out.mp4", info.width, info.height, info.fps_text) as w:
        w.write(rgb)                                 # published whole on success
    with all_or_nothing():                           # a job's outputs appear together
        write_text_atomic(Path("notes.txt"), text)

The modules, one job each: :mod:`~stabilize.io.process` (the ffmpeg child),
:mod:`~stabilize.io.messages` (what it prints), :mod:`~stabilize.io.probing` (a clip's
header), :mod:`~stabilize.io.colour` (colour tags), :mod:`~stabilize.io.frames` (frame
records and layouts), :mod:`~stabilize.io.decode` (reading frames),
:mod:`~stabilize.io.seek` (reading a range), :mod:`~stabilize.io.encode` (writing a video),
:mod:`~stabilize.io.publishing` (temporary names, then rename).
"""

from .decode import iter_frames
from .encode import VideoWriter
from .frames import Frame, PlanarImage
from .probing import VideoInfo, probe
from .process import stop_children
from .publishing import (
    all_or_nothing,
    check_writable_folder,
    discard,
    publish,
    remove_temporaries,
    temp_path_for,
    write_text_atomic,
)
from .seek import iter_frame_range

__all__ = [
    "Frame", "PlanarImage", "VideoInfo", "VideoWriter", "all_or_nothing",
    "check_writable_folder", "discard", "iter_frame_range", "iter_frames", "probe", "publish",
    "remove_temporaries", "stop_children", "temp_path_for", "write_text_atomic",
]
