"""``stabilize demo``: the main job on the bundled demo clip, an invented inspection pass.

The clip lives in ``demo_clips/`` of the source tree; an installed copy without it draws the
same scene again with :mod:`stabilize.demo_scene`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from .demo_scene import write_demo_clip
from .log import MotionLog
from .pipeline import steady
from .report import make_report

DEMO_NAME = "truss_pass.mp4"


def demo_clip(out_dir: Path) -> Path:
    """The bundled demo clip, or a freshly drawn one in ``out_dir`` when it is not bundled."""
    bundled = Path(__file__).resolve().parent.parent / "demo_clips" / DEMO_NAME
    if bundled.is_file():
        return bundled
    target = out_dir / DEMO_NAME
    if not target.is_file():
        write_demo_clip(target)
    return target


def run_demo(out: str | Path | None = None, *, config: str | None = None,
             progress: Any = None, **options: Any) -> tuple[MotionLog, Any]:
    """Steady the demo clip into ``out`` (default ``./stabilize-demo``) and write its shake
    report there; returns the log and the report."""
    out_dir = Path(out) if out else Path("stabilize-demo")
    out_dir.mkdir(parents=True, exist_ok=True)
    clip = demo_clip(out_dir)
    options.setdefault("force", True)
    video = out_dir / f"{clip.stem}.steady.mp4"
    motion = steady(clip, video, config=config, progress=progress, **options)
    report = make_report(motion.extra["outputs"]["log_csv"], out_dir, config=config,
                         **options)
    return motion, report
