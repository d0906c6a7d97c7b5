"""The render pass in planar YUV: per-plane warps, the chroma matrix, fills, side by side,
and the formats and sizes the encoder is fed."""

from __future__ import annotations

import subprocess
from contextlib import closing
from pathlib import Path

import cv2
import numpy as np
import pytest

import stabilize
from stabilize.io import PlanarImage, VideoWriter, iter_frame_range, iter_frames, probe
from stabilize.io.encode import output_pix_fmt
from stabilize.io.frames import YUV_BLACK
from stabilize.io.process import ffmpeg_exe
from stabilize.render import (
    BORDERS,
    COMPARE_MAX_SIDE,
    compare_layout,
    compare_size,
    plane_matrix,
    side_by_side,
    warp,
    warp_planes,
)
from stabilize.render import render as render_frames

from .conftest import noise_frames, write_clip

W, H = 96, 64


def _smooth_rgb(w: int = W, h: int = H, seed: int = 0) -> np.ndarray:
    """Smooth colour texture: detail well below the chroma sampling rate."""
    rng = np.random.default_rng(seed)
    img = rng.integers(0, 256, (h, w, 3), dtype=np.uint8)
    return cv2.GaussianBlur(img, (0, 0), 3.0)


def _i420(rgb: np.ndarray) -> PlanarImage:
    """OpenCV's RGB -> I420 (Y, U, V planes, chroma averaged over 2×2, so centre-sited)."""
    h, w = rgb.shape[:2]
    return PlanarImage.wrap(cv2.cvtColor(rgb, cv2.COLOR_RGB2YUV_I420).ravel(), "yuv420p", w, h)


def _correction(deg: float = 3.0, scale: float = 1.04, tx: float = 2.3,
                ty: float = -1.7) -> np.ndarray:
    c = np.vstack([cv2.getRotationMatrix2D(((W - 1) / 2, (H - 1) / 2), deg, scale), [0, 0, 1]])
    c[:2, 2] += (tx, ty)
    return c


def _inside(c: np.ndarray, w: int, h: int, border_px: float) -> np.ndarray:
    """Output pixels whose source point lies at least ``border_px`` inside the w × h frame."""
    ys, xs = np.mgrid[0:h, 0:w].astype(np.float64)
    pts = np.linalg.inv(c) @ np.stack([xs.ravel(), ys.ravel(), np.ones(xs.size)])
    sx, sy = pts[0] / pts[2], pts[1] / pts[2]
    ok = ((sx >= border_px) & (sx <= w - 1 - border_px) & (sy >= border_px)
          & (sy <= h - 1 - border_px))
    return ok.reshape(h, w)


def test_planar_warp_agrees_with_warping_rgb_then_converting():
    rgb = _smooth_rgb()
    c = _correction()
    ours = warp_planes(_i420(rgb), c, "black")
    ref = _i420(warp(rgb, c, "black"))
    inside = _inside(c, W, H, 3.0)
    inside_c = inside.reshape(H // 2, 2, W // 2, 2).all(axis=(1, 3))
    for k, mask in enumerate((inside, inside_c, inside_c)):
        diff = np.abs(ours.planes[k].astype(int) - ref.planes[k].astype(int))[mask]
        assert diff.max() <= 2, (k, diff.max())
        assert diff.mean() < 0.6


@pytest.mark.parametrize("fill", ["black", "reflect", "replicate"])
def test_affine_corrections_take_the_affine_warp_and_match_the_perspective_one(fill):
    """An affine correction goes through OpenCV's affine warp (the cheaper one): its planes
    are those of the perspective warp to within one grey level of fixed-point rounding, at
    a few pixels in a hundred; a correction with a perspective row still takes the
    perspective warp."""
    src = _i420(_smooth_rgb())
    c = _correction()
    assert np.all(c[2] == (0, 0, 1))
    got = warp_planes(src, c, fill)
    for k, plane in enumerate(got.planes):
        m = c if k == 0 else plane_matrix(c, 2, 2)
        ref = cv2.warpPerspective(src.planes[k], m, plane.shape[::-1], flags=cv2.INTER_LINEAR,
                                  borderMode=BORDERS[fill], borderValue=YUV_BLACK[k])
        diff = np.abs(plane.astype(int) - ref)
        assert diff.max() <= 1 and (diff > 0).mean() < 0.05, (k, diff.max())
    tilted = c.copy()
    tilted[2, :2] = (2e-5, -1e-5)
    got = warp_planes(src, tilted, fill)
    ref = cv2.warpPerspective(src.planes[0], tilted, got.planes[0].shape[::-1],
                              flags=cv2.INTER_LINEAR, borderMode=BORDERS[fill],
                              borderValue=YUV_BLACK[0])
    np.testing.assert_array_equal(got.planes[0], ref)


def test_warp_writes_into_the_buffer_it_is_given():
    src = _i420(_smooth_rgb())
    out = PlanarImage.empty("yuv420p", W, H)
    got = warp_planes(src, _correction(), "reflect", out=out)
    assert got is out
    for plane in out.planes:
        assert np.shares_memory(plane, out.data)
    assert out.data.flags.c_contiguous and out.data.size == W * H * 3 // 2


def test_chroma_matrix_of_a_translation_is_the_translation_halved():
    c = np.array([[1.0, 0, 6.0], [0, 1.0, -4.0], [0, 0, 1.0]])
    np.testing.assert_allclose(plane_matrix(c, 2, 2), [[1, 0, 3.0], [0, 1, -2.0], [0, 0, 1]],
                               atol=1e-12)
    np.testing.assert_array_equal(plane_matrix(c, 1, 1), c)
    # The luma pixel centres of a 2×2 block average to the chroma sample's centre.
    d = plane_matrix(np.eye(3), 2, 2)
    np.testing.assert_allclose(d, np.eye(3))


def _left_sited(c: np.ndarray) -> np.ndarray:
    """D'·C·D'⁻¹ for chroma co-sited with the left luma column: x_c = x / 2,
    y_c = (y + 0.5) / 2 − 0.5."""
    d = np.array([[0.5, 0, 0], [0, 0.5, -0.25], [0, 0, 1]])
    return d @ c @ np.linalg.inv(d)


def _map(m: np.ndarray, pts: np.ndarray) -> np.ndarray:
    p = m @ np.vstack([pts.T, np.ones(len(pts))])
    return (p[:2] / p[2]).T


@pytest.mark.parametrize("deg,scale", [(0.0, 1.0), (1.0, 1.0), (0.0, 1.03), (2.0, 0.97)])
def test_centre_siting_assumption_costs_a_fraction_of_a_chroma_pixel(deg, scale):
    """The docstring's claim: for other sitings the chroma warp is off by (I − A)·τ with
    τ a quarter chroma pixel: zero for translation, ~τ·θ or τ·|1 − s| otherwise."""
    c = _correction(deg, scale, tx=7.3, ty=-3.1)
    ys, xs = np.mgrid[0:H // 2, 0:W // 2]
    pts = np.stack([xs.ravel(), ys.ravel()], axis=1).astype(np.float64)
    err = np.linalg.norm(_map(plane_matrix(c, 2, 2), pts) - _map(_left_sited(c), pts), axis=1)
    bound = 0.25 * (2 * np.sin(np.radians(deg) / 2) * scale + abs(1 - scale)) + 1e-9
    assert err.max() <= bound
    if deg == 0.0 and scale == 1.0:
        assert err.max() < 1e-12
    else:
        assert err.max() < 0.02


def test_black_fill_is_limited_range_black_and_other_fills_extend_each_plane():
    src = _i420(_smooth_rgb())
    far = np.array([[1.0, 0, 500.0], [0, 1.0, 0], [0, 0, 1.0]])
    black = warp_planes(src, far, "black")
    for plane, value in zip(black.planes, YUV_BLACK, strict=True):
        assert (plane == value).all()
    assert YUV_BLACK == (16, 128, 128)
    shift = np.array([[1.0, 0, 10.0], [0, 1.0, 0], [0, 0, 1.0]])
    for fill in ("reflect", "replicate"):
        out = warp_planes(src, shift, fill)
        for k, plane in enumerate(out.planes):
            s = 1 if k == 0 else 2
            np.testing.assert_array_equal(plane[:, 10 // s:], src.planes[k][:, :-(10 // s)])
            ref = cv2.copyMakeBorder(src.planes[k], 0, 0, 10 // s, 0,
                                     {"reflect": cv2.BORDER_REFLECT_101,
                                      "replicate": cv2.BORDER_REPLICATE}[fill])
            np.testing.assert_array_equal(plane, ref[:, :plane.shape[1]])


def _ffmpeg(*args: str) -> None:
    subprocess.run([ffmpeg_exe(), "-hide_banner", "-loglevel", "error", "-y", *args],
                   check=True)


@pytest.mark.parametrize("full_range", [False, True])
def test_planar_frames_are_decoded_to_limited_range(tmp_path, full_range):
    """Black is Y = 16 whether the source is limited range (the usual H.264) or full range
    (a phone's yuvj420p), where ffmpeg alone would hand Y = 0 through."""
    clip = tmp_path / "black.mp4"
    rng = ["-vf", "scale=out_range=full,format=yuvj420p"] if full_range else [
        "-pix_fmt", "yuv420p"]
    _ffmpeg("-f", "lavfi", "-i", "color=black:s=64x48:d=0.2", *rng, "-c:v", "libx264",
            "-crf", "0", str(clip))
    frame = next(iter(iter_frames(clip, yuv="yuv420p"))).image
    assert abs(float(frame.y.mean()) - 16) < 0.5
    assert abs(float(frame.u.mean()) - 128) < 0.5 and abs(float(frame.v.mean()) - 128) < 0.5


@pytest.mark.parametrize("pix_fmt,codec,size", [("yuv420p", "h264", (64, 48)),
                                                ("yuv444p", "ffv1", (33, 41))])
def test_planar_frames_round_trip_through_writer_and_reader(tmp_path, pix_fmt, codec, size):
    """Lossless encoding (x264 at CRF 0, FFV1) gives back the planes the writer was fed."""
    w, h = size
    assert output_pix_fmt(codec, w, h) == pix_fmt
    rng = np.random.default_rng(1)
    frames = []
    for _ in range(3):
        f = PlanarImage.empty(pix_fmt, w, h)
        f.data[:] = rng.integers(16, 236, f.data.size)
        frames.append(f)
    out = tmp_path / "planes.mp4"
    with VideoWriter(out, w, h, 25.0, codec=codec, crf=0, preset="ultrafast",
                     input_pix_fmt=pix_fmt) as wr:
        for f in frames:
            wr.write(f)
    back = [f.image for f in iter_frames(out, yuv=pix_fmt)]
    assert len(back) == 3
    for a, b in zip(frames, back, strict=True):
        np.testing.assert_array_equal(a.data, b.data)
    ranged = list(iter_frame_range(out, 1, 3, yuv=pix_fmt))
    assert [f.index for f in ranged] == [1, 2]
    np.testing.assert_array_equal(ranged[0].image.data, frames[1].data)


def test_writer_refuses_frames_of_the_wrong_format(tmp_path):
    with pytest.raises(ValueError, match="yuv420p PlanarImage"):
        with VideoWriter(tmp_path / "x.mp4", 64, 48, 25.0, input_pix_fmt="yuv420p") as wr:
            wr.write(np.zeros((48, 64, 3), np.uint8))
    with pytest.raises(ValueError, match="input_pix_fmt"):
        VideoWriter(tmp_path / "x.mp4", 64, 48, 25.0, input_pix_fmt="nv12")
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("size", [(96, 64), (33, 41)])
def test_side_by_side_planar_matches_rgb_layout(size):
    w, h = size
    rgb_a, rgb_b = _smooth_rgb(w, h, 1), _smooth_rgb(w, h, 2)
    rgb = side_by_side(rgb_a, rgb_b)
    fmt = output_pix_fmt("h264", w, h)

    def planar(img):
        if fmt == "yuv420p":
            return _i420(img)
        planes = np.moveaxis(cv2.cvtColor(img, cv2.COLOR_RGB2YUV), 2, 0)
        return PlanarImage.wrap(planes.ravel(), fmt, img.shape[1], img.shape[0])

    yuv = side_by_side(planar(rgb_a), planar(rgb_b))
    assert (yuv.width, yuv.height) == (rgb.shape[1], rgb.shape[0]) == compare_size(w, h)
    ref = planar(rgb)
    diff = np.abs(yuv.y.astype(int) - ref.y.astype(int))
    assert np.mean(diff <= 3) > 0.97
    again = side_by_side(planar(rgb_a), planar(rgb_b), out=yuv)
    assert again is yuv


@pytest.mark.parametrize("size,stacked", [((1280, 720), True), ((640, 480), False),
                                          ((720, 1280), False), ((1912, 800), True),
                                          ((98, 66), False), ((3, 2), False),
                                          ((3840, 2160), True), ((4096, 1716), True),
                                          ((1278, 720), False)])
def test_compare_layout_fills_its_canvas_and_a_screen(size, stacked):
    """The halves tile the canvas exactly (no bars), at even sizes and the source's aspect;
    sources of 16:9 and wider are stacked; on a 16:9 screen the two halves cover half of it,
    the most two pictures of that shape can, each with twice the pixels of the old
    letterboxed half-size layout."""
    w, h = size
    lay = compare_layout(w, h)
    (cw, ch), (hw, hh) = lay.size, lay.half
    assert lay.stacked is stacked
    assert cw % 2 == ch % 2 == hw % 2 == hh % 2 == 0
    assert (cw, ch) == ((hw, 2 * hh) if stacked else (2 * hw, hh)) == compare_size(w, h)
    assert {lay.origin(0), lay.origin(1)} == ({(0, 0), (0, hh)} if stacked
                                              else {(0, 0), (hw, 0)})
    assert max(cw, ch) <= COMPARE_MAX_SIDE
    if min(w, h) >= 64:
        assert abs(hw * h / w - hh) <= 2.0    # the source's aspect, to the even rounding
        screen = 16 / 9
        fit = min(cw / ch / screen, screen / (cw / ch))   # share of the screen the video fills
        assert fit >= 0.49
        assert cw * ch <= 1.02 * w * h    # no dearer to encode than the steadied video


@pytest.mark.parametrize("w,h", [(320, 180), (240, 180)])
def test_side_by_side_labels_each_half_and_leaves_the_rest_alone(w, h):
    """Planar and RGB, stacked and side by side: each half carries its own label (white text
    on a black box) in its top-left corner; away from the labels the canvas is the frames,
    resized."""
    grey_a = np.full((h, w, 3), 100, np.uint8)
    grey_b = np.full((h, w, 3), 150, np.uint8)
    lay = compare_layout(w, h)
    hw, hh = lay.half
    rgb = side_by_side(grey_a, grey_b)
    yuv = side_by_side(_i420(grey_a), _i420(grey_b))
    for canvas, black, white, planes in ((rgb[..., 1], 0, 255, None), (yuv.y, 16, 235, yuv)):
        corners = []
        levels = [canvas[y + hh - 1, x + 1] for x, y in (lay.origin(0), lay.origin(1))]
        for i, level in enumerate(levels):
            x, y = lay.origin(i)
            corner = canvas[y:y + hh // 4, x:x + hw // 2].astype(int)
            assert (corner == black).mean() > 0.05        # the box
            assert (corner >= white - 10).any()           # the text
            rest = canvas[y + hh // 3:y + hh, x:x + hw]
            assert (rest == level).all()
            corners.append(corner)
        assert levels[0] != levels[1]
        assert not np.array_equal(corners[0], corners[1])   # "input" against "steadied"
        if planes is not None:
            x, y = lay.origin(1)
            box = (yuv.y[y:y + hh // 4, x:x + hw // 2] == 16)
            rows, cols = np.flatnonzero(box.any(1)), np.flatnonzero(box.any(0))
            assert (yuv.u[(y + rows[0]) // 2, (x + cols[0]) // 2] == 128)


def test_side_by_side_halves_split_the_chroma_planes_evenly():
    """4:2:0 at a size not divisible by 4: each half is a whole number of chroma pixels and
    its chroma is the source's, resized on its own, outside the label."""
    w, h = 98, 66
    a, b = _i420(_smooth_rgb(w, h, 1)), _i420(_smooth_rgb(w, h, 2))
    yuv = side_by_side(a, b)
    lay = compare_layout(w, h)
    hw, hh = lay.half
    assert (yuv.width, yuv.height) == lay.size
    for i, img in enumerate((a, b)):
        x, y = lay.origin(i)
        for got, want in ((yuv.u, img.u), (yuv.v, img.v)):
            part = got[y // 2:(y + hh) // 2, x // 2:(x + hw) // 2]
            ref = cv2.resize(want, (hw // 2, hh // 2), interpolation=cv2.INTER_AREA)
            np.testing.assert_array_equal(part[hh // 4:], ref[hh // 4:])


def _frames_rgb(path: Path) -> list[np.ndarray]:
    return [f.image for f in iter_frames(path)]


def _pix_fmt(path: Path) -> str:
    text = subprocess.run([ffmpeg_exe(), "-hide_banner", "-i", str(path)], capture_output=True,
                          text=True).stderr
    return text.split("Video: ", 1)[1].split(",")[1].strip().split("(")[0]


@pytest.mark.parametrize("codec,size", [("h264", (160, 120)), ("h264", (161, 121)),
                                        ("ffv1", (160, 120))])
def test_steady_renders_in_the_output_format(tmp_path, codec, size):
    """End to end: the steadied video and the comparison have the source's frames warped by
    the logged corrections (checked against OpenCV on RGB), in the format the rules give, and
    the audio is copied."""
    w, h = size
    src = write_clip(tmp_path / "clip.mp4", noise_frames(20, w=w, h=h, shift_px=1.5), 30.0,
                     audio=True)
    out = tmp_path / f"out.{codec}.mp4"
    log = stabilize.steady(src, out, codec=codec, compare=True, margin=0.1, crf=10,
                           preset="veryfast")
    assert _pix_fmt(out) == output_pix_fmt(codec, w, h)
    assert probe(out).audio_codec == "aac"
    got = _frames_rgb(out)
    source = _frames_rgb(src)
    assert len(got) == len(source) == log.frames
    for t in (0, 10, 19):
        ref = warp(source[t], log.corrections[t], "black")
        inside = _inside(log.corrections[t], w, h, 2.0)
        assert np.abs(got[t].astype(int) - ref.astype(int))[inside].mean() < 3.0
    compare = Path(log.extra["outputs"]["compare"])
    side = _frames_rgb(compare)
    assert len(side) == log.frames and side[0].shape[1::-1] == compare_size(w, h)
    ref = side_by_side(source[10], warp(source[10], log.corrections[10], "black"))
    assert np.abs(side[10].astype(int) - ref.astype(int)).mean() < 4.0


def test_render_stops_cleanly_when_the_encoder_fails(tmp_path):
    """An encoder that breaks mid-pass surfaces its error; no thread waits for buffers."""
    src = write_clip(tmp_path / "clip.mp4", noise_frames(12), 30.0)
    calls = []

    class Broken:
        def write(self, frame):
            calls.append(frame)
            if len(calls) == 3:
                raise OSError("disk full")

    corrections = np.repeat(np.eye(3)[None], 12, axis=0)
    with closing(iter_frames(src, yuv="yuv420p")) as frames:
        with pytest.raises(OSError, match="disk full"):
            render_frames(frames, corrections, Broken(), fill="black")
