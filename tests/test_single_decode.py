"""``steady`` from one decoding pass gives the two-pass result bit for bit: the same motion log
(CSV, and JSON but for the run's own keys) and the same decoded frames, whether the single
pass is kept or given up for a second pass."""

from __future__ import annotations

import json
import logging
from pathlib import Path

import pytest

import stabilize
from stabilize.io import VideoWriter
from stabilize.jobs import rendering
from stabilize.synthetic import Mover, SceneSpec, SyntheticClip
from tests.golden.cases import _scrub, frame_digest

KEPT = "analysed and rendered from one decoding pass"
GIVEN_UP = "single decoding pass given up"


@pytest.fixture(scope="module")
def long_clip(tmp_path_factory) -> Path:
    """Eight seconds (longer than the render's look-ahead), a mover and a cut."""
    dest = tmp_path_factory.mktemp("single") / "truss.mp4"
    spec = SceneSpec(style="truss", width=320, height=180, fps=24.0, duration_s=8.0, seed=7,
                     movers=(Mover("vehicle", (60.0, 28.0), (80.0, 120.0), (40.0, 0.0)),),
                     cuts_s=(5.2,))
    clip = SyntheticClip(spec)
    with VideoWriter(dest, clip.width, clip.height, clip.fps, crf=14, preset="veryfast") as wr:
        for _, frame in clip.frames():
            wr.write(frame)
    return dest


def _steady(clip: Path, work: Path, single: bool, monkeypatch, **options) -> dict[str, str]:
    monkeypatch.setattr(rendering, "SINGLE_DECODE", single)
    work.mkdir()
    out, log_csv = work / "out.mp4", work / "out.motion.csv"
    stabilize.steady(clip, out, log_path=log_csv, seed=0, **options)
    summary = json.loads(log_csv.with_suffix(".json").read_text())
    return {"csv": log_csv.read_text(), "json": json.dumps(_scrub(summary), sort_keys=True),
            "frames": "\n".join(frame_digest(out))}


@pytest.mark.slow
@pytest.mark.parametrize("margin,route", [(0.1, KEPT), (0.004, GIVEN_UP)])
def test_one_pass_equals_two_passes(long_clip, tmp_path, monkeypatch, caplog, margin, route):
    options = dict(model="similarity", smoother="gaussian", margin=margin)
    with caplog.at_level(logging.DEBUG, logger="stabilize"):
        one = _steady(long_clip, tmp_path / "one", True, monkeypatch, **options)
    assert route in caplog.text
    two = _steady(long_clip, tmp_path / "two", False, monkeypatch, **options)
    assert len(one["frames"].splitlines()) == 192
    for part in ("csv", "json", "frames"):
        assert one[part] == two[part], part


def test_whole_path_smoothers_take_two_passes(long_clip, tmp_path, monkeypatch, caplog):
    with caplog.at_level(logging.DEBUG, logger="stabilize"):
        _steady(long_clip, tmp_path / "k", True, monkeypatch, smoother="kalman", margin=0.1)
    assert KEPT not in caplog.text and GIVEN_UP not in caplog.text


def test_twin_decoder_streams_equal_two_decoding_passes(long_clip):
    import hashlib
    import threading

    from stabilize.io import iter_frames, probe
    from stabilize.io.twin_decode import TwinDecoder

    info = probe(long_clip)
    size = (160, 90)
    want_a = [(f.time_s, f.image.tobytes()) for f in iter_frames(long_clip, size=size,
                                                                 gray=True, info=info)]
    want_r = [hashlib.sha1(bytes(f.image.data)).hexdigest()
              for f in iter_frames(long_clip, yuv="yuv420p", info=info)]
    got_r: list[str] = []
    with TwinDecoder(long_clip, info, size, yuv="yuv420p") as twin:
        reader = threading.Thread(target=lambda: got_r.extend(
            hashlib.sha1(bytes(f.image.data)).hexdigest() for f in twin.render()))
        reader.start()
        got_a = [(f.time_s, f.image.tobytes()) for f in twin.analysis()]
        reader.join()
    assert len(want_a) == 192
    assert got_a == want_a
    assert got_r == want_r


def test_render_decoding_threads_follow_the_cores():
    assert rendering.render_decode_threads(2) == 1
    assert rendering.render_decode_threads(6) == 1
    assert rendering.render_decode_threads(16) == 3
    assert rendering.render_decode_threads(128) == 4


def test_frames_held_fit_the_memory_budget(long_clip):
    import dataclasses

    from stabilize.config import Settings
    from stabilize.io import probe
    from stabilize.jobs.single_decode import frames_to_hold

    info = probe(long_clip)
    fixed = Settings(smoother="gaussian", margin=0.1)
    at = {size: frames_to_hold(dataclasses.replace(info, width=size[0], height=size[1],
                                                   fps=30.0), fixed)
          for size in ((320, 180), (1280, 720), (1920, 1080))}
    # 84 frames of look-ahead, 90 of the analysis's revision window, 20 in flight.
    assert at[(320, 180)] == at[(1280, 720)] == 194
    assert at[(1920, 1080)] is None  # 194 frames of 3 MiB are over the budget
    assert frames_to_hold(info, Settings(smoother="kalman", margin=0.1)) is None
    assert frames_to_hold(info, Settings(smoother="gaussian")) is None  # margin auto
