"""Streaming reader and writer over the bundled ffmpeg."""

import ast
import os
import subprocess
from contextlib import closing
from pathlib import Path

import numpy as np
import pytest

from stabilize.errors import StabilizeError
from stabilize.io import (
    PlanarImage,
    VideoWriter,
    iter_frame_range,
    iter_frames,
    probe,
    stop_children,
)
from stabilize.io.colour import ColourTags, parse_colour
from stabilize.io.decode import DecodeStats, analysis_size, looks_truncated
from stabilize.io.encode import LARGE_FRAME_LOOKAHEAD, _encoder_env, output_colour, x264_options
from stabilize.io.messages import StderrReader
from stabilize.io.probing import constant_rate
from stabilize.io.process import PIPE_MAX_BYTES, ffmpeg_exe, usable_cores, widen_pipe

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


def _ff(*args: str) -> None:
    subprocess.run([ffmpeg_exe(), "-hide_banner", "-nostdin", "-loglevel", "error", "-y", *args],
                   check=True, capture_output=True)


def test_rotation_flag_gives_upright_frames(tmp_path):
    # A frame whose orientation is plain: a bright block at the top left.
    frame = np.zeros((48, 64, 3), np.uint8)
    frame[:16, :24] = 255
    stored = write_clip(tmp_path / "stored.mp4", [frame] * 3, 25.0, codec="ffv1")
    flagged = tmp_path / "flagged.mp4"
    _ff("-display_rotation", "90", "-i", str(stored), "-c", "copy", str(flagged))
    info = probe(flagged)
    assert (info.width, info.height, info.rotation_deg) == (48, 64, 90.0)
    got = next(iter(iter_frames(flagged))).image
    # The flag means "turn counter-clockwise by 90 degrees before showing": so does np.rot90.
    assert got.shape == (64, 48, 3)
    assert np.abs(got.astype(int) - np.rot90(frame, 1)).max() <= 2


def test_writer_keeps_variable_frame_times(tmp_path):
    rng = np.random.default_rng(3)
    times = np.concatenate([[0.0], np.cumsum(rng.integers(300, 1500, 19))]) / 15360
    out = tmp_path / "vfr.mp4"
    with VideoWriter(out, 32, 24, 20.0, preset="ultrafast", times_s=times,
                     time_base=15360) as w:
        for i in range(22):  # two frames more than times: they continue at the last interval
            w.write(np.full((24, 32, 3), 10 * i, np.uint8))
    got = np.array([f.time_s for f in iter_frames(out)])
    np.testing.assert_array_equal(got[:20], times)
    np.testing.assert_allclose(np.diff(got[19:]), times[-1] - times[-2], atol=1e-9)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["vfr.mp4"]
    assert constant_rate(np.arange(10) / 30.0, 30.0) and not constant_rate(times, 20.0)


def test_truncation_is_told_apart_from_a_whole_clip(tmp_path):
    clip = write_clip(tmp_path / "whole.mp4", noise_frames(40, 96, 72), 20.0, audio=True)
    cut = tmp_path / "cut.mp4"
    cut.write_bytes(clip.read_bytes()[: clip.stat().st_size // 2])
    for path, expected in ((clip, False), (cut, True)):
        info, stats = probe(path), DecodeStats()
        n = sum(1 for _ in iter_frames(path, info=info, stats=stats))
        assert stats.finished and stats.frames == n
        assert looks_truncated(info, stats) is expected
        assert (n < 40) is expected
    # A caller that stops early has not seen the end: that is no evidence of truncation.
    info, stats = probe(clip), DecodeStats()
    with closing(iter_frames(clip, info=info, stats=stats)) as frames:
        next(frames)
    assert not stats.finished and not looks_truncated(info, stats)


def test_awkward_names_reach_ffmpeg_as_files(tmp_path):
    for name in ("-i.mp4", "12:30 take.mp4", "a'b\"c d.mp4", "Øre_橋.mp4"):
        clip = write_clip(tmp_path / name, noise_frames(3, 32, 24), 25.0)
        assert probe(clip).width == 32
        assert len(list(iter_frames(clip))) == 3


def test_still_images_and_cut_indexes_are_named(tmp_path):
    for name in ("s.png", "s.jpg"):
        _ff("-f", "lavfi", "-i", "testsrc2=size=32x24", "-frames:v", "1", str(tmp_path / name))
        with pytest.raises(StabilizeError, match="still image"):
            probe(tmp_path / name)
    whole = tmp_path / "whole.mp4"
    _ff("-f", "lavfi", "-i", "testsrc2=size=64x48:rate=10", "-frames:v", "20", "-c:v",
        "libx264", str(whole))  # no faststart: the index is written last
    data = whole.read_bytes()
    for keep in (len(data) // 2, len(data) - 200):  # index missing, or cut inside it
        (tmp_path / "cut.mp4").write_bytes(data[:keep])
        with pytest.raises(StabilizeError, match="incomplete"):
            probe(tmp_path / "cut.mp4")


def test_stop_children_ends_a_running_decoder(small_clip):
    frames = iter_frames(small_clip)
    next(frames)
    assert stop_children() == 1
    assert stop_children() == 0
    frames.close()


def test_closing_a_range_early_stops_its_decoders(tmp_path):
    # The seek decodes through the same loop as a whole pass: closing the generator part-way
    # must leave no ffmpeg running (the listing, the look at frame 0 and the seek).
    clip = write_clip(tmp_path / "range.mp4", noise_frames(40, 64, 48), 25.0)
    frames = iter_frame_range(clip, 20, 30, size=(32, 24), gray=True)
    first = next(frames)
    assert (first.index, first.image.shape) == (20, (24, 32))
    frames.close()
    assert stop_children() == 0


def test_an_unknown_codec_is_named_as_a_setting(tmp_path):
    with pytest.raises(StabilizeError, match="codec 'vp9' is not one of h264") as err:
        VideoWriter(tmp_path / "x.mp4", 64, 48, 25.0, codec="vp9")
    assert "--" not in str(err.value)
    assert list(tmp_path.iterdir()) == []


def test_only_the_io_package_starts_processes():
    package = Path(__file__).resolve().parents[1] / "stabilize"
    offenders = []
    for path in package.rglob("*.py"):
        if "io" in path.relative_to(package).parts[:1]:
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = ([a.name for a in node.names] if isinstance(node, ast.Import)
                     else [node.module or ""] if isinstance(node, ast.ImportFrom) else [])
            offenders += [f"{path.name}: {n}" for n in names
                          if n.split(".")[0] in ("subprocess", "imageio_ffmpeg")]
    assert offenders == []


def test_encoder_env_adds_the_malloc_threshold_and_keeps_other_tunables(monkeypatch):
    monkeypatch.delenv("GLIBC_TUNABLES", raising=False)
    assert _encoder_env()["GLIBC_TUNABLES"] == "glibc.malloc.mmap_threshold=1048576"
    monkeypatch.setenv("GLIBC_TUNABLES", "glibc.malloc.arena_max=2")
    assert _encoder_env()["GLIBC_TUNABLES"] == (
        "glibc.malloc.arena_max=2:glibc.malloc.mmap_threshold=1048576")


def test_colour_tags_are_read_from_the_stream_line():
    # Details as ffmpeg prints them after the pixel format (seen with the bundled ffmpeg).
    assert parse_colour("tv, bt709, progressive") == ColourTags("tv", "bt709", "bt709", "bt709")
    assert parse_colour("tv, bt2020nc/bt2020/arib-std-b67, progressive") == ColourTags(
        "tv", "bt2020nc", "bt2020", "arib-std-b67")
    assert parse_colour("tv, bt470bg/unknown/unknown, progressive") == ColourTags(
        "tv", "bt470bg", None, None)
    assert parse_colour("pc, progressive") == ColourTags("pc")
    assert parse_colour("progressive") == ColourTags()
    assert parse_colour("10 bpc, tv, bt709, top first") == ColourTags(
        "tv", "bt709", "bt709", "bt709")
    # A name the encoder side does not know is not stamped on an output.
    assert ColourTags("tv", "bt709", "made-up", None).setparams_filter() == \
        "setparams=range=tv:colorspace=bt709"
    assert ColourTags().setparams_filter() is None


def _tagged_source(path, vf: str, pix_fmt: str) -> object:
    _ff("-f", "lavfi", "-i", "testsrc2=s=64x48:d=0.2:r=25", "-vf", vf, "-c:v", "libx264",
        "-pix_fmt", pix_fmt, str(path))
    return probe(path)


def test_probe_reads_colour_and_the_output_keeps_what_the_render_preserves(tmp_path):
    hlg = _tagged_source(tmp_path / "hlg.mp4", "setparams=range=tv:colorspace=bt2020nc:"
                         "color_primaries=bt2020:color_trc=arib-std-b67", "yuv420p10le")
    assert hlg.pix_fmt == "yuv420p10le"
    assert hlg.colour == ColourTags("tv", "bt2020nc", "bt2020", "arib-std-b67")
    # Rendered in 8-bit limited-range YUV: the matrix, primaries and transfer carry over.
    assert output_colour(hlg) == hlg.colour
    full = _tagged_source(tmp_path / "full.mp4", "setparams=range=pc", "yuvj420p")
    assert full.colour.range == "pc" and output_colour(full) == ColourTags("tv")
    plain = _tagged_source(tmp_path / "plain.mp4", "null", "yuv420p")
    assert plain.colour == ColourTags() and output_colour(plain) == ColourTags("tv")
    # An RGB-coded source is turned into YUV with ffmpeg's default matrix: not tagged.
    rgb = probe(_ff_rgb(tmp_path / "rgb.mp4"))
    assert rgb.pix_fmt == "gbrp" and output_colour(rgb).space is None


def _ff_rgb(path):
    _ff("-f", "lavfi", "-i", "testsrc2=s=64x48:d=0.2:r=25", "-c:v", "libx264rgb", str(path))
    return path


@pytest.mark.parametrize("times", [None, np.arange(5) / 25.0 + np.array([0, 0, 0.01, 0, 0])])
def test_writer_tags_colour_and_pixel_shape_without_touching_the_pixels(tmp_path, times):
    rng = np.random.default_rng(0)
    frames = [PlanarImage.wrap(bytearray(rng.integers(16, 236, 64 * 48 * 3 // 2, np.uint8)
                                         .tobytes()), "yuv420p", 64, 48) for _ in range(5)]
    tags = ColourTags("tv", "bt709", "bt2020", "arib-std-b67")
    decoded = {}
    for name, colour, sar in (("tagged", tags, (32, 27)), ("square", None, (1, 1)),
                              ("untagged", None, None)):
        out = tmp_path / f"{name}.mp4"
        with VideoWriter(out, 64, 48, 25.0, codec="ffv1", input_pix_fmt="yuv420p",
                         colour=colour, sar=sar, times_s=times, time_base=12800) as w:
            for f in frames:
                w.write(f)
        decoded[name] = [f.image.data.tobytes() for f in iter_frames(out, yuv="yuv420p")]
        assert probe(out).colour == (tags if colour else ColourTags())
        assert probe(out).sar == sar
    assert decoded["tagged"] == decoded["square"] == decoded["untagged"]
    # ffv1 is stored as 4:4:4 here, so only the luma comes back bit for bit.
    luma = 64 * 48
    assert [d[:luma] for d in decoded["tagged"]] == [bytes(f.data)[:luma] for f in frames]


def test_probe_reads_the_pixel_aspect_ratio_upright(tmp_path):
    stored = tmp_path / "anamorphic.mp4"
    _ff("-f", "lavfi", "-i", "testsrc2=s=72x48:d=0.2:r=25", "-vf", "setsar=32/27",
        "-c:v", "libx264", str(stored))
    assert probe(stored).sar == (32, 27)
    flagged = tmp_path / "flagged.mp4"
    _ff("-display_rotation", "90", "-i", str(stored), "-c", "copy", str(flagged))
    info = probe(flagged)
    # Read upright, a pixel is as tall as it was wide.
    assert (info.width, info.height, info.sar) == (48, 72, (27, 32))
    assert probe(_ff_rgb(tmp_path / "square.mp4")).sar == (1, 1)
    # No tag at all (players assume square pixels) reads as None, not as a 1:1 tag.
    bare = tmp_path / "bare.mp4"
    _ff("-f", "lavfi", "-i", "testsrc2=s=72x48:d=0.2:r=25", "-vf", "setsar=0",
        "-c:v", "libx264", str(bare))
    assert probe(bare).sar is None


def test_large_frames_get_a_shorter_encoder_look_ahead(tmp_path):
    """At 4K the encoder holds fewer frames ahead (its memory), below that x264's preset
    decides alone; the option reaches the encoder's command line."""
    assert x264_options(1920, 1080, 2) == ["-threads", "2"]
    assert "-x264-params" not in x264_options(2560, 1440, 2)
    big = x264_options(3840, 2160, 2)
    assert big == ["-threads", "2", "-x264-params", f"rc-lookahead={LARGE_FRAME_LOOKAHEAD}"]
    cmd = VideoWriter(tmp_path / "big.mp4", 3840, 2160, 30.0)._command(tmp_path / "t.mp4")
    assert cmd[cmd.index("-x264-params") + 1] == f"rc-lookahead={LARGE_FRAME_LOOKAHEAD}"
    small = VideoWriter(tmp_path / "s.mp4", 1280, 720, 30.0)._command(tmp_path / "t.mp4")
    assert "-x264-params" not in small


def test_the_encoder_starts_one_thread_per_usable_core(tmp_path):
    """x264 encodes on as many threads as this process has cores (not one and a half per
    core), never fewer than one; the option reaches the encoder's command line."""
    assert x264_options(640, 360, 16)[:2] == ["-threads", "16"]
    assert x264_options(640, 360, 0)[:2] == ["-threads", "1"]
    cmd = VideoWriter(tmp_path / "s.mp4", 1280, 720, 30.0)._command(tmp_path / "t.mp4")
    assert cmd[cmd.index("-threads") + 1] == str(usable_cores())
    assert cmd.index("-threads") > cmd.index("-c:v")


def test_a_widened_pipe_holds_a_frame_and_a_file_is_left_alone(tmp_path):
    fcntl = pytest.importorskip("fcntl")
    if not hasattr(fcntl, "F_GETPIPE_SZ"):
        pytest.skip("pipe sizes cannot be set here")
    r, w = os.pipe()
    with os.fdopen(r, "rb", buffering=0) as rd, os.fdopen(w, "wb", buffering=0) as wr:
        frame = 960 * 540
        widen_pipe(rd, frame)
        assert fcntl.fcntl(rd.fileno(), fcntl.F_GETPIPE_SZ) >= frame
        widen_pipe(wr, 8 * PIPE_MAX_BYTES)  # capped, never an error
        assert fcntl.fcntl(wr.fileno(), fcntl.F_GETPIPE_SZ) <= PIPE_MAX_BYTES
    with open(tmp_path / "f", "wb") as f:
        widen_pipe(f, frame)  # not a pipe: nothing happens


def test_the_message_reader_takes_every_line_of_an_unbuffered_pipe():
    r, w = os.pipe()
    rd = os.fdopen(r, "rb", buffering=0)
    reader = StderrReader(rd)
    reader.start()
    with os.fdopen(w, "wb", buffering=0) as wr:
        for i in range(50):
            wr.write(f"line {i}: Error while decoding stream\n".encode())
    reader.join(5.0)
    assert not reader.is_alive() and reader.finished
    assert reader.errors == 50
    assert not rd.closed  # the pipe is its owner's to close
    rd.close()

