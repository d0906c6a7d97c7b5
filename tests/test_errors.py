"""Bad input, bad options, bad destinations: the table of cases and what each must give.

Each case runs the command line in-process (``cli.main``, the same code as the console script,
minus the interpreter start-up) in a folder of its own, and checks the contract:

* the exit status;
* for an error, exactly one line on stderr, ``stabilize: error: …``, naming the file or option
  and the problem, with no traceback; a case that succeeds may print warnings, each one line
  prefixed ``stabilize: warning:``, and nothing else;
* the input's bytes are unchanged (hashed before and after);
* no temporary (``*.partial*``) is left anywhere in the folder, and an error leaves no new file
  at all.

The inputs are drawn with the bundled ffmpeg's own test sources, a few frames each.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import shutil
import subprocess
import sys
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest

from stabilize import cli
from stabilize.errors import StabilizeError
from stabilize.io import (
    all_or_nothing,
    check_writable_folder,
    iter_frames,
    probe,
    publish,
    temp_path_for,
)
from stabilize.io.process import ffmpeg_exe

# ----------------------------------------------------------------------------- inputs


def ff(*args: str) -> None:
    """Run the bundled ffmpeg quietly (argument list, no shell)."""
    subprocess.run([ffmpeg_exe(), "-hide_banner", "-nostdin", "-loglevel", "error", "-y", *args],
                   check=True, capture_output=True)


def lavfi_clip(path: Path, *, size: str = "96x72", frames: int = 12, rate: int = 24,
               source: str = "testsrc2", extra: tuple[str, ...] = (),
               faststart: bool = True) -> Path:
    """A small H.264 clip from one of ffmpeg's test sources."""
    sep = ":" if "=" in source else "="
    ff("-f", "lavfi", "-i", f"{source}{sep}size={size}:rate={rate}", "-frames:v", str(frames),
       *extra, "-c:v", "libx264", "-preset", "ultrafast", "-pix_fmt", "yuv444p",
       *(["-movflags", "+faststart"] if faststart else []), str(path))
    return path


def container_times(path: Path) -> np.ndarray:
    """Presentation times (s) of a clip's video packets as the container stores them, read by
    the demuxer alone (no decoding, none of this package's code)."""
    out = subprocess.run(
        [ffmpeg_exe(), "-hide_banner", "-nostdin", "-loglevel", "error", "-i", str(path),
         "-map", "0:v:0", "-c", "copy", "-f", "framecrc", "-"],
        capture_output=True, text=True, check=True).stdout
    tb = re.search(r"#tb 0: (\d+)/(\d+)", out)
    pts = sorted(int(line.split(",")[2]) for line in out.splitlines() if line.startswith("0,"))
    return (np.array(pts) - pts[0]) * int(tb.group(1)) / int(tb.group(2))


@pytest.fixture(scope="module")
def sources(tmp_path_factory) -> dict[str, Path]:
    """Every input of the table, made once; each case works on its own copy."""
    d = tmp_path_factory.mktemp("sources")
    s: dict[str, Path] = {}
    s["clip"] = lavfi_clip(d / "clip.mp4")
    (d / "zero.mp4").write_bytes(b"")
    s["zero"] = d / "zero.mp4"
    s["random"] = d / "random.mp4"
    s["random"].write_bytes(np.random.default_rng(7).bytes(6000))
    s["text"] = d / "notes.txt"
    s["text"].write_text("wind 12 kn, gusts 20; battery swapped at pier 3\n")
    ff("-f", "lavfi", "-i", "testsrc2=size=96x72", "-frames:v", "1", str(d / "still.png"))
    ff("-f", "lavfi", "-i", "testsrc2=size=96x72", "-frames:v", "1", str(d / "still.jpg"))
    s["png"], s["jpg"] = d / "still.png", d / "still.jpg"
    # Pulled SD card: the first part of a clip. With the index at the front (faststart) the
    # frames that arrived still decode; with the index at the end nothing can be read.
    full = lavfi_clip(d / "full.mp4", size="160x120", frames=48, rate=24)
    s["truncated"] = d / "truncated.mp4"
    s["truncated"].write_bytes(full.read_bytes()[: full.stat().st_size // 2])
    tail_index = lavfi_clip(d / "tail.mp4", size="160x120", frames=48, faststart=False)
    s["truncated_noindex"] = d / "noindex.mp4"
    s["truncated_noindex"].write_bytes(tail_index.read_bytes()[: tail_index.stat().st_size // 2])
    s["one"] = lavfi_clip(d / "one.mp4", frames=1)
    s["two"] = lavfi_clip(d / "two.mp4", frames=2)
    s["black"] = lavfi_clip(d / "black.mp4", source="color=c=black", frames=10)
    s["odd"] = lavfi_clip(d / "odd.mp4", frames=6, extra=("-vf", "scale=321:241"))
    s["tiny"] = lavfi_clip(d / "tiny.mp4", size="16x16", frames=6)
    # Variable frame rate: keep 3 frames of every 5, with their original timestamps.
    s["vfr"] = lavfi_clip(d / "vfr.mp4", frames=20, rate=30,
                          extra=("-vf", "select='lt(mod(n,5),3)'", "-fps_mode", "passthrough"))
    upright = lavfi_clip(d / "upright.mp4", size="96x64", frames=8)
    s["rotated"] = d / "rotated.mp4"
    ff("-display_rotation", "90", "-i", str(upright), "-c", "copy", str(s["rotated"]))
    s["audio_only"] = d / "voice memo.m4a"
    ff("-f", "lavfi", "-i", "sine=duration=0.5", "-c:a", "aac", str(s["audio_only"]))
    return s


# ------------------------------------------------------------------------------ table


@dataclass
class Case:
    """One row: the input (a key of ``sources``, or a maker), the command line (``{in}`` is
    the input, ``{dir}`` the case's folder), and what must come out."""

    name: str
    source: str | Callable[[Path], Path] | None
    argv: list[str]
    status: int
    says: tuple[str, ...] = ()
    check: Callable[[Path, Path], None] | None = None
    input_name: str | None = None
    flags: list[str] = field(default_factory=lambda: ["--quiet", "--preset", "ultrafast"])


def _log(folder: Path, name: str) -> dict:
    return json.loads((folder / f"{name}.motion.json").read_text())


def _csv_times(folder: Path, name: str) -> np.ndarray:
    lines = (folder / f"{name}.motion.csv").read_text().splitlines()[1:]
    return np.array([float(line.split(",")[1]) for line in lines])


def _check_truncated(folder: Path, clip: Path) -> None:
    src = _log(folder, "truncated")["source"]
    assert src["truncated"] is True
    assert 0 < src["frames"] < src["frames_expected"] == 48
    assert sum(1 for _ in iter_frames(folder / "truncated.steady.mp4")) == src["frames"]


def _check_one(folder: Path, clip: Path) -> None:
    # Passed through unchanged: the same bytes, one frame, marked failed.
    assert (folder / "one.steady.mp4").read_bytes() == clip.read_bytes()
    doc = _log(folder, "one")
    assert doc["source"]["frames"] == 1 and doc["summary"]["frames_failed"] == 1


def _check_two(folder: Path, clip: Path) -> None:
    assert _log(folder, "two")["source"]["frames"] == 2
    assert sum(1 for _ in iter_frames(folder / "two.steady.mp4")) == 2


def _check_black(folder: Path, clip: Path) -> None:
    summary = _log(folder, "black")["summary"]
    assert summary["frames"] == 10
    # Nothing to track: every frame after the first is weak or failed, and says so.
    assert summary["frames_failed"] + summary["frames_weak"] >= 9


def _check_odd(folder: Path, clip: Path) -> None:
    info = probe(folder / "odd.steady.mp4")
    assert (info.width, info.height) == (321, 241)
    assert sum(1 for _ in iter_frames(folder / "odd.steady.mp4")) == 6


def _check_tiny(folder: Path, clip: Path) -> None:
    assert (folder / "tiny.steady.mp4").read_bytes() == clip.read_bytes()
    assert _log(folder, "tiny")["summary"]["frames_failed"] == 6


def _check_vfr(folder: Path, clip: Path) -> None:
    expected = container_times(clip)
    assert len(expected) == 20 and np.ptp(np.diff(expected)) > 0.05  # really variable
    np.testing.assert_allclose(_csv_times(folder, "vfr"), expected, atol=1e-9)
    # The steadied video keeps every frame at its own time.
    out = container_times(folder / "vfr.steady.mp4")
    np.testing.assert_allclose(out, expected, atol=1e-6)


def _check_rotated(folder: Path, clip: Path) -> None:
    src = _log(folder, "rotated")["source"]
    assert (src["width"], src["height"], src["rotation_deg"]) == (64, 96, 90.0)
    out = probe(folder / "rotated.steady.mp4")
    assert (out.width, out.height, out.rotation_deg) == (64, 96, 0.0)


def _named(name: str) -> Callable[[Path], Path]:
    def make(folder: Path) -> Path:
        return lavfi_clip(folder / name, frames=6)
    return make


def _check_outputs_of(stem: str) -> Callable[[Path, Path], None]:
    def check(folder: Path, clip: Path) -> None:
        for suffix in (".steady.mp4", ".motion.csv", ".motion.json"):
            assert (folder / f"{stem}{suffix}").is_file(), sorted(os.listdir(folder))
    return check


def _under_a_file(folder: Path) -> Path:
    clip = folder / "clip.mp4"
    (folder / "notes.txt").write_text("a file, not a folder\n")
    return clip


def _existing_output(folder: Path) -> Path:
    (folder / "clip.steady.mp4").write_bytes(b"an earlier result")
    return folder / "clip.mp4"


def _bad_log(mutate: Callable[[str], str], which: str = "csv") -> Callable[[Path], Path]:
    """A clip with a motion log beside it, damaged by ``mutate``."""
    def make(folder: Path) -> Path:
        clip = folder / "clip.mp4"
        assert cli.main(["measure", str(clip), "--quiet"]) == 0
        path = folder / f"clip.motion.{which}"
        path.write_text(mutate(path.read_text()))
        return clip
    return make


INPUTS = [
    Case("missing path", None, ["steady", "{dir}/nowhere.mp4"], 2, ("nowhere.mp4", "no such file")),
    Case("a folder", lambda d: (d / "flights").mkdir() or d / "flights", ["steady", "{in}"], 2,
         ("flights", "folder")),
    Case("zero bytes", "zero", ["steady", "{in}"], 2, ("zero.mp4", "empty")),
    Case("random bytes named .mp4", "random", ["steady", "{in}"], 2,
         ("random.mp4", "not a video")),
    Case("a text file", "text", ["steady", "{in}"], 2, ("notes.txt", "not a video")),
    Case("still image png", "png", ["steady", "{in}"], 2, ("still.png", "still image")),
    Case("still image jpg", "jpg", ["steady", "{in}"], 2, ("still.jpg", "still image")),
    Case("truncated, index first", "truncated", ["steady", "{in}"], 0, ("ends early",),
         _check_truncated),
    Case("truncated, index last", "truncated_noindex", ["steady", "{in}"], 2,
         ("noindex.mp4", "incomplete")),
    Case("one frame", "one", ["steady", "{in}"], 0, ("too short",), _check_one),
    Case("two frames", "two", ["steady", "{in}"], 0, (), _check_two),
    Case("all black", "black", ["steady", "{in}"], 0, ("no trustworthy motion",), _check_black),
    Case("odd size 321x241", "odd", ["steady", "{in}"], 0, (), _check_odd),
    Case("tiny 16x16", "tiny", ["steady", "{in}"], 0, ("too small",), _check_tiny),
    Case("variable frame rate", "vfr", ["steady", "{in}"], 0, (), _check_vfr),
    Case("rotation flag", "rotated", ["steady", "{in}"], 0, (), _check_rotated),
    Case("audio without video", "audio_only", ["steady", "{in}"], 2,
         ("voice memo.m4a", "has no video stream")),
    Case("spaces and quotes", _named("""Pier 3 'north' "span".mp4"""), ["steady", "{in}"], 0,
         (), _check_outputs_of("""Pier 3 'north' "span\"""")),
    Case("leading dash", _named("-take 2.mp4"), ["steady", "--", "{in_rel}"], 0, (),
         _check_outputs_of("-take 2")),
    Case("non-ASCII letters", _named("Brücke_Øresund_橋.mp4"), ["steady", "{in}"], 0, (),
         _check_outputs_of("Brücke_Øresund_橋")),
    Case("colon in the name", _named("12:30 pass.mp4"), ["steady", "{in_rel}"], 0, (),
         _check_outputs_of("12:30 pass")),
]

OUTPUTS = [
    Case("output equal to input", "clip", ["steady", "{in}", "-o", "{in}"], 2,
         ("clip.mp4", "overwrite the input")),
    Case("output equal to input, other spelling", "clip",
         ["steady", "{in}", "-o", "{dir}/./sub/../clip.mp4"], 2, ("overwrite the input",)),
    Case("log equal to input", "clip", ["steady", "{in}", "--log", "{in}"], 2, ("clip.mp4",)),
    Case("destination under a file", _under_a_file,
         ["steady", "{in}", "-o", "{dir}/notes.txt/out.mp4"], 2,
         ("notes.txt", "not a folder")),
    Case("destination folder under a file", "clip",
         ["steady", "{in}", "-o", "{dir}/clip.mp4/such/out.mp4"], 2, ("out.mp4", "folder")),
    Case("existing output without --force", _existing_output, ["steady", "{in}"], 2,
         ("clip.steady.mp4", "already exists", "--force")),
]

OPTIONS = [
    Case(f"option {flag} {value}", "clip", ["steady", "{in}", flag, value], 2, (flag, *words))
    for flag, value, words in [
        ("--inlier-px", "-1", ("positive",)),
        ("--inlier-px", "inf", ("positive",)),
        ("--window-s", "abc", ("seconds",)),
        ("--window-s", "nan", ("seconds",)),
        ("--margin", "0.5", ("auto", "0.45")),
        ("--margin", "-0.1", ("auto", "0.45")),
        ("--margin", "wide", ("auto", "0.45")),
        ("--model", "spline", ("translation", "similarity", "affine", "homography")),
        ("--smoother", "spline", ("gaussian", "kalman", "l1", "lockoff")),
        ("--preset", "fastest", ("ultrafast", "veryslow")),
        ("--codec", "vp9", ("h264", "h265", "ffv1")),
        ("--settings", "no-such-name", ("drone-inspection", ".toml")),
        ("--crf", "99", ("0 to 51",)),
        ("--crf", "high", ("0 to 51",)),
        ("--max-rounds", "0", ("at least 1",)),
        ("--seed", "-3", ("0 or more",)),
        ("--confidence", "1.5", ("between 0 and 1",)),
        ("--fov-deg", "200", ("between 0 and 180",)),
        ("--analysis-width", "10", ("at least 32",)),
        ("--shake-above-hz", "0", ("positive",)),
        ("--ignore", "1,2,3", ("X,Y,W,H",)),
        ("--ignore", "a,b,c,d", ("X,Y,W,H",)),
        ("--ignore", "0,0,-5,5", ("X,Y,W,H", "positive")),
        ("--ignore", "0,0,inf,5", ("X,Y,W,H",)),
    ]
]

LOGS = [
    Case("render: log header damaged", _bad_log(lambda t: t.replace("time_s", "time", 1)),
         ["render", "{in}", "--log", "{dir}/clip.motion.csv", "-o", "{dir}/r.mp4"], 2,
         ("clip.motion.csv", "line 1")),
    Case("render: a cell not a number", _bad_log(lambda t: t.replace(",first,", ",first,x", 1)),
         ["render", "{in}", "--log", "{dir}/clip.motion.csv", "-o", "{dir}/r.mp4"], 2,
         ("clip.motion.csv", "line 2")),
    Case("render: a row cut short", _bad_log(lambda t: t[: t.index("\n", t.index("\n") + 1)
                                                        + 30]),
         ["render", "{in}", "--log", "{dir}/clip.motion.csv", "-o", "{dir}/r.mp4"], 2,
         ("clip.motion.csv", "line 3", "fields")),
    Case("report: JSON damaged", _bad_log(lambda t: t[:-20], "json"),
         ["report", "{dir}/clip.motion.csv"], 2, ("clip.motion.json", "not valid JSON", "line")),
    Case("report: log missing", "clip", ["report", "{dir}/gone.motion.csv"], 2,
         ("gone.motion.csv", "no such file")),
]


def _tree(folder: Path) -> dict[str, str]:
    """Every file under ``folder`` with a hash of its bytes."""
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.mark.parametrize("case", INPUTS + OUTPUTS + OPTIONS + LOGS, ids=lambda c: c.name)
def test_table(case: Case, sources, tmp_path, capsys, monkeypatch):
    folder = tmp_path / "case"
    folder.mkdir()
    monkeypatch.chdir(folder)
    # The clip the "clip" rows and the log makers need, in place before the maker runs.
    shutil.copy(sources["clip"], folder / "clip.mp4")
    clip: Path | None = None
    if isinstance(case.source, str):
        clip = folder / sources[case.source].name
        if clip != folder / "clip.mp4":
            shutil.copy(sources[case.source], clip)
    elif case.source is not None:
        clip = case.source(folder)
    capsys.readouterr()
    before = _tree(folder)
    fill = {"{in}": str(clip), "{in_rel}": clip.name if clip else "", "{dir}": str(folder)}
    argv = []
    for a in case.argv:
        for k, v in fill.items():
            a = a.replace(k, v)
        argv.append(a)
    if argv[0] in ("steady", "render"):
        argv[1:1] = case.flags
    elif argv[0] == "report":
        argv.insert(1, "--quiet")

    status = cli.main(argv)
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.strip()]

    assert status == case.status, err
    assert "Traceback" not in err
    if case.status == 0:
        assert all(ln.startswith("stabilize: warning: ") for ln in lines), err
        text = " ".join(lines)
    else:
        assert len(lines) == 1, err
        assert lines[0].startswith("stabilize: error: "), err
        text = lines[0]
    for words in case.says:
        assert words in text, err
    after = _tree(folder)
    if clip is not None and clip.is_file():
        assert after[str(clip.relative_to(folder))] == before[str(clip.relative_to(folder))]
    assert not [p for p in after if ".partial" in p], sorted(after)
    if case.status != 0:
        assert after == before, "an error must leave the folder as it was"
    if case.check is not None:
        case.check(folder, clip)


# ------------------------------------------------------------- outputs, in the library


def test_check_writable_folder_really_tries(tmp_path):
    # Root ignores permission bits, so the check makes (and removes) a file; what stops root
    # is a folder that is not there or a "folder" that is a file.
    check_writable_folder(tmp_path / "out.mp4")
    (tmp_path / "f.txt").write_text("x")
    with pytest.raises(StabilizeError, match="is a file, not a folder"):
        check_writable_folder(tmp_path / "f.txt" / "out.mp4")
    with pytest.raises(StabilizeError, match="does not exist"):
        check_writable_folder(tmp_path / "none" / "out.mp4")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["f.txt"]


def test_all_or_nothing_publishes_together_or_not_at_all(tmp_path):
    a, b = tmp_path / "a.txt", tmp_path / "b.txt"
    with pytest.raises(KeyboardInterrupt):
        with all_or_nothing():
            tmp = temp_path_for(a)
            tmp.write_text("a")
            publish(tmp, a)
            assert not a.exists()  # held back until the job is done
            raise KeyboardInterrupt
    assert list(tmp_path.iterdir()) == []
    with all_or_nothing():
        for p in (a, b):
            tmp = temp_path_for(p)
            tmp.write_text(p.stem)
            publish(tmp, p)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.txt", "b.txt"]
    assert a.read_text() == "a"


def test_failed_steady_leaves_nothing(sources, tmp_path, monkeypatch):
    """A fault after the video is finished (here: writing the log) publishes nothing."""
    import stabilize
    from stabilize.jobs import rendering

    clip = shutil.copy(sources["clip"], tmp_path / "clip.mp4")

    def broken(motion, csv_path):
        raise OSError(28, "No space left on device", str(csv_path))

    monkeypatch.setattr(rendering, "save_log", broken)
    with pytest.raises(OSError):
        stabilize.steady(clip, preset="ultrafast")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["clip.mp4"]


def test_command_line_end_to_end_with_awkward_names(sources, tmp_path):
    """The real console entry point, with a name that starts with a dash and has non-ASCII
    letters, passed as the operating system passes it."""
    clip = shutil.copy(sources["clip"], tmp_path / "-Brücke 2.mp4")
    proc = subprocess.run([sys.executable, "-m", "stabilize", "measure", "--quiet", "--",
                           clip.name], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert (tmp_path / "-Brücke 2.motion.csv").is_file()
    bad = subprocess.run([sys.executable, "-m", "stabilize", "steady", clip.name, "--margin",
                          "0.9"], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and len(bad.stderr.strip().splitlines()) == 1, bad.stderr


def test_no_shell_strings_anywhere():
    """ffmpeg is only ever started with argument lists: nothing in the package builds a shell
    command line."""
    package = Path(cli.__file__).parent
    pattern = re.compile(r"shell\s*=\s*True|os\.system\(|os\.popen\(|commands\.getoutput")
    offenders = [f"{p.name}:{i}" for p in package.rglob("*.py")
                 for i, line in enumerate(p.read_text(encoding="utf-8").splitlines(), 1)
                 if pattern.search(line)]
    assert offenders == []


# ------------------------------------------------------------ hostile and damaged input
#
# Inputs made to mislead: tags and file names that imitate ffmpeg's own words, servers that
# never answer, logs edited to break the readers, names that a browser or a spreadsheet would
# run. Each must end quickly with one plain line (or succeed, saying what it noticed), leave
# its input as it was and leave no stray files.

TITLE = "Stream #0:0: Video: h264, yuv420p, 64x48, 30 fps"


def _outcome(argv: list[str], folder: Path, capsys) -> tuple[int, list[str]]:
    """Run the command line in ``folder``; its status and stderr lines."""
    capsys.readouterr()
    status = cli.main(argv)
    err = capsys.readouterr().err
    assert "Traceback" not in err, err
    return status, [ln for ln in err.splitlines() if ln.strip()]


def _refused(argv: list[str], folder: Path, capsys, *words: str, status: int = 2) -> str:
    """The command is refused: ``status``, one error line holding ``words``, nothing new or
    changed in ``folder``."""
    before = _tree(folder)
    got, lines = _outcome(argv, folder, capsys)
    assert got == status, lines
    assert len(lines) == 1 and lines[0].startswith("stabilize: error: "), lines
    for w in words:
        assert w in lines[0], lines
    assert _tree(folder) == before, "a refusal must leave the folder as it was"
    return lines[0]


def _warnings_only(lines: list[str]) -> None:
    assert all(ln.startswith("stabilize: warning: ") for ln in lines), lines


def _subprocess(argv: list[str], cwd: Path, timeout: float) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "stabilize", *argv], cwd=cwd,
                          capture_output=True, text=True, timeout=timeout,
                          env={**os.environ, "PYTHONPATH": str(Path(cli.__file__).parents[1])})


@pytest.fixture()
def clip_here(sources, tmp_path, monkeypatch) -> Path:
    monkeypatch.chdir(tmp_path)
    return Path(shutil.copy(sources["clip"], tmp_path / "clip.mp4"))


def test_hostile_render_never_replaces_the_log_it_reads(clip_here, tmp_path, capsys):
    assert cli.main(["measure", "--quiet", str(clip_here)]) == 0
    logs = {p: p.read_bytes() for p in (tmp_path / "clip.motion.csv",
                                        tmp_path / "clip.motion.json")}
    for spelling in ("clip.motion.json", "clip.motion.csv", "./sub/../clip.motion.json"):
        (tmp_path / "sub").mkdir(exist_ok=True)
        status, lines = _outcome(["render", "--quiet", "--preset", "ultrafast", "--force",
                                  str(clip_here), "--log", spelling], tmp_path, capsys)
        assert status == 0, lines
        _warnings_only(lines)
        assert {p: p.read_bytes() for p in logs} == logs, spelling
        assert (tmp_path / "clip.render.motion.csv").is_file()
    # The video itself may not land on the log either.
    _refused(["render", "--quiet", str(clip_here), "--log", "clip.motion.json", "-o",
              "clip.motion.csv", "--force"], tmp_path, capsys, "clip.motion.csv",
             "motion log it is made from")
    assert {p: p.read_bytes() for p in logs} == logs


def _tagged_clip(folder: Path, name: str, **tags: str) -> Path:
    path = folder / name
    meta = [x for k, v in tags.items() for x in ("-metadata", f"{k}={v}")]
    lavfi_clip(path, frames=8, extra=tuple(meta))
    return path


@pytest.mark.parametrize("tags", [
    {"title": TITLE},
    {"comment": "rotation of 90 degrees"},
    {"comment": "x\n  Duration: 99:00:00.00, start: 0.000000, bitrate: 9 kb/s\n  " + TITLE},
], ids=["title like a stream", "comment like a rotation", "comment with line breaks"])
def test_hostile_tags_are_data(tmp_path, tags):
    """Tags that read like ffmpeg's description of a stream change nothing: the clip is read
    at its real size, rotation and duration, in seconds (it used to wait for frames of the
    size the tag claimed)."""
    clip = _tagged_clip(tmp_path, "clip.mp4", **tags)
    before = clip.read_bytes()
    proc = _subprocess(["steady", "--quiet", "--preset", "ultrafast", clip.name], tmp_path, 120)
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr and "ends early" not in proc.stderr
    src = _log(tmp_path, "clip")["source"]
    assert (src["width"], src["height"], src["rotation_deg"]) == (96, 72, 0.0)
    assert src["truncated"] is False and abs(src["duration_s"] - 8 / 24) < 0.05
    out = probe(tmp_path / "clip.steady.mp4")
    assert (out.width, out.height) == (96, 72)
    assert clip.read_bytes() == before


@pytest.mark.parametrize("name", [TITLE + ".mp4", "Duration: 99:00:00.00, start 0.mp4",
                                  "rotation of 90 degrees.mp4"])
def test_hostile_file_names_are_data(tmp_path, name):
    clip = lavfi_clip(tmp_path / name, frames=8)
    info = probe(clip)
    assert (info.width, info.height, info.rotation_deg, info.fps) == (96, 72, 0.0, 24.0)
    assert abs(info.duration_s - 8 / 24) < 0.05
    proc = _subprocess(["measure", "--quiet", "--", name], tmp_path, 120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr.strip() == "", proc.stderr


def test_hostile_name_with_line_breaks(tmp_path):
    name = f"x\n  Duration: 99:00:00.00, start: 0.000000\n  {TITLE}\n.mp4"
    clip = lavfi_clip(tmp_path / "plain.mp4", frames=8).rename(tmp_path / name)
    info = probe(clip)
    assert (info.width, info.height) == (96, 72) and info.duration_s < 1


def test_hostile_tag_name_with_line_breaks(tmp_path, capsys, monkeypatch):
    """A Matroska tag whose *name* holds line breaks puts whole lines into ffmpeg's header
    text, word for word like its own: the header is refused, never read as the fake says."""
    monkeypatch.chdir(tmp_path)
    made = tmp_path / "made.mkv"
    fake_stream, fake_duration = f"  {TITLE}", "  Duration: 99:00:00.00, start: 0.0"
    ff("-f", "lavfi", "-i", "testsrc2=size=96x72:rate=24", "-frames:v", "8", "-c:v", "libx264",
       "-preset", "ultrafast", "-metadata", f"k\n{fake_stream}\n{fake_duration}\nz=v", str(made))
    data = made.read_bytes()
    made.unlink()
    for fake in (fake_stream, fake_duration):  # the muxer wrote them upper case, "_" for " "
        stored = fake.upper().replace(" ", "_").encode()
        assert stored in data
        data = data.replace(stored, fake.encode())
    (tmp_path / "key.mkv").write_bytes(data)
    _refused(["measure", "--quiet", "key.mkv"], tmp_path, capsys, "key.mkv", "imitate")


def test_hostile_claimed_picture_size_refused_before_any_read(tmp_path, capsys, monkeypatch):
    """A header claiming a 16000x16000 picture (768 MB a frame) is refused at once."""
    monkeypatch.chdir(tmp_path)
    raw = tmp_path / "raw.mov"
    ff("-f", "lavfi", "-i", "testsrc2=size=96x72:rate=24", "-frames:v", "2", "-c:v",
       "rawvideo", "-pix_fmt", "rgb24", str(raw))
    data = bytearray(raw.read_bytes())
    i = data.find(b"raw ")
    assert int.from_bytes(data[i + 28:i + 30], "big") == 96
    data[i + 28:i + 32] = (16000).to_bytes(2, "big") * 2
    (tmp_path / "huge.mov").write_bytes(bytes(data))
    raw.unlink()
    _refused(["steady", "--quiet", "huge.mov"], tmp_path, capsys, "huge.mov", "16000x16000")


def test_hostile_text_file_is_not_video(tmp_path, capsys, monkeypatch):
    """ffmpeg draws a text file (ANSI art reader); that is never a clip to steady."""
    monkeypatch.chdir(tmp_path)
    rng = np.random.default_rng(3)
    text = "".join(rng.choice(list("abcdefgh ijk\n"), 20000))
    for name in ("notes.txt", "readme.nfo"):
        (tmp_path / name).write_text(text)
        _refused(["steady", "--quiet", name], tmp_path, capsys, name, "not a video")


class _Silent:
    """A TCP server that accepts connections and never says a word (or, ``http``, answers
    like a web server once spoken to)."""

    def __init__(self, http: bool = False) -> None:
        import socket
        import threading
        self.sock = socket.socket()
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(8)
        self.port = self.sock.getsockname()[1]
        self.http = http
        self.conns: list = []
        threading.Thread(target=self._serve, daemon=True).start()

    def _serve(self) -> None:
        while True:
            try:
                conn, _ = self.sock.accept()
            except OSError:
                return
            self.conns.append(conn)
            if self.http:
                try:
                    conn.settimeout(5)
                    conn.recv(1024)
                    conn.sendall(b"HTTP/1.0 400 Bad Request\r\nContent-Length: 0\r\n\r\n")
                except OSError:
                    pass

    def close(self) -> None:
        self.sock.close()
        for c in self.conns:
            c.close()


@pytest.mark.parametrize("http", [False, True], ids=["silent server", "web server"])
@pytest.mark.parametrize("command", ["measure", "batch"])
def test_hostile_scheduler_that_never_answers(sources, tmp_path, http, command):
    pytest.importorskip("distributed")
    shutil.copy(sources["clip"], tmp_path / "clip.mp4")
    server = _Silent(http=http)
    try:
        address = f"tcp://127.0.0.1:{server.port}"
        argv = (["measure", "--quiet", "clip.mp4", "--workers", "2", "--scheduler", address]
                if command == "measure" else
                ["batch", "--quiet", "clip.mp4", "--out-dir", "out", "--scheduler", address])
        before = _tree(tmp_path)
        proc = _subprocess(argv, tmp_path, timeout=90)  # the check waits 10 s at most
    finally:
        server.close()
    lines = proc.stderr.strip().splitlines()
    assert proc.returncode == 2 and len(lines) == 1, proc.stderr
    assert "--scheduler" in lines[0] and address in lines[0], lines
    assert _tree(tmp_path) == before


@pytest.mark.parametrize("flag,value,words", [
    ("--max-rounds", "1000000", ("at most 20000",)),
    ("--window-s", "1e9", ("at most 3600",)),
    ("--analysis-width", "1e9", ("at most",)),
    ("--seed", "1e30", ("below 2**32",)),
    ("--ignore", "0,0,1e12,5", ("within",)),
])
def test_hostile_options_bounded(clip_here, tmp_path, capsys, flag, value, words):
    # measure takes no smoothing options: the window is steady's.
    command = "steady" if flag == "--window-s" else "measure"
    _refused([command, "--quiet", str(clip_here), flag, value], tmp_path, capsys, flag,
             *words)


def test_hostile_pipe_and_workers(clip_here, tmp_path, capsys):
    os.mkfifo(tmp_path / "pipe.mp4")
    before = _tree(tmp_path)
    status, lines = _outcome(["measure", "--quiet", "pipe.mp4"], tmp_path, capsys)
    assert status == 2 and len(lines) == 1 and "pipe.mp4" in lines[0], lines
    assert "not a regular file" in lines[0] and _tree(tmp_path) == before
    (tmp_path / "pipe.mp4").unlink()
    _refused(["measure", "--quiet", str(clip_here), "--workers", "100000"], tmp_path, capsys,
             "--workers", "at most 256")


@pytest.mark.parametrize("toml,words", [
    ("ignore = 5", ("ignore", "X,Y,W,H")),
    ("ignore = [5]", ("ignore",)),
    ("max_rounds = 1e12", ("max-rounds",)),
    ('model = 5', ("model",)),
    ("window_s = 1e9", ("window-s",)),
], ids=["ignore a number", "ignore a list of numbers", "rounds huge", "model a number",
        "window huge"])
def test_hostile_config_values(clip_here, tmp_path, capsys, toml, words):
    (tmp_path / "bad.toml").write_text(toml + "\n")
    _refused(["measure", "--quiet", str(clip_here), "--config", "bad.toml"], tmp_path, capsys,
             "bad.toml", *words)


def _measured(folder: Path, steady: bool = False) -> tuple[Path, Path]:
    argv = (["steady", "--quiet", "--preset", "ultrafast"] if steady else ["measure", "--quiet"])
    assert cli.main([*argv, str(folder / "clip.mp4")]) == 0
    return folder / "clip.motion.csv", folder / "clip.motion.json"


def _edit_json(path: Path, change: Callable[[dict], None]) -> None:
    doc = json.loads(path.read_text())
    change(doc)
    path.write_text(json.dumps(doc))


@pytest.mark.parametrize("change,words", [
    (lambda d: d["source"].update(path=5), ("source path",)),
    (lambda d: d.update(outputs="clip.steady.mp4"), ("outputs",)),
    (lambda d: d["settings"].update(ignore=7), ("settings ignore",)),
    (lambda d: d["source"].update(fps=int("9" * 400)), ("source fps",)),
    (lambda d: d["source"].update(codec=["h264"]), ("source codec",)),
    (lambda d: d["source"].update(duration_s="long"), ("source duration_s",)),
], ids=["path a number", "outputs a string", "ignore a number", "fps 400 digits",
        "codec a list", "duration text"])
def test_hostile_log_json_fields(clip_here, tmp_path, capsys, change, words):
    _, json_path = _measured(tmp_path)
    _edit_json(json_path, change)
    _refused(["report", "--quiet", str(json_path)], tmp_path, capsys, "clip.motion.json", *words)
    _refused(["render", "--quiet", str(clip_here), "--log", str(json_path), "-o", "r.mp4"],
             tmp_path, capsys, "clip.motion.json", *words)


def _edit_csv(path: Path, column: str, values: Callable[[np.ndarray], np.ndarray]) -> None:
    lines = path.read_text().splitlines()
    head = lines[0].split(",")
    j = head.index(column)
    rows = [ln.split(",") for ln in lines[1:]]
    new = values(np.array([float(r[j]) for r in rows]))
    for r, v in zip(rows, new, strict=True):
        r[j] = repr(float(v))
    path.write_text("\n".join([lines[0], *(",".join(r) for r in rows)]) + "\n")


@pytest.mark.parametrize("column,values,words", [
    ("h13", lambda v: v + 1e300, ("line 2", "transform")),
    ("c13", lambda v: v * 0 + 1e12, ("line 2", "correction")),
    ("time_s", lambda v: v[::-1].copy(), ("line 3", "time_s")),
    ("time_s", lambda v: v + 1e18, ("line 2", "time_s")),
    ("time_s", lambda v: v * 0, ("line 3", "time_s")),
], ids=["h13 1e300", "correction huge", "time backwards", "time huge", "time repeated"])
def test_hostile_log_values(clip_here, tmp_path, capsys, column, values, words):
    csv_path, _ = _measured(tmp_path, steady=column.startswith("c"))
    _edit_csv(csv_path, column, values)
    _refused(["render", "--quiet", str(clip_here), "--log", str(csv_path), "-o", "r.mp4"],
             tmp_path, capsys, "clip.motion.csv", *words)
    _refused(["report", "--quiet", str(csv_path)], tmp_path, capsys, "clip.motion.csv", *words)


def test_hostile_log_from_another_clip(clip_here, tmp_path, capsys):
    """A 24-fps clip's log applied to a 1-fps clip of a minute: refused, not a short video."""
    csv_path, _ = _measured(tmp_path)
    lavfi_clip(tmp_path / "slow.mp4", rate=1, frames=60)
    _refused(["render", "--quiet", "slow.mp4", "--log", str(csv_path), "-o", "r.mp4"],
             tmp_path, capsys, "clip.motion.csv", "fps")
    # Same rate, other length: refused too.
    lavfi_clip(tmp_path / "long.mp4", frames=96)
    _refused(["render", "--quiet", "long.mp4", "--log", str(csv_path), "-o", "r.mp4"],
             tmp_path, capsys, "clip.motion.csv", "frames")


def test_hostile_csv_header_of_commas_refused_early(clip_here, tmp_path, capsys):
    """A header line of 20 MB of commas is refused at its first 64 KiB, not parsed whole."""
    import tracemalloc
    csv_path, _ = _measured(tmp_path)
    csv_path.write_bytes(b"frame,time_s" + b"," * 20_000_000 + b"\n")
    tracemalloc.start()
    try:
        _refused(["report", "--quiet", str(csv_path)], tmp_path, capsys, "clip.motion.csv",
                 "line 1", "longer than")
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 50e6, peak


def _cut_clip(folder: Path, ext: str, extra: tuple[str, ...] = ()) -> Path:
    full = folder / f"full.{ext}"
    ff("-f", "lavfi", "-i", "testsrc2=size=96x72:rate=24", "-frames:v", "48", "-c:v",
       "libx264", "-preset", "ultrafast", "-g", "6", *extra, str(full))
    cut = folder / f"cut.{ext}"
    cut.write_bytes(full.read_bytes()[: full.stat().st_size // 2])
    full.unlink()
    return cut


@pytest.mark.parametrize("ext,extra", [("mkv", ()), ("mp4", ("-movflags", "+faststart"))])
def test_hostile_cut_clip_in_segments_as_in_one_pass(tmp_path, ext, extra, caplog):
    """A clip cut short whose header claims the full length: the segmented analysis gives
    the log of one pass (runs planned past the real end keep nothing) and says it ends
    early."""
    import stabilize
    clip = _cut_clip(tmp_path, ext, extra)
    one = stabilize.measure(clip, workers=1, keyframe_every=12)
    with caplog.at_level("WARNING", logger="stabilize"):
        two = stabilize.measure(clip, workers=2, keyframe_every=12)
    assert 0 < two.frames < 48
    assert two.source["truncated"] is True and one.source["truncated"] is True
    assert one.to_csv() == two.to_csv()
    assert "ends early" in caplog.text


def test_hostile_cut_mkv_on_workers_command_line(tmp_path):
    clip = _cut_clip(tmp_path, "mkv")
    proc = _subprocess(["measure", "--quiet", clip.name, "--workers", "2"], tmp_path, 300)
    assert proc.returncode == 0, proc.stderr
    assert "ends early" in proc.stderr and "internal error" not in proc.stderr


def test_hostile_damaged_frames_are_reported(tmp_path, caplog):
    """Damaged data in the middle of a clip: the decoder's complaints are counted and the
    warning says a segmented analysis can differ there."""
    import stabilize
    full = tmp_path / "full.mkv"
    ff("-f", "lavfi", "-i", "testsrc2=size=96x72:rate=24", "-frames:v", "48", "-c:v",
       "libx264", "-preset", "ultrafast", "-g", "6", str(full))
    data = bytearray(full.read_bytes())
    rng = np.random.default_rng(5)
    for start in range(len(data) // 3, 2 * len(data) // 3, 2000):
        data[start:start + 40] = rng.bytes(40)
    clip = tmp_path / "damaged.mkv"
    clip.write_bytes(bytes(data))
    for workers in (1, 2):
        caplog.clear()
        with caplog.at_level("WARNING", logger="stabilize"):
            stabilize.measure(clip, workers=workers, keyframe_every=12)
        assert "damaged data" in caplog.text or "ends early" in caplog.text, caplog.text


def _batch_folder(folder: Path, names: list[str]) -> Path:
    src = folder / "in"
    (src / "sub").mkdir(parents=True)
    for n in names:
        lavfi_clip(src / n, frames=6)
    return src


def test_hostile_batch_names_links_and_loops(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    src = _batch_folder(tmp_path, ["sub/javascript:alert(document.domain).mp4",
                                   "=HYPERLINK(1).mp4", "+1.mp4", "-2.mp4", "@sum.mp4"])
    (src / "sub" / "loop").symlink_to("..")
    (src / "sub" / "again").symlink_to("..")
    bad = os.fsdecode(b"bad\xff name.mp4")
    shutil.copy(src / "+1.mp4", src / bad)
    for spec in (str(src), str(src / "**" / "*.mp4")):
        out = tmp_path / f"out{len(spec)}"
        status, lines = _outcome(["batch", "--quiet", "--measure-only", "--workers", "1",
                                  spec, "--out-dir", str(out)], tmp_path, capsys)
        assert status == 0, lines
        _warnings_only(lines)
        assert any("not valid UTF-8" in ln and "\\xff" in ln for ln in lines), lines
        rows = (out / "summary.csv").read_text().splitlines()[1:]
        assert len(rows) == 5, rows  # each real file once, whatever the links
        cells = [r.split(",")[0] for r in rows]
        assert sorted(cells) == sorted(["'+1.mp4", "'-2.mp4", "'=HYPERLINK(1).mp4",
                                        "'@sum.mp4",
                                        "sub/javascript:alert(document.domain).mp4"]), cells
        page = (out / "summary.html").read_text()
        hrefs = re.findall(r'href="([^"]*)"', page)
        assert hrefs and all(h.startswith("./") and ":" not in h for h in hrefs), hrefs
        assert "Content-Security-Policy" in page and "default-src 'none'" in page


def test_hostile_spreadsheet_safe():
    from stabilize.jobs.batch import spreadsheet_safe
    for text in ("=1+1", "+1", "-2", "@SUM(A1)", "\t=1", "\r=1"):
        assert spreadsheet_safe(text) == "'" + text
    for value in ("clip.mp4", "", 1.5, -2.0, 3):
        assert spreadsheet_safe(value) == value


def test_hostile_clip_gone_mid_batch(sources, tmp_path, monkeypatch):
    from stabilize.config import Settings
    from stabilize.jobs import batch
    clip = shutil.copy(sources["clip"], tmp_path / "clip.mp4")

    def vanish(job, clip, settings):
        raise FileNotFoundError(2, "No such file or directory", str(clip))

    monkeypatch.setattr(batch, "_do_clip", vanish)
    job = batch.ClipJob(str(clip), "clip.mp4", str(tmp_path / "out"), "clip", Settings(), True)
    result = batch.process_clip(job)
    assert result.status == "failed"
    assert "internal error" not in result.error and "no longer there" in result.error


@pytest.mark.parametrize("command", ["measure", "steady", "report"])
def test_hostile_disk_full_names_the_file(clip_here, tmp_path, capsys, monkeypatch, command):
    from stabilize.io import publishing
    if command == "report":
        _measured(tmp_path)

    class Full:
        def __init__(self, *a, **k):
            pass

        def __enter__(self):
            return self

        def __exit__(self, *a):
            return False

        def write(self, text):
            raise OSError(28, "No space left on device")

    monkeypatch.setattr(publishing, "open", Full, raising=False)
    argv = {"measure": ["measure", "--quiet", str(clip_here), "--force"],
            "steady": ["steady", "--quiet", "--preset", "ultrafast", str(clip_here), "--force"],
            "report": ["report", "--quiet", "clip.motion.csv", "--force"]}[command]
    before = _tree(tmp_path)
    status, lines = _outcome(argv, tmp_path, capsys)
    assert status == 2, lines
    *warnings, error = lines
    _warnings_only(warnings)
    assert error.startswith("stabilize: error: ") and "No space left on device" in error
    assert re.search(r"clip[.\w]*\.(csv|json|html)", error), lines
    assert _tree(tmp_path) == before


def test_hostile_repeated_interrupt_prints_no_traceback(tmp_path):
    import signal
    import time
    # Long enough (200 s of clip) that the run is still going when interrupted, however
    # fast the machine: a run that has already ended cannot be interrupted.
    clip = lavfi_clip(tmp_path / "long.mp4", size="320x240", frames=4800)
    proc = subprocess.Popen([sys.executable, "-m", "stabilize", "steady", "--quiet", clip.name],
                            cwd=tmp_path, stderr=subprocess.PIPE, text=True,
                            env={**os.environ,
                                 "PYTHONPATH": str(Path(cli.__file__).parents[1])})
    time.sleep(6)
    assert proc.poll() is None, "finished before it could be interrupted"
    for _ in range(4):
        proc.send_signal(signal.SIGINT)
        time.sleep(0.05)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    # Warnings of the analysis may come first when it ended before the interrupt; the
    # interrupt itself is one line, said once.
    *warnings, last = err.strip().splitlines()
    assert "Traceback" not in err and last.startswith("stabilize: interrupted"), err
    assert all(w.startswith("stabilize: warning: ") for w in warnings), err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["long.mp4"]


@pytest.mark.slow
def test_hostile_interrupted_dask_run_says_one_line(tmp_path):
    """Ctrl-C during a run on a local Dask cluster: one line, none of Dask's own."""
    import signal
    import time
    pytest.importorskip("distributed")
    # 400 s of clip: still running after the cluster's start and 12 s, however fast the
    # machine.
    clip = lavfi_clip(tmp_path / "long.mp4", size="320x240", frames=9600)
    proc = subprocess.Popen([sys.executable, "-m", "stabilize", "measure", "--quiet", clip.name,
                             "--scheduler", "local", "--workers", "2"], cwd=tmp_path,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                            env={**os.environ,
                                 "PYTHONPATH": str(Path(cli.__file__).parents[1])})
    time.sleep(12)
    assert proc.poll() is None, "finished before it could be interrupted"
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert err.strip().splitlines() == ["stabilize: interrupted; no partial outputs were left"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["long.mp4"]
