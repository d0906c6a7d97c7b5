import numpy as np
import pytest
from consensus_data import HEIGHT, WIDTH, apply, make_matches, random_motion
from hypothesis import given, settings
from hypothesis import strategies as st

from stabilize.consensus import Fit, MotionBounds, estimate, grid_transfer_error

NAMES = ("translation", "similarity", "affine", "homography")
FRAME = (WIDTH, HEIGHT)


def _check_failure(fit: Fit, n: int) -> None:
    assert not fit.ok
    assert fit.reason
    assert fit.matrix.shape == (3, 3)
    np.testing.assert_array_equal(fit.matrix, np.eye(3))
    assert fit.inliers.shape == (n,) and not fit.inliers.any()


@pytest.mark.parametrize("model", NAMES)
def test_recovers_motion_with_half_outliers(model):
    # Rule of thumb (common practice, no source): plain RANSAC copes with ~50 % outliers.
    rng = np.random.default_rng(7)
    h, src, dst, is_in = make_matches(rng, model, n=400, outliers=0.5)
    fit = estimate(src, dst, model=model, seed=1, frame_size=FRAME)
    assert fit.ok and not fit.weak, fit.reason
    assert fit.reason == ""
    assert grid_transfer_error(h, fit.matrix, WIDTH, HEIGHT) < 0.3
    assert (fit.inliers & is_in).sum() >= 0.95 * is_in.sum()
    assert (fit.inliers & ~is_in).sum() <= 2
    assert fit.matrix[2, 2] == 1.0
    assert 0.3 < fit.rms_px < 1.0  # noise sigma 0.5 px per axis
    assert fit.score > 0 and fit.rounds >= 1


def test_breaks_down_with_many_outliers_and_few_rounds():
    # Rule of thumb (common practice, no source): plain RANSAC becomes impractical
    # past ~60 % outliers at a fixed round cap. At 90 % outliers a 4-point sample is
    # clean with probability 1e-4, so 30 rounds almost never find the motion.
    fails = 0
    for trial in range(5):
        rng = np.random.default_rng(100 + trial)
        h, src, dst, _ = make_matches(rng, "homography", n=400, outliers=0.9)
        fit = estimate(src, dst, model="homography", max_rounds=30, seed=trial,
                       frame_size=FRAME)
        assert fit.rounds <= 30
        if not fit.ok or fit.weak:
            fails += 1
    assert fails == 5
    # With enough rounds the same data is solvable (inliers: 40 of 400, 10 %).
    fit = estimate(src, dst, model="homography", max_rounds=200000, confidence=0.99,
                   seed=0, frame_size=FRAME)
    assert fit.ok and grid_transfer_error(h, fit.matrix, WIDTH, HEIGHT) < 1.0
    assert fit.weak  # only 10 % of the matches agree


@pytest.mark.parametrize("model", NAMES)
def test_same_seed_identical_bits(model):
    rng = np.random.default_rng(3)
    _, src, dst, _ = make_matches(rng, model, n=300, outliers=0.4)
    a = estimate(src, dst, model=model, seed=[5, 17], frame_size=FRAME)
    b = estimate(src, dst, model=model, seed=[5, 17], frame_size=FRAME)
    assert a.matrix.tobytes() == b.matrix.tobytes()
    np.testing.assert_array_equal(a.inliers, b.inliers)
    assert a.rounds == b.rounds and a.score == b.score
    c = estimate(src, dst, model=model, seed=np.random.default_rng([5, 17]), frame_size=FRAME)
    assert c.matrix.tobytes() == a.matrix.tobytes()


@pytest.mark.parametrize("model", NAMES)
@settings(max_examples=8, deadline=None)
@given(seed=st.integers(0, 2**32 - 1))
def test_invariant_to_order_of_correspondences(model, seed):
    rng = np.random.default_rng(seed)
    _, src, dst, _ = make_matches(rng, model, n=120, outliers=0.4)
    perm = rng.permutation(len(src))
    a = estimate(src, dst, model=model, seed=0, frame_size=FRAME)
    b = estimate(src[perm], dst[perm], model=model, seed=0, frame_size=FRAME)
    # Canonical ordering makes the whole computation identical, bit for bit.
    assert a.matrix.tobytes() == b.matrix.tobytes()
    np.testing.assert_array_equal(a.inliers[perm], b.inliers)


def test_order_invariance_with_duplicate_rows():
    rng = np.random.default_rng(4)
    _, src, dst, _ = make_matches(rng, "affine", n=100, outliers=0.3)
    src = np.vstack([src, src[:10]])
    dst = np.vstack([dst, dst[:10]])
    perm = rng.permutation(len(src))
    a = estimate(src, dst, model="affine", seed=2)
    b = estimate(src[perm], dst[perm], model="affine", seed=2)
    assert a.matrix.tobytes() == b.matrix.tobytes()
    np.testing.assert_array_equal(a.inliers[perm], b.inliers)


@pytest.mark.parametrize("model", ("similarity", "affine", "homography"))
def test_coincident_points_fail_cleanly(model):
    src = np.full((20, 2), 300.0)
    _check_failure(estimate(src, src + 2.0, model=model), 20)


@pytest.mark.parametrize("model", ("affine", "homography"))
def test_collinear_points_fail_cleanly(model):
    t = np.linspace(0, 1000, 50)
    src = np.stack([t, 0.5 * t + 20], axis=1)
    _check_failure(estimate(src, src + (4.0, -1.0), model=model), 50)


def test_collinear_points_fine_for_similarity():
    t = np.linspace(0, 1000, 50)
    src = np.stack([t, 0.5 * t + 20], axis=1)
    fit = estimate(src, src + (4.0, -1.0), model="similarity")
    assert fit.ok
    np.testing.assert_allclose(fit.matrix[:2, 2], (4.0, -1.0), atol=1e-9)


@pytest.mark.parametrize("model", NAMES)
def test_too_few_points(model):
    s = {"translation": 1, "similarity": 2, "affine": 3, "homography": 4}[model]
    for n in (0, s - 1):
        _check_failure(estimate(np.zeros((n, 2)), np.zeros((n, 2)), model=model), n)
    rng = np.random.default_rng(0)
    h = random_motion(rng, model)
    src = rng.uniform(0, 1000, (s, 2))
    fit = estimate(src, apply(h, src), model=model)
    assert not fit.ok and "too few inliers" in fit.reason  # exact fit, no support


def test_prior_is_used():
    rng = np.random.default_rng(11)
    h, src, dst, _ = make_matches(rng, "homography", n=500, outliers=0.0)
    plain = estimate(src, dst, model="homography", seed=0, frame_size=FRAME)
    primed = estimate(src, dst, model="homography", seed=0, prior=h, frame_size=FRAME)
    assert primed.ok and primed.rounds <= 5 < plain.rounds
    # A perfect prior with max_rounds=0 is verified on its own.
    only = estimate(src, dst, model="homography", max_rounds=0, prior=h, frame_size=FRAME)
    assert only.ok and only.rounds == 1
    assert grid_transfer_error(h, only.matrix, WIDTH, HEIGHT) < 0.2
    # Without a prior and no rounds there is nothing to fit.
    assert not estimate(src, dst, max_rounds=0).ok


def test_bad_prior_is_ignored():
    rng = np.random.default_rng(12)
    h, src, dst, _ = make_matches(rng, "affine", n=300, outliers=0.3)
    for prior in (np.zeros((3, 3)), np.full((3, 3), np.nan), np.diag([5.0, 5.0, 1.0])):
        fit = estimate(src, dst, model="affine", prior=prior, frame_size=FRAME)
        assert fit.ok and grid_transfer_error(h, fit.matrix, WIDTH, HEIGHT) < 0.3


def test_motion_bounds_reject_implausible_motion():
    rng = np.random.default_rng(5)
    src = rng.uniform((0, 0), (WIDTH - 1, HEIGHT - 1), (200, 2))
    c, s_ = np.cos(np.radians(60)), np.sin(np.radians(60))
    cx, cy = (WIDTH - 1) / 2, (HEIGHT - 1) / 2
    rot = np.array([[c, -s_, cx - c * cx + s_ * cy], [s_, c, cy - s_ * cx - c * cy], [0, 0, 1]])
    dst = apply(rot, src)
    fit = estimate(src, dst, model="similarity", frame_size=FRAME)
    assert not fit.ok and "bounds" in fit.reason
    fit = estimate(src, dst, model="similarity", frame_size=FRAME,
                   bounds=MotionBounds(max_rotation_deg=90))
    assert fit.ok and grid_transfer_error(rot, fit.matrix, WIDTH, HEIGHT) < 1e-6
    fit = estimate(src, dst, model="similarity", bounds=MotionBounds.unbounded())
    assert fit.ok


def test_mirror_never_accepted():
    rng = np.random.default_rng(6)
    src = rng.uniform((0, 0), (WIDTH - 1, HEIGHT - 1), (100, 2))
    dst = src * (-1.0, 1.0) + (WIDTH - 1, 0.0)
    for model in ("affine", "homography"):
        fit = estimate(src, dst, model=model, bounds=MotionBounds.unbounded())
        assert not fit.ok


def test_weak_when_inliers_bunched():
    rng = np.random.default_rng(8)
    h = random_motion(rng, "similarity")
    src = rng.uniform((0, 0), (400, 300), (100, 2))  # top-left corner only
    fit = estimate(src, apply(h, src), model="similarity", frame_size=FRAME)
    assert fit.ok and fit.weak and "bunched" in fit.reason
    src = rng.uniform((0, 0), (WIDTH - 1, HEIGHT - 1), (100, 2))
    fit = estimate(src, apply(h, src), model="similarity", frame_size=FRAME)
    assert fit.ok and not fit.weak


def test_weak_when_few_inliers():
    rng = np.random.default_rng(9)
    h = random_motion(rng, "translation")
    src = rng.uniform((0, 0), (WIDTH - 1, HEIGHT - 1), (8, 2))
    fit = estimate(src, apply(h, src), model="translation", frame_size=FRAME)
    assert fit.ok and fit.weak and "few inliers" in fit.reason


def test_non_finite_rows_ignored():
    rng = np.random.default_rng(10)
    h, src, dst, _ = make_matches(rng, "affine", n=200, outliers=0.2)
    src[3] = np.nan
    dst[7] = np.inf
    fit = estimate(src, dst, model="affine", frame_size=FRAME)
    assert fit.ok and not fit.inliers[3] and not fit.inliers[7]
    assert fit.inliers.shape == (200,)


def test_programming_errors_raise():
    pts = np.zeros((10, 2))
    with pytest.raises(ValueError):
        estimate(pts, pts, model="projective")
    with pytest.raises(ValueError):
        estimate(np.zeros((10, 3)), np.zeros((10, 3)))
    with pytest.raises(ValueError):
        estimate(pts, np.zeros((9, 2)))
    with pytest.raises(ValueError):
        estimate(pts, pts, inlier_px=-1.0)
    with pytest.raises(ValueError):
        estimate(pts, pts, confidence=1.0)
    with pytest.raises(ValueError):
        estimate(pts, pts, confidence=0.0)
    with pytest.raises(ValueError):
        estimate(pts, pts, prior=np.eye(2))


@pytest.mark.parametrize("model", NAMES)
def test_point_sets_reused_by_value_only(model):
    # A point set made ready once is reused for equal values (fresh copies included) and
    # never for changed values, even when the same arrays were changed in place.
    rng = np.random.default_rng(11)
    _, src, dst, _ = make_matches(rng, model, n=200, outliers=0.3)
    prior = estimate(src, dst, model=model, seed=1, frame_size=FRAME).matrix
    kw = dict(model=model, seed=2, prior=prior, inlier_px=0.8, frame_size=FRAME)
    a = estimate(src, dst, **kw)
    b = estimate(src.copy(), dst.copy(), **kw)
    assert a.matrix.tobytes() == b.matrix.tobytes()
    np.testing.assert_array_equal(a.inliers, b.inliers)
    moved = src.copy()
    estimate(moved, dst, **kw)
    moved += 3.0  # the same array, changed in place after it was seen
    again = estimate(moved, dst, **kw)
    fresh = estimate(src + 3.0, dst, **kw)
    assert again.matrix.tobytes() == fresh.matrix.tobytes()
    np.testing.assert_array_equal(again.inliers, fresh.inliers)
    assert not np.array_equal(again.matrix, a.matrix)


def test_spread_counted_on_the_inliers_of_each_call():
    # The spread grid's cells are kept with the point set; each call counts the cells of
    # its own inliers (here: a prior that fits only the left half, then the whole set).
    rng = np.random.default_rng(12)
    src = rng.uniform(0, [WIDTH, HEIGHT], (400, 2))
    dst = src + (4.0, -1.0)
    left = src[:, 0] < WIDTH / 4
    dst[~left] += (0.0, 30.0)  # the rest moves away: only the left quarter fits
    shift = np.array([[1.0, 0.0, 4.0], [0.0, 1.0, -1.0], [0.0, 0.0, 1.0]])
    narrow = estimate(src, dst, model="translation", prior=shift, max_rounds=0,
                      frame_size=FRAME)
    assert narrow.ok and narrow.weak and "bunched" in narrow.reason
    dst[~left] -= (0.0, 30.0)
    wide = estimate(src, dst, model="translation", prior=shift, max_rounds=0,
                    frame_size=FRAME)
    assert wide.ok and not wide.weak
