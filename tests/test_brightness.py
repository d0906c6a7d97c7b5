"""The error a change of brightness puts into Lucas–Kanade shifts, checked against OpenCV's
own tracker on drawn pictures, and how such errors add up along a path."""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from stabilize.brightness import drift_px, gain_effect, gain_sensitivity

W, H = 640, 360
SHIFT = (1.3, -0.7)
CRITERIA = (cv2.TERM_CRITERIA_EPS | cv2.TERM_CRITERIA_COUNT, 20, 0.01)


def _sloped_texture(contrast: float, seed: int = 0) -> np.ndarray:
    """A fine texture of ``contrast`` grey levels (standard deviation) on a brightness slope
    of 60 grey levels across the picture and 20 down it: a faint wall lit from one side."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:H, 0:W].astype(np.float32)
    tex = cv2.GaussianBlur(rng.normal(0, 1, (H, W)).astype(np.float32), (0, 0), 1.5)
    return 90 + 60 * xx / W + 20 * yy / H + contrast * tex / tex.std()


def _tracked(picture: np.ndarray, gain: float):
    """The picture shifted by SHIFT and scaled by ``gain``, both 8-bit; corners of the first,
    where OpenCV's pyramidal Lucas–Kanade (11-px window) puts them in the second, and which
    it found."""
    m = np.float32([[1, 0, SHIFT[0]], [0, 1, SHIFT[1]]])
    moved = cv2.warpAffine(picture, m, (W, H), flags=cv2.INTER_CUBIC,
                           borderMode=cv2.BORDER_REFLECT)
    a = np.clip(np.rint(picture), 0, 255).astype(np.uint8)
    b = np.clip(np.rint(gain * moved), 0, 255).astype(np.uint8)
    pts = cv2.goodFeaturesToTrack(a, 300, 0.003, 10, blockSize=7).reshape(-1, 2)
    dst, st, _ = cv2.calcOpticalFlowPyrLK(a, b, pts.reshape(-1, 1, 2), None, winSize=(11, 11),
                                          maxLevel=2, criteria=CRITERIA)
    return a, b, pts, dst.reshape(-1, 2), st.ravel() == 1


@pytest.mark.parametrize("gain", [1.01, 1.03, 0.98])
def test_the_predicted_error_is_the_one_lucas_kanade_makes(gain):
    """On a faint wall (6 grey levels of texture on a slope) OpenCV's tracker, told nothing
    of the gain, settles off the true shift by a few hundredths of a pixel, track by track;
    the prediction follows it (correlation over 0.95, the median within a fifth and
    0.005 px). Each track's own error without a gain change (0.03–0.04 px here) is taken
    off first, and tracks that slipped (off by over half a pixel) are left out."""
    picture = _sloped_texture(6.0)
    _, _, pts, still, found0 = _tracked(picture, 1.0)
    a, b, _, dst, found = _tracked(picture, gain)
    made = (dst - pts) - (still - pts)
    keep = found0 & found & (np.abs(made).max(axis=1) < 0.5)
    made = made[keep]
    predicted = -((gain - 1) / gain) * gain_sensitivity(a, pts[keep], 11)
    effect = gain_effect(a, b, pts[keep], dst[keep], 11)
    assert effect.gain == pytest.approx(gain, abs=0.001)
    print(f"gain {gain}: Lucas-Kanade off by {np.median(made, axis=0).round(4)} (median), "
          f"predicted {effect.shift.round(4)}")
    assert np.abs(np.median(made, axis=0)).max() > 0.01  # the error is there to predict
    for j in range(2):
        assert np.corrcoef(made[:, j], predicted[:, j])[0, 1] > 0.95
    np.testing.assert_allclose(effect.shift, np.median(predicted, axis=0), rtol=0.1, atol=1e-3)
    np.testing.assert_allclose(effect.shift, np.median(made, axis=0), rtol=0.2, atol=0.005)


def test_crisp_detail_and_a_steady_exposure_predict_no_error():
    crisp = _sloped_texture(30.0)
    a, b, pts, dst, ok = _tracked(crisp, 1.03)
    assert np.abs(gain_effect(a, b, pts[ok], dst[ok], 11).shift).max() < 0.01
    faint = _sloped_texture(6.0)
    a, b, pts, dst, ok = _tracked(faint, 1.0)
    pts, dst = pts[ok], dst[ok]
    effect = gain_effect(a, b, pts, dst, 11)
    assert abs(effect.gain - 1.0) < 1e-3 and not effect.shift.any()
    assert not gain_effect(a, b, pts[:5], dst[:5], 11).shift.any()  # too few tracks
    tiny = np.full((24, 40), 100, np.uint8)  # the least picture that is tracked at all
    spots = np.array([[10.0, 10.0]] * 10)
    assert gain_effect(tiny, tiny + 5, spots, spots, 31).gain == 1.0


def test_sensitivity_follows_the_slope_and_vanishes_on_a_flat_window():
    """A window on a brightness slope rising to the right, with texture: the error of a
    brightening points the way the slope rises (−(g − 1)·s, s along +x), and a window with
    no texture in two directions has none."""
    picture = _sloped_texture(6.0).astype(np.float32)
    s = gain_sensitivity(np.clip(picture, 0, 255).astype(np.uint8),
                         np.array([[320.0, 180.0], [200.0, 100.0]]), 11)
    flat = np.full((40, 40), 128, np.uint8)
    assert not gain_sensitivity(flat, np.array([[20.0, 20.0]]), 11).any()
    assert np.isfinite(s).all()
    edge = np.tile(np.linspace(60, 200, 40, dtype=np.float32), (40, 1)).astype(np.uint8)
    assert not gain_sensitivity(edge, np.array([[20.0, 20.0]]), 11).any()


def test_drift_adds_up_ramps_cancels_flicker_and_restarts_at_cuts():
    n = 100
    ramp = np.tile([0.02, -0.01], (n, 1))
    counted, cuts = np.ones(n, bool), np.zeros(n, bool)
    assert drift_px(ramp, counted, cuts) == pytest.approx(np.hypot(2.0, 1.0))
    flicker = ramp * np.where(np.arange(n) % 2, 1, -1)[:, None]
    assert drift_px(flicker, counted, cuts) == pytest.approx(np.hypot(0.02, 0.01))
    cuts[50] = True
    assert drift_px(ramp, counted, cuts) == pytest.approx(np.hypot(1.0, 0.5))
    counted[:75] = False  # stand-ins and held frames: their motion was never the tracks'
    assert drift_px(ramp, counted, np.zeros(n, bool)) == pytest.approx(np.hypot(0.5, 0.25))
