"""Acceptance checks on real footage (clips listed in tests/real/CLIPS.md).

Each check states what is true of the footage itself (a fixed camera, five scene cuts, an
irregular frame rate), established by looking at the frames and timestamps, and asks the
public API to agree. The clips are fetched by ``scripts/fetch_clips.py``.
"""

from __future__ import annotations

from pathlib import Path

import cv2
import numpy as np
import pytest

import stabilize
from stabilize.io import iter_frames
from stabilize.motion_log import MotionLog

from .helpers import (
    path_excursion_px,
    real_rate_hz,
    reference_path_px,
    region_drift_px,
    region_moved_px,
)

pytestmark = pytest.mark.slow

# True scene cuts of bikes.mp4: the first frame of each new shot. Found from the per-frame
# Bhattacharyya distance between hue-saturation histograms (32×32 bins) of consecutive
# frames: these five frames score 0.50–0.85 and mean grey-level change 52–84 (of 255), where
# every other frame scores at most 0.17 (median 0.06), and frames k−2 … k+1 around each were
# looked at: a different place or subject begins at k. The runner-up frames 97–102 are a car
# crossing close in front of the camera within one shot, not a cut.
BIKES_CUTS = (30, 76, 137, 187, 242)

# A region of box.mp4 (x0, y0, x1, y1, px) of plain table-cloth in front of the pen, which
# the box and the hand never reach in any frame (per-pixel difference from the clip's median
# frame stays under 40 grey levels there in all 455 frames). The pen itself is not used: the
# box passes over it in frames 120–364. The bottom rows are left out: a knee shows at the
# lower left. y0 keeps 18 px clear of the nearest covered pixel so that a steadied output
# zoomed in by up to ~10 % still shows only uncovered table in this window.
BOX_TABLE_REGION = (230, 390, 630, 472)

_logs: dict[tuple[str, str], MotionLog] = {}


def _measured(path: Path) -> MotionLog:
    """``stabilize.measure`` once per clip in a session (several checks read one log)."""
    key = ("measure", str(path))
    if key not in _logs:
        _logs[key] = stabilize.measure(path)
    return _logs[key]


@pytest.fixture(scope="module")
def steadied(tmp_path_factory, real_clip):
    """``steady`` a named clip once per module into a temporary folder: (video, log)."""
    done: dict[str, tuple[Path, MotionLog]] = {}

    def get(name: str) -> tuple[Path, MotionLog]:
        if name not in done:
            out = tmp_path_factory.mktemp("steady") / f"{Path(name).stem}.steady.mp4"
            done[name] = out, stabilize.steady(real_clip(name), out)
        return done[name]

    return get


def _excursion_message(name: str, log: MotionLog, limit_px: float) -> str:
    centre, corner = path_excursion_px(log)
    return (f"{name}: camera path strays {centre:.2f} px from zero at the frame centre "
            f"(limit {limit_px} px; {corner:.2f} px at the worst corner) for a fixed camera")


# --------------------------------------------------------------------- box.mp4
def test_box_fixed_camera_path_stays_at_zero(real_clip):
    # Fixed camera; a hand moves a large box across the view. The moving box must not be
    # taken for camera motion.
    log = _measured(real_clip("box.mp4"))
    centre, _ = path_excursion_px(log)
    assert centre <= 1.0, _excursion_message("box.mp4", log, 1.0)


def test_box_table_drifts_no_more_after_steadying(real_clip, steadied):
    # The table does not move in the source. Steadying a fixed camera must not make it
    # wander. Measured on the pixels: on every frame, where the table lies in the output
    # against where it lies in the same source frame (:func:`region_moved_px`). The output's
    # drift from frame 0 is at most the source's plus that, so a bound on it bounds what
    # steadying added to the drift. 0.5 px allows for the resampling (bilinear warp) and the
    # second encoding, and is far under the several pixels a camera path pulled along by the
    # box gives.
    # Why not the drift of each video from its own frame 0: on this weakly textured cloth
    # those readings jump by 0.6-2.2 px for a few frames at a time, in the source (1.50 px
    # after the 5-frame median) and in outputs alike, however small the correction. With
    # a correction of at most 0.37 px over the whole clip, two outputs read 1.63 and 2.14 px,
    # and the same-frame readings 0.29 and 0.23 px at the most (measured).
    src = real_clip("box.mp4")
    out, _ = steadied("box.mp4")
    moved = region_moved_px(src, out, BOX_TABLE_REGION)
    drift_in = region_drift_px(src, BOX_TABLE_REGION)
    assert moved.max() <= 0.5, (
        f"box.mp4: steadying moved the table by up to {moved.max():.2f} px (frame "
        f"{int(moved.argmax())}), beyond 0.5 px; its drift in the source reads "
        f"{drift_in:.2f} px")


@pytest.mark.parametrize("name", ["box.mp4", "carphone_pristine.mp4"])
def test_a_fixed_camera_before_a_large_subject_is_measured_steadier(steadied, name):
    # Left to its own consensus, the render's check of the frames followed the subject: on
    # box.mp4 1.15 px of shake read on the still source (the log: 0.01 px), on carphone
    # 1.06 px (the log: 0.17 px), so steadied videos whose background held still (for the
    # box, the test above) read "not steadier", and the verdicts were rough. Told the log's
    # scene on the frames the log measured, the check measures the background.
    _, log = steadied(name)
    s = log.summary
    print({k: s.get(k) for k in ("jitter_rms_x_px", "jitter_rms_x_px_src_check",
                                 "jitter_rms_y_px_src_check", "jitter_rms_x_px_out",
                                 "jitter_rms_y_px_out", "output_steadier", "trust_reasons")})
    assert s["output_steadier"] is True
    for axis in ("x", "y"):
        assert s[f"jitter_rms_{axis}_px_src_check"] <= s[f"jitter_rms_{axis}_px"] + 0.1
        assert s[f"jitter_rms_{axis}_px_out"] <= 0.1
    assert not any("steadier" in r for r in s["trust_reasons"]), s["trust_reasons"]


def test_box_logs_read_back_though_its_last_frame_steps_back_in_time(real_clip, steadied,
                                                                    tmp_path):
    # box.mp4's container times its last frame 0.03 s before the one ahead of it. The logs
    # record the times as decoded, and the tool must read its own logs back (to render from
    # one, to report on it): the reader refused them at that line before.
    log = _measured(real_clip("box.mp4"))
    assert (np.diff(log.time_s) <= 0).sum() == 1
    _, steady_log = steadied("box.mp4")
    for name, made in (("measured", log), ("steadied", steady_log)):
        csv_path, _ = made.save(tmp_path / f"{name}.motion.csv")
        back = stabilize.read_log(csv_path)
        np.testing.assert_array_equal(back.time_s, made.time_s)
        np.testing.assert_allclose(back.matrices, made.matrices, rtol=0, atol=1e-12)


# --------------------------------------------------------------------- carphone
def test_carphone_fixed_camera_path_stays_at_zero(real_clip):
    # Camera fixed in a car; a talking man fills much of the frame, landscape moves past the
    # side window. Neither is camera motion.
    log = _measured(real_clip("carphone_pristine.mp4"))
    centre, _ = path_excursion_px(log)
    assert centre <= 1.0, _excursion_message("carphone_pristine.mp4", log, 1.0)


def test_carphone_compressed_to_blocks_keeps_its_path_near_zero(real_clip):
    # The same clip compressed to 7 KB, kept aside as another fixed camera with a person
    # filling much of the frame: within 2 px of zero, the bound asked of such clips kept
    # aside (1 px is asked of the pristine copy; measured 1.12 px, against 0.82 px there).
    log = _measured(real_clip("carphone_distorted.mp4"))
    centre, _ = path_excursion_px(log)
    assert centre <= 2.0, _excursion_message("carphone_distorted.mp4", log, 2.0)


# --------------------------------------------------------------------- vtest
def test_vtest_static_camera_path_and_no_dominant_frequency(real_clip):
    # Static surveillance camera, pedestrians walking: a path within 0.1 px of zero and no
    # dominant shake frequency on any axis (there is no shake).
    log = _measured(real_clip("vtest.avi"))
    centre, _ = path_excursion_px(log)
    assert centre <= 0.1, _excursion_message("vtest.avi", log, 0.1)
    dominant = {k: log.summary.get(k) for k in ("dominant_hz_x", "dominant_hz_y",
                                                 "dominant_hz_rot")}
    assert all(v is None for v in dominant.values()), (
        f"vtest.avi: static camera, yet dominant frequencies reported: {dominant}")


# --------------------------------------------------------------------- bikes
def test_bikes_finds_exactly_the_five_scene_cuts(real_clip):
    log = _measured(real_clip("bikes.mp4"))
    found = np.flatnonzero(log.status == "cut")
    truth = np.array(BIKES_CUTS)
    near = np.abs(found[:, None] - truth[None, :]) <= 1
    missed = truth[~near.any(axis=0)].tolist()
    invented = found[~near.any(axis=1)].tolist()
    assert not missed and not invented and len(found) == len(truth), (
        f"bikes.mp4: cuts found at {found.tolist()}, true cuts at {list(BIKES_CUTS)} "
        f"(±1 frame): missed {missed}, invented {invented}")


def test_bikes_steadying_cuts_jitter_threefold(steadied):
    _, log = steadied("bikes.mp4")
    s = log.summary
    for axis in ("x", "y"):
        before, after = s[f"jitter_rms_{axis}_px"], s[f"jitter_rms_{axis}_px_out"]
        assert after * 3 <= before, (
            f"bikes.mp4: jitter RMS {axis} {before:.3f} px in, {after:.3f} px out "
            f"(wanted at most a third)")


def test_moving_cameras_are_never_held_still(real_clip):
    """Hand-held, moving cameras (bikes: street scenes with cuts; cup: a phone drifting
    before a plain wall): detail away from the tracks moves with them, so no frame is taken
    for an object in front of a still camera (reason ``held_still``)."""
    for name in ("bikes.mp4", "cup.mp4"):
        held = _measured(real_clip(name)).extra["frame_reasons"].get("held_still", [])
        assert not held, f"{name}: frames {held[:10]} held still, but the camera moves"


# --------------------------------------------------------------------- cup
# A hand waves a dark cup in front of a plain wall with a few faint marks. The phone is held,
# not fixed: an independent registration of two strips of bare wall (phase correlation,
# :func:`reference_path_px`) has the camera drifting up to about 10 px. The log is checked
# against that reference on the frames where both strips correlate and agree (129 of 217;
# elsewhere the cup or the hand covers a strip). The strips lie about 175 px below the frame
# centre, where the log states the path; the reference is read there, from the similarity
# that the two strips' shifts give (their mean alone is the motion of the strips' middle, and
# left out the phone's rotation of up to 0.4 degrees, about 1 px at that distance).
CUP_WALL = [(0, 360, 300, 470), (300, 360, 640, 470)]
CUP_CENTRE = (319.5, 239.5)


def _cup_errors(real_clip) -> tuple[MotionLog, np.ndarray, np.ndarray]:
    clip = real_clip("cup.mp4")
    log = _measured(clip)
    ref, valid = reference_path_px(clip, CUP_WALL, at=CUP_CENTRE)
    assert valid.sum() >= 100, f"cup.mp4: the wall reference holds on {valid.sum()} frames only"
    err = np.linalg.norm(log.readouts()["path"][:, :2] - ref, axis=1)
    return log, err, valid


def _cup_message(err: np.ndarray, valid: np.ndarray, limit: float) -> str:
    worst = int(np.flatnonzero(valid)[err[valid].argmax()])
    return (f"cup.mp4: logged path off the wall reference by up to {err[valid].max():.2f} px "
            f"(frame {worst}), median {np.median(err[valid]):.2f} px; limit {limit} px")


@pytest.mark.xfail(strict=True, reason=(
    "known limit (DEVELOPERS.md, Known limits): the few faint marks of a plain wall lie in a "
    "band 160 px below the frame centre; the rotation and scale fitted on them scatter from "
    "frame to frame and, chained, wander, so the path at the centre strays from the wall's "
    "own registration by up to about 2.3 px"))
def test_cup_plain_wall_follows_the_wall(real_clip):
    _, err, valid = _cup_errors(real_clip)
    assert err[valid].max() <= 2.0, _cup_message(err, valid, 2.0)


def test_cup_plain_wall_stays_near_the_wall_and_is_called_unreliable(real_clip):
    # Until the path above holds, the run must say that its figures for this clip cannot be
    # trusted, and why, instead of giving them as a measurement; and the cup never drags the
    # path (it did by 209 px and 28 degrees before the grouping of tracks over a baseline).
    log, err, valid = _cup_errors(real_clip)
    assert log.summary["trust"] == "unreliable", log.summary["trust_reasons"]
    assert log.summary["trust_reasons"]
    assert err[valid].max() <= 8.0, _cup_message(err, valid, 8.0)
    assert np.abs(log.readouts()["path"][:, 2]).max() < 2.0


# --------------------------------------------------------------------- Megamind
# Four shots of an animated film; in the last (from the cut at frame 200) the camera holds
# still on a man whose head and shoulders fill more than half of the frame before a dark,
# defocused room. A patch of that room (the right edge, below the middle) is the reference.
MEGAMIND_LAST_CUT = 200
MEGAMIND_ROOM = (600, 300, 720, 420)


def _megamind_last_shot(real_clip) -> tuple[MotionLog, np.ndarray, np.ndarray]:
    """The log, the logged path's frame-centre shift over the last shot relative to its
    first frame, and the camera's shift over it as the room patch gives it (phase
    correlation, negated: the path is the camera's motion, the picture moves the other
    way), pixels."""
    clip = real_clip("Megamind.avi")
    log = _measured(clip)
    cut = int(np.flatnonzero(log.status == "cut")[-1])
    assert abs(cut - MEGAMIND_LAST_CUT) <= 1, f"Megamind.avi: last cut at {cut}"
    path = log.readouts()["path"][cut:, :2]
    x0, y0, x1, y1 = MEGAMIND_ROOM
    window = cv2.createHanningWindow((x1 - x0, y1 - y0), cv2.CV_32F)
    ref, room = None, []
    for frame in iter_frames(clip, gray=True):
        if frame.index < cut:
            continue
        patch = frame.image[y0:y1, x0:x1].astype(np.float32)
        ref = patch if ref is None else ref
        room.append(cv2.phaseCorrelate(ref, patch, window)[0])
    return log, path - path[0], -np.array(room)


def test_megamind_last_shot_is_a_still_camera(real_clip):
    # The property the next test relies on: the room behind the man stays put.
    _, _, room = _megamind_last_shot(real_clip)
    assert np.abs(room).max() <= 1.0, f"Megamind.avi: the room moves {np.abs(room).max():.2f} px"


def test_megamind_last_shot_path_stays_with_the_room(real_clip):
    # History: 13.2 px, then 2.2 px once weak fits most tracks moved against became
    # stand-ins; 14.5 px (frames 237-239) once the tracker gave every grid cell its strongest
    # corner first (the room's tracks widened the hull the still-detail check looks away
    # from); 8.5 px (frame 234) since the noise floor is judged on the quieter parts of the
    # picture and a hold lasts while nothing can end it; 9.1 px (frame 264) as later commits
    # left it, and 8.1 px (frame 241) once the room's shift is compared as the camera's
    # (negated: it had been compared with the wrong sign, an error of up to twice the room's
    # 0.6 px); 1.87 px (frame 224) since the analysis that hands over at a keyframe (frame
    # 240 here) follows through past it: the hold that the room's detail starts at frame
    # 245 now reaches back over frames 226-239 as it does with no keyframe at all.
    _, path, room = _megamind_last_shot(real_clip)
    err = np.linalg.norm(path - room, axis=1)
    assert err.max() <= 2.0, (
        f"Megamind.avi: logged path off the room by up to {err.max():.2f} px (frame "
        f"{MEGAMIND_LAST_CUT + int(err.argmax())}) in a still shot")


def test_megamind_is_called_unreliable(real_clip):
    # Most of the last shot is held still on the room's faint detail (stand-ins, status
    # weak), so the run must say its figures are not a measurement there.
    log, _, _ = _megamind_last_shot(real_clip)
    assert log.summary["trust"] == "unreliable", log.summary["trust_reasons"]
    assert log.summary["trust_reasons"]


def test_megamind_in_two_segments_gives_the_single_pass_log(real_clip):
    # The keyframe at frame 240 falls inside the hold of the last shot: the first segment
    # must follow through past its end exactly as the single pass does, or the frames
    # before the keyframe differ.
    clip = real_clip("Megamind.avi")
    two = stabilize.measure(clip, workers=2)
    assert two.to_csv() == _measured(clip).to_csv()


# --------------------------------------------------------------------- Megamind_bugy
# The shots of Megamind.avi with single garbled frames (found by comparing with the clean
# copy): a flat green bar over frames 20 and 35, a green box over the lower two thirds of
# frame 100, frame 75 mirrored left to right.
BUGY_GARBLED = (20, 35, 75, 100)
BUGY_MIRRORED = 75
MEGAMIND_CUTS = [1, 98, 154, 200]


def test_single_garbled_frames_put_no_jump_in_the_path(real_clip):
    # Across a garbled frame the path goes on as across any other: the clean copy's path
    # moves at most 2.4 px over two frames within a shot (measured). Measured here: 0.0,
    # 0.0, 0.0, 0.09 px; the first three lie inside a stretch held still (DEVELOPERS.md,
    # Known limits, "A slow dolly held still"), so there the check says little until that
    # hold is gone, and the statuses around the mirrored frame carry it.
    log = _measured(real_clip("Megamind_bugy.avi"))
    path = log.readouts()["path"][:, :2]
    for g in BUGY_GARBLED:
        jump = float(np.linalg.norm(path[g + 1] - path[g - 1]))
        assert jump <= 3.0, f"Megamind_bugy.avi: the path jumps {jump:.2f} px across frame {g}"
    # The mirrored frame matches neither neighbour: no motion is fitted into or out of it,
    # and it is no scene cut either.
    around = log.status[BUGY_MIRRORED:BUGY_MIRRORED + 2]
    assert (around == "failed").all(), f"Megamind_bugy.avi: frames 75, 76 are {around}"
    cuts = np.flatnonzero(log.status == "cut").tolist()
    assert cuts == MEGAMIND_CUTS, f"Megamind_bugy.avi: cuts at {cuts}"


# --------------------------------------------------------------------- bigbuckbunny
# One animated shot: a large character climbs out of a burrow and stretches in front of the
# camera while the camera itself drifts. Two patches of the background (rocks, sky and
# treetops on the right) give the camera's own shift from the first frame to the last.
BUNNY_BACKGROUND = ((780, 220, 1280, 470), (900, 0, 1280, 300))


def test_bigbuckbunny_camera_drift_is_logged_not_the_character(real_clip):
    clip = real_clip("bigbuckbunny.mp4")
    log = _measured(clip)
    first = last = None
    for frame in iter_frames(clip, gray=True):
        last = frame.image.astype(np.float32)
        first = last if first is None else first
    shifts = []
    for x0, y0, x1, y1 in BUNNY_BACKGROUND:
        window = cv2.createHanningWindow((x1 - x0, y1 - y0), cv2.CV_32F)
        (dx, dy), response = cv2.phaseCorrelate(first[y0:y1, x0:x1], last[y0:y1, x0:x1],
                                                window)
        assert response > 0.5, f"bigbuckbunny.mp4: background patch lost ({response:.2f})"
        shifts.append((dx, dy))
    background = np.mean(shifts, axis=0)
    # The path is the camera's motion: the picture moves the other way.
    logged = -log.readouts()["path"][-1, :2]
    assert np.abs(logged - background).max() <= 3.0, (
        f"bigbuckbunny.mp4: logged camera drift {logged.round(2).tolist()} px against the "
        f"background's own {background.round(2).tolist()} px")


# --------------------------------------------------------------------- tree
def test_tree_irregular_timestamps_give_the_real_rate(real_clip):
    # The container says 15 fps; frames arrive 0.33–0.73 s apart. Time scales must follow
    # the real mean rate, and the summary must say the timing is irregular.
    clip = real_clip("tree.avi")
    rate = real_rate_hz(clip)
    log = _measured(clip)
    fps = log.summary["fps"]
    assert abs(fps - rate) <= 0.1 * rate, (
        f"tree.avi: summary fps {fps:.3f}, real mean rate {rate:.3f} Hz from the timestamps")
    assert log.summary.get("timestamps_irregular") is True, (
        f"tree.avi: timestamps_irregular is {log.summary.get('timestamps_irregular')!r}")


def test_tree_renders_from_its_own_log(real_clip, tmp_path):
    # A log is made to be rendered from later. tree.avi's header gives 29.6 s at 15 fps,
    # "about 444 frames", against the 68 it has; its own log was refused as made from
    # another clip. Rendered from the log, every frame is written at its own time.
    clip = real_clip("tree.avi")
    csv_path, _ = _measured(clip).save(tmp_path / "tree.motion.csv")
    out = tmp_path / "tree.rendered.mp4"
    log = stabilize.render(clip, csv_path, out)
    assert log.frames == 68
    times = [f.time_s for f in iter_frames(out, gray=True, size=(64, 48))]
    np.testing.assert_allclose(times, log.time_s - log.time_s[0], atol=0.02)


# ------------------------------------------------------------- rolling shutter
@pytest.mark.parametrize(("name", "readout"), [
    ("vtest.avi", "auto"), ("box.mp4", "auto"), ("carphone_pristine.mp4", "auto"),
    ("bikes.mp4", "auto"), ("vtest.avi", 25.0), ("bikes.mp4", 25.0)])
def test_real_clips_report_no_vibration_they_do_not_have(real_clip, name, readout):
    # None of these clips shows vibration faster than its frame rate (a still camera, a
    # hand-held one, a camera in a car, a camera following a cyclist): asked to estimate the
    # readout, or given a plausible one, the run must not invent a vibration peak.
    log = stabilize.measure(real_clip(name), readout_ms=readout)
    s = log.summary
    assert s.get("vibration_found") is not True, (
        f"{name} (readout {readout}): vibration {s.get('vibration_hz')} Hz, "
        f"{s.get('vibration_px')} px reported")
    if readout == "auto":
        assert s.get("readout_source") in ("estimated", "not_found"), s.get("readout_source")


# --------------------------------------------------------------------- corner detection
@pytest.mark.parametrize("name", ["box.mp4", "cup.mp4", "bikes.mp4", "bigbuckbunny.mp4",
                                  "Megamind.avi", "carphone_pristine.mp4"])
def test_corners_from_the_strength_map_are_opencvs_on_real_frames(real_clip, name):
    # The tracker picks corners on the corner-strength map it already has
    # (stabilize.track.peak_corners); on real pictures the corners must be those OpenCV's
    # goodFeaturesToTrack picks from the same map, at the analysis width and spacing and at
    # the lowest quality level the tracker uses. Real frames can hold equal strengths, which
    # OpenCV orders as its sort leaves them: the sets are compared, and the order up to ties.
    from stabilize.track import peak_corners

    clip = real_clip(name)
    for frame in iter_frames(clip, gray=True):
        if frame.index not in (5, 60):
            continue
        h, w = frame.image.shape
        img = cv2.resize(frame.image, (960, round(h * 960 / w)), interpolation=cv2.INTER_AREA) \
            if w > 960 else frame.image
        strength = cv2.cornerMinEigenVal(img, 7, ksize=3)
        spacing = max(2.0, img.shape[1] / 240.0)
        cv = cv2.goodFeaturesToTrack(img, 0, 0.003, spacing, blockSize=7).reshape(-1, 2)
        ours = peak_corners(strength, float(strength.max()) * 0.003, spacing)
        assert sorted(map(tuple, ours.tolist())) == sorted(map(tuple, cv.tolist())), (
            f"{name} frame {frame.index}: {len(ours)} corners against OpenCV's {len(cv)}")
        # Strongest first on both sides: the strengths read in order agree.
        np.testing.assert_array_equal(strength[ours[:, 1].astype(int), ours[:, 0].astype(int)],
                                      strength[cv[:, 1].astype(int), cv[:, 0].astype(int)])
