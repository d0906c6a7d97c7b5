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


# ------------------------------------------------------------- help that fits
def _help(command: str) -> str:
    from stabilize.cli import build_parser

    sub = build_parser()._subparsers._group_actions[0].choices[command]
    return sub.format_help()


def _accepted(command: str) -> set[str]:
    from stabilize.cli import build_parser

    sub = build_parser()._subparsers._group_actions[0].choices[command]
    return {flag for action in sub._actions for flag in action.option_strings}


ENCODING = {"--crf", "--preset", "--codec", "--compare"}
SMOOTHING = {"--smoother", "--window-s", "--margin", "--fill"}


def test_each_command_shows_and_accepts_only_the_options_it_uses():
    measure = _help("measure")
    for flag in ENCODING | SMOOTHING:
        assert flag not in measure and flag not in _accepted("measure")
    assert not (ENCODING | SMOOTHING) & _accepted("report")
    for command in ("steady", "render", "batch", "demo"):
        assert ENCODING | SMOOTHING <= _accepted(command)
    assert "--workers" in _accepted("measure") and "--workers" not in _accepted("steady")
    assert "--analysis-width" not in _accepted("render")  # a render re-uses the log's motion
    for command in ("steady", "measure", "render", "report", "batch", "demo"):
        text = _help(command)
        for title in ("input:", "output:", "run:"):
            if not (command == "demo" and title == "input:"):  # the demo reads its own clip
                assert f"\n{title}" in text, (command, title)
    assert "\nanalysis:" in _help("steady") and "\nsmoothing and framing:" in _help("steady")
    assert "\noutput encoding:" in _help("steady")
    # A flag the command does not use is refused, naming the command.
    from stabilize.cli import main

    assert main(["measure", "x.mp4", "--crf", "20"]) == 2


def test_refused_option_names_the_command(capsys):
    from stabilize.cli import main

    assert main(["measure", "x.mp4", "--codec", "h265"]) == 2
    err = capsys.readouterr().err
    assert "--codec" in err and "stabilize measure --help" in err and len(err.splitlines()) == 1


def test_log_is_an_input_of_render_and_an_output_elsewhere():
    def section(text: str, title: str) -> str:
        part = text.split(f"\n{title}:\n", 1)[1]
        return part.split("\n\n", 1)[0]

    assert "--log" in section(_help("render"), "input")
    assert "--log" not in section(_help("render"), "output")
    for command in ("steady", "measure"):
        assert "--log" in section(_help(command), "output")


def test_output_folders_are_out_dir_and_old_spellings_still_parse():
    from stabilize.cli import build_parser

    parser = build_parser()
    for command, args in (("report", ["x.csv"]), ("demo", []), ("batch", ["in"])):
        assert "--out-dir" in _help(command) and "--out " not in _help(command)
        new = parser.parse_args([command, *args, "--out-dir", "D"])
        old = parser.parse_args([command, *args, "--out", "D"])
        assert new.out_dir == old.out_dir == "D"
    new = parser.parse_args(["steady", "x.mp4", "--settings", "drone-inspection"])
    old = parser.parse_args(["steady", "x.mp4", "--config", "drone-inspection"])
    assert new.config == old.config == "drone-inspection"
    assert "--config" not in _help("steady")


def test_settings_files_are_not_called_presets():
    readme = (Path(__file__).resolve().parent.parent / "README.md").read_text()
    for text in (readme, *(_help(c) for c in ("steady", "measure", "render", "report"))):
        # "preset" is the encoder's speed, and only that.
        lines = [ln for ln in text.splitlines() if "preset" in ln.lower()]
        assert all("--preset" in ln for ln in lines), lines
    assert "encoder speed" in _help("steady")
    assert "settings file" in _help("steady")


def test_quiet_help_and_readme_agree():
    readme = (Path(__file__).resolve().parent.parent / "README.md").read_text()
    row = next(ln for ln in readme.splitlines() if ln.startswith("| `--quiet`"))
    help_text = " ".join(_help("steady").split())
    for words in ("no progress bars", "no info or note lines", "warnings and errors still "
                  "print"):
        assert words in row and words in help_text, words


def test_demo_has_no_force():
    from stabilize.cli import main

    assert "--force" not in _accepted("demo")
    assert main(["demo", "--force"]) == 2


def test_options_are_checked_before_existing_outputs(clip, tmp_path, capsys):
    from stabilize.cli import main

    log = tmp_path / "there.motion.csv"
    log.write_text("x")
    assert main(["measure", str(clip), "--log", str(log), "--scheduler", "nowhere"]) == 2
    assert "--scheduler" in capsys.readouterr().err
    assert main(["measure", str(clip), "--log", str(log), "--workers", "0"]) == 2
    assert "--workers" in capsys.readouterr().err
    assert main(["steady", str(clip), "--log", str(log), "--margin", "0.9"]) == 2
    err = capsys.readouterr().err
    assert "--margin" in err and "already exists" not in err


def test_a_second_render_into_one_folder_gets_its_own_log(clip, tmp_path):
    log = tmp_path / "pan.motion.csv"
    assert run("measure", str(clip), "--log", str(log), "--quiet").returncode == 0
    out = tmp_path / "renders"
    for video, smoother in (("a.mp4", "gaussian"), ("b.mp4", "kalman")):
        proc = run("render", str(clip), "--log", str(log), "-o", str(out / video),
                   "--smoother", smoother, "--preset", "ultrafast", "--quiet")
        assert proc.returncode == 0, proc.stderr
    docs = {v: json.loads((out / f"{v}.motion.json").read_text()) for v in ("a", "b")}
    assert docs["a"]["settings"]["smoother"] == "gaussian"
    assert docs["b"]["settings"]["smoother"] == "kalman"
    assert not (out / "pan.motion.csv").exists()


# ---------------------------------------------------------- streams and terminals
class _Stream:
    def __init__(self, tty: bool) -> None:
        self.tty = tty

    def isatty(self) -> bool:
        return self.tty

    def write(self, text: str) -> int:
        return len(text)

    def flush(self) -> None:
        pass


def test_progress_bars_only_on_a_terminal(monkeypatch):
    from stabilize import cli

    monkeypatch.setattr(sys, "stderr", _Stream(False))
    assert cli._progress(False) is None
    monkeypatch.setattr(sys, "stderr", _Stream(True))
    assert cli._progress(False) is not None
    assert cli._progress(True) is None


def test_notes_go_to_stderr_and_stdout_lists_the_files(clip, tmp_path, capsys):
    from stabilize.cli import main

    log = tmp_path / "n.motion.csv"
    assert run("measure", str(clip), "--log", str(log), "--quiet").returncode == 0
    capsys.readouterr()
    assert main(["report", str(log), "--out-dir", str(tmp_path / "rep")]) == 0
    out, err = capsys.readouterr()
    assert "note:" not in out
    assert "stabilize: note: " in err  # no --fov-deg given: a note says so
    # ... naming the option, not the library's setting.
    assert "option --fov-deg" in err and "fov_deg" not in err
    assert any(ln.startswith("report: ") for ln in out.splitlines())
    # The dominant frequency is written to the spectrum's resolution, as on the report page.
    from stabilize import read_log
    from stabilize.report_page import hz_text

    s = read_log(log).summary
    want = ("no clear peak" if s["dominant_hz_x"] is None else
            hz_text(s["dominant_hz_x"], s["spectrum_resolution_hz"]).replace("\u00a0", " "))
    row = next(ln for ln in out.splitlines() if ln.startswith("shake x"))
    assert row.endswith(want), (row, want)
    assert main(["report", str(log), "--out-dir", str(tmp_path / "rep2"), "--quiet"]) == 0
    assert "note:" not in capsys.readouterr().err


def test_demo_checks_its_options_before_making_its_folder(tmp_path):
    from stabilize.cli import main

    assert main(["demo", "--out-dir", str(tmp_path / "d"), "--margin", "0.9", "--quiet"]) == 2
    assert not (tmp_path / "d").exists()
