"""The evidence over many frames of what is scene and what moves in front of it: the
per-track records (stabilize.anchors), the grouping over a baseline and the revision helpers
(stabilize.track_groups), on point sets with exact, invented motion."""

from __future__ import annotations

import numpy as np
import pytest

from stabilize import anchors
from stabilize.anchors import BaselineSettings
from stabilize.config import Settings
from stabilize.frame_fit import corner_shift
from stabilize.motion_models import SIMILARITY
from stabilize.track_groups import group_tracks, in_mask, object_mask

SIZE = (640, 360)


def _memo(k: int) -> np.ndarray:
    return np.full((k, anchors.WIDTH), np.nan)


def test_first_seen_stamps_only_new_tracks():
    memo = _memo(3)
    memo[0, anchors.SINCE_S] = 1.0
    memo[0, anchors.STRIKES] = 2.0
    out = anchors.first_seen(memo, prev_s=4.5)
    assert out[0, anchors.SINCE_S] == 1.0 and out[0, anchors.STRIKES] == 2.0
    assert np.all(out[1:, anchors.SINCE_S] == 4.5) and np.all(out[1:, anchors.STRIKES] == 0)
    assert np.isnan(memo[1, anchors.SINCE_S])  # the input is left alone


def test_a_track_that_moved_on_its_own_is_distrusted_for_a_while():
    base = BaselineSettings(regain_s=1.0)
    memo = anchors.first_seen(_memo(2), prev_s=0.0)
    assert anchors.trust(memo, 0.5, base).all()
    struck = anchors.strike(memo, np.array([True, False]), now_s=2.0)
    assert struck[0, anchors.STRIKES] == 1.0
    assert list(anchors.trust(struck, 2.5, base)) == [False, True]
    assert list(anchors.trust(struck, 3.0, base)) == [True, True]


def test_age_share_grows_to_one():
    base = BaselineSettings(settle_s=2.0)
    memo = anchors.first_seen(_memo(1), prev_s=1.0)
    assert anchors.age_share(memo, 2.0, base)[0] == pytest.approx(0.5)
    assert anchors.age_share(memo, 9.0, base)[0] == 1.0
    assert anchors.age_share(_memo(1), 9.0, base)[0] == 0.0  # never seen: no age


def test_rebase_and_prove():
    memo = anchors.first_seen(_memo(3), 0.0)
    pts = np.array([[1.0, 2.0], [3.0, 4.0], [5.0, 6.0]])
    out = anchors.rebase(memo, 1, pts)
    assert np.array_equal(out[:, 2:4], pts) and np.isnan(out[:, 0:2]).all()
    assert not anchors.proven(out).any()
    assert list(anchors.proven(anchors.prove(out, np.array([False, True, False])))) == [
        False, True, False]


def _scene_and_object(rng, n_scene=120, n_object=200, object_shift=(4.0, -3.0),
                      camera_shift=(1.5, 0.5)):
    """Tracks over a baseline: a scene spread over the whole frame, moved by the camera,
    and a compact object (a fifth of the frame) with more tracks, moved on its own too."""
    w, h = SIZE
    scene = rng.uniform([0, 0], [w - 1, h - 1], size=(n_scene, 2))
    obj = rng.uniform([250, 120], [250 + 0.45 * w, 120 + 0.45 * h], size=(n_object, 2))
    start = np.concatenate([scene, obj])
    moved = start + np.asarray(camera_shift)
    moved[n_scene:] += np.asarray(object_shift)
    moved += rng.normal(0.0, 0.05, moved.shape)
    return start, moved


def _group(start, dst, **kw):
    memo = anchors.first_seen(_memo(len(dst)), 0.0)
    memo = anchors.rebase(memo, 0, start)
    k = len(dst)
    return group_tracks(dst, memo, 0, np.full(k, 0.5), np.zeros(k),
                        model=SIMILARITY, settings=Settings(), base=BaselineSettings(),
                        seed=[0, 1], frame_size=SIZE, **kw)


def test_the_scene_is_the_group_that_spreads_not_the_largest():
    rng = np.random.default_rng(3)
    start, dst = _scene_and_object(rng)
    g = _group(start, dst)
    assert g is not None and g.split
    truth_scene = np.arange(len(dst)) < 120
    # Nearly every scene track is in the scene group and no object track is.
    assert (g.scene & truth_scene).sum() >= 110 and not (g.scene & ~truth_scene).any()
    assert (g.moved & ~truth_scene).sum() >= 180
    assert g.scene_spread > g.moved_spread


def test_a_second_motion_within_the_noise_is_no_split():
    rng = np.random.default_rng(4)
    start, dst = _scene_and_object(rng, object_shift=(0.3, 0.0))
    g = _group(start, dst)
    assert g is not None and not g.split


def test_no_baseline_no_grouping():
    rng = np.random.default_rng(5)
    start, dst = _scene_and_object(rng)
    memo = anchors.first_seen(_memo(len(dst)), 0.0)
    k = len(dst)
    kw = dict(model=SIMILARITY, settings=Settings(), base=BaselineSettings(), seed=[0, 1],
              frame_size=SIZE)
    assert group_tracks(dst, memo, None, np.full(k, 0.5), np.zeros(k), **kw) is None
    assert group_tracks(dst, memo, 0, np.full(k, 0.5), np.zeros(k), **kw) is None  # all NaN


def test_object_mask_covers_the_hull_and_a_cell_around_it():
    pts = np.array([[100.0, 100.0], [200.0, 100.0], [150.0, 180.0]])
    mask = object_mask(pts, SIZE)
    inside = np.array([[150.0, 130.0], [101.0, 101.0], [95.0, 100.0]])
    outside = np.array([[300.0, 300.0], [20.0, 20.0]])
    assert in_mask(mask, inside).all() and not in_mask(mask, outside).any()
    assert not object_mask(pts[:2], SIZE).any()  # two points have no area


def test_corner_shift():
    shift = np.array([[1.0, 0.0, 0.3], [0.0, 1.0, -0.4], [0.0, 0.0, 1.0]])
    assert corner_shift(shift, np.eye(3), SIZE) == pytest.approx(0.5)
    c, s = np.cos(np.radians(0.1)), np.sin(np.radians(0.1))
    cx, cy = (SIZE[0] - 1) / 2, (SIZE[1] - 1) / 2
    rot = np.array([[c, -s, cx - c * cx + s * cy], [s, c, cy - s * cx - c * cy], [0, 0, 1]])
    # A rotation about the centre moves the corners by the radius times the angle.
    radius = np.hypot(cx, cy)
    assert corner_shift(rot, np.eye(3), SIZE) == pytest.approx(
        2 * radius * np.sin(np.radians(0.05)), rel=1e-6)
