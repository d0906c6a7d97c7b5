"""The batch command: many clips, one row each, resumable, a failure never stops the rest."""

from __future__ import annotations

import csv
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from stabilize.jobs.batch import find_clips, output_names

from .conftest import noise_frames, write_clip


def run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "stabilize", *args], capture_output=True,
                          text=True, timeout=300)


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("batch") / "in"
    (root / "sub").mkdir(parents=True)
    write_clip(root / "a.mp4", noise_frames(16, 128, 96, shift_px=1.0), 24.0)
    write_clip(root / "sub" / "a.mp4", noise_frames(16, 128, 96, seed=1, shift_px=0.8), 24.0)
    write_clip(root / "sub" / "B.MOV", noise_frames(16, 128, 96, seed=2, shift_px=1.5), 24.0)
    (root / "broken.mkv").write_bytes(b"not a video" * 20)
    (root / "notes.txt").write_text("not a clip")
    return root


def _rows(out: Path) -> dict[str, dict[str, str]]:
    with open(out / "summary.csv", newline="") as fh:
        return {r["clip"]: r for r in csv.DictReader(fh)}


def test_finding_and_naming(folder, tmp_path):
    root, clips = find_clips(folder)
    assert [c.relative_to(folder).as_posix() for c in clips] == [
        "a.mp4", "broken.mkv", "sub/B.MOV", "sub/a.mp4"]
    names = output_names(root, clips)
    assert names[folder / "a.mp4"] == (Path("."), "a")
    assert names[folder / "sub" / "a.mp4"] == (Path("sub"), "a")
    _, globbed = find_clips(str(folder / "**" / "*.mp4"))
    assert len(globbed) == 2
    (tmp_path / "x.mp4").write_bytes(b"")
    (tmp_path / "x.mov").write_bytes(b"")
    both = output_names(tmp_path, find_clips(tmp_path)[1])
    assert sorted(n for _, n in both.values()) == ["x.mov", "x.mp4"]


def test_batch_failed_row_resume_force(folder, tmp_path):
    out = tmp_path / "out"
    t0 = time.monotonic()
    first = run("batch", str(folder), "--out-dir", str(out), "--workers", "2", "--quiet")
    t_first = time.monotonic() - t0
    assert first.returncode == 3, first.stderr
    rows = _rows(out)
    assert len(rows) == 4
    assert rows["broken.mkv"]["status"] == "failed"
    assert "broken.mkv" in rows["broken.mkv"]["error"]
    for label, stem in (("a.mp4", "a"), ("sub/a.mp4", "sub/a"), ("sub/B.MOV", "sub/B")):
        assert rows[label]["status"] == "done"
        assert rows[label]["frames"] == "16"
        assert float(rows[label]["jitter_rms_x_px"]) >= 0
        assert rows[label]["video"] == f"{stem}.steady.mp4"
        assert rows[label]["trust"] in ("sound", "rough", "unreliable")
        doc_summary = json.loads((out / f"{stem}.motion.json").read_text())["summary"]
        assert rows[label]["trust"] == doc_summary["trust"]
        assert rows[label]["trust_reasons"] == "; ".join(doc_summary["trust_reasons"])
        assert (out / f"{stem}.steady.mp4").is_file() and (out / f"{stem}.report.html").is_file()
        doc = json.loads((out / f"{stem}.motion.json").read_text())
        assert doc["source"]["size_bytes"] > 0 and doc["source"]["mtime_ns"] > 0
    page = (out / "summary.html").read_text()
    assert 'href="./sub/B.report.html"' in page and "<script" not in page
    assert ">verdict</th>" in page

    t0 = time.monotonic()
    again = run("batch", str(folder), "--out-dir", str(out), "--workers", "2", "--quiet")
    t_again = time.monotonic() - t0
    assert again.returncode == 3
    rows = _rows(out)
    assert [rows[k]["status"] for k in ("a.mp4", "sub/B.MOV", "sub/a.mp4")] == ["skipped"] * 3
    assert all(rows[k]["trust"] for k in ("a.mp4", "sub/B.MOV", "sub/a.mp4"))
    assert t_again < 0.5 * t_first, (t_first, t_again)

    # A changed source is redone; --force redoes everything.
    st = os.stat(folder / "a.mp4")
    os.utime(folder / "a.mp4", ns=(st.st_atime_ns, st.st_mtime_ns + 10**9))
    third = run("batch", str(folder / "*.mp4"), "--out-dir", str(tmp_path / "out1"),
                "--workers", "1", "--quiet", "--measure-only")
    assert third.returncode == 0, third.stderr
    assert _rows(tmp_path / "out1")["a.mp4"]["video"] == ""


@pytest.mark.slow
def test_dask_local_cluster_gives_the_same_outputs(folder, tmp_path):
    pytest.importorskip("distributed")
    a = run("batch", str(folder), "--out-dir", str(tmp_path / "p"), "--workers", "2",
            "--quiet", "--measure-only")
    b = run("batch", str(folder), "--out-dir", str(tmp_path / "d"), "--workers", "2",
            "--scheduler", "local", "--quiet", "--measure-only")
    assert a.returncode == b.returncode == 3, b.stderr
    for stem in ("a", "sub/a", "sub/B"):
        assert (tmp_path / "p" / f"{stem}.motion.csv").read_text() == \
            (tmp_path / "d" / f"{stem}.motion.csv").read_text()


def test_each_warning_of_a_clip_is_printed_once(tmp_path):
    """Run in the batch's own process (one worker), a clip's warnings reached the terminal
    both as they happened and again from the batch's report of them."""
    root = tmp_path / "in"
    root.mkdir()
    write_clip(root / "grey.mp4", [np.full((96, 128, 3), 120, np.uint8)] * 16, 24.0)
    done = run("batch", str(root), "--out-dir", str(tmp_path / "out"), "--workers", "1",
               "--quiet")
    assert done.returncode == 0, done.stderr
    lines = [ln for ln in done.stderr.splitlines() if "no trustworthy motion fit" in ln]
    assert len(lines) == 1, done.stderr


def test_no_videos_is_a_usage_error(tmp_path):
    proc = run("batch", str(tmp_path), "--out-dir", str(tmp_path / "o"))
    assert proc.returncode == 2
    assert "no video files" in proc.stderr and "Traceback" not in proc.stderr


def test_measure_only_after_a_steady_batch_removes_the_video_the_new_log_does_not_describe(
        tmp_path):
    from stabilize.config import Settings
    from stabilize.jobs.batch import run_batch

    src = tmp_path / "in"
    src.mkdir()
    write_clip(src / "c.mp4", noise_frames(12, 96, 64, shift_px=1.0), 24.0)
    out = tmp_path / "out"  # missing: the batch creates it
    steady = run_batch(src, out, settings=Settings(preset="ultrafast"), workers=1)
    assert steady.count("done") == 1
    video, log_json = out / "c.steady.mp4", out / "c.motion.json"
    assert video.is_file()
    # The same settings: the steady outputs hold a log that describes the video; skipped.
    same = run_batch(src, out, settings=Settings(preset="ultrafast"), workers=1,
                     measure_only=True)
    assert same.count("skipped") == 1 and video.is_file()
    # Measured again with other settings: the new log no longer describes the old video.
    again = run_batch(src, out, settings=Settings(preset="ultrafast", seed=5), workers=1,
                      measure_only=True)
    assert again.count("done") == 1, again.results[0].error
    assert not video.exists()
    assert json.loads(log_json.read_text())["batch"]["job"] == "measure"
    assert any("removed" in w and "c.steady.mp4" in w for w in again.results[0].warnings)
    with open(again.summary_csv, newline="") as fh:
        assert next(csv.DictReader(fh))["video"] == ""
