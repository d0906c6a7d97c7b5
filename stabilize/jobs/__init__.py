"""The jobs: measure, steady, render, report, batch and demo. Each composes the stages, and
assembles its motion log once, at its end, and writes it once.

``measure``, ``steady`` and ``render`` are the Python API (re-exported by :mod:`stabilize`).
"""

from .analysis import measure, measure_to_file
from .batch import run_batch
from .demo import run_demo
from .rendering import render, steady
from .report import Report, make_report

__all__ = [
    "Report", "make_report", "measure", "measure_to_file", "render", "run_batch", "run_demo",
    "steady",
]
