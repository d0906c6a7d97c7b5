"""Interrupting ``steady``: SIGINT or SIGTERM while it works leaves nothing behind.

The real command (``python -m stabilize steady``) is started on a clip of a few seconds and
signalled part-way: while it renders (the encoder has started writing its temporary file) and,
separately, while it still analyses. It must exit with status 130 and one line on stderr, leave
nothing under the output names and no temporaries, and leave no ffmpeg child running.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from stabilize.io.process import ffmpeg_exe


@pytest.fixture(scope="module")
def clip(tmp_path_factory) -> Path:
    """Three seconds of 320×180 test pattern with a tone: long enough to catch mid-render."""
    path = tmp_path_factory.mktemp("interrupt") / "long flight.mp4"
    subprocess.run(
        [ffmpeg_exe(), "-hide_banner", "-nostdin", "-loglevel", "error", "-y",
         "-f", "lavfi", "-i", "testsrc2=size=320x180:rate=30", "-f", "lavfi", "-i",
         "sine=frequency=300", "-t", "3", "-c:v", "libx264", "-preset", "ultrafast",
         "-c:a", "aac", "-shortest", str(path)],
        check=True, capture_output=True)
    return path


def _children(pid: int) -> set[int]:
    """Processes whose parent is ``pid`` (from /proc; the name field may hold spaces)."""
    kids = set()
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        if int(stat.rsplit(")", 1)[1].split()[1]) == pid:
            kids.add(int(entry.name))
    return kids


def _cmdline(pid: int) -> str:
    try:
        return (Path("/proc") / str(pid) / "cmdline").read_bytes().replace(b"\0", b" ").decode(
            "utf-8", "replace")
    except OSError:
        return ""


def _alive(pid: int) -> bool:
    try:
        state = (Path("/proc") / str(pid) / "stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.parametrize(
    "sig, stage",
    [(signal.SIGINT, "render"), (signal.SIGTERM, "render"), (signal.SIGINT, "analyse")],
    ids=["SIGINT-render", "SIGTERM-render", "SIGINT-analyse"],
)
def test_interrupted_steady_leaves_nothing(clip, tmp_path, sig, stage):
    work = tmp_path / "work"
    work.mkdir()
    src = work / clip.name
    os.link(clip, src) if clip.stat().st_dev == work.stat().st_dev else src.write_bytes(
        clip.read_bytes())
    before = src.read_bytes()
    # veryslow: the render takes seconds, so the signal lands while it runs.
    proc = subprocess.Popen(
        [sys.executable, "-m", "stabilize", "steady", str(src), "--quiet", "--preset",
         "veryslow"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    seen: set[int] = set()
    deadline = time.monotonic() + 90
    try:
        while True:
            assert proc.poll() is None, "finished before it could be interrupted"
            assert time.monotonic() < deadline, "never reached the stage"
            ffmpeg = {k for k in _children(proc.pid) if "ffmpeg" in _cmdline(k)}
            seen |= ffmpeg
            if stage == "analyse" and ffmpeg:
                break
            encoder = [k for k in ffmpeg if "pipe:0" in _cmdline(k)]
            if stage == "render" and encoder:
                # Let frames flow into the encoder's temporary file for a moment.
                time.sleep(0.3)
                seen |= {k for k in _children(proc.pid) if "ffmpeg" in _cmdline(k)}
                assert any(".partial" in p.name for p in work.iterdir())
                break
            time.sleep(0.01)
        assert proc.poll() is None, "finished before it could be interrupted"
        proc.send_signal(sig)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 130, err
    # Warnings about the clip itself (weak frames of the moving test pattern) may come first.
    lines = [ln for ln in err.splitlines()
             if ln.strip() and not ln.startswith("stabilize: warning:")]
    assert lines == ["stabilize: interrupted; no partial outputs were left"], err
    assert sorted(p.name for p in work.iterdir()) == [src.name]
    assert src.read_bytes() == before
    assert seen and not [pid for pid in seen if _alive(pid)]


_STUCK_RUN = r"""
import sys, threading, os, signal
from pathlib import Path
import stabilize.cli as cli
from stabilize.io.process import spawn
from stabilize.io.publishing import temp_path_for

cli.STOP_GRACE_S = 1.0

def run(args):
    work = Path(os.environ["STUCK_WORK"])
    temp_path_for(work / "out.mp4")
    spawn([sys.executable, "-c", "import time; time.sleep(120)"])
    print("working", flush=True)
    try:
        threading.Event().wait()
    finally:
        threading.Event().wait()  # an unwinding that never ends

cli.run = run
sys.exit(cli.main())
"""


@pytest.mark.parametrize("debug", [False, True], ids=["plain", "debug"])
def test_interrupted_run_that_cannot_unwind_still_ends(tmp_path, debug):
    """Should the unwinding hang (a stuck thread or child), the process still ends a grace
    period after the signal: status 130, the one line, children stopped, temporaries gone;
    with --debug, every thread's stack is printed first."""
    script = tmp_path / "stuck.py"
    script.write_text(_STUCK_RUN)
    work = tmp_path / "work"
    work.mkdir()
    args = [sys.executable, str(script), "steady", "in.mp4"]
    proc = subprocess.Popen(args + (["--debug"] if debug else []), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True,
                            env=os.environ | {"STUCK_WORK": str(work)})
    try:
        assert proc.stdout.readline().strip() == "working"
        kids = _children(proc.pid)
        assert kids and [p.name for p in work.iterdir()]
        started = time.monotonic()
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=30)
        took = time.monotonic() - started
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 130, err
    assert 1.0 <= took < 15.0
    lines = err.splitlines()
    assert lines.count("stabilize: interrupted; no partial outputs were left") == 1
    assert ("Thread 0x" in err and "stuck.py" in err) == debug, err
    assert not debug or lines[-1] == "stabilize: interrupted; no partial outputs were left"
    assert list(work.iterdir()) == []
    assert not [pid for pid in kids if _alive(pid)]
