"""Margin, coverage and corrections."""

import numpy as np
import pytest

from stabilize.framing import (
    choose_margin,
    corrections,
    covered,
    distortion,
    fit_to_margin,
    zoom,
)
from stabilize.geometry import frame_centre, from_similarity

W, H = 640, 360


def _shift(dx):
    return from_similarity(np.array([[dx, 0.0, 0.0, 0.0]]), frame_centre(W, H))


def test_zoom_crops_the_margin_about_the_centre():
    z = zoom(0.1, W, H)
    assert np.isclose(z[0, 0], 1 / 0.8)
    c = frame_centre(W, H)
    np.testing.assert_allclose(z @ [*c, 1.0], [*c, 1.0])


def test_coverage_of_shifted_frames():
    assert covered(np.eye(3)[None], W, H)[0]
    assert not covered(_shift(5.0), W, H)[0]
    # A 5 px shift needs a margin of at least 5 / 640 of the width: 0.02 is enough.
    assert covered(zoom(0.02, W, H)[None] @ _shift(5.0), W, H)[0]


def test_auto_margin_is_the_smallest_that_covers():
    p = np.concatenate([_shift(0.0), _shift(12.8)])
    s = np.repeat(np.eye(3)[None], 2, axis=0)
    m = choose_margin(p, s, W, H, cap=0.25)
    # Shift of 12.8 px on a 640 px wide frame (corners at 0 and 639): 12.8 / 639 / 2 * ... the
    # zoom k must map the output corner x = 0 to source x >= 0 after the shift.
    c = corrections(p, s, m, W, H)
    assert covered(c, W, H).all()
    assert not covered(corrections(p, s, m - 1e-3, W, H), W, H).all()
    assert 0.0 < m < 0.05


def test_fit_to_margin_eases_corrections_that_do_not_fit():
    n = 60
    x = np.where(np.arange(n) == 30, 60.0, 0.0)
    c = frame_centre(W, H)
    p = from_similarity(np.stack([x, 0 * x, 0 * x, 0 * x], axis=1), c)
    s = np.repeat(np.eye(3)[None], n, axis=0)
    s2, kept = fit_to_margin(p, s, 0.02, model="similarity", width=W, height=H, fps=30.0,
                             window_s=1.0)
    assert covered(corrections(p, s2, 0.02, W, H), W, H).all()
    assert kept[30] < 1.0 and kept[0] == pytest.approx(1.0)


def test_fit_to_margin_can_ease_toward_another_path():
    n = 40
    c = frame_centre(W, H)
    x = np.where(np.arange(n) >= 20, 80.0, 0.0)
    p = from_similarity(np.stack([x, 0 * x, 0 * x, 0 * x], axis=1), c)
    held = np.repeat(np.eye(3)[None], n, axis=0)
    target = from_similarity(np.stack([0.9 * x, 0 * x, 0 * x, 0 * x], axis=1), c)
    s, kept = fit_to_margin(p, held, 0.05, model="similarity", width=W, height=H, fps=30.0,
                            window_s=1.0, toward=target)
    assert covered(corrections(p, s, 0.05, W, H), W, H).all()
    assert kept[0] == pytest.approx(1.0) and kept[-1] < 1.0


def test_distortion_limit_eases_stretching_corrections():
    p = np.repeat(np.eye(3)[None], 3, axis=0)
    s = p.copy()
    s[1, 0, 1] = 0.3  # a sheared virtual camera: its correction would shear the picture
    c0 = corrections(p, s, 0.2, W, H)
    assert distortion(c0)[1] < 0.9 and distortion(c0)[0] == pytest.approx(1.0)
    s2, kept = fit_to_margin(p, s, 0.2, model="affine", width=W, height=H, fps=30.0,
                             window_s=1.0, min_distortion=0.9)
    assert distortion(corrections(p, s2, 0.2, W, H)).min() >= 0.9
    assert kept[1] < 1.0
