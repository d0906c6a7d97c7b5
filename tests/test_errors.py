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
    Case("destination folder missing", "clip", ["steady", "{in}", "-o", "{dir}/no/such/out.mp4"],
         2, ("does not exist",)),
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
        ("--config", "no-such-preset", ("drone-inspection", ".toml")),
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
    Case("render: a cell not a number", _bad_log(lambda t: t.replace(",ok,", ",ok,x", 1)),
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
