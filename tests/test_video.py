"""Streaming reader and writer over the bundled ffmpeg."""

import numpy as np
import pytest

from stabilize.errors import StabilizeError
from stabilize.video import VideoWriter, analysis_size, iter_frames, probe

from .conftest import noise_frames, write_clip


def test_probe_and_frames_with_timestamps(small_clip):
    info = probe(small_clip)
    assert (info.width, info.height, info.fps) == (160, 120, 30.0)
    assert info.has_audio and info.audio_codec == "aac"
    frames = list(iter_frames(small_clip))
    assert len(frames) == 30
    assert frames[0].image.shape == (120, 160, 3) and frames[0].image.dtype == np.uint8
    times = np.array([f.time_s for f in frames])
    np.testing.assert_allclose(np.diff(times), 1 / 30, atol=1e-4)


def test_reduced_grey_copy(small_clip):
    info = probe(small_clip)
    size = analysis_size(info, 80)
    assert size == (80, 60)
    f = next(iter(iter_frames(small_clip, size=size, gray=True)))
    assert f.image.shape == (60, 80)
    assert analysis_size(info, 0) == (160, 120)
    assert analysis_size(info, 4000) == (160, 120)


def test_writer_leaves_nothing_when_the_block_fails(tmp_path):
    out = tmp_path / "out.mp4"
    with pytest.raises(RuntimeError):
        with VideoWriter(out, 64, 48, 25.0) as w:
            w.write(np.zeros((48, 64, 3), np.uint8))
            raise RuntimeError("stop")
    assert list(tmp_path.iterdir()) == []


def test_odd_sizes_keep_their_size(tmp_path):
    frames = (np.full((41, 33, 3), 10 * i, np.uint8) for i in range(5))
    clip = write_clip(tmp_path / "odd.mp4", frames, 24.0)
    info = probe(clip)
    assert (info.width, info.height) == (33, 41)
    assert len(list(iter_frames(clip))) == 5


def test_not_a_video(tmp_path):
    junk = tmp_path / "junk.mp4"
    junk.write_bytes(np.random.default_rng(0).integers(0, 256, 4096, dtype=np.uint8).tobytes())
    with pytest.raises(StabilizeError, match="junk.mp4"):
        probe(junk)
    with pytest.raises(StabilizeError, match="no such file"):
        probe(tmp_path / "missing.mp4")
    empty = tmp_path / "empty.mp4"
    empty.write_bytes(b"")
    with pytest.raises(StabilizeError, match="empty"):
        probe(empty)


def test_ffv1_and_h265(tmp_path):
    for codec in ("ffv1", "h265"):
        clip = write_clip(tmp_path / f"{codec}.mp4", noise_frames(4, 64, 48), 25.0, codec=codec)
        assert len(list(iter_frames(clip))) == 4
