"""Scene cuts: consecutive frames that do not show the same scene.

A cut is declared when two independent signs agree: the grey-level histograms of the two
frames differ strongly (Bhattacharyya distance), and tracking between them collapsed. Either
sign alone is common without a cut (a pan into the sky changes the histogram slowly; motion
blur loses tracks), so both are required.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np


@dataclass(frozen=True)
class CutSettings:
    """``histogram_distance``: Bhattacharyya distance (0 same, 1 disjoint) above which two
    frames' grey histograms count as different; ``survival_share``: tracking has collapsed
    when fewer than this share of the live tracks survive the checks."""

    histogram_distance: float = 0.35
    survival_share: float = 0.25
    bins: int = 32


def grey_histogram(gray: np.ndarray, bins: int = 32) -> np.ndarray:
    """Normalised grey-level histogram (bins,) float32 of an analysis frame."""
    hist = cv2.calcHist([gray], [0], None, [bins], [0, 256]).ravel()
    return (hist / max(1.0, float(hist.sum()))).astype(np.float32)


def histogram_distance(a: np.ndarray, b: np.ndarray) -> float:
    """Bhattacharyya distance between two normalised histograms (0 = identical)."""
    return float(cv2.compareHist(a, b, cv2.HISTCMP_BHATTACHARYYA))


def is_cut(distance: float, survived: int, offered: int, settings: CutSettings) -> bool:
    """Whether a frame starts a new scene, from its histogram distance to the previous frame
    and how many of the offered tracks survived."""
    collapsed = offered == 0 or survived < settings.survival_share * offered
    return distance > settings.histogram_distance and collapsed
