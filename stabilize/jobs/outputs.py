"""Output files of every job: their names (one place for ``NAME.steady.mp4`` and the rest) and
the checks made before any work.

NAME is the input's file name without its extension (``flight.mp4`` → ``flight``); a motion
log's NAME drops ``.motion.csv`` (``flight.motion.csv`` → ``flight``). A video named by the
user (``-o``) names its log: ``take2.mp4`` → ``take2.motion.csv``, ``flight.steady.mp4`` →
``flight.motion.csv``, so two renders of one clip into one folder never share a log.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from ..config import setting_label
from ..errors import StabilizeError
from ..io import check_writable_folder
from ..io.motion_log_files import json_path_for
from ..io.probing import check_input

__all__ = [
    "Outputs", "check_job_outputs", "check_outputs", "clip_files", "clip_name", "compare_video",
    "keep_read_log", "log_name", "make_folders", "motion_log", "plan_outputs", "render_log",
    "report_files", "steady_video", "video_name",
]

_LOG_ENDINGS = (".motion.csv", ".motion.json")


# ------------------------------------------------------------------- names
def clip_name(clip: Path) -> str:
    """NAME of a clip's outputs: its file name without its extension."""
    return clip.stem


def log_name(path: Path) -> str:
    """NAME of the outputs made from a clip or its motion log: ``truss.motion.csv`` and
    ``truss.mp4`` both give ``truss``."""
    name = path.name
    for ending in _LOG_ENDINGS:
        if name.lower().endswith(ending):
            return name[: -len(ending)]
    return clip_name(path)


def video_name(video: Path) -> str:
    """NAME of the log written beside a steadied video: its file name without its extension
    and without a ``.steady`` ending (``flight.steady.mp4`` and ``flight.mp4`` give
    ``flight``)."""
    stem = video.stem
    return stem[: -len(".steady")] if stem.lower().endswith(".steady") and \
        len(stem) > len(".steady") else stem


def steady_video(folder: Path, name: str) -> Path:
    """``FOLDER/NAME.steady.mp4``: the steadied video."""
    return folder / f"{name}.steady.mp4"


def motion_log(folder: Path, name: str) -> Path:
    """``FOLDER/NAME.motion.csv``: the motion log (its JSON beside it)."""
    return folder / f"{name}.motion.csv"


def render_log(folder: Path, name: str) -> Path:
    """``FOLDER/NAME.render.motion.csv``: the log of a render that would otherwise replace the
    log it renders from."""
    return folder / f"{name}.render.motion.csv"


def compare_video(video: Path) -> Path:
    """``VIDEO.compare.mp4`` beside the steadied video: the side-by-side comparison."""
    return video.with_name(f"{video.stem}.compare{video.suffix or '.mp4'}")


def report_files(folder: Path, name: str, *, frames: bool, log: bool,
                 vibration: bool = False) -> dict[str, Path]:
    """The files a shake report writes into ``folder``, by role (``json``, ``html``, the plots,
    the vibration plot of a rolling-shutter log, and the motion log when the report measured
    the clip itself)."""
    outs = {"json": folder / f"{name}.shake.json", "html": folder / f"{name}.report.html",
            "path_plot": folder / f"{name}.path.png",
            "spectrum_plot": folder / f"{name}.spectrum.png",
            "fit_plot": folder / f"{name}.fit.png"}
    if frames:
        outs["frames_plot"] = folder / f"{name}.frames.png"
    if vibration:
        outs["vibration_plot"] = folder / f"{name}.vibration.png"
    if log:
        outs["log_csv"] = motion_log(folder, name)
        outs["log_json"] = json_path_for(outs["log_csv"])
    return outs


def clip_files(folder: Path, name: str, *, with_video: bool) -> dict[str, Path]:
    """The files of one clip of a batch, by role: the log, its JSON, the report page, the
    figures and (unless measuring only) the steadied video."""
    report = report_files(folder, name, frames=False, log=False)
    log_csv = motion_log(folder, name)
    outs = {"log": log_csv, "log_json": json_path_for(log_csv), "report": report["html"],
            "shake_json": report["json"]}
    if with_video:
        outs["video"] = steady_video(folder, name)
    return outs


# -------------------------------------------------------- steady, measure, render
@dataclass(frozen=True)
class Outputs:
    """Where a job writes: the video (None for measure) and the log CSV (its JSON beside it)."""

    video: Path | None
    log_csv: Path
    compare: Path | None = None

    @property
    def log_json(self) -> Path:
        """The log's JSON, beside its CSV."""
        return json_path_for(self.log_csv)

    def all(self) -> list[Path]:
        """Every file, video first."""
        return [p for p in (self.video, self.log_csv, self.log_json, self.compare) if p]

    def by_role(self) -> dict[str, str]:
        """The files by role, as the log's ``extra["outputs"]`` lists them."""
        pairs = (("video", self.video), ("compare", self.compare),
                 ("log_csv", self.log_csv), ("log_json", self.log_json))
        return {k: str(v) for k, v in pairs if v is not None}


def plan_outputs(clip: Path, *, video_out: str | Path | None, log_out: str | Path | None,
                 with_video: bool, compare: bool) -> Outputs:
    """Default outputs sit beside the input; a video path given moves the logs to its folder,
    named after the video (:func:`video_name`)."""
    name = clip_name(clip)
    video = None
    if with_video:
        video = Path(video_out) if video_out else steady_video(clip.parent, name)
    if log_out:
        log_csv = Path(log_out)
        if log_csv.suffix.lower() != ".csv":
            raise StabilizeError(f"{log_csv}: the motion log must be named *.csv")
    elif video is not None:
        log_csv = motion_log(video.parent, video_name(video))
    else:
        log_csv = motion_log(clip.parent, name)
    comp = compare_video(video) if compare and video is not None else None
    return Outputs(video, log_csv, comp)


def _refuse(p: Path, force: bool) -> None:
    if p.is_dir():
        raise StabilizeError(f"{p}: output name is an existing folder")
    if p.exists() and not force:
        raise StabilizeError(f"{p}: already exists ({setting_label('force')} allows "
                             "overwriting)")


def make_folders(paths: list[Path]) -> None:
    """Create the missing folders of output files (after every other check, so a refused job
    leaves none behind), then refuse, before any work, a folder that takes no new files."""
    for p in paths:
        folder = p.parent
        if str(folder) and not folder.exists():
            try:
                folder.mkdir(parents=True, exist_ok=True)
            except FileExistsError:  # a file stands where a folder is needed
                pass
            except OSError as exc:
                raise StabilizeError(f"{p}: cannot create its folder {folder} "
                                     f"({exc.strerror or exc})") from None
        check_writable_folder(p)


def check_job_outputs(clip: Path, outputs: Outputs, force: bool) -> None:
    """Refuse, before any work, outputs that equal the input, exist (unless ``force``) or
    cannot be written. A missing input is named first: that is the problem to fix."""
    check_input(clip)
    src = clip.resolve()
    seen: set[Path] = set()
    for p in outputs.all():
        rp = p.resolve()
        if rp == src or (p.exists() and clip.exists() and os.path.samefile(p, clip)):
            raise StabilizeError(f"{p}: output would overwrite the input clip; choose another name")
        if rp in seen:
            raise StabilizeError(f"{p}: two outputs would share this name")
        seen.add(rp)
        _refuse(p, force)
    make_folders(outputs.all())


def _same(a: Path, b: Path) -> bool:
    """Whether two spellings name one file (resolved paths, or one file behind links)."""
    if a.resolve() == b.resolve():
        return True
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def keep_read_log(log_file: Path, outputs: Outputs) -> Outputs:
    """Outputs of a render that never replace the log it reads, whichever file of the log
    (``.csv`` or ``.json``) was named: the new log moves to ``NAME.render.motion.csv``; a video
    that would replace the log is refused."""
    csv_in = log_file.with_suffix(".csv") if log_file.suffix.lower() == ".json" else log_file
    read = (csv_in, json_path_for(csv_in))
    for p in (outputs.video, outputs.compare):
        if p is not None and any(_same(p, r) for r in read):
            raise StabilizeError(f"{p}: output would overwrite the motion log it is made from; "
                                 "choose another name")
    if any(_same(o, r) for o in (outputs.log_csv, outputs.log_json) for r in read):
        outputs = Outputs(outputs.video, render_log(outputs.log_csv.parent, log_name(csv_in)),
                          outputs.compare)
        if any(_same(o, r) for o in (outputs.log_csv, outputs.log_json) for r in read):
            raise StabilizeError(f"{log_file}: the new motion log would overwrite the one it "
                                 "is made from; choose another output folder")
    return outputs


def check_outputs(inputs: list[Path], outputs: dict[str, Path], force: bool) -> None:
    """Refuse, before any work, outputs that would replace an input, exist (unless
    ``force``) or cannot be written."""
    srcs = [p.resolve() for p in inputs]
    for p in outputs.values():
        if p.resolve() in srcs:
            raise StabilizeError(f"{p}: output would overwrite an input; choose another "
                                 "output folder")
        _refuse(p, force)
    make_folders(list(outputs.values()))
