"""The independent references of tests/real, checked on shifts made up from a known motion
(no clip needed): synthetic ground truth only."""

from __future__ import annotations

import numpy as np

from . import helpers


def test_reference_at_a_point_reads_rotation_and_scale_off_the_boxes(monkeypatch):
    boxes = [(0, 360, 300, 470), (300, 360, 640, 470)]
    n = 5
    angle = np.radians(np.linspace(0.0, 0.4, n))
    scale = np.linspace(1.0, 0.995, n)
    t = np.stack([np.linspace(0, 3, n), np.linspace(0, -2, n)], axis=1)

    def moved(p: np.ndarray) -> np.ndarray:
        """Displacement (n, 2) of point p under the motion x -> s R x + t."""
        c, s = scale * np.cos(angle), scale * np.sin(angle)
        return np.stack([c * p[0] - s * p[1], s * p[0] + c * p[1]], axis=1) + t - p

    def shifts(clip, box, high_pass_px=None, with_response=False):
        x0, y0, x1, y1 = box
        d = moved(np.array([(x0 + x1 - 1) / 2.0, (y0 + y1 - 1) / 2.0]))
        return np.c_[d, np.ones(n)] if with_response else d

    monkeypatch.setattr(helpers, "region_shifts_px", shifts)
    centre = (319.5, 239.5)
    path, valid = helpers.reference_path_px("made-up.mp4", boxes, agree_px=10.0, at=centre)
    assert valid.all()
    # A similarity's displacement field is t + [[a, -b], [b, a]] p exactly, so two boxes give
    # it back to rounding.
    np.testing.assert_allclose(path, -moved(np.array(centre)), atol=1e-9)
    mean, _ = helpers.reference_path_px("made-up.mp4", boxes, agree_px=10.0)
    # The mean shift alone is the motion of the boxes' middle, not of the centre above it.
    assert np.abs(mean - path).max() > 1.0
