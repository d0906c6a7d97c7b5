"""The jobs: measure, steady, render, report, batch and demo. Each composes the stages, and
assembles its motion log once, at its end, and writes it once.

``measure``, ``steady`` and ``render`` are the Python API (re-exported by :mod:`stabilize`).
"""

import importlib
from typing import Any

from .analysis import measure, measure_to_file
from .rendering import render, steady

__all__ = [
    "Report", "make_report", "measure", "measure_to_file", "render", "run_batch", "run_demo",
    "steady",
]

#: Jobs imported on first use (PEP 562): ``measure`` and ``steady`` need neither the report's
#: plots, the batch nor the demo's drawing, whose imports cost about 0.1 s at every start.
_LATER = {"Report": "report", "make_report": "report", "run_batch": "batch",
          "run_demo": "demo"}


def __getattr__(name: str) -> Any:
    if name in _LATER:
        return getattr(importlib.import_module(f"{__name__}.{_LATER[name]}"), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
