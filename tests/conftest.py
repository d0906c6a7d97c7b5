"""Shared fixtures: small clips the tests draw themselves (no downloads)."""

from __future__ import annotations

import subprocess
from pathlib import Path

import numpy as np
import pytest

from stabilize.io import VideoWriter
from stabilize.io.process import ffmpeg_exe


def tone(path: Path, seconds: float) -> Path:
    """A mono 440 Hz AAC tone to carry as a clip's audio track."""
    subprocess.run(
        [ffmpeg_exe(), "-hide_banner", "-loglevel", "error", "-y", "-f", "lavfi", "-i",
         f"sine=frequency=440:duration={seconds}", "-c:a", "aac", "-b:a", "64k", str(path)],
        check=True,
    )
    return path


def write_clip(path: Path, frames, fps: float, *, audio: bool = False, crf: int = 12,
               codec: str = "h264") -> Path:
    """Encode an iterable of RGB frames (optionally with a tone as audio) to ``path``."""
    frames = list(frames)
    h, w = frames[0].shape[:2]
    audio_from = None
    if audio:
        audio_from = tone(path.with_suffix(".tone.m4a"), len(frames) / fps)
    with VideoWriter(path, w, h, fps, crf=crf, preset="veryfast", codec=codec,
                     audio_from=audio_from, audio_codec="aac" if audio else None) as wr:
        for f in frames:
            wr.write(f)
    return path


def noise_frames(n: int, w: int = 160, h: int = 120, seed: int = 0, shift_px: float = 1.0):
    """Blurred random texture panning right by ``shift_px`` per frame (scene moves left)."""
    import cv2

    rng = np.random.default_rng(seed)
    world = rng.integers(0, 256, (h + 40, w + 40 + int(n * shift_px) + 8, 3), dtype=np.uint8)
    world = cv2.GaussianBlur(world, (0, 0), 1.5)
    for t in range(n):
        m = np.array([[1.0, 0, -20 - t * shift_px], [0, 1.0, -20]])
        yield cv2.warpAffine(world, m, (w, h), flags=cv2.INTER_LINEAR)


@pytest.fixture
def small_clip(tmp_path: Path) -> Path:
    return write_clip(tmp_path / "small clip.mp4", noise_frames(30), 30.0, audio=True)


@pytest.fixture(autouse=True)
def _stabilize_logger_propagates():
    """The command line, run in-process by some tests, gives the package logger a handler of
    its own and stops propagation; undo that so caplog sees the warnings of later tests."""
    import logging

    yield
    logger = logging.getLogger("stabilize")
    logger.handlers.clear()
    logger.propagate = True
    logger.setLevel(logging.NOTSET)
