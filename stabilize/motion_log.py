"""The motion-log record: the dataclass, its column schema and the coordinate convention.

Ground floor: no file I/O here; :mod:`stabilize.io.motion_log_files` writes and reads logs.

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

from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .geometry import frame_centre, similarity_readout
from .raw_path import accumulate

__all__ = [
    "BAND_COLUMNS", "BASE_COLUMNS", "CHECK_COLUMNS", "COLUMNS", "C_COLUMNS", "FORMAT",
    "H_COLUMNS", "OUT_CHECK", "SMOOTH_COLUMNS", "SRC_CHECK", "STATUSES", "VERSION", "MotionLog",
    "RowBands", "frame_reasons", "reason_codes", "reasons_of", "use_files",
]

FORMAT = "stabilize-motion-log"
VERSION = 1
#: Per-frame status values: ``first`` marks frame 0 (nothing before it, so no motion was
#: measured: H_0 is the identity), so that ``status == "ok"`` counts measured frames only.
STATUSES = ("ok", "weak", "failed", "cut", "first")

#: The inter-frame transform H_t and the correction C_t, row by row.
H_COLUMNS = [f"h{r}{c}" for r in (1, 2, 3) for c in (1, 2, 3)]
C_COLUMNS = [f"c{r}{c}" for r in (1, 2, 3) for c in (1, 2, 3)]
#: The smoothed path read as a similarity (empty in a log written by ``measure``).
SMOOTH_COLUMNS = ["smooth_x", "smooth_y", "smooth_deg", "smooth_scale"]
#: The columns every version-1 log has.
BASE_COLUMNS = (
    ["frame", "time_s", *H_COLUMNS, "dx", "dy", "rotation_deg", "scale",
     "tracked", "inliers", "inlier_ratio", "rms_px", "rounds", "status",
     "path_x", "path_y", "path_deg", "path_scale", *SMOOTH_COLUMNS, *C_COLUMNS]
)
#: The motion measured on the frames while rendering (:mod:`stabilize.residual`): of the
#: output (``out_*``) and of the source (``src_check_*``), frame t−1 to t, read as a
#: similarity about the frame centre. Written after the base columns; older logs lack them.
OUT_CHECK = ["out_dx", "out_dy", "out_deg"]
SRC_CHECK = ["src_check_dx", "src_check_dy", "src_check_deg"]
CHECK_COLUMNS = [*OUT_CHECK, *SRC_CHECK]
COLUMNS = [*BASE_COLUMNS, *CHECK_COLUMNS]
#: The row-band sidecar (``NAME.motion.bands.csv``, rolling shutter only): one row per
#: measured band of a frame. ``frame`` t, ``band`` b (0 at the top), ``row_px`` the band's
#: centre row, ``time_s`` its exposure instant (the frame's ``time_s`` + row_px × readout /
#: height), ``dx_px``, ``dy_px`` the band's shift from frame t−1 to t, ``support`` the
#: summed weight of the tracks behind it.
BAND_COLUMNS = ["frame", "band", "row_px", "time_s", "dx_px", "dy_px", "support"]


@dataclass(frozen=True)
class RowBands:
    """Row-band shifts of a rolling-shutter clip, as the log keeps them.

    ``shift_px`` (frames, bands, 2) each band's shift (dx, dy) px from frame t−1 to t (NaN
    where not measured); ``support`` (frames, bands); ``readout_s`` the readout the bands were
    timed with (s).
    """

    shift_px: np.ndarray
    support: np.ndarray
    readout_s: float

# The writers of a log's files. The record does no file I/O; :mod:`stabilize.io.motion_log_files`
# hands its writers over with :func:`use_files` when it is imported (importing ``stabilize``
# imports it), so ``log.save(path)`` keeps working as the published API says.
_FILES: dict[str, Callable[..., Any]] = {}


def use_files(*, to_csv: Callable[[MotionLog], str], to_json: Callable[[MotionLog], dict],
              save: Callable[[MotionLog, Path], tuple[Path, Path]]) -> None:
    """Set the functions behind :meth:`MotionLog.to_csv`, ``to_json`` and ``save``.

    Parameters
    ----------
    to_csv : log -> CSV text.
    to_json : log -> JSON document (a dict).
    save : (log, CSV path) -> (CSV path, JSON path) written.
    """
    _FILES.update(to_csv=to_csv, to_json=to_json, save=save)


@dataclass
class MotionLog:
    """Per-frame camera motion of one clip, with diagnostics, path and (after steady) corrections.

    Arrays have one row per decoded frame. ``matrices`` are the inter-frame transforms H_t,
    ``corrections`` the C_t (None before smoothing), ``smooth_values`` the smoothed path S_t
    read as (x, y, degrees, scale) per frame (None before smoothing); see the module docstring
    for the convention. ``output_check`` and ``source_check`` are (frames, 3) dx, dy (pixels)
    and degrees: the inter-frame motion measured on the written output and on the source
    frames while rendering (nan where not measured; None before rendering). ``row_bands``
    holds the per-band shifts of a rolling-shutter analysis (None without one).

    A job assembles the log once, at its end; nothing in the package changes a log after that.
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
    row_bands: RowBands | None = None

    @property
    def frames(self) -> int:
        """Number of frames (rows).

        Returns
        -------
        int : the length of ``time_s``.
        """
        return len(self.time_s)

    @property
    def size(self) -> tuple[int, int]:
        """Source frame (width, height), pixels.

        Returns
        -------
        (int, int) : ``source["width"]``, ``source["height"]``, pixels.
        """
        return int(self.source["width"]), int(self.source["height"])

    @property
    def centre(self) -> np.ndarray:
        """Frame centre ((w−1)/2, (h−1)/2), pixels.

        Returns
        -------
        (2,) the centre (x, y), pixels (:func:`stabilize.geometry.frame_centre`).
        """
        return frame_centre(*self.size)

    @property
    def path(self) -> np.ndarray:
        """Raw camera path P_t, restarting at scene cuts.

        Returns
        -------
        (frames, 3, 3) P_t, frame t to the shot's first frame, pixels
        (:func:`stabilize.raw_path.accumulate`; frames with status ``cut`` restart it).
        """
        return accumulate(self.matrices, self.status == "cut")

    def readouts(self) -> dict[str, np.ndarray]:
        """The derived columns: per-frame motion and path read as similarities.

        Returns
        -------
        dict : ``"motion"`` (H_t) and ``"path"`` (P_t), each (frames, 4) dx, dy (pixels),
        rotation (degrees), scale, read about the frame centre
        (:func:`stabilize.geometry.similarity_readout`); and ``"smooth"``, the
        (frames, 4) ``smooth_values``, when the log has them.
        """
        c = self.centre
        out = {"motion": similarity_readout(self.matrices, c),
               "path": similarity_readout(self.path, c)}
        if self.smooth_values is not None:
            out["smooth"] = np.asarray(self.smooth_values, dtype=np.float64)
        return out

    # ------------------------------------------------- files (stabilize.io.motion_log_files)
    def to_csv(self) -> str:
        """The CSV text of the log (:func:`stabilize.io.motion_log_files.log_csv`).

        Returns
        -------
        str : the CSV file's text.
        """
        return _FILES["to_csv"](self)

    def to_json(self) -> dict[str, Any]:
        """The JSON document of the log (:func:`stabilize.io.motion_log_files.log_json`).

        Returns
        -------
        dict : the JSON file's document.
        """
        return _FILES["to_json"](self)

    def save(self, csv_path: str | Path) -> tuple[Path, Path]:
        """Write ``NAME.motion.csv`` and its JSON beside it; returns both paths.

        See :func:`stabilize.io.motion_log_files.save_log`.

        Parameters
        ----------
        csv_path : where the CSV goes; the JSON takes the same name with ``.json``.

        Returns
        -------
        (Path, Path) : the CSV and JSON paths written.
        """
        return _FILES["save"](self, Path(csv_path))


def frame_reasons(reasons: np.ndarray) -> dict[str, list[int]]:
    """Frames that are weak or failed for a stated reason, by reason.

    See :data:`stabilize.motion.REASONS`.

    Parameters
    ----------
    reasons : (n,) str, per-frame reason codes ('' for none).

    Returns
    -------
    dict : reason -> sorted frame indices, e.g. ``{"foreground": [12, 13], ...}``; reasons in
    alphabetical order, '' left out.
    """
    return {str(r): np.flatnonzero(reasons == r).tolist()
            for r in sorted(set(reasons.tolist())) if r}


def reasons_of(motion: MotionLog) -> np.ndarray:
    """Per-frame reason codes ('' for none) from a log's ``frame_reasons``.

    Parameters
    ----------
    motion : the log; its ``extra["frame_reasons"]`` is read.

    Returns
    -------
    (frames,) ``<U12`` reason codes (:func:`reason_codes`).
    """
    return reason_codes(motion.extra.get("frame_reasons"), len(motion.status))


def reason_codes(by_reason: dict[str, list[int]] | None, n: int) -> np.ndarray:
    """Per-frame reason codes from :func:`frame_reasons`' mapping.

    Parameters
    ----------
    by_reason : reason -> frame indices, or None for none. Entries that are not frame
        numbers in range are passed over; reasons are cut to 12 characters.
    n : number of frames.

    Returns
    -------
    (n,) ``<U12`` reason codes ('' for none).
    """
    out = np.full(n, "", "<U12")
    for reason, frames in (by_reason or {}).items():
        idx = np.asarray([f for f in frames if isinstance(f, int) and 0 <= f < len(out)], int)
        out[idx] = str(reason)[:12]
    return out
