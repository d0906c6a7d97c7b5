"""Evidence over many frames of what is scene and what moves in front of it.

One frame pair says little about which group of tracks is the camera: an object sliding at a
few tenths of a pixel a frame sits inside any sensible inlier threshold of a still camera, and
a least-squares fit settles between the two. Over a fraction of a second it does not. Each
track keeps where it was at two staggered *baseline* frames, re-based in turn every half
``baseline_s``, so a baseline of between a half and a whole ``baseline_s`` is always at hand.
A consensus over the baseline (where each track was then, where it is now) finds the largest
rigid group; a consensus among the rest finds a second one if there is one. The group that
spreads over more of the frame, with the older tracks, is the scene; the other *moved on its
own*, is left out of this frame's fit and distrusted until it has again been still against
the scene for a while. The grouping uses the tracks' own positions, never the camera motion
chosen before, so a wrong choice does not feed on itself.

Points and thresholds are in full-resolution pixels; times in seconds of the clip's own
timestamps. The per-track record (kept by the tracker, :attr:`stabilize.track.Pairs.memo`)
is seven numbers: the position at baseline 0 (x, y) and at baseline 1 (x, y), NaN for a
track that did not exist then; the time the track was first seen or last moved on its own;
how many times it moved on its own; and whether it has yet been found in the scene's group
(*proven*: while objects move about, tracks new to the picture, most of them on the moving
objects that keep turning and showing new corners, wait until they are).
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

__all__ = ["BaselineSettings", "Grouping", "age_share", "first_seen", "hull_share", "prove",
           "proven", "rebase", "strike", "trust", "WIDTH"]

WIDTH = 7
SINCE_S, STRIKES, PROVEN = 4, 5, 6


@dataclass(frozen=True)
class BaselineSettings:
    """``baseline_s``: the longest baseline, seconds (re-based in turn every half of it);
    ``settle_s``: a track's age counts fully from this age on; ``regain_s``: a track that
    moved on its own is trusted again after this long; ``min_group``: fewest tracks that make
    a group. The values are this project's own choices, tried on real clips of fixed cameras
    with objects moved in front and on synthetic drone footage (common practice, no source)."""

    baseline_s: float = 0.5
    settle_s: float = 2.0
    regain_s: float = 1.0
    min_group: int = 12


@dataclass(frozen=True)
class Grouping:
    """The outcome of one frame's grouping: ``scene`` and ``moved`` (k,) bool masks of the
    pairs (``moved`` the rival group that lost, empty when there was none); ``scene_spread``
    and ``moved_spread`` the shares of the frame their hulls cover."""

    scene: np.ndarray
    moved: np.ndarray
    scene_spread: float
    moved_spread: float

    @property
    def split(self) -> bool:
        """Whether a second rigid group moved against the scene.

        Returns
        -------
        bool : True when any pair is in ``moved``.
        """
        return bool(self.moved.any())


def hull_share(pts: np.ndarray, frame_size: tuple[int, int]) -> float:
    """Area of the convex hull of ``pts`` as a share of the frame area (0 to 1).

    Parameters
    ----------
    pts : (k, 2) points (x, y), pixels (convention of :mod:`stabilize.geometry`).
    frame_size : (width, height) of the frame the points lie in, pixels.

    Returns
    -------
    float : hull area / (width · height); 0 for fewer than three points.
    """
    if len(pts) < 3:
        return 0.0
    hull = cv2.convexHull(pts.astype(np.float32).reshape(-1, 1, 2))
    return float(cv2.contourArea(hull)) / float(frame_size[0] * frame_size[1])


def age_share(memo: np.ndarray, now_s: float, settings: BaselineSettings) -> np.ndarray:
    """Each track's age as a share of ``settle_s`` (0 to 1): how long it has been followed
    without moving on its own.

    Parameters
    ----------
    memo : (k, WIDTH) per-track records (see the module docstring), one row per track.
    now_s : time of the current frame, s.
    settings : supplies ``settle_s``.

    Returns
    -------
    (k,) share, 0 to 1 (0 for a track with no time recorded).
    """
    since = memo[:, SINCE_S]
    age = np.where(np.isfinite(since), np.maximum(0.0, now_s - since), 0.0)
    return np.minimum(1.0, age / max(settings.settle_s, 1e-9))


def trust(memo: np.ndarray, now_s: float, settings: BaselineSettings) -> np.ndarray:
    """Whether each track may speak for the scene: never moved on its own, or not
    for ``regain_s``.

    Parameters
    ----------
    memo : (k, WIDTH) per-track records (see the module docstring), one row per track.
    now_s : time of the current frame, s.
    settings : supplies ``regain_s``.

    Returns
    -------
    (k,) bool, True for trusted tracks.
    """
    since = memo[:, SINCE_S]
    age = np.where(np.isfinite(since), now_s - since, np.inf)
    return (np.nan_to_num(memo[:, STRIKES]) == 0) | (age >= settings.regain_s)


def first_seen(memo: np.ndarray, prev_s: float) -> np.ndarray:
    """Records with tracks seen for the first time stamped with the previous frame's time.

    Parameters
    ----------
    memo : (k, WIDTH) per-track records (see the module docstring), one row per track.
    prev_s : time of the previous frame, s.

    Returns
    -------
    (k, WIDTH) a new array: tracks with no time yet get ``prev_s``, no strikes and not
    proven; the rest as they were.
    """
    out = np.array(memo, dtype=np.float64, copy=True)
    new = ~np.isfinite(out[:, SINCE_S])
    out[new, SINCE_S] = prev_s
    out[new, STRIKES] = 0.0
    out[new, PROVEN] = 0.0
    return out


def prove(memo: np.ndarray, scene: np.ndarray) -> np.ndarray:
    """Records with the tracks in ``scene`` marked as found in the scene's group.

    Parameters
    ----------
    memo : (k, WIDTH) per-track records (see the module docstring), one row per track.
    scene : (k,) bool (or indices) of the tracks in the scene's group.

    Returns
    -------
    (k, WIDTH) a new array.
    """
    out = np.array(memo, dtype=np.float64, copy=True)
    out[scene, PROVEN] = 1.0
    return out


def proven(memo: np.ndarray) -> np.ndarray:
    """Whether each track has been found in the scene's group.

    Parameters
    ----------
    memo : (k, WIDTH) per-track records (see the module docstring), one row per track.

    Returns
    -------
    (k,) bool.
    """
    return np.nan_to_num(memo[:, PROVEN]) > 0


def strike(memo: np.ndarray, moved: np.ndarray, now_s: float) -> np.ndarray:
    """Records with the tracks in ``moved`` marked as having moved on their own now.

    Parameters
    ----------
    memo : (k, WIDTH) per-track records (see the module docstring), one row per track.
    moved : (k,) bool (or indices) of the tracks that moved on their own.
    now_s : time of the current frame, s.

    Returns
    -------
    (k, WIDTH) a new array: for those tracks the time is ``now_s`` and the strike count is
    one higher.
    """
    out = np.array(memo, dtype=np.float64, copy=True)
    out[moved, SINCE_S] = now_s
    out[moved, STRIKES] = np.nan_to_num(out[moved, STRIKES]) + 1.0
    return out


def rebase(memo: np.ndarray, slot: int, dst: np.ndarray) -> np.ndarray:
    """Records with baseline ``slot`` (0 or 1) set to the tracks' positions now.

    Parameters
    ----------
    memo : (k, WIDTH) per-track records (see the module docstring), one row per track.
    slot : baseline, 0 or 1.
    dst : (k, 2) the tracks' positions now (x, y), full-resolution pixels.

    Returns
    -------
    (k, WIDTH) a new array.
    """
    out = np.array(memo, dtype=np.float64, copy=True)
    out[:, 2 * slot:2 * slot + 2] = dst
    return out
