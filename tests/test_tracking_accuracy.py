"""The motion log as a measurement, on footage-like synthetic clips with exact ground truth.

Each clip is drawn by :mod:`stabilize.synthetic` (exact camera motion), encoded with H.264 at our
default quality (CRF 18, preset medium), decoded and measured as users would.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

import stabilize
from stabilize.io import VideoWriter, iter_frames
from stabilize.synthetic import (
    MotionSpec,
    Mover,
    SceneSpec,
    ShakeSpec,
    SyntheticClip,
    grid_transfer_error,
    movers_covering,
)

pytestmark = pytest.mark.slow


def _encode(clip: SyntheticClip, path, crf: int = 18):
    # CRF 0 is lossless at any preset: the fastest one saves time.
    with VideoWriter(path, clip.width, clip.height, clip.spec.fps, crf=crf,
                     preset="ultrafast" if crf == 0 else "medium") as w:
        for _, f in clip.frames():
            w.write(f)
    return path


@pytest.mark.parametrize("level, crf, limit", [("balanced", 18, 0.016), ("thorough", 18, 0.015),
                                              ("balanced", 0, 0.008)])
def test_moving_objects_and_telemetry_at_720p(tmp_path, level, crf, limit):
    """1280×720, 240 frames, sensor noise, three moving patches over a fifth of the frame and
    a burnt-in telemetry strip, no --ignore, default analysis width; the default analysis
    level (``balanced``, whose limit of 0.016 px is the speed issue's) and the most accurate
    one, at our default quality (CRF 18).

    At CRF 18 the encoder, not the tracking, sets the floor (README, "Analysis speed": the
    same clip at other qualities, and what was tried at ``balanced``). The third case, the
    clip encoded losslessly (CRF 0), checks the tracking itself: 0.0060 px at ``balanced``
    (measured 2026-12-05), where the encoder's loss would hide a worse tracker.

    For scale (figures given with the task, not measured here): a plain pipeline of 200
    corners and OpenCV's estimator gets about 0.17 / 1.9 / 4.0 px (median / 95th percentile /
    worst), a carefully tuned one about 0.019 / 0.037 / 0.056 px.
    """
    w, h = 1280, 720
    spec = SceneSpec(style="truss", width=w, height=h, fps=30.0, duration_s=8.0, seed=4,
                     noise_sigma=2.0, model="similarity",
                     movers=movers_covering(0.2, w, h, count=3, seed=1), telemetry=True)
    clip = SyntheticClip(spec)
    path = _encode(clip, tmp_path / "girder pass.mp4", crf)
    log = stabilize.measure(path, analysis=level)
    err = grid_transfer_error(clip.ground_truth()["inter_frame"][1:], log.matrices[1:], w, h)
    median, p95, worst = np.median(err), np.percentile(err, 95), err.max()
    print(f"grid transfer error px: median {median:.4f}, p95 {p95:.4f}, worst {worst:.4f}")
    assert median <= limit
    assert p95 <= 0.035
    assert worst <= 0.1
    assert log.status[0] == "first" and (log.status[1:] == "ok").all()
    # The telemetry strip was found and left out, and the log says so.
    strip_top = clip.ground_truth()["telemetry_box"][1]
    found = log.extra["excluded"]["static_overlay"]
    assert found and all(y + rh > strip_top for _, y, _, rh in found)


@pytest.mark.parametrize("style, contrast, crf, seed", [
    ("field", 0.15, 18, 3), ("truss", 0.08, 18, 3), ("truss", 0.08, 18, 1), ("truss", 0.08, 10, 3)])
def test_hazy_scene_with_telemetry_holding_the_strong_corners(tmp_path, style, contrast, crf,
                                                              seed):
    """A hazy, low-contrast scene (blended toward grey) under drone shake and a slow pan,
    with a full-contrast telemetry strip that holds most of the strong corners of the frame.

    Judged against the frame's strongest corner alone, nearly every corner lies on the strip
    and the fit follows it (measured before corners were also judged per cell: a median
    error of 1.33 px, the strip not found). At CRF 10 the sensor noise survives the
    encoding and raises the picture's median corner strength: with the noise floor at 10×
    that median only the strip's corners were left (median error 1.33 px, every frame weak,
    the strip not found; 0.046 px with the floor at 5×; seed 1: 1.65 → 0.059 px, measured).
    The truss's corners lie at the noise, and its seed 1 read 0.155 px at CRF 18 until such
    a picture was tracked with a wider window (0.139 px; ``TrackSettings.faint_win_size``)."""
    w, h = 640, 360
    spec = SceneSpec(style=style, width=w, height=h, fps=30.0, duration_s=8.0, seed=seed,
                     noise_sigma=1.5, contrast=contrast, motion=MotionSpec(pan_px_s=12.0),
                     shake=ShakeSpec.drone(), telemetry=True)
    clip = SyntheticClip(spec)
    path = _encode(clip, tmp_path / "haze.mp4", crf)
    log = stabilize.measure(path)
    err = grid_transfer_error(clip.ground_truth()["inter_frame"][1:], log.matrices[1:], w, h)
    print(f"grid transfer error px: median {np.median(err):.4f}, "
          f"p95 {np.percentile(err, 95):.4f}")
    assert np.median(err) <= 0.15
    assert (log.status[1:] == "ok").mean() >= 0.95
    strip_top = clip.ground_truth()["telemetry_box"][1]
    found = log.extra["excluded"]["static_overlay"]
    assert found and all(y + rh > strip_top for _, y, _, rh in found)


def test_hazy_scene_under_an_exposure_ramp_is_called_rough(tmp_path):
    """The hazy truss (contrast 0.08, seed 1) while the camera's exposure brightens the
    picture by 15 % over 2 s and back: the faint tracks are pulled the same way frame after
    frame and the logged path strays from the true one by about 2 px at the frame centre
    (2.19 px; 0.41 px without the ramp, seed 3; measured 2026-12-05). The log cannot tell
    that from the frames' motion, but it reads the brightness change: its
    ``brightness_drift_px`` (1.28 px, measured) calls the figures rough and says why."""
    w, h = 640, 360
    spec = SceneSpec(style="truss", width=w, height=h, fps=30.0, duration_s=8.0, seed=1,
                     noise_sigma=1.5, contrast=0.08, motion=MotionSpec(pan_px_s=12.0),
                     shake=ShakeSpec.drone(), telemetry=True)
    clip = SyntheticClip(spec)
    path = tmp_path / "haze ramp.mp4"
    with VideoWriter(path, w, h, 30.0, crf=18, preset="medium") as wr:
        for i, f in clip.frames():
            t = i / 30.0
            gain = 1 + 0.15 * (np.clip((t - 2) / 2, 0, 1) - np.clip((t - 5) / 2, 0, 1))
            wr.write(np.clip(f.astype(np.float32) * gain, 0, 255).astype(np.uint8))
    s = stabilize.measure(path).summary
    print(f"brightness_drift_px {s['brightness_drift_px']}; trust {s['trust']}")
    assert s["brightness_drift_px"] > 0.5
    assert s["trust"] != "sound"
    assert any("brightness changed" in r for r in s["trust_reasons"])


def test_hazy_scene_at_the_noise_is_measured_roughly_and_called_so(tmp_path):
    """The hazy truss blended further toward grey (contrast 0.05): after H.264 at CRF 18 its
    rows vary by about 1.5 grey levels, the size of the sensor noise. The log read the strip
    (median error 1.65 px, the strip not found, 126 of 239 frames weak, measured 2026-12-05);
    with the faint picture's wider tracking window 0.33 px (73 frames weak, verdict
    `unreliable`); with the text found as a line beside the scene's thin spread of tracks
    (``OverlaySettings.line_span``), 0.27 px, 48 frames weak (measured 2026-12-05). The run
    must not give those figures as a sound measurement: the clip's verdict is at least
    `rough` (20 % of frames weak), with its reasons. Nor one by one: most of the wrong `ok`
    frames rested on the strip's still tracks alone, which the consensus's spread test, made
    on looser inliers, let pass; judged on the pairs the motion was fitted on, they are
    `weak` (2 of the 145 `ok` frames over 1.3 px, 9 over 0.5 px; before, 17 of 166 and 30;
    with the line rule none of 191, and 10)."""
    w, h = 640, 360
    spec = SceneSpec(style="truss", width=w, height=h, fps=30.0, duration_s=8.0, seed=1,
                     noise_sigma=1.5, contrast=0.05, motion=MotionSpec(pan_px_s=12.0),
                     shake=ShakeSpec.drone(), telemetry=True)
    clip = SyntheticClip(spec)
    log = stabilize.measure(_encode(clip, tmp_path / "fog.mp4"))
    err = grid_transfer_error(clip.ground_truth()["inter_frame"][1:], log.matrices[1:], w, h)
    print(f"median {np.median(err):.4f} px; weak {(log.status == 'weak').sum()}; "
          f"trust {log.summary['trust']}: {log.summary['trust_reasons']}")
    assert np.median(err) <= 0.3
    if np.median(err) > 0.15:
        assert log.summary["trust"] in ("rough", "unreliable"), log.summary["trust_reasons"]
        assert log.summary["trust_reasons"]
    ok = log.status[1:] == "ok"
    assert np.mean(err[ok] > 1.3) <= 0.03, f"{np.count_nonzero(err[ok] > 1.3)} of {ok.sum()}"


def _ecc_inter_frame(path, frames: int, mask: np.ndarray) -> np.ndarray:
    """Each frame pair's affine motion by OpenCV's ECC alignment (dense, intensity-based;
    Evangelidis and Psarakis, "Parametric image alignment using enhanced correlation
    coefficient maximization", IEEE TPAMI 2008), started at no motion, on the grey frames
    with ``mask`` (255: used): (frames - 1, 3, 3) mapping frame t-1 to frame t."""
    out, prev = [], None
    criteria = (cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, 50, 1e-4)
    for frame in iter_frames(path, gray=True):
        if frame.index >= frames:
            break
        img = frame.image.astype(np.float32)
        if prev is not None:
            # ECC finds W with current(x) ≈ previous(W x): W maps frame t to frame t-1.
            _, w = cv2.findTransformECC(img, prev, np.eye(2, 3, dtype=np.float32),
                                        cv2.MOTION_AFFINE, criteria, mask, 5)
            out.append(np.linalg.inv(np.vstack([w, [0.0, 0.0, 1.0]])))
        prev = img
    return np.array(out)


def test_hazy_scene_at_ffmpegs_default_quality_is_measured_as_well_as_a_dense_reference(
        tmp_path):
    """The hazy truss (contrast 0.12) encoded at CRF 23, x264's default, instead of 18: the
    encoder keeps the faint detail only as well as its motion vectors carry it, and the
    decoded picture itself moves off the true motion by a fifth of a pixel from frame to
    frame. No estimator reads the true motion from it: on these 4 s OpenCV's dense ECC
    alignment (the strip masked out) is off by 0.191 px (median), the log by 0.190 px
    (over 8 s of the same scene, 0.21 and 0.20 px; at CRF 18, 0.11 and 0.07 px; measured
    2026-12-05). The log must stay within a tenth of that reference. Over such scenes at
    CRF 23 the log read 0.20–0.39 px for contrasts 0.08–0.12 and the field style, 0.24 px
    at 1280×720 (measured); the 0.15-px figure of the hazy scenes above holds at CRF 18
    (DEVELOPERS.md, Known limits)."""
    w, h, n = 640, 360, 120
    spec = SceneSpec(style="truss", width=w, height=h, fps=30.0, duration_s=n / 30.0, seed=2,
                     noise_sigma=1.5, contrast=0.12, motion=MotionSpec(pan_px_s=12.0),
                     shake=ShakeSpec.drone(), telemetry=True)
    clip = SyntheticClip(spec)
    path = _encode(clip, tmp_path / "haze crf23.mp4", crf=23)
    truth = clip.ground_truth()["inter_frame"][1:]
    log = stabilize.measure(path)
    ours = np.median(grid_transfer_error(truth, log.matrices[1:], w, h))
    mask = np.zeros((h, w), np.uint8)
    mask[10:int(clip.ground_truth()["telemetry_box"][1]) - 8, 10:w - 10] = 255
    ecc = _ecc_inter_frame(path, n, mask)
    reference = np.median(grid_transfer_error(truth[:len(ecc)], ecc, w, h))
    print(f"median error px: log {ours:.4f}, OpenCV ECC {reference:.4f}")
    assert ours <= 1.1 * reference


def test_frames_fitted_before_a_strip_is_found_are_refitted_without_it(tmp_path):
    """A hazy truss scene whose tracked detail is patchy: for its first second the grouping
    takes the telemetry strip (its tracks are the oldest, and the first fits moved with them)
    for the scene and the real scene for an object, until enough of the scene moves together
    to show the strip as a still band. Once the strip is known, the frames fitted on it are
    fitted again without it (measured before: median error 1.28 px over the first 45 frames,
    24 of them weak; after: 0.20 px, one weak)."""
    w, h = 640, 360
    spec = SceneSpec(style="truss", width=w, height=h, fps=30.0, duration_s=8.0, seed=1,
                     noise_sigma=1.5, contrast=0.08, motion=MotionSpec(pan_px_s=12.0),
                     shake=ShakeSpec.drone(), telemetry=True)
    clip = SyntheticClip(spec)
    log = stabilize.measure(_encode(clip, tmp_path / "haze.mp4"))
    err = grid_transfer_error(clip.ground_truth()["inter_frame"][1:], log.matrices[1:], w, h)
    early = err[:45]
    print(f"first 45 frames: median {np.median(early):.4f} px, largest {early.max():.4f} px; "
          f"all: median {np.median(err):.4f} px; weak {(log.status == 'weak').sum()}")
    assert np.median(early) <= 0.3
    assert (log.status[1:46] == "weak").sum() <= 3
    assert np.median(err) <= 0.2


@pytest.mark.slow
def test_stand_ins_before_a_text_line_is_found_are_refitted_once_it_is(tmp_path):
    """The hazy truss (contrast 0.08, seed 2) at CRF 23: its telemetry line is found only
    after 41 frames, and until then 20 frames stood in for their motion, the line and the
    scene rivalling as two groups. Interpolated over up to 20 frames, the stand-ins lost
    the drone's shake, and the steadied video kept 1.15 / 0.82 px of it against 2.2 px in
    the source (measured on the frames). Once the line is known, those frames are fitted
    again without it where the rest is not bunched: 9 stand-ins left, 0.30 / 0.54 px kept
    (measured 2026-12-05)."""
    w, h = 640, 360
    spec = SceneSpec(style="truss", width=w, height=h, fps=30.0, duration_s=8.0, seed=2,
                     noise_sigma=1.5, contrast=0.08, motion=MotionSpec(pan_px_s=12.0),
                     shake=ShakeSpec.drone(), telemetry=True)
    clip = SyntheticClip(spec)
    path = _encode(clip, tmp_path / "haze crf23.mp4", crf=23)
    log = stabilize.steady(path, tmp_path / "haze.steady.mp4")
    s = log.summary
    print(f"stand-ins {s['frames_foreground']}; kept x {s['jitter_rms_x_px_out']:.3f}, y "
          f"{s['jitter_rms_y_px_out']:.3f} px of x {s['jitter_rms_x_px_src_check']:.3f}, y "
          f"{s['jitter_rms_y_px_src_check']:.3f} px")
    assert s["frames_foreground"] <= 12
    assert s["output_steadier"] is True and s["output_keeps_shake"] is False
    assert s["shake_reduction_x"] >= 0.7 and s["shake_reduction_y"] >= 0.6


def test_static_camera_with_a_large_object_in_front(tmp_path):
    """A still camera; a densely textured board covering about half of the frame moves in
    front of it for the whole 20 s. The logged camera path must stay within 2 px of zero."""
    w, h = 640, 360
    board = Mover("panel", (0.7 * w, 0.7 * h), (w / 2, h / 2), (37.0, 23.0), "frame", seed=5)
    log, offset = _still_camera(tmp_path / "still.mp4", board, duration_s=20.0, seed=2)
    assert offset < 2.0
    assert not (log.status == "failed").any()


def _still_camera(path, board: Mover, *, duration_s: float, seed: int):
    """Measure a still camera's 640×360 field scene with ``board`` moving in front; the log
    and the largest offset of its camera path from zero, pixels."""
    spec = SceneSpec(style="field", width=640, height=360, fps=30.0, duration_s=duration_s,
                     seed=seed, noise_sigma=1.5, motion=MotionSpec(pan_px_s=0.0),
                     shake=ShakeSpec(), movers=(board,))
    log = stabilize.measure(_encode(SyntheticClip(spec), path))
    offset = float(np.abs(log.readouts()["path"][:, :2]).max())
    print(f"largest camera path offset: {offset:.4f} px")
    return log, offset


def test_static_camera_with_a_slow_object_in_front(tmp_path):
    """A still camera; a textured board over about a third of the frame drifts at 9 px/s,
    0.3 px a frame: inside any per-frame inlier threshold of the still scene, so only its
    motion over several frames gives it away. The logged path must stay within 1 px."""
    w, h = 640, 360
    board = Mover("panel", (0.55 * w, 0.6 * h), (0.4 * w, h / 2), (9.0, 4.0), "frame", seed=8)
    _, offset = _still_camera(tmp_path / "slow board.mp4", board, duration_s=12.0, seed=9)
    assert offset < 1.0


def test_homography_chain_matches_direct_registration(tmp_path):
    """A camera moving over a planar scene: the logged transforms chained over 80 frames agree
    with a direct registration of the first and last frames (SIFT matches and OpenCV's
    findHomography as an outside reference, and the exact ground truth)."""
    w, h = 640, 360
    spec = SceneSpec(style="field", width=w, height=h, fps=30.0, duration_s=80 / 30, seed=5,
                     noise_sigma=1.0, model="perspective",
                     motion=MotionSpec(pan_px_s=60.0, tilt_x_deg_s=4.0, tilt_y_deg_s=-2.0,
                                       zoom_per_s=0.05))
    clip = SyntheticClip(spec)
    path = _encode(clip, tmp_path / "plane.mp4")
    log = stabilize.measure(path, model="homography")
    chained = np.eye(3)
    for m in log.matrices[1:]:
        chained = m @ chained
    chained /= chained[2, 2]
    g = clip.ground_truth()["world_to_frame"]
    truth = g[-1] @ np.linalg.inv(g[0])
    frames = [f.image for f in iter_frames(path, gray=True)]
    sift = cv2.SIFT_create(4000)
    k0, d0 = sift.detectAndCompute(frames[0], None)
    k1, d1 = sift.detectAndCompute(frames[-1], None)
    pairs = cv2.BFMatcher().knnMatch(d0, d1, k=2)
    good = [a for a, b in pairs if a.distance < 0.75 * b.distance]  # Lowe's ratio test
    src = np.float32([k0[g.queryIdx].pt for g in good])
    dst = np.float32([k1[g.trainIdx].pt for g in good])
    direct, _ = cv2.findHomography(src, dst, cv2.RANSAC, 1.5)
    vs_direct = grid_transfer_error(direct, chained, w, h)
    vs_truth = grid_transfer_error(truth / truth[2, 2], chained, w, h)
    print(f"chain vs direct registration {vs_direct:.3f} px, vs truth {vs_truth:.3f} px")
    assert vs_direct < 2.0 and vs_truth < 2.0


def test_textureless_stretch_and_hard_cut(tmp_path):
    """Plain sky for a second and a hard cut to another scene: flagged, and the path is not
    thrown (no stand-in jumps, the cut restarts the path)."""
    w, h = 480, 270
    spec = SceneSpec(style="truss", width=w, height=h, fps=30.0, duration_s=6.0, seed=6,
                     noise_sigma=1.0, textureless_s=(1.5, 2.5), cuts_s=(4.0,),
                     cut_styles=("solar",))
    clip = SyntheticClip(spec)
    gt = clip.ground_truth()
    path = _encode(clip, tmp_path / "sky and cut.mp4")
    log = stabilize.measure(path)
    cut = int(np.flatnonzero(gt["cut"])[0])
    assert log.status[cut] == "cut"
    sky = np.flatnonzero(gt["textureless"])
    # Frames inside the sky stretch cannot be measured: none may claim a trustworthy fit.
    assert not np.isin(log.status[sky[1:]], ["ok"]).any()
    assert log.summary["cuts"] >= 1 and log.summary["frames_failed"] >= len(sky) - 2
    # Stand-ins are interpolated, not wild: per-frame motion stays near the camera's.
    motion = log.readouts()["motion"]
    assert np.abs(motion[sky[1:-1], :2]).max() < 5.0
    # Where the motion can be seen, it is still measured well.
    seen = gt["observable"].copy()
    seen[0] = False
    seen &= log.status != "cut"
    err = grid_transfer_error(np.nan_to_num(gt["inter_frame"][seen]), log.matrices[seen], w, h)
    assert np.median(err) < 0.05
    # And steadying the clip works across both.
    steadied = stabilize.steady(path, tmp_path / "out.mp4", margin=0.1)
    assert steadied.frames == clip.n_frames


def test_fast_pan_is_followed(tmp_path):
    """A whip pan of 100 px a frame (a sixth of the frame width) with a climb: the previous
    frame's motion predicts the tracks, and phase correlation restarts them on the first."""
    w, h = 640, 360
    spec = SceneSpec(style="field", width=w, height=h, fps=30.0, duration_s=3.0, seed=7,
                     noise_sigma=1.0, motion=MotionSpec(pan_px_s=3000.0, climb_px_s=1000.0))
    clip = SyntheticClip(spec)
    path = _encode(clip, tmp_path / "whip.mp4")
    log = stabilize.measure(path)
    err = grid_transfer_error(clip.ground_truth()["inter_frame"][1:], log.matrices[1:], w, h)
    assert log.status[0] == "first" and (log.status[1:] == "ok").all()
    assert np.median(err) < 0.05 and err.max() < 0.2


def _plain_wall_clip(path, *, n: int = 240, seed: int = 0, cover: float = 0.45,
                     amp_px: float = 120.0, camera_px: float = 0.0, marks: int = 6,
                     board: str = "textured"):
    """A camera (640×360, 30 fps) facing a plain wall (a faint lighting gradient, ``marks``
    faint marks, sensor noise σ 1.5) while a board covering ``cover`` of the frame is
    waved in front of it (±``amp_px`` across, 0.7 Hz): densely ``"textured"``, or
    ``"dotted"`` (a dark face with 15 bright spots of 2–7 px radius). With ``camera_px`` the
    board is held still on the wall and the camera moves instead (±``camera_px`` across at
    0.6 Hz, a third of that up and down at 1.3 Hz, sub-pixel); the true inter-frame shifts
    (n, 2) are returned with the path, pixels. Procedurally drawn."""
    rng = np.random.default_rng(seed)
    w, h = 640, 360
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
    wall = np.repeat((150 + 20 * xx / w - 10 * yy / h)[..., None], 3, axis=2)
    for _ in range(marks):
        x, y = (int(v) for v in rng.integers(20, (w - 20, h - 20)))
        cv2.circle(wall, (x, y), int(rng.integers(2, 5)), (130, 130, 130), -1, cv2.LINE_AA)
    bw, bh = int(np.sqrt(cover) * w * 0.8), int(np.sqrt(cover) * h * 1.2)
    if board == "textured":
        face = cv2.resize(rng.integers(0, 255, (bh // 6 + 1, bw // 6 + 1, 3)
                                        ).astype(np.uint8), (bw, bh),
                           interpolation=cv2.INTER_CUBIC)
    else:
        face = np.full((bh, bw, 3), 40, np.uint8)
        for _ in range(15):
            x, y = (int(v) for v in rng.integers(8, (bw - 8, bh - 8)))
            cv2.circle(face, (x, y), int(rng.integers(2, 8)), (int(rng.integers(60, 200)),) * 3,
                       -1, cv2.LINE_AA)
    amp = 0.0 if camera_px else amp_px
    t = np.arange(n) / 30.0
    cam = np.c_[camera_px * np.sin(2 * np.pi * 0.6 * t),
                camera_px / 3 * np.sin(2 * np.pi * 1.3 * t + 0.5)]
    with VideoWriter(path, w, h, 30.0, crf=18, preset="medium") as out:
        for i in range(n):
            img = wall.copy()
            x0 = int(w / 2 + amp * np.sin(2 * np.pi * 0.7 * t[i]) - bw / 2)
            y0 = int(h / 2 + 0.4 * amp * np.sin(2 * np.pi * 1.1 * t[i] + 1.0) - bh / 2)
            xs, ys, xe, ye = max(0, x0), max(0, y0), min(w, x0 + bw), min(h, y0 + bh)
            img[ys:ye, xs:xe] = face[ys - y0:ye - y0, xs - x0:xe - x0]
            if camera_px:
                m = np.float32([[1, 0, cam[i, 0]], [0, 1, cam[i, 1]]])
                img = cv2.warpAffine(img, m, (w, h), flags=cv2.INTER_CUBIC,
                                     borderMode=cv2.BORDER_REFLECT)
            out.write(np.clip(img + rng.normal(0, 1.5, img.shape), 0, 255).astype(np.uint8))
    return path, np.diff(cam, axis=0, prepend=cam[:1])


def test_still_camera_before_a_plain_wall_with_a_board_waved_in_front(tmp_path):
    """A still camera, a plain wall, a textured board over up to half the frame waved in
    front: the board holds every tracked corner, and only the wall's few faint marks say
    the camera did not move. The camera path must stay within 2 px of zero, and the frames
    held still must say so (weak, ``held_still``).

    Before the still-detail check the log followed the board (±120 px), every frame ``ok``.
    """
    clip, _ = _plain_wall_clip(tmp_path / "plain wall.mp4")
    log = stabilize.measure(clip)
    path = np.abs(log.readouts()["path"][:, :2]).max(axis=1)
    print(f"largest camera path offset: {path.max():.4f} px; statuses "
          f"{dict(zip(*np.unique(log.status, return_counts=True), strict=True))}")
    assert path.max() < 2.0, f"path strays {path.max():.1f} px"
    held = log.extra["frame_reasons"].get("held_still", [])
    assert (log.status[held] == "weak").all()
    assert len(held) > 0.5 * len(log.status)


@pytest.mark.parametrize("marks, seed, amp_px", [(0, 55, 40.0), (2, 54, 120.0)])
def test_still_camera_before_a_bare_wall_with_a_dark_dotted_board_waved_in_front(
        tmp_path, marks, seed, amp_px):
    """A still camera, a wall with no marks or two, a dark board dotted with bright spots
    (no texture between them) waved in front. Each spot is a mark apart from the others,
    and the board's corners stand alone against the wall: marks apart from an object
    confirm a fit as the camera's only when they stand on the plain wall itself. Nothing
    else tells this board from a dark structure before a bare wall, so the camera path must
    stay within 2 px of zero and the frames must say they could not be confirmed.

    Before, the spots and corners confirmed the board's motion: the path followed it by 40
    px (no marks, ±40 px waved, every frame ``ok``, trust ``sound``) and 120 px (two marks,
    41 frames ``ok``)."""
    clip, _ = _plain_wall_clip(tmp_path / "dotted board.mp4", seed=seed, marks=marks,
                               amp_px=amp_px, board="dotted")
    log = stabilize.measure(clip)
    path = np.abs(log.readouts()["path"][:, :2]).max(axis=1)
    print(f"largest camera path offset: {path.max():.4f} px; statuses "
          f"{dict(zip(*np.unique(log.status, return_counts=True), strict=True))}")
    assert path.max() < 2.0, f"path strays {path.max():.1f} px"
    assert (log.status[1:] == "weak").mean() > 0.9
    assert log.summary["trust"] == "unreliable"


def test_camera_moving_over_a_plain_wall_with_a_board_fixed_to_it(tmp_path):
    """The counterpart: the same wall and board, the board fixed to the wall, the camera
    moving (±40 px). The wall's marks move with the fit, so no frame is held still and the
    logged motion follows the camera's (exact ground truth of the drawn shifts)."""
    clip, truth = _plain_wall_clip(tmp_path / "panned wall.mp4", camera_px=40.0, seed=3)
    log = stabilize.measure(clip)
    assert "held_still" not in log.extra["frame_reasons"]
    err = np.abs(log.matrices[1:, :2, 2] - truth[1:]).max(axis=1)
    print(f"shift error px: median {np.median(err):.4f}, worst {err.max():.4f}")
    # Measured 0.08 / 0.27 px: the drawn shift's cubic resampling of a blocky texture.
    assert np.median(err) < 0.15 and err.max() < 0.5
