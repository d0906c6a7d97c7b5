"""The command line as users script it: outputs, exit status, one-line errors."""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from .conftest import noise_frames, write_clip


def run(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "stabilize", *args], capture_output=True,
                          text=True, cwd=cwd, timeout=300)


def _one_line_error(proc: subprocess.CompletedProcess, *fragments: str) -> None:
    assert proc.returncode == 2, proc.stderr
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, proc.stderr
    assert "Traceback" not in proc.stderr
    for f in fragments:
        assert f in lines[0], lines[0]


@pytest.fixture(scope="module")
def clip(tmp_path_factory) -> Path:
    tmp = tmp_path_factory.mktemp("cli")
    return write_clip(tmp / "pan.mp4", noise_frames(24, 192, 144, shift_px=1.2), 24.0,
                      audio=True)


def test_steady_writes_video_and_logs_beside_the_input(clip):
    proc = run("steady", str(clip), "--quiet")
    assert proc.returncode == 0, proc.stderr
    for name in ("pan.steady.mp4", "pan.motion.csv", "pan.motion.json"):
        assert (clip.parent / name).is_file()
        assert str(clip.parent / name) in proc.stdout
    doc = json.loads((clip.parent / "pan.motion.json").read_text())
    assert doc["settings"]["model"] == "similarity"
    assert doc["source"]["frames"] == 24
    # A second run refuses to overwrite, --force allows it.
    again = run("steady", str(clip), "--quiet")
    _one_line_error(again, "already exists", "--force")
    assert run("steady", str(clip), "--quiet", "--force").returncode == 0


def test_measure_prints_a_summary_and_writes_the_log(clip, tmp_path):
    out = tmp_path / "m.csv"
    proc = run("measure", str(clip), "--log", str(out), "--quiet", "--fov-deg", "80")
    assert proc.returncode == 0, proc.stderr
    assert "shake x" in proc.stdout and "deg" in proc.stdout
    assert out.is_file() and out.with_suffix(".json").is_file()
    trust = json.loads(out.with_suffix(".json").read_text())["summary"]["trust"]
    assert f"verdict: {trust}" in proc.stdout
    header = out.read_text().splitlines()[0]
    assert header.startswith("frame,time_s,h11")
    row = out.read_text().splitlines()[2].split(",")
    assert row[-1] == ""  # measure leaves the correction empty


def test_render_from_log_and_config_precedence(clip, tmp_path):
    log = tmp_path / "pan.motion.csv"
    assert run("measure", str(clip), "--log", str(log), "--quiet").returncode == 0
    cfg = tmp_path / "my.toml"
    cfg.write_text('margin = 0.2\nwindow_s = 2.0\n')
    out = tmp_path / "out" / "r.mp4"  # a missing folder is created
    proc = run("render", str(clip), "--log", str(log), "-o", str(out), "--settings", str(cfg),
               "--margin", "0.05", "--quiet")
    assert proc.returncode == 0, proc.stderr
    # The new log is named after the video, so a second render into the folder works too.
    doc = json.loads((out.parent / "r.motion.json").read_text())
    assert doc["settings"]["margin"] == 0.05 and doc["settings"]["window_s"] == 2.0
    assert doc["summary"]["margin"] == 0.05


def test_bad_input_gives_one_line_and_status_2(clip, tmp_path):
    _one_line_error(run("steady", str(tmp_path / "nope.mp4")), "nope.mp4", "no such file")
    text = tmp_path / "notes.mp4"
    text.write_text("not a video at all\n")
    _one_line_error(run("steady", str(text)), "notes.mp4")
    _one_line_error(run("steady", str(clip), "-o", str(clip)), "overwrite the input")
    _one_line_error(run("steady", str(clip), "--model", "spline"), "--model")
    _one_line_error(run("steady", str(clip), "--margin", "0.7"), "--margin", "0.45")
    _one_line_error(run("steady", str(clip), "--inlier-px", "-2"), "--inlier-px")
    _one_line_error(run("steady", str(clip), "--settings", "no-such-name"), "--settings",
                    "no settings file named")
    _one_line_error(run("steady", str(clip), "-o", str(text / "dir" / "x.mp4")),
                    "x.mp4", "folder")
    _one_line_error(run("render", str(clip), "--log", str(tmp_path / "missing.csv")),
                    "missing.csv")
    assert not list(tmp_path.glob("*.partial*"))


def test_input_is_never_touched(clip):
    before = hashlib.sha256(clip.read_bytes()).hexdigest()
    run("steady", str(clip), "-o", str(clip), "--force")
    run("steady", str(clip), "--log", str(clip), "--force")
    assert hashlib.sha256(clip.read_bytes()).hexdigest() == before


def test_demo_runs_and_says_where_the_outputs_are(tmp_path):
    proc = run("demo", "--out-dir", str(tmp_path / "demo"), "--quiet")
    assert proc.returncode == 0, proc.stderr
    outs = [Path(line.split(": ", 1)[1]) for line in proc.stdout.splitlines()
            if line.startswith(("video:", "motion log:"))]
    assert len(outs) == 3 and all(p.is_file() for p in outs)
    report = [Path(line.split(": ", 1)[1]) for line in proc.stdout.splitlines()
              if line.startswith("report:")]
    assert len(report) == 1 and report[0].suffix == ".html" and report[0].is_file()
    assert any(p.suffix == ".mp4" for p in outs)
    summary = json.loads(next(p for p in outs if p.suffix == ".json").read_text())["summary"]
    assert summary["frames_failed"] == 0
    assert np.isfinite(summary["jitter_rms_x_px"])


def test_the_printout_says_no_clear_peak_the_real_rate_and_the_verdict(capsys):
    from stabilize.cli import _print_summary

    summary = {"frames": 68, "frames_weak": 0, "frames_failed": 0, "cuts": 0, "fps": 2.27,
               "fps_nominal": 15.0, "timestamps_irregular": True, "nyquist_hz": 1.135,
               "shake_above_hz": 1.0, "jitter_rms_x_px": 0.5, "dominant_hz_x": None,
               "jitter_rms_y_px": 0.4, "dominant_hz_y": 3.25, "jitter_rms_rot_deg": None,
               "dominant_hz_rot": None, "trust": "rough",
               "trust_reasons": ["The frame times are irregular."]}
    _print_summary(summary)
    out = capsys.readouterr().out
    lines = {ln.split()[1] if ln.startswith("shake") else ln: ln for ln in out.splitlines()}
    assert "no clear peak" in lines["x"] and "3.25 Hz" in lines["y"]
    assert "no clear peak" not in lines["rotation"]  # no shake measured: nothing to say
    assert "2.27 fps on average, irregular times (container: 15.0 fps)" in out
    assert "verdict: rough" in out and "  - The frame times are irregular." in out


def test_library_messages_name_settings_and_the_cli_words_them_as_flags():
    from stabilize.cli import flag_wording

    assert flag_wording("setting 'window_s': 'x' is not allowed; use a positive number") == \
        "option --window-s: 'x' is not allowed; use a positive number"
    assert flag_wording("a.mp4: already exists (setting 'force' allows overwriting)") == \
        "a.mp4: already exists (option --force allows overwriting)"
    assert flag_wording("a.mp4: no such file") == "a.mp4: no such file"
