"""Scene cuts: consecutive frames that do not show the same scene.

A cut is declared when tracking between two frames collapsed *and* the pictures differ: their
grey-level histograms are far apart (Bhattacharyya distance), or they are moderately apart and
whole-frame phase correlation finds no shift that maps one onto the other. Either sign alone is
common without a cut (a pan into the sky changes the histogram slowly; motion blur loses
tracks), so both kinds are required.

Textureless frames (plain sky, water, fog, a lens cap) are told apart from cuts by their corner
strength: the 99th percentile of the Shi–Tomasi minimum eigenvalue falls far below what the
clip's textured frames showed.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

__all__ = [
    "CutSettings", "collapsed", "corner_strength", "grey_histogram", "histogram_distance", "is_cut",
    "is_textureless",
]


@dataclass(frozen=True)
class CutSettings:
    """``histogram_distance``: Bhattacharyya distance (0 same, 1 disjoint) above which two
    frames' grey histograms count as different; ``survival_share``: tracking has collapsed
    when fewer than this share of the live tracks survive the checks."""

    histogram_distance: float = 0.35
    survival_share: float = 0.25
    bins: int = 32
    weak_histogram_distance: float = 0.1
    min_phase_response: float = 0.1
    textureless_ratio: float = 0.05
    textureless_floor: float = 1e-4


def grey_histogram(gray: np.ndarray, bins: int = 32) -> np.ndarray:
    """Normalised grey-level histogram of an analysis frame.

    Parameters
    ----------
    gray : (h, w) uint8 grey frame.
    bins : number of bins over 0–255.

    Returns
    -------
    (bins,) float32, summing to 1 (all zero for an empty frame).
    """
    hist = cv2.calcHist([gray], [0], None, [bins], [0, 256]).ravel()
    return (hist / max(1.0, float(hist.sum()))).astype(np.float32)


def histogram_distance(a: np.ndarray, b: np.ndarray) -> float:
    """Bhattacharyya distance between two normalised histograms (0 = identical).

    Parameters
    ----------
    a, b : (bins,) float32 histograms (:func:`grey_histogram`).

    Returns
    -------
    float : distance, 0 (identical) to 1 (disjoint).
    """
    return float(cv2.compareHist(a, b, cv2.HISTCMP_BHATTACHARYYA))


def collapsed(survived: int, offered: int, settings: CutSettings) -> bool:
    """Whether tracking between two frames collapsed (few of the offered tracks survived).

    Parameters
    ----------
    survived : tracks that survived the checks.
    offered : live tracks offered.
    settings : supplies ``survival_share``.

    Returns
    -------
    bool : True when none were offered or fewer than ``survival_share`` of them survived.
    """
    return offered == 0 or survived < settings.survival_share * offered


def is_cut(distance: float, phase_response: float | None, settings: CutSettings) -> bool:
    """Whether a frame whose tracking collapsed starts a new scene, from its histogram
    distance to the previous frame and the phase-correlation peak response between them
    (None when not measured).

    Parameters
    ----------
    distance : Bhattacharyya distance of the grey histograms (:func:`histogram_distance`).
    phase_response : phase-correlation peak response, 0 to 1, or None.
    settings : the thresholds.

    Returns
    -------
    bool : True for a cut.
    """
    if distance > settings.histogram_distance:
        return True
    return (phase_response is not None and phase_response < settings.min_phase_response
            and distance > settings.weak_histogram_distance)


def corner_strength(gray: np.ndarray) -> float:
    """99th percentile of the Shi–Tomasi minimum eigenvalue on a half-size copy: how much
    trackable texture a frame has (larger is more).

    Parameters
    ----------
    gray : (h, w) uint8 grey frame.

    Returns
    -------
    float : the percentile (OpenCV ``cornerMinEigenVal`` units, block size 5).
    """
    small = cv2.pyrDown(gray)
    return float(np.percentile(cv2.cornerMinEigenVal(small, 5), 99))


def is_textureless(strength: float, reference: float | None, settings: CutSettings) -> bool:
    """Whether a frame has too little texture to measure motion, relative to the clip's
    textured frames (``reference``) or, before any, an absolute floor.

    Parameters
    ----------
    strength : the frame's :func:`corner_strength`.
    reference : corner strength of the clip's textured frames, or None before any.
    settings : supplies ``textureless_ratio`` and ``textureless_floor``.

    Returns
    -------
    bool : True for a textureless frame.
    """
    if reference is None:
        return strength < settings.textureless_floor
    return strength < settings.textureless_ratio * reference
