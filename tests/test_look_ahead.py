"""The fixed look-ahead of the Gaussian plan: planned on a clip's first frames only, a frame's
correction is bit for bit the whole clip's once the plan has seen L frames past it."""

import numpy as np
import pytest

from stabilize.steady_path import look_ahead_frames, plan_corrections


def _shaky(n: int, seed: int) -> np.ndarray:
    """Inter-frame similarities: a slow pan with random shake (pixels, radians)."""
    rng = np.random.default_rng(seed)
    th = rng.normal(0.0, 0.002, n)
    m = np.repeat(np.eye(3)[None], n, axis=0)
    m[:, 0, 0] = m[:, 1, 1] = np.cos(th)
    m[:, 0, 1], m[:, 1, 0] = -np.sin(th), np.sin(th)
    m[:, 0, 2] = 1.0 + rng.normal(0.0, 3.0, n)
    m[:, 1, 2] = rng.normal(0.0, 3.0, n)
    return m


def _plan(m, cuts, smoother="gaussian", margin=0.1):
    return plan_corrections(m, cuts, fps=30.0, window_s=1.0, model="similarity",
                            smoother=smoother, margin=margin, width=640, height=360,
                            auto_cap=0.2).corrections


def test_gaussian_prefix_plans_match_the_whole_clip_after_the_look_ahead():
    n = 300
    m = _shaky(n, 1)
    cuts = np.zeros(n, bool)
    cuts[190] = True
    lag = look_ahead_frames("gaussian", 0.1, 30.0, 1.0)
    full = _plan(m, cuts)
    for stop in range(lag + 3, n, 11):
        part = _plan(m[:stop], cuts[:stop])
        assert np.array_equal(part[:stop - lag], full[:stop - lag]), stop
    # The look-ahead is needed: a plan that stops short of it changes the frames before.
    short = _plan(m[:150], cuts[:150])
    assert not np.array_equal(short[:150 - lag // 4], full[:150 - lag // 4])


def test_the_kalman_path_changes_with_what_comes_later():
    n = 300
    m = _shaky(n, 2)
    cuts = np.zeros(n, bool)
    full = _plan(m, cuts, smoother="kalman")
    part = _plan(m[:200], cuts[:200], smoother="kalman")
    assert not np.array_equal(part[:100], full[:100])


@pytest.mark.parametrize("smoother,margin", [("kalman", 0.1), ("l1", 0.1), ("lockoff", 0.1),
                                             ("gaussian", "auto")])
def test_whole_path_smoothers_have_no_look_ahead(smoother, margin):
    assert look_ahead_frames(smoother, margin, 30.0, 1.0) is None


def test_look_ahead_grows_with_the_time_scale():
    assert look_ahead_frames("gaussian", 0.1, 30.0, 1.0) == 45 + 16 + 23
    assert look_ahead_frames("gaussian", 0.1, 30.0, 2.0) > look_ahead_frames(
        "gaussian", 0.1, 30.0, 1.0)


def test_fixed_lag_planner_fed_in_steps_gives_the_whole_clips_corrections():
    from stabilize.steady_path import FixedLagPlanner

    n = 400
    m = _shaky(n, 3)
    cuts = np.zeros(n, bool)
    cuts[230] = True
    planner = FixedLagPlanner(fps=30.0, window_s=1.0, model="similarity", margin=0.1,
                              width=640, height=360)
    got: list[np.ndarray] = []
    for start in range(0, n, 13):
        stop = min(n, start + 13)
        planner.extend(m[start:stop], cuts[start:stop])
        got.extend(planner.plan(len(got), final=stop == n))
    assert not planner.eased
    assert np.array_equal(np.array(got), _plan(m, cuts))
