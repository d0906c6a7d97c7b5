"""Motion-log files: ``NAME.motion.csv`` and the JSON beside it, written and read.

Writing is atomic (temporary name, then rename; the CSV and its JSON together). Reading treats
a log as data from outside: every problem is a :class:`~stabilize.errors.StabilizeError` naming
the file and line. The record and its columns are :mod:`stabilize.motion_log`.
"""

from __future__ import annotations

import csv
import io
import json
import math
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import StabilizeError
from ..geometry import normalise
from ..motion_log import (
    BAND_COLUMNS,
    BASE_COLUMNS,
    C_COLUMNS,
    CHECK_COLUMNS,
    COLUMNS,
    FORMAT,
    H_COLUMNS,
    OUT_CHECK,
    SMOOTH_COLUMNS,
    SRC_CHECK,
    STATUSES,
    VERSION,
    MotionLog,
    RowBands,
    use_files,
)
from ..version import __version__
from .probing import VideoInfo
from .publishing import all_or_nothing, write_text_atomic

__all__ = ["MAX_FPS", "MAX_JSON_BYTES", "MAX_LINE_BYTES", "MAX_TIME_S", "TIME_GLITCH_SHARE",
           "bands_csv", "bands_path_for", "check_log_fits", "json_path_for", "jsonable",
           "log_csv", "log_json", "read_bands", "read_log", "save_log"]


# --------------------------------------------------------------------- writing
def log_csv(motion: MotionLog) -> str:
    """The CSV text of a log: header row, then one row per frame (:data:`COLUMNS`).

    Numbers are written with ``repr`` (they round-trip exactly); non-finite ones as ``nan``;
    columns a job did not fill (smoothed path, corrections, checks) are left empty.
    """
    r = motion.readouts()
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(COLUMNS)
    h = normalise(motion.matrices).reshape(-1, 9)
    cm = None if motion.corrections is None else normalise(motion.corrections).reshape(-1, 9)
    for t in range(motion.frames):
        row: list[Any] = [t, _num(motion.time_s[t])]
        row += [_num(v) for v in h[t]]
        row += [_num(v) for v in r["motion"][t]]
        row += [int(motion.tracked[t]), int(motion.inliers[t]), _num(motion.inlier_ratio[t]),
                _num(motion.rms_px[t]), int(motion.rounds[t]), str(motion.status[t])]
        row += [_num(v) for v in r["path"][t]]
        row += [_num(v) for v in r["smooth"][t]] if "smooth" in r else [""] * 4
        row += [_num(v) for v in cm[t]] if cm is not None else [""] * 9
        for check in (motion.output_check, motion.source_check):
            row += [_num(v) for v in check[t]] if check is not None else [""] * 3
        writer.writerow(row)
    return buf.getvalue()


def log_json(motion: MotionLog) -> dict[str, Any]:
    """The JSON document of a log: format, version, source, settings, summary, tool version,
    then the log's ``extra`` keys."""
    doc = {
        "format": FORMAT, "version": VERSION, "source": motion.source,
        "settings": motion.settings, "summary": jsonable(motion.summary),
        "tool_version": __version__,
    }
    doc.update(jsonable(motion.extra))
    if motion.row_bands is not None:
        rb = motion.row_bands
        doc["row_bands"] = {"file": None, "bands": int(rb.shift_px.shape[1]),
                            "readout_ms": jsonable(1000.0 * rb.readout_s),
                            "columns": list(BAND_COLUMNS)}
    return doc


def bands_csv(motion: MotionLog) -> str:
    """The row-band sidecar's CSV text (:data:`BAND_COLUMNS`): one row per measured band."""
    rb = motion.row_bands
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(BAND_COLUMNS)
    if rb is None:
        return buf.getvalue()
    n, nb = rb.shift_px.shape[:2]
    h = float(motion.size[1])
    edges = np.linspace(-0.5, h - 0.5, nb + 1)
    rows = 0.5 * (edges[:-1] + edges[1:])
    for t in range(n):
        for b in range(nb):
            dx, dy = rb.shift_px[t, b]
            if not (math.isfinite(dx) and math.isfinite(dy)):
                continue
            when = float(motion.time_s[t]) + rows[b] * (rb.readout_s / h)
            writer.writerow([t, b, _num(rows[b]), _num(when), _num(dx), _num(dy),
                             _num(rb.support[t, b])])
    return buf.getvalue()


def bands_path_for(csv_path: Path) -> Path:
    """``NAME.motion.csv`` -> ``NAME.motion.bands.csv``."""
    return csv_path.with_suffix(".bands.csv")


def save_log(motion: MotionLog, csv_path: str | Path) -> tuple[Path, Path]:
    """Write ``NAME.motion.csv`` and its JSON beside it; returns both paths."""
    csv_path = Path(csv_path)
    json_path = json_path_for(csv_path)
    doc = log_json(motion)
    with all_or_nothing():  # the CSV and its JSON appear together or not at all
        write_text_atomic(csv_path, log_csv(motion))
        if motion.row_bands is not None:
            doc["row_bands"]["file"] = bands_path_for(csv_path).name
            write_text_atomic(bands_path_for(csv_path), bands_csv(motion))
        write_text_atomic(json_path, json.dumps(doc, indent=2, allow_nan=False) + "\n")
    return csv_path, json_path


def json_path_for(csv_path: Path) -> Path:
    """``NAME.motion.csv`` -> ``NAME.motion.json`` (any ``.csv`` -> ``.json``)."""
    return csv_path.with_suffix(".json")


def _num(v: float) -> str:
    v = float(v)
    if not math.isfinite(v):
        return "nan"
    return repr(v)


def jsonable(obj: Any) -> Any:
    """``obj`` with NumPy values turned into plain ones and non-finite floats into None."""
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        f = float(obj)
        return f if math.isfinite(f) else None
    return obj


use_files(to_csv=log_csv, to_json=log_json, save=save_log)


# --------------------------------------------------------------------- reading
# Logs are data from outside: a file edited by hand, cut short, or from somewhere else. Every
# problem found is a StabilizeError naming the file and line, never another exception.
_INT_COLUMNS = ("tracked", "inliers", "rounds")
_MAX_COUNT = 2**31 - 1
_MAX_SIDE_PX = 1 << 16
#: Longest line a log's CSV may have (bytes): a row of every column is well under 2 KiB.
MAX_LINE_BYTES = 64 * 1024
#: Largest JSON half of a log read (bytes).
MAX_JSON_BYTES = 256 * 1024 * 1024
#: Largest time a log may state (s): about 115 days, far from where int64 microseconds or
#: nanoseconds overflow.
MAX_TIME_S = 1e7
#: Frame times that do not go forward are a container's glitch the stages read past (the
#: shake timebase skips a step back or a repeat) when they are rare: on one frame, or on at
#: most this share of them. ``box.mp4`` of tests/real times its last frame 0.03 s before the
#: one ahead of it, and the reader refused the tool's own log of it. More are no clip's
#: times (a column reversed, a column of zeros). This project's choice, as the timebase's
#: rare gaps.
TIME_GLITCH_SHARE = 0.01
#: Largest frame rate a log may state (frames per second).
MAX_FPS = 1e5
# Plausible transforms (common practice): the linear part of a frame-to-frame or correction
# transform within ±100, its perspective terms within ±1 per pixel, its shift within 100
# picture sizes. Anything beyond is damage, and would overflow in the warp or the plots.
_MAX_LINEAR = 100.0
_MAX_PERSPECTIVE = 1.0
_MAX_SHIFT_SIZES = 100.0
# Types of the source fields a log may carry (None allowed for each).
_SOURCE_TYPES: dict[str, tuple[type, ...]] = {
    "path": (str,), "codec": (str,), "audio_codec": (str,), "fps": (int, float),
    "duration_s": (int, float), "rotation_deg": (int, float), "frames": (int,),
    "frames_expected": (int,), "truncated": (bool,),
}


def _read_text(path: Path) -> str:
    try:
        if path.stat().st_size > MAX_JSON_BYTES:
            raise StabilizeError(f"{path}: too large for a motion log "
                                 f"({path.stat().st_size} bytes)")
        return path.read_bytes().decode("utf-8")
    except OSError as exc:
        raise StabilizeError(f"{path}: cannot read ({exc.strerror or exc})") from None
    except UnicodeDecodeError as exc:
        raise StabilizeError(f"{path}: not a text file (byte {exc.start} is not UTF-8)") from None


def _read_meta(json_path: Path) -> dict[str, Any]:
    text = _read_text(json_path)
    try:
        meta = json.loads(text)
    except json.JSONDecodeError as exc:
        raise StabilizeError(
            f"{json_path}: not valid JSON at line {exc.lineno}: {exc.msg}"
        ) from None
    except (ValueError, RecursionError):  # absurd numbers or nesting
        raise StabilizeError(f"{json_path}: not valid JSON (too deeply nested or a number "
                             "too long)") from None
    if not isinstance(meta, dict) or meta.get("format") != FORMAT:
        raise StabilizeError(f"{json_path}: not a stabilize motion log (format field missing)")
    version = meta.get("version")
    if type(version) is not int or version != VERSION:
        raise StabilizeError(
            f"{json_path}: log version {version!r} is not supported (need {VERSION})"
        )
    source = meta.get("source")
    if not isinstance(source, dict) or not all(
        type(source.get(k)) is int and 0 < source[k] <= _MAX_SIDE_PX for k in ("width", "height")
    ):
        raise StabilizeError(f"{json_path}: source width and height missing or invalid")
    for key, types in _SOURCE_TYPES.items():
        value = source.get(key)
        if value is None:
            continue
        if not isinstance(value, types) or (bool not in types and isinstance(value, bool)):
            raise StabilizeError(f"{json_path}: source {key} {_short(value)} is not "
                                 f"{'text' if str in types else 'a number'}")
        if int in types and not _finite(value, 1e15):
            raise StabilizeError(f"{json_path}: source {key} {_short(value)} is out of range")
    fps = source.get("fps")
    if fps is not None and not (_finite(fps, MAX_FPS) and fps > 0):
        raise StabilizeError(f"{json_path}: source fps {_short(fps)} is not a positive number "
                             f"of at most {MAX_FPS:g}")
    for key in ("settings", "summary", "outputs"):
        if meta.get(key) is not None and not isinstance(meta[key], dict):
            raise StabilizeError(f"{json_path}: {key} is not a JSON object")
    for key, value in (meta.get("outputs") or {}).items():
        if not isinstance(value, str):
            raise StabilizeError(f"{json_path}: outputs {key} {_short(value)} is not a file name")
    ignore = (meta.get("settings") or {}).get("ignore")
    if ignore is not None and not (
            isinstance(ignore, list) and all(
                isinstance(r, list) and len(r) == 4 and all(_finite(v, 1e9) for v in r)
                for r in ignore)):
        raise StabilizeError(f"{json_path}: settings ignore {_short(ignore)} is not a list of "
                             "X,Y,W,H regions")
    for key, value in (meta.get("summary") or {}).items():
        if isinstance(value, int | float) and not isinstance(value, bool) \
                and not _finite(value, 1e300):
            raise StabilizeError(f"{json_path}: summary {key} {_short(value)} is out of range")
    return meta


def _short(value: Any) -> str:
    """``repr(value)`` cut to 40 characters, for a message."""
    text = repr(value) if not isinstance(value, int) or abs(value) < 10**30 else "(a huge number)"
    return text if len(text) <= 40 else text[:37] + "..."


def _finite(value: Any, bound: float) -> bool:
    """Whether ``value`` is a real number (not a bool) with magnitude at most ``bound``."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        return False
    try:
        return math.isfinite(float(value)) and abs(value) <= bound
    except OverflowError:  # an integer with hundreds of digits
        return False


def _bounded_lines(csv_path: Path, fh) -> Iterator[str]:
    """The lines of a log's CSV, read one at a time; a line longer than
    :data:`MAX_LINE_BYTES` or not UTF-8 is refused at once, before it is held whole."""
    number = 0
    while True:
        raw = fh.readline(MAX_LINE_BYTES + 1)
        if not raw:
            return
        number += 1
        if len(raw) > MAX_LINE_BYTES:
            raise StabilizeError(f"{csv_path}: line {number}: longer than {MAX_LINE_BYTES} "
                                 "bytes; not a motion log")
        try:
            yield raw.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise StabilizeError(f"{csv_path}: line {number}: not text (byte {exc.start} is "
                                 "not UTF-8)") from None


def _read_rows(csv_path: Path) -> tuple[np.ndarray, np.ndarray, np.ndarray, bool, bool,
                                        list[str], set[str]]:
    """Parse the CSV body: (numbers, status, line numbers, has smooth, has corrections, the
    known columns present, the check columns with any value written). A log from before the
    check columns has only the base ones."""
    rows: list[list[str]] = []
    lines: list[int] = []
    try:
        with open(csv_path, "rb") as fh:
            reader = csv.reader(_bounded_lines(csv_path, fh))
            for row in reader:
                if row or lines:  # blank lines after the header still count below
                    rows.append(row)
                    lines.append(reader.line_num)
                if len(rows) == 1 and rows[0][: len(BASE_COLUMNS)] != BASE_COLUMNS:
                    break  # refused below, before reading on
    except csv.Error as exc:
        raise StabilizeError(f"{csv_path}: line {reader.line_num}: {exc}") from None
    except OSError as exc:
        raise StabilizeError(f"{csv_path}: cannot read ({exc.strerror or exc})") from None
    while rows and len(rows) > 1 and not rows[-1]:  # trailing blank lines from an editor
        rows.pop()
        lines.pop()
    if not rows or rows[0][: len(BASE_COLUMNS)] != BASE_COLUMNS:
        raise StabilizeError(f"{csv_path}: line 1: header does not match the motion log columns")
    names = COLUMNS if rows[0][: len(COLUMNS)] == COLUMNS else BASE_COLUMNS
    width = len(rows[0])
    body, body_lines = rows[1:], lines[1:]
    if not body:
        raise StabilizeError(f"{csv_path}: line 2: the log has no frames")
    n = len(body)
    numeric = np.empty((n, len(names)), dtype=np.float64)
    status = np.empty(n, dtype=object)
    has_smooth = has_corr = True
    status_col = names.index("status")
    optional = {j for j, name in enumerate(names) if name in SMOOTH_COLUMNS or name in C_COLUMNS}
    checks = {j for j, name in enumerate(names) if name in CHECK_COLUMNS}
    written: set[str] = set()
    for t, (row, line) in enumerate(zip(body, body_lines, strict=True)):
        if len(row) != width:
            raise StabilizeError(
                f"{csv_path}: line {line}: {len(row)} fields, expected {width}"
            )
        for j, name in enumerate(names):
            cell = row[j]
            if j == status_col:
                if cell not in STATUSES:
                    raise StabilizeError(
                        f"{csv_path}: line {line}: status {cell[:40]!r} is not one of "
                        + ", ".join(STATUSES)
                    )
                status[t] = cell
                numeric[t, j] = 0.0
                continue
            if j in checks:
                if cell == "":  # not rendered
                    numeric[t, j] = np.nan
                    continue
                written.add(name)
            if cell == "" and j in optional:
                numeric[t, j] = np.nan
                if name in SMOOTH_COLUMNS:
                    has_smooth = False
                else:
                    has_corr = False
                continue
            try:
                numeric[t, j] = float(cell)
            except ValueError:
                raise StabilizeError(
                    f"{csv_path}: line {line}: column {name}: {cell[:40]!r} is not a number"
                ) from None
    return numeric, status, np.array(body_lines), has_smooth, has_corr, names, written


def _check_rows(csv_path: Path, numeric: np.ndarray, lines: np.ndarray,
                has_smooth: bool, has_corr: bool, names: list[str],
                size: tuple[int, int]) -> None:
    """Refuse values no stage could use: frames out of order, non-finite times or times
    that do not go forward (beyond a rare glitch, :data:`TIME_GLITCH_SHARE`), non-finite or
    singular transforms, counts that are not whole numbers."""
    n = len(numeric)
    col = {name: j for j, name in enumerate(names)}

    def first_bad(ok: np.ndarray, what: str) -> None:
        if not np.all(ok):
            t = int(np.flatnonzero(~ok)[0])
            raise StabilizeError(f"{csv_path}: line {int(lines[t])}: {what}")

    first_bad(numeric[:, col["frame"]] == np.arange(n), "frame number out of order")
    times = numeric[:, col["time_s"]]
    first_bad(np.isfinite(times) & (np.abs(times) <= MAX_TIME_S),
              f"time_s is not a number of seconds within ±{MAX_TIME_S:g}")
    later = np.r_[True, np.diff(times) > 0]
    if np.count_nonzero(~later) > max(1, TIME_GLITCH_SHARE * (n - 1)):
        first_bad(later, "time_s is not later than the frame before")
    for name in _INT_COLUMNS:
        v = numeric[:, col[name]]
        with np.errstate(invalid="ignore"):
            ok = np.isfinite(v) & (v >= 0) & (v <= _MAX_COUNT) & (v == np.round(v))
        first_bad(ok, f"{name} is not a whole number of 0 or more")
    h = numeric[:, [col[c] for c in H_COLUMNS]].reshape(n, 3, 3)
    first_bad(np.isfinite(h).reshape(n, -1).all(axis=1), "transform has a non-finite value")
    with np.errstate(all="ignore"):
        det = np.linalg.det(h)
    ok = np.isfinite(det) & (np.abs(det) > 1e-12) & (h[:, 2, 2] != 0)
    first_bad(ok, "transform is singular (it cannot be inverted)")
    first_bad(_plausible(h, size), "transform is beyond any camera motion (damaged)")
    if has_corr:
        c = numeric[:, [col[name] for name in C_COLUMNS]]
        first_bad(np.isfinite(c).all(axis=1), "correction has a non-finite value")
        first_bad(_plausible(c.reshape(n, 3, 3), size),
                  "correction is beyond any camera motion (damaged)")
    if has_smooth:
        sm = numeric[:, [col[name] for name in SMOOTH_COLUMNS]]
        first_bad(np.isfinite(sm).all(axis=1), "smoothed path has a non-finite value")
        first_bad((np.abs(sm) <= 1e9).all(axis=1), "smoothed path is out of range (damaged)")


def _plausible(h: np.ndarray, size: tuple[int, int]) -> np.ndarray:
    """(n,) whether each 3x3 transform is within the plausible bounds above (``size`` is the
    source's width and height in pixels)."""
    shift = _MAX_SHIFT_SIZES * max(size)
    with np.errstate(invalid="ignore"):
        return ((np.abs(h[:, :2, :2]) <= _MAX_LINEAR).all(axis=(1, 2))
                & (np.abs(h[:, :2, 2]) <= shift).all(axis=1)
                & (np.abs(h[:, 2, :2]) <= _MAX_PERSPECTIVE).all(axis=1)
                & (np.abs(h[:, 2, 2]) <= _MAX_LINEAR))


def check_log_fits(motion: MotionLog, info: VideoInfo, log_path: str | Path) -> None:
    """Refuse a log that was not made from this clip (or a proxy of it): another frame rate,
    more time than the clip holds, or far fewer frames than it has over far less of its
    time.

    Parameters
    ----------
    motion : the log read.
    info : the clip's header.
    log_path : the log's file, for the message.

    Raises
    ------
    StabilizeError
        Naming ``log_path`` and the mismatch. The picture size may differ (a proxy's log is
        scaled).
    """
    fps = motion.source.get("fps")
    if isinstance(fps, int | float) and fps > 0 and abs(fps / info.fps - 1.0) > 0.01:
        raise StabilizeError(f"{log_path}: made from a clip at {fps:g} fps, but {info.path} "
                             f"runs at {info.fps:g} fps; use the clip's own log")
    if info.duration_s > 0:
        span = float(motion.time_s[-1] - motion.time_s[0])
        slack = max(1.0, 2.0 / info.fps)
        if span > info.duration_s + slack:
            raise StabilizeError(f"{log_path}: covers {span:.2f} s, but {info.path} lasts "
                                 f"{info.duration_s:.2f} s; use the clip's own log")
        # The header's count is duration × rate, which a clip of irregular times does not
        # keep (tree.avi of tests/real: 68 frames over 29.5 s at a stated 15 fps, "about
        # 444"): fewer frames refuse the log only when it also covers less of the clip.
        if not motion.source.get("truncated") and \
                span < 0.9 * info.duration_s - slack and \
                motion.frames < 0.9 * info.frames_estimate - 2:
            raise StabilizeError(f"{log_path}: has {motion.frames} frames, but {info.path} has "
                                 f"about {info.frames_estimate}; use the clip's own log")


def read_log(csv_path: str | Path) -> MotionLog:
    """Read a motion log written by this major version (the CSV and the JSON beside it).

    Raises StabilizeError naming the file and line of the first problem found; a damaged or
    hand-edited log gives that one error, never another exception.
    """
    csv_path = Path(csv_path)
    if csv_path.suffix.lower() == ".json":
        csv_path = csv_path.with_suffix(".csv")
    json_path = json_path_for(csv_path)
    for p in (csv_path, json_path):
        if not p.is_file():
            raise StabilizeError(f"{p}: motion log file not found")
    meta = _read_meta(json_path)
    numeric, status, lines, has_smooth, has_corr, names, written = _read_rows(csv_path)
    _check_rows(csv_path, numeric, lines, has_smooth, has_corr, names,
                (meta["source"]["width"], meta["source"]["height"]))
    n = len(numeric)
    col = {name: j for j, name in enumerate(names)}
    h = numeric[:, [col[c] for c in H_COLUMNS]].reshape(n, 3, 3)
    corrections = smooth_values = None
    if has_corr:
        corrections = numeric[:, [col[c] for c in C_COLUMNS]].reshape(n, 3, 3)
    if has_smooth:
        smooth_values = numeric[:, [col[c] for c in SMOOTH_COLUMNS]]
    checks = {}
    for key, cols in (("output_check", OUT_CHECK), ("source_check", SRC_CHECK)):
        # Columns left empty (a log not rendered) read as absent, not as unmeasured.
        if any(c in written for c in cols):
            checks[key] = numeric[:, [col[c] for c in cols]]
    return MotionLog(
        time_s=numeric[:, col["time_s"]],
        matrices=h,
        tracked=numeric[:, col["tracked"]].astype(int),
        inliers=numeric[:, col["inliers"]].astype(int),
        inlier_ratio=numeric[:, col["inlier_ratio"]],
        rms_px=numeric[:, col["rms_px"]],
        rounds=numeric[:, col["rounds"]].astype(int),
        status=status.astype(str),
        source=meta["source"],
        settings=meta.get("settings") or {},
        summary=meta.get("summary") or {},
        corrections=corrections,
        smooth_values=smooth_values,
        **checks,
        extra={k: v for k, v in meta.items()
               if k not in {"format", "version", "source", "settings", "summary",
                            "tool_version", "row_bands"}},
        row_bands=read_bands(csv_path, meta, n),
    )


def read_bands(csv_path: Path, meta: dict[str, Any], frames: int) -> RowBands | None:
    """The row-band sidecar of a log whose JSON names one (``row_bands``), else None."""
    info = meta.get("row_bands")
    if not isinstance(info, dict) or not isinstance(info.get("file"), str):
        return None
    path = csv_path.parent / Path(info["file"]).name
    if not path.is_file():
        raise StabilizeError(f"{path}: row-band file named in the log's JSON not found")
    try:
        nb = int(info["bands"])
        readout_s = float(info["readout_ms"] or 0.0) / 1000.0
        data = np.loadtxt(io.StringIO(_read_text(path)), delimiter=",", skiprows=1,
                          ndmin=2, dtype=np.float64)
    except (KeyError, TypeError, ValueError) as exc:
        raise StabilizeError(f"{path}: not a valid row-band file ({exc})") from None
    shift = np.full((frames, max(nb, 1), 2), np.nan)
    support = np.zeros((frames, max(nb, 1)))
    if len(data):
        if data.shape[1] != len(BAND_COLUMNS):
            raise StabilizeError(f"{path}: expected columns {','.join(BAND_COLUMNS)}")
        t, b = data[:, 0].astype(int), data[:, 1].astype(int)
        ok = (t >= 0) & (t < frames) & (b >= 0) & (b < nb)
        if not ok.all():
            raise StabilizeError(f"{path}: line {int(np.argmin(ok)) + 2}: frame or band "
                                 "out of range")
        shift[t, b] = data[:, 4:6]
        support[t, b] = data[:, 6]
    return RowBands(shift, support, readout_s)
