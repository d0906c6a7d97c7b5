"""The demo job: ``steady`` and the shake report on the bundled demo clip, an invented
inspection pass.

The clip lives in ``demo_clips/`` of the source tree; an installed copy without it draws the
same scene again with :mod:`stabilize.demo_scene`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from ..config import resolve_settings
from ..demo_scene import write_demo_clip
from ..io import all_or_nothing
from ..motion_log import MotionLog
from .outputs import (
    check_job_outputs,
    check_outputs,
    clip_name,
    plan_outputs,
    report_files,
    steady_video,
)
from .rendering import steady_clip
from .report import Report, report_for_log

__all__ = ["DEMO_NAME", "demo_clip", "run_demo"]

DEMO_NAME = "truss_pass.mp4"


def demo_clip(out_dir: Path) -> Path:
    """The bundled demo clip, or a freshly drawn one in ``out_dir`` when it is not bundled.

    Parameters
    ----------
    out_dir : folder for a drawn clip (an existing ``truss_pass.mp4`` there is reused).

    Returns
    -------
    Path : the clip.
    """
    bundled = Path(__file__).resolve().parent.parent.parent / "demo_clips" / DEMO_NAME
    if bundled.is_file():
        return bundled
    target = out_dir / DEMO_NAME
    if not target.is_file():
        write_demo_clip(target)
    return target


def run_demo(out: str | Path | None = None, *, config: str | None = None,
             progress: Any = None, **options: Any) -> tuple[MotionLog, Report]:
    """Steady the demo clip into ``out`` (default ``./stabilize-demo``) and write its shake
    report there; returns the log and the report.

    Parameters
    ----------
    out : output folder (created when missing); None for ``./stabilize-demo``.
    config : TOML settings file or preset name, as for the other jobs.
    progress : progress-bar factory, as for :func:`stabilize.steady`.
    **options : the jobs' options; ``force`` defaults to True here (earlier demo outputs are
        overwritten).

    Returns
    -------
    (MotionLog, Report) : the steadied clip's motion log and the report written.
    """
    out_dir = Path(out) if out else Path("stabilize-demo")
    options.setdefault("force", True)
    settings = resolve_settings(config, options)  # options first: a bad one makes no folder
    out_dir.mkdir(parents=True, exist_ok=True)
    clip = demo_clip(out_dir)
    name = clip_name(clip)
    outputs = plan_outputs(clip, video_out=steady_video(out_dir, name), log_out=None,
                           with_video=True, compare=settings.compare)
    with all_or_nothing():
        check_job_outputs(clip, outputs, settings.force)
        motion = steady_clip(clip, outputs, settings, progress)
    files = report_files(out_dir, name, frames=True, log=False)
    with all_or_nothing():
        check_outputs([clip, *outputs.all()], files, settings.force)
        report = report_for_log(motion, settings, files, name=name, log_csv=outputs.log_csv,
                                clip=clip, steadied=outputs.video)
    return motion, report
