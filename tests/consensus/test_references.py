"""Agreement with outside estimators on the same synthetic data.

References used (never inside the package): OpenCV 5 ``cv2.estimateAffinePartial2D``,
``cv2.estimateAffine2D``, ``cv2.findHomography`` with ``cv2.RANSAC``; scikit-image 0.26
``skimage.measure.ransac`` with ``SimilarityTransform`` / ``AffineTransform`` /
``ProjectiveTransform``.
"""

import cv2
import numpy as np
import pytest
import skimage.transform as sktf
from consensus_data import HEIGHT, WIDTH, make_matches
from skimage.measure import ransac

from stabilize.consensus import estimate, grid_transfer_error

THRESH = 1.5
CONF = 0.999
ROUNDS = 2000
TRIALS = 8
# Our median grid error may exceed the reference's by at most this (pixels).
TOL_PX = 0.02


def _opencv(model: str, src: np.ndarray, dst: np.ndarray) -> np.ndarray:
    s = src.astype(np.float64)
    d = dst.astype(np.float64)
    kw = dict(method=cv2.RANSAC, ransacReprojThreshold=THRESH, maxIters=ROUNDS,
              confidence=CONF)
    if model == "similarity":
        m, _ = cv2.estimateAffinePartial2D(s, d, **kw)
    elif model == "affine":
        m, _ = cv2.estimateAffine2D(s, d, **kw)
    else:
        h, _ = cv2.findHomography(s, d, cv2.RANSAC, THRESH, maxIters=ROUNDS, confidence=CONF)
        return h
    return np.vstack([m, (0.0, 0.0, 1.0)])


_SKIMAGE = {
    "similarity": (sktf.SimilarityTransform, 2),
    "affine": (sktf.AffineTransform, 3),
    "homography": (sktf.ProjectiveTransform, 4),
}


def _skimage(model: str, src: np.ndarray, dst: np.ndarray, seed: int) -> np.ndarray:
    cls, s = _SKIMAGE[model]
    m, _ = ransac((src, dst), cls, min_samples=s, residual_threshold=THRESH,
                  max_trials=ROUNDS, stop_probability=CONF, rng=seed)
    return m.params


def _errors(model: str, reference, outliers: float = 0.5):
    ours, theirs = [], []
    for trial in range(TRIALS):
        rng = np.random.default_rng(1000 + trial)
        h, src, dst, _ = make_matches(rng, model, n=300, outliers=outliers)
        fit = estimate(src, dst, model=model, inlier_px=THRESH, confidence=CONF,
                       max_rounds=ROUNDS, seed=trial, frame_size=(WIDTH, HEIGHT))
        assert fit.ok
        ours.append(grid_transfer_error(h, fit.matrix, WIDTH, HEIGHT))
        theirs.append(grid_transfer_error(h, reference(model, src, dst, trial), WIDTH, HEIGHT))
    return float(np.median(ours)), float(np.median(theirs))


@pytest.mark.parametrize("model", ["similarity", "affine", "homography"])
def test_no_worse_than_opencv(model):
    # Reference: OpenCV's RANSAC estimators with the same threshold, confidence, cap.
    ours, theirs = _errors(model, lambda m, s, d, seed: _opencv(m, s, d))
    assert ours <= theirs + TOL_PX, (ours, theirs)


@pytest.mark.parametrize("model", ["similarity", "affine", "homography"])
def test_no_worse_than_skimage(model):
    # Reference: skimage.measure.ransac (plain RANSAC, final least-squares fit on the
    # consensus set) with the matching skimage.transform model. 30 % outliers keep its
    # Python loop fast.
    ours, theirs = _errors(model, _skimage, outliers=0.3)
    assert ours <= theirs + TOL_PX, (ours, theirs)


def test_translation_matches_mean_of_true_inliers():
    # No OpenCV/scikit-image translation estimator; the least-squares translation on
    # the true inliers is the reference.
    rng = np.random.default_rng(3)
    h, src, dst, is_in = make_matches(rng, "translation", n=300, outliers=0.5)
    fit = estimate(src, dst, model="translation", frame_size=(WIDTH, HEIGHT))
    ref = np.eye(3)
    ref[:2, 2] = (dst[is_in] - src[is_in]).mean(axis=0)
    assert grid_transfer_error(ref, fit.matrix, WIDTH, HEIGHT) < 0.02
