"""The motion log: its schema, its coordinate convention, and CSV/JSON reading and writing.

Coordinate convention (stated here once; every stage uses it)
--------------------------------------------------------------
Pixel coordinates are (x, y) in full-resolution source pixels, x to the right and y down, with
the origin at the *centre* of the top-left pixel: pixel column j, row i has its centre at
(j, i). This is OpenCV's convention for ``warpPerspective`` and ``remap``.

A 3×3 matrix M acts on homogeneous column vectors (x, y, 1) and is normalised so m33 = 1.

* ``H_t`` (the ``h11 … h33`` columns) maps pixel coordinates of frame t−1 to frame t: a scene
  point seen at p in frame t−1 is seen at H_t·p in frame t, so
  ``cv2.warpPerspective(frame[t-1], H_t, (w, h))`` reproduces frame t where both see the scene.
  Frame 0's matrix is the identity.
* The raw camera path is ``P_t = A_t⁻¹`` with ``A_t = H_t ⋯ H_1``: P_t maps pixels of frame t
  to where they lie in frame 0. A pan to the right makes ``path_x`` grow.
* The smoothed path ``S_t`` is the same for the virtual (steady) camera.
* The correction ``C_t`` (``c11 … c33``) maps pixels of source frame t to pixels of output
  frame t: the output is ``cv2.warpPerspective(frame[t], C_t, (w, h))``.

Any such matrix is read as a similarity about the frame centre c = ((w−1)/2, (h−1)/2):
``dx, dy`` = M(c) − c, rotation ``atan2(m21 − m12, m11 + m22)`` in degrees, and scale
``sqrt(|m11·m22 − m12·m21|)`` (see :func:`similarity_readout`).
"""

from __future__ import annotations

import csv
import io
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .errors import StabilizeError
from .geometry import frame_centre, normalise, similarity_readout
from .io import all_or_nothing, write_text_atomic

FORMAT = "stabilize-motion-log"
VERSION = 1
STATUSES = ("ok", "weak", "failed", "cut")

_H = [f"h{r}{c}" for r in (1, 2, 3) for c in (1, 2, 3)]
_C = [f"c{r}{c}" for r in (1, 2, 3) for c in (1, 2, 3)]
#: The columns every version-1 log has.
BASE_COLUMNS = (
    ["frame", "time_s", *_H, "dx", "dy", "rotation_deg", "scale",
     "tracked", "inliers", "inlier_ratio", "rms_px", "rounds", "status",
     "path_x", "path_y", "path_deg", "path_scale",
     "smooth_x", "smooth_y", "smooth_deg", "smooth_scale", *_C]
)
#: The motion measured on the frames while rendering (:mod:`stabilize.residual`): of the
#: output (``out_*``) and of the source (``src_check_*``), frame t−1 to t, read as a
#: similarity about the frame centre. Written after the base columns; older logs lack them.
OUT_CHECK = ["out_dx", "out_dy", "out_deg"]
SRC_CHECK = ["src_check_dx", "src_check_dy", "src_check_deg"]
CHECK_COLUMNS = [*OUT_CHECK, *SRC_CHECK]
COLUMNS = [*BASE_COLUMNS, *CHECK_COLUMNS]


@dataclass
class MotionLog:
    """Per-frame camera motion of one clip, with diagnostics, path and (after steady) corrections.

    Arrays have one row per decoded frame. ``matrices`` are the inter-frame transforms H_t,
    ``corrections`` the C_t (None before smoothing), ``smooth_values`` the smoothed path S_t
    read as (x, y, degrees, scale) per frame (None before smoothing); see the module docstring
    for the convention. ``output_check`` and ``source_check`` are (frames, 3) dx, dy (pixels)
    and degrees: the inter-frame motion measured on the written output and on the source
    frames while rendering (nan where not measured; None before rendering).
    """

    time_s: np.ndarray
    matrices: np.ndarray
    tracked: np.ndarray
    inliers: np.ndarray
    inlier_ratio: np.ndarray
    rms_px: np.ndarray
    rounds: np.ndarray
    status: np.ndarray
    source: dict[str, Any] = field(default_factory=dict)
    settings: dict[str, Any] = field(default_factory=dict)
    summary: dict[str, Any] = field(default_factory=dict)
    smooth_values: np.ndarray | None = None
    corrections: np.ndarray | None = None
    extra: dict[str, Any] = field(default_factory=dict)
    output_check: np.ndarray | None = None
    source_check: np.ndarray | None = None

    @property
    def frames(self) -> int:
        return len(self.time_s)

    @property
    def size(self) -> tuple[int, int]:
        return int(self.source["width"]), int(self.source["height"])

    @property
    def centre(self) -> np.ndarray:
        return frame_centre(*self.size)

    @property
    def path(self) -> np.ndarray:
        """Raw camera path P_t, (frames, 3, 3), restarting at scene cuts."""
        from .path import accumulate

        return accumulate(self.matrices, self.status == "cut")

    def readouts(self) -> dict[str, np.ndarray]:
        """The derived columns: per-frame motion and path read as similarities."""
        c = self.centre
        out = {"motion": similarity_readout(self.matrices, c),
               "path": similarity_readout(self.path, c)}
        if self.smooth_values is not None:
            out["smooth"] = np.asarray(self.smooth_values, dtype=np.float64)
        return out

    # ----------------------------------------------------------------- writing
    def to_csv(self) -> str:
        r = self.readouts()
        buf = io.StringIO()
        writer = csv.writer(buf, lineterminator="\n")
        writer.writerow(COLUMNS)
        h = normalise(self.matrices).reshape(-1, 9)
        cm = None if self.corrections is None else normalise(self.corrections).reshape(-1, 9)
        for t in range(self.frames):
            row: list[Any] = [t, _num(self.time_s[t])]
            row += [_num(v) for v in h[t]]
            row += [_num(v) for v in r["motion"][t]]
            row += [int(self.tracked[t]), int(self.inliers[t]), _num(self.inlier_ratio[t]),
                    _num(self.rms_px[t]), int(self.rounds[t]), str(self.status[t])]
            row += [_num(v) for v in r["path"][t]]
            row += [_num(v) for v in r["smooth"][t]] if "smooth" in r else [""] * 4
            row += [_num(v) for v in cm[t]] if cm is not None else [""] * 9
            for check in (self.output_check, self.source_check):
                row += [_num(v) for v in check[t]] if check is not None else [""] * 3
            writer.writerow(row)
        return buf.getvalue()

    def to_json(self) -> dict[str, Any]:
        from . import __version__

        doc = {
            "format": FORMAT, "version": VERSION, "source": self.source,
            "settings": self.settings, "summary": _jsonable(self.summary),
            "tool_version": __version__,
        }
        doc.update(_jsonable(self.extra))
        return doc

    def save(self, csv_path: str | Path) -> tuple[Path, Path]:
        """Write ``NAME.motion.csv`` and its JSON beside it; returns both paths."""
        csv_path = Path(csv_path)
        json_path = json_path_for(csv_path)
        with all_or_nothing():  # the CSV and its JSON appear together or not at all
            write_text_atomic(csv_path, self.to_csv())
            write_text_atomic(json_path,
                              json.dumps(self.to_json(), indent=2, allow_nan=False) + "\n")
        return csv_path, json_path


def json_path_for(csv_path: Path) -> Path:
    """``NAME.motion.csv`` -> ``NAME.motion.json`` (any ``.csv`` -> ``.json``)."""
    return csv_path.with_suffix(".json")


def _num(v: float) -> str:
    v = float(v)
    if not math.isfinite(v):
        return "nan"
    return repr(v)


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _jsonable(obj.tolist())
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        f = float(obj)
        return f if math.isfinite(f) else None
    return obj


# --------------------------------------------------------------------- reading
# Logs are data from outside: a file edited by hand, cut short, or from somewhere else. Every
# problem found is a StabilizeError naming the file and line, never another exception.
_INT_COLUMNS = ("tracked", "inliers", "rounds")
_SMOOTH = ["smooth_x", "smooth_y", "smooth_deg", "smooth_scale"]
_MAX_COUNT = 2**31 - 1
_MAX_SIDE_PX = 1 << 16


def _read_text(path: Path) -> str:
    try:
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
    fps = source.get("fps")
    if fps is not None and not (isinstance(fps, int | float) and not isinstance(fps, bool)
                                and math.isfinite(fps) and fps > 0):
        raise StabilizeError(f"{json_path}: source fps {fps!r} is not a positive number")
    for key in ("settings", "summary"):
        if meta.get(key) is not None and not isinstance(meta[key], dict):
            raise StabilizeError(f"{json_path}: {key} is not a JSON object")
    return meta


def _read_rows(csv_path: Path) -> tuple[np.ndarray, np.ndarray, np.ndarray, bool, bool,
                                        list[str], set[str]]:
    """Parse the CSV body: (numbers, status, line numbers, has smooth, has corrections, the
    known columns present, the check columns with any value written). A log from before the
    check columns has only the base ones."""
    text = _read_text(csv_path)
    reader = csv.reader(io.StringIO(text, newline=""))
    rows: list[list[str]] = []
    lines: list[int] = []
    try:
        for row in reader:
            if row or lines:  # blank lines after the header still count below
                rows.append(row)
                lines.append(reader.line_num)
    except csv.Error as exc:
        raise StabilizeError(f"{csv_path}: line {reader.line_num}: {exc}") from None
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
    optional = {j for j, name in enumerate(names) if name in _SMOOTH or name in _C}
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
                if name in _SMOOTH:
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
                has_smooth: bool, has_corr: bool, names: list[str]) -> None:
    """Refuse values no stage could use: frames out of order, non-finite times or
    transforms, singular transforms, counts that are not whole numbers."""
    n = len(numeric)
    col = {name: j for j, name in enumerate(names)}

    def first_bad(ok: np.ndarray, what: str) -> None:
        if not np.all(ok):
            t = int(np.flatnonzero(~ok)[0])
            raise StabilizeError(f"{csv_path}: line {int(lines[t])}: {what}")

    first_bad(numeric[:, col["frame"]] == np.arange(n), "frame number out of order")
    first_bad(np.isfinite(numeric[:, col["time_s"]]), "time_s is not a finite number")
    for name in _INT_COLUMNS:
        v = numeric[:, col[name]]
        with np.errstate(invalid="ignore"):
            ok = np.isfinite(v) & (v >= 0) & (v <= _MAX_COUNT) & (v == np.round(v))
        first_bad(ok, f"{name} is not a whole number of 0 or more")
    h = numeric[:, [col[c] for c in _H]].reshape(n, 3, 3)
    first_bad(np.isfinite(h).reshape(n, -1).all(axis=1), "transform has a non-finite value")
    with np.errstate(all="ignore"):
        det = np.linalg.det(h)
    ok = np.isfinite(det) & (np.abs(det) > 1e-12) & (h[:, 2, 2] != 0)
    first_bad(ok, "transform is singular (it cannot be inverted)")
    if has_corr:
        c = numeric[:, [col[name] for name in _C]]
        first_bad(np.isfinite(c).all(axis=1), "correction has a non-finite value")
    if has_smooth:
        sm = numeric[:, [col[name] for name in _SMOOTH]]
        first_bad(np.isfinite(sm).all(axis=1), "smoothed path has a non-finite value")


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
    _check_rows(csv_path, numeric, lines, has_smooth, has_corr, names)
    n = len(numeric)
    col = {name: j for j, name in enumerate(names)}
    h = numeric[:, [col[c] for c in _H]].reshape(n, 3, 3)
    corrections = smooth_values = None
    if has_corr:
        corrections = numeric[:, [col[c] for c in _C]].reshape(n, 3, 3)
    if has_smooth:
        smooth_values = numeric[:, [col[c] for c in _SMOOTH]]
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
                            "tool_version"}},
    )


def frame_reasons(reasons: np.ndarray) -> dict[str, list[int]]:
    """Frames that are weak or failed for a stated reason, by reason (see
    :data:`stabilize.motion_track.REASONS`): ``{"foreground": [12, 13], ...}``."""
    return {str(r): np.flatnonzero(reasons == r).tolist()
            for r in sorted(set(reasons.tolist())) if r}


def reasons_of(motion: MotionLog) -> np.ndarray:
    """Per-frame reason codes ('' for none) from a log's ``frame_reasons``."""
    out = np.full(len(motion.status), "", "<U12")
    for reason, frames in (motion.extra.get("frame_reasons") or {}).items():
        idx = np.asarray([f for f in frames if isinstance(f, int) and 0 <= f < len(out)], int)
        out[idx] = str(reason)[:12]
    return out
