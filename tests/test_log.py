"""Motion log schema: columns, conventions, CSV/JSON round trip, malformed input."""

import json

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import stabilize
from stabilize import read_log
from stabilize.errors import StabilizeError
from stabilize.geometry import frame_centre, similarity_readout
from stabilize.io.motion_log_files import check_log_fits
from stabilize.io.probing import VideoInfo
from stabilize.motion_log import BASE_COLUMNS, COLUMNS, MotionLog
from stabilize.shake.stability import measured_frames

from .conftest import noise_frames, write_clip


def _log(n=6, with_corrections=True):
    rng = np.random.default_rng(0)
    h = np.repeat(np.eye(3)[None], n, axis=0)
    h[1:, :2, 2] = rng.normal(0, 2, (n - 1, 2))
    h[1:, :2, :2] += rng.normal(0, 1e-3, (n - 1, 2, 2))
    h[1:, 2, :2] = rng.normal(0, 1e-6, (n - 1, 2))
    status = np.array(["ok", "ok", "weak", "failed", "ok", "cut"][:n])
    log = MotionLog(
        time_s=np.arange(n) / 29.97, matrices=h, tracked=np.full(n, 500),
        inliers=np.full(n, 400), inlier_ratio=np.full(n, 0.8), rms_px=np.full(n, 0.31),
        rounds=np.full(n, 12), status=status,
        source={"path": "x.mp4", "width": 640, "height": 360, "fps": 29.97, "frames": n},
        settings={"model": "homography"}, summary={"frames": n, "jitter_rms_x_px": 1.25},
    )
    if with_corrections:
        log.corrections = h.copy()
        log.smooth_values = rng.normal(0, 1, (n, 4))
    return log


def test_header_is_the_contract():
    h = [f"h{r}{c}" for r in (1, 2, 3) for c in (1, 2, 3)]
    c = [f"c{r}{c}" for r in (1, 2, 3) for c in (1, 2, 3)]
    assert COLUMNS == ["frame", "time_s", *h, "dx", "dy", "rotation_deg", "scale", "tracked",
                       "inliers", "inlier_ratio", "rms_px", "rounds", "status", "path_x",
                       "path_y", "path_deg", "path_scale", "smooth_x", "smooth_y",
                       "smooth_deg", "smooth_scale", *c, "out_dx", "out_dy", "out_deg",
                       "src_check_dx", "src_check_dy", "src_check_deg"]


def test_similarity_readout_about_the_centre():
    c = frame_centre(101, 51)
    assert tuple(c) == (50.0, 25.0)
    theta = np.radians(3.0)
    rot = np.array([[np.cos(theta), -np.sin(theta)], [np.sin(theta), np.cos(theta)]]) * 1.02
    m = np.eye(3)
    m[:2, :2] = rot
    m[:2, 2] = c - rot @ c + [4.0, -2.0]
    dx, dy, deg, scale = similarity_readout(m, c)
    assert dx == pytest.approx(4.0) and dy == pytest.approx(-2.0)
    assert deg == pytest.approx(3.0) and scale == pytest.approx(1.02)


@pytest.mark.parametrize("with_corrections", [True, False])
def test_csv_json_round_trip_is_exact(tmp_path, with_corrections):
    log = _log(with_corrections=with_corrections)
    csv_path, json_path = log.save(tmp_path / "clip.motion.csv")
    back = read_log(csv_path)
    np.testing.assert_array_equal(back.matrices, log.matrices / log.matrices[:, 2:3, 2:3])
    np.testing.assert_array_equal(back.time_s, log.time_s)
    np.testing.assert_array_equal(back.status, log.status)
    assert back.to_csv() == log.to_csv()
    doc = json.loads(json_path.read_text())
    assert doc["format"] == "stabilize-motion-log" and doc["version"] == 1
    assert set(doc) >= {"source", "settings", "summary", "tool_version"}
    lines = csv_path.read_text().splitlines()
    assert len(lines) == log.frames + 1
    if not with_corrections:
        assert lines[1].endswith("," * 13)
    # No temporaries are left beside the outputs.
    assert sorted(p.name for p in tmp_path.iterdir()) == ["clip.motion.csv", "clip.motion.json"]


def test_measured_motion_columns_round_trip_with_gaps(tmp_path):
    log = _log()
    rng = np.random.default_rng(1)
    log.output_check = rng.normal(0, 0.1, (log.frames, 3))
    log.source_check = rng.normal(0, 3.0, (log.frames, 3))
    log.output_check[0] = log.source_check[0] = np.nan  # frame 0 has no predecessor
    log.output_check[3, 1] = np.nan
    csv_path, _ = log.save(tmp_path / "c.motion.csv")
    row = csv_path.read_text().splitlines()[1].split(",")
    assert row[-6:] == ["nan"] * 6
    back = read_log(csv_path)
    np.testing.assert_array_equal(back.output_check, log.output_check)
    np.testing.assert_array_equal(back.source_check, log.source_check)
    assert back.to_csv() == log.to_csv()


def test_logs_without_the_measured_motion_columns_still_read(tmp_path):
    log = _log()
    csv_path, _ = log.save(tmp_path / "old.motion.csv")
    back = read_log(csv_path)  # columns there, left empty: not rendered
    assert back.output_check is None and back.source_check is None
    # A log written before the columns existed: the base columns only.
    lines = csv_path.read_text().splitlines()
    csv_path.write_text("\n".join(",".join(line.split(",")[:len(BASE_COLUMNS)])
                                   for line in lines) + "\n")
    assert csv_path.read_text().splitlines()[0].split(",") == BASE_COLUMNS
    back = read_log(csv_path)
    assert back.output_check is None and back.source_check is None
    np.testing.assert_array_equal(back.corrections, log.corrections)
    # Saving it again writes the new header, the new columns empty.
    back.save(tmp_path / "again.motion.csv")
    header = (tmp_path / "again.motion.csv").read_text().splitlines()[0].split(",")
    assert header == COLUMNS


def test_numbers_keep_at_least_nine_significant_digits(tmp_path):
    log = _log()
    log.matrices[1, 0, 2] = 1.0 / 3.0
    csv_path, _ = log.save(tmp_path / "a.motion.csv")
    row = csv_path.read_text().splitlines()[2].split(",")
    assert len(row[COLUMNS.index("h13")].replace("0.", "")) >= 9


@pytest.mark.parametrize(
    "mutate, message",
    [
        (lambda t: t.replace("frame,time_s", "frame,time"), "line 1"),
        (lambda t: t.replace(",ok,", ",good,", 1), "line 2"),
        (lambda t: "\n".join(t.splitlines()[:3] + [t.splitlines()[3][:-5]]), "line 4"),
        (lambda t: t.replace(t.splitlines()[2].split(",")[2], "abc", 1), "line 3"),
    ],
)
def test_malformed_csv_names_the_line(tmp_path, mutate, message):
    csv_path, _ = _log().save(tmp_path / "m.motion.csv")
    csv_path.write_text(mutate(csv_path.read_text()))
    with pytest.raises(StabilizeError, match=message):
        read_log(csv_path)


def test_malformed_json_is_reported(tmp_path):
    csv_path, json_path = _log().save(tmp_path / "m.motion.csv")
    json_path.write_text("{not json")
    with pytest.raises(StabilizeError, match="not valid JSON"):
        read_log(csv_path)
    json_path.write_text(json.dumps({"format": "other"}))
    with pytest.raises(StabilizeError, match="not a stabilize motion log"):
        read_log(csv_path)
    with pytest.raises(StabilizeError, match="not found"):
        read_log(tmp_path / "none.motion.csv")


# ------------------------------------------------------------------ fuzzing the reader


@st.composite
def _mutation(draw):
    """One random damage: cut the file short, flip some bytes, or drop a field of a line."""
    kind = draw(st.sampled_from(["truncate", "flip", "drop", "duplicate"]))
    target = draw(st.sampled_from(["csv", "json"]))
    return kind, target, draw(st.randoms(use_true_random=False))


def _damage(data: bytes, kind: str, rnd) -> bytes:
    if not data:
        return data
    if kind == "truncate":
        return data[: rnd.randrange(len(data))]
    if kind == "flip":
        out = bytearray(data)
        for _ in range(rnd.randint(1, 8)):
            out[rnd.randrange(len(out))] = rnd.randrange(256)
        return bytes(out)
    lines = data.split(b"\n")
    i = rnd.randrange(len(lines))
    if kind == "duplicate":
        lines.insert(i, lines[i])
        return b"\n".join(lines)
    fields = lines[i].split(b",")
    if len(fields) > 1:
        del fields[rnd.randrange(len(fields))]
    lines[i] = b",".join(fields)
    return b"\n".join(lines)


@settings(max_examples=200, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(mutation=_mutation(), with_corrections=st.booleans())
def test_read_log_survives_any_damage(tmp_path, mutation, with_corrections):
    """A damaged log is read or refused with a StabilizeError; nothing else escapes."""
    kind, target, rnd = mutation
    csv_path, json_path = _log(with_corrections=with_corrections).save(tmp_path / "f.motion.csv")
    path = csv_path if target == "csv" else json_path
    path.write_bytes(_damage(path.read_bytes(), kind, rnd))
    try:
        back = read_log(csv_path)
    except StabilizeError as exc:
        assert "\n" not in str(exc) and str(tmp_path) in str(exc)
        return
    # What is read is usable: finite, invertible transforms, one status per frame.
    assert np.all(np.isfinite(back.matrices)) and len(back.status) == back.frames
    assert np.all(np.isfinite(back.path))


@pytest.mark.parametrize(
    "mutate, message",
    [
        (lambda t: t.replace("\n1,", "\n7,", 1), "line 3: frame number out of order"),
        (lambda t: t.replace(",500,", ",-5,", 1), "line 2: tracked is not a whole number"),
        (lambda t: t.replace(",500,", ",nan,", 1), "line 2: tracked"),
        (lambda t: t.replace("\n0,0.0,", "\n0,inf,", 1), "line 2: time_s"),
        (lambda t: "\n".join(t.splitlines()[:2] + [""] + t.splitlines()[2:]), "line 3: 0 fields"),
        (lambda t: t.replace("\n0,0.0,1.0,", "\n0,0.0,0.0,", 1).replace(
            ",0.0,0.0,0.0,1.0,0.0,0.0,0.0,1.0,", ",0.0,0.0,0.0,0.0,0.0,0.0,0.0,1.0,", 1),
         "line 2: transform is singular"),
        (lambda t: t.replace("\n", "\n\0", 1), "line 2"),
    ],
)
def test_damaged_rows_name_the_line(tmp_path, mutate, message):
    csv_path, _ = _log().save(tmp_path / "m.motion.csv")
    csv_path.write_text(mutate(csv_path.read_text()))
    with pytest.raises(StabilizeError, match=message):
        read_log(csv_path)


def test_a_rare_step_back_in_the_times_is_read_and_more_are_refused(tmp_path):
    """A container can time one frame before the one ahead of it (``box.mp4`` of tests/real
    does so with its last frame); the tool logs the times it decoded and must read its own
    log back. Times that go back or repeat on more frames than that are no clip's."""
    log = _log(n=6, with_corrections=False)
    log.time_s = log.time_s.copy()
    log.time_s[-1] = log.time_s[-2] - 0.03
    csv_path, _ = log.save(tmp_path / "glitch.motion.csv")
    np.testing.assert_array_equal(read_log(csv_path).time_s, log.time_s)
    log.time_s[2] = log.time_s[1]
    csv_path, _ = log.save(tmp_path / "twice.motion.csv")
    with pytest.raises(StabilizeError, match="line 4: time_s is not later"):
        read_log(csv_path)


def test_a_log_fits_its_clip_of_irregular_times_and_not_a_longer_one():
    """The header's frame count is duration × stated rate: a clip of irregular times (68
    frames over 29.5 s at a stated 15 fps, as tree.avi of tests/real) has far fewer, and its
    own log must fit it; a log covering half of another clip at the same rate must not."""
    def info(duration_s: float, fps: float) -> VideoInfo:
        return VideoInfo("c.avi", 640, 360, fps, f"{fps:g}", duration_s,
                         int(round(duration_s * fps)), "h264", 0.0, None)

    irregular = _log(n=6, with_corrections=False)
    irregular.time_s = np.array([0.0, 5.9, 11.8, 17.7, 23.6, 29.5])
    irregular.source = {**irregular.source, "fps": 15.0, "frames": 6}
    check_log_fits(irregular, info(29.6, 15.0), "tree.motion.csv")
    short = _log(n=6, with_corrections=False)
    short.source = {**short.source, "fps": 29.97}
    with pytest.raises(StabilizeError, match="has 6 frames"):
        check_log_fits(short, info(4.0, 29.97), "short.motion.csv")


def test_damaged_json_fields_are_refused(tmp_path):
    csv_path, json_path = _log().save(tmp_path / "m.motion.csv")
    doc = json.loads(json_path.read_text())
    for change, message in [({"source": {**doc["source"], "fps": "fast"}}, "fps"),
                            ({"source": {**doc["source"], "width": 0}}, "width"),
                            ({"settings": [1, 2]}, "settings is not a JSON object"),
                            ({"version": True}, "version")]:
        json_path.write_text(json.dumps({**doc, **change}))
        with pytest.raises(StabilizeError, match=message):
            read_log(csv_path)
    json_path.write_bytes(b"\xff\xfe{}")
    with pytest.raises(StabilizeError, match="not a text file"):
        read_log(csv_path)


def test_save_writes_what_the_file_functions_write(tmp_path):
    """``log.save`` is the published way to write; the record hands it to the io module."""
    from stabilize.io.motion_log_files import json_path_for, log_csv, log_json, save_log

    log = _log()
    a = log.save(tmp_path / "a.motion.csv")
    b = save_log(log, tmp_path / "b.motion.csv")
    assert a == (tmp_path / "a.motion.csv", json_path_for(tmp_path / "a.motion.csv"))
    assert a[0].read_text() == b[0].read_text() == log_csv(log) == log.to_csv()
    assert json.loads(a[1].read_text()) == json.loads(b[1].read_text()) == log.to_json()
    assert log.to_json() == log_json(log)


def test_the_record_is_on_the_ground_floor():
    """The record and its schema import nothing of ours but ground-floor modules (no files)."""
    import ast
    from pathlib import Path

    import stabilize.motion_log as record

    ground = {"errors", "geometry", "config", "raw_path", "version"}
    tree = ast.parse(Path(record.__file__).read_text(encoding="utf-8"))
    ours = [node.module for node in ast.walk(tree)
            if isinstance(node, ast.ImportFrom) and node.level == 1]
    assert ours and set(ours) <= ground, ours
    assert not [n for n in ast.walk(tree) if isinstance(n, ast.Import)
                and any(a.name.split(".")[0] in ("os", "io", "csv", "json") for a in n.names)]


def test_frame_0_is_first_not_a_measurement(tmp_path):
    """Frame 0 has nothing before it: its status says so, and ``status == "ok"`` (the filter
    a script uses for measured frames) leaves it out; the log reader accepts the value."""
    clip = write_clip(tmp_path / "pan.mp4", noise_frames(8, 96, 64, shift_px=1.0), 24.0)
    log = stabilize.measure(clip)
    assert log.status[0] == "first" and log.tracked[0] == 0
    assert "first" not in log.status[1:]
    assert not (log.status == "ok")[0]
    assert not measured_frames(log.status)[0]
    csv_path, _ = log.save(tmp_path / "pan.motion.csv")
    assert csv_path.read_text().splitlines()[1].split(",")[
        COLUMNS.index("status")] == "first"
    back = read_log(csv_path)
    np.testing.assert_array_equal(back.status, log.status)
    # Counted as neither weak nor failed.
    assert back.summary["frames_weak"] + back.summary["frames_failed"] == int(
        np.isin(back.status, ["weak", "failed"]).sum())
