"""The per-frame motion record of an analysis, why frames are weak or failed, and stand-ins."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from .geometry import frame_centre, from_similarity, to_similarity

__all__ = ["LOG_COLUMNS", "MotionTrack", "REASONS", "anchor_frames", "fill_failed",
           "stand_ins"]

#: Why a frame is weak or failed, as listed in the log's JSON (``frame_reasons``).
REASONS = {
    "foreground": "the motion could not be told apart from an object moving in front of the "
                  "scene (rival groups of tracks, or a weak fit that most tracks moved "
                  "against); the frame's motion is a stand-in from its neighbours",
    "held_still": "the tracks moved but faint detail away from them stayed put: they are "
                  "taken for an object in front of a still camera, and the frame's motion is "
                  "held at none",
    "few_inliers": "few inliers, or inliers bunched in a small part of the frame",
    "unconfirmed": "the tracks moved but covered only part of the picture, and nothing in "
                   "the plain rest (a bare wall, a clear sky) told an object moving before "
                   "a still camera from a moving camera; the frame's motion is held at none "
                   "(setting plain_surround 'hold', the default) or is the tracks' "
                   "('follow')",
    "textureless": "too little texture to measure motion (plain sky, water, fog, blur)",
    "no_fit": "no trustworthy motion fit",
    "unmeasurable": "the frame is too small to track",
}

#: The per-frame arrays of :class:`MotionTrack` that the motion log takes over as they are.
LOG_COLUMNS = ("time_s", "matrices", "tracked", "inliers", "inlier_ratio", "rms_px", "rounds",
               "status")
# The optional per-frame arrays (row bands of a rolling shutter; the shift a change of
# brightness put into each fit), carried along with the frames.
_OPTIONAL = ("band_shift_px", "band_support", "gain_shift_px")
# Shapes and dtypes of those arrays for no frames at all.
_EMPTY = {"time_s": (0, float), "matrices": ((0, 3, 3), float), "tracked": (0, int),
          "inliers": (0, int), "inlier_ratio": (0, float), "rms_px": (0, float),
          "rounds": (0, int), "status": (0, "<U6")}


@dataclass
class MotionTrack:
    """Per-frame arrays of one analysis pass (see :class:`stabilize.motion_log.MotionLog`), what
    was left out of tracking (``excluded``: full-resolution (x, y, w, h) rectangles), and why
    a frame is weak or failed (``reason``: '' or a short code, see :data:`REASONS`).

    Attributes
    ----------
    time_s : (n,) float, seconds. matrices : (n, 3, 3) inter-frame transforms ``H_t``,
        full-resolution pixels. tracked, inliers, rounds : (n,) int. inlier_ratio : (n,).
    rms_px : (n,) inlier residual RMS, full-resolution pixels. status : (n,) ``<U6``
        (``ok``, ``weak``, ``failed``, ``cut``, ``first``). reason : (n,) ``<U12`` or None.
    band_shift_px : (n, bands, 2) row-band shifts (dx, dy) px from the previous frame
        (:func:`stabilize.row_bands.track_band_shifts`; NaN where a frame has none), or None
        when the analysis did not measure them. band_support : (n, bands), or None.
    gain_shift_px : (n, 2) how far the picture's change of brightness moved each frame's
        fit (dx, dy px; :mod:`stabilize.brightness`), 0 where no fit stood; or None.
    """

    time_s: np.ndarray
    matrices: np.ndarray
    tracked: np.ndarray
    inliers: np.ndarray
    inlier_ratio: np.ndarray
    rms_px: np.ndarray
    rounds: np.ndarray
    status: np.ndarray
    excluded: dict[str, list[list[int]]] = field(default_factory=dict)
    reason: np.ndarray | None = None
    band_shift_px: np.ndarray | None = None
    band_support: np.ndarray | None = None
    gain_shift_px: np.ndarray | None = None

    def log_columns(self) -> dict[str, np.ndarray]:
        """The per-frame arrays the motion log takes over as they are, by column name.

        Returns
        -------
        dict : :data:`LOG_COLUMNS` name -> the array itself (not a copy).
        """
        return {name: getattr(self, name) for name in LOG_COLUMNS}

    def select(self, frames: slice) -> MotionTrack:
        """The frames in ``frames`` of every per-frame array; the same excluded regions.

        Parameters
        ----------
        frames : the frame indices to keep.

        Returns
        -------
        MotionTrack : a new record.
        """
        return MotionTrack(**{k: v[frames] for k, v in self.log_columns().items()},
                           excluded=self.excluded,
                           reason=None if self.reason is None else self.reason[frames],
                           **{k: None if getattr(self, k) is None else getattr(self, k)[frames]
                              for k in _OPTIONAL})

    @classmethod
    def concatenate(cls, parts: Sequence[MotionTrack],
                    excluded: dict[str, list[list[int]]]) -> MotionTrack:
        """The per-frame arrays of ``parts`` one after the other (no reasons: ''), with the
        excluded regions given; empty arrays of the right shapes and dtypes for no parts.

        Parameters
        ----------
        parts : the records, in frame order.
        excluded : the excluded regions of the whole (full-resolution (x, y, w, h)).

        Returns
        -------
        MotionTrack : a new record.
        """
        if not parts:
            return cls(**{k: np.empty(shape, dtype) for k, (shape, dtype) in _EMPTY.items()},
                       excluded=excluded, reason=np.empty(0, "<U12"))
        bands = {k: np.concatenate([getattr(p, k) for p in parts])
                 if all(getattr(p, k) is not None for p in parts) else None for k in _OPTIONAL}
        return cls(**{k: np.concatenate([getattr(p, k) for p in parts]) for k in LOG_COLUMNS},
                   excluded=excluded,
                   reason=np.concatenate([p.reason if p.reason is not None
                                          else np.full(len(p.status), "", "<U12")
                                          for p in parts]), **bands)


def stand_ins(status: np.ndarray, reason: np.ndarray | None) -> np.ndarray:
    """Frames whose logged motion is a stand-in: failed ones, and weak ones whose motion
    could not be told apart from an object's.

    Parameters
    ----------
    status : (n,) per-frame status.
    reason : (n,) per-frame reason codes, or None.

    Returns
    -------
    (n,) bool, True for stand-ins (status ``failed`` or reason ``foreground``).
    """
    out = status == "failed"
    if reason is not None:
        out = out | (reason == "foreground")
    return out


def anchor_frames(status: np.ndarray, reason: np.ndarray | None) -> np.ndarray:
    """Frames whose logged motion may anchor the stand-ins around them: neither stand-ins
    (:func:`stand_ins`) nor cuts, nor weak fits on few or bunched tracks (reason
    ``few_inliers``). Such a fit is a measurement, but a noisy one: as the end of a long
    run of stand-ins, its error is repeated on every frame of the run (one fit 0.4 px off,
    at the end of 30 stand-ins, once put 8 px into the path of a still camera, measured on
    a drawn clip, tests/test_motion.py).

    Parameters
    ----------
    status : (n,) per-frame status.
    reason : (n,) per-frame reason codes, or None.

    Returns
    -------
    (n,) bool.
    """
    out = ~stand_ins(status, reason) & (status != "cut")
    if reason is not None:
        out &= reason != "few_inliers"
    return out


def fill_failed(matrices: np.ndarray, status: np.ndarray, size: tuple[int, int],
                stand_in: np.ndarray | None = None,
                anchor: np.ndarray | None = None) -> np.ndarray:
    """Stand-ins for failed frames (or the frames marked in ``stand_in``): the similarity
    motion interpolated linearly between the nearest trustworthy neighbours (those marked
    in ``anchor``; or the identity with none), never a wild jump.

    Frame 0 is never replaced; cut frames are not used as neighbours. Beyond the last
    trustworthy neighbour the nearest one's motion is held.

    Parameters
    ----------
    matrices : (n, 3, 3) inter-frame transforms H_t, pixels (conventions of
        :mod:`stabilize.motion_log`).
    status : (n,) per-frame status.
    size : (width, height) of the frame, pixels.
    stand_in : (n,) bool, the frames to replace; None for the ``failed`` ones.
    anchor : (n,) bool, the frames that may be neighbours (:func:`anchor_frames`); None:
        every frame neither replaced nor a cut.

    Returns
    -------
    (n, 3, 3) transforms with the stand-ins (``matrices`` itself when there is none to
    replace).
    """
    failed = (status == "failed") if stand_in is None else np.array(stand_in, bool)
    failed[0] = False
    if not failed.any():
        return matrices
    good = ~failed & (status != "cut")
    if anchor is not None:
        good &= np.asarray(anchor, bool)
    good = np.flatnonzero(good)
    good = good[good > 0]
    out = matrices.copy()
    idx = np.flatnonzero(failed)
    if len(good) == 0:
        out[idx] = np.eye(3)
        return out
    centre = frame_centre(*size)
    q = to_similarity(matrices[good], centre)
    q[:, 2] = np.angle(np.exp(1j * q[:, 2]))
    stand_in = np.stack([np.interp(idx, good, q[:, j]) for j in range(4)], axis=1)
    out[idx] = from_similarity(stand_in, centre)
    return out
