"""stabilize: steady shaky video, measure the camera shake, and log per-frame camera motion.

The Python API mirrors the command line::

    import stabilize
    log = stabilize.measure("flight.mp4", model="similarity")
    log.save("flight.motion.csv")
    stabilize.steady("flight.mp4", "flight.steady.mp4", margin=0.1)
"""

__version__ = "0.1.0"

from .config import Settings  # noqa: E402
from .errors import StabilizeError  # noqa: E402
from .log import MotionLog, read_log  # noqa: E402
from .pipeline import measure, render, steady  # noqa: E402

__all__ = [
    "MotionLog", "Settings", "StabilizeError", "__version__", "measure", "read_log", "render",
    "steady",
]
