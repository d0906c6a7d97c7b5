"""Scene cuts: consecutive frames that do not show the same scene.

A cut is declared when tracking between two frames collapsed *and* the pictures differ: their
grey-level histograms are far apart (Bhattacharyya distance), or they are moderately apart and
whole-frame phase correlation finds no shift that maps one onto the other, or the shift it
finds leaves the two pictures' fine structure uncorrelated (a peak from something both frames
share in place, such as a burnt-in overlay or an object that stays put across the cut, is then
not taken for the scene). Either sign alone is
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
    "CutSettings", "aligned_correlation", "collapsed", "corner_strength", "grey_histogram",
    "histogram_distance", "is_cut", "is_textureless",
]


@dataclass(frozen=True)
class CutSettings:
    """``histogram_distance``: Bhattacharyya distance (0 same, 1 disjoint) above which two
    frames' grey histograms count as different; ``survival_share``: tracking has collapsed
    when fewer than this share of the live tracks survive the checks;
    ``min_aligned_correlation``: below this correlation of the two frames' fine structure,
    once aligned by the phase-correlation shift (:func:`aligned_correlation`), the frames do
    not show the same scene (this project's choice: measured 0.02 or less across drawn and
    real cuts, where a pan or blur that lost the tracks keeps well above it)."""

    histogram_distance: float = 0.35
    survival_share: float = 0.25
    bins: int = 32
    weak_histogram_distance: float = 0.1
    min_phase_response: float = 0.1
    min_aligned_correlation: float = 0.2
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


def aligned_correlation(prev: np.ndarray, cur: np.ndarray, shift: tuple[float, float],
                        max_side: int = 160) -> float:
    """How alike two frames' fine structure is once ``prev`` is moved by ``shift``.

    Both frames are reduced to at most ``max_side`` pixels wide, high-passed (minus a
    Gaussian blur of 3 px there, so lighting and the broad layout of sky and ground do not
    count) and compared by zero-mean normalised cross-correlation over the part of the frame
    both cover.

    Parameters
    ----------
    prev, cur : (h, w) uint8 grey frames of the same size.
    shift : (dx, dy) pixels of ``prev``'s grid, where its content lies in ``cur``.
    max_side : width of the reduced copies, pixels.

    Returns
    -------
    float : the correlation, −1 to 1; 0 when the frames overlap on less than a quarter of
        their area under the shift.
    """
    h, w = prev.shape
    f = min(1.0, max_side / w)
    size = (max(16, round(w * f)), max(16, round(h * f)))
    a = cv2.resize(prev, size, interpolation=cv2.INTER_AREA).astype(np.float32)
    b = cv2.resize(cur, size, interpolation=cv2.INTER_AREA).astype(np.float32)
    a -= cv2.GaussianBlur(a, (0, 0), 3)
    b -= cv2.GaussianBlur(b, (0, 0), 3)
    move = np.float32([[1, 0, shift[0] * f], [0, 1, shift[1] * f]])
    a = cv2.warpAffine(a, move, size)
    valid = cv2.warpAffine(np.ones(size[::-1], np.float32), move, size) > 0.99
    if valid.sum() < 0.25 * valid.size:
        return 0.0
    x = a[valid] - a[valid].mean()
    y = b[valid] - b[valid].mean()
    return float((x * y).sum() / np.sqrt((x * x).sum() * (y * y).sum() + 1e-9))


def is_cut(distance: float, phase_response: float | None, settings: CutSettings,
           aligned: float | None = None) -> bool:
    """Whether a frame whose tracking collapsed starts a new scene, from its histogram
    distance to the previous frame, the phase-correlation peak response between them and
    how alike they are once aligned by that peak's shift (None when not measured).

    Parameters
    ----------
    distance : Bhattacharyya distance of the grey histograms (:func:`histogram_distance`).
    phase_response : phase-correlation peak response, 0 to 1, or None.
    settings : the thresholds.
    aligned : :func:`aligned_correlation` under the phase-correlation shift, or None.

    Returns
    -------
    bool : True for a cut.
    """
    if distance > settings.histogram_distance:
        return True
    if distance <= settings.weak_histogram_distance:
        return False
    return ((phase_response is not None and phase_response < settings.min_phase_response)
            or (aligned is not None and aligned < settings.min_aligned_correlation))


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
