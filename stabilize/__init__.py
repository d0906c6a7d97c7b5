"""stabilize: steady shaky video, measure the camera shake, and log per-frame camera motion.

The Python API mirrors the command line::

    import stabilize
    log = stabilize.measure("flight.mp4", model="similarity")
    log.save("flight.motion.csv")
    stabilize.steady("flight.mp4", "flight.steady.mp4", margin=0.1)
"""

from .config import Settings
from .errors import StabilizeError
from .io.motion_log_files import read_log
from .jobs import measure, render, steady
from .motion_log import MotionLog
from .version import __version__

__all__ = [
    "MotionLog", "Settings", "StabilizeError", "__version__", "measure", "read_log", "render",
    "steady",
]
