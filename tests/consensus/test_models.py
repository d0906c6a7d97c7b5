import numpy as np
import pytest
from consensus_data import HEIGHT, WIDTH, apply, random_motion
from hypothesis import given, settings
from hypothesis import strategies as st

from stabilize.consensus import MODELS, estimate, grid_transfer_error
from stabilize.consensus.models import normalisation

NAMES = ("translation", "similarity", "affine", "homography")


def test_minimal_sample_sizes():
    # Minimal samples: 1 point (2 dof), 2 (4 dof), 3 (6 dof), 4 (8 dof).
    assert {k: m.sample_size for k, m in MODELS.items()} == {
        "translation": 1, "similarity": 2, "affine": 3, "homography": 4}
    assert {k: m.dof for k, m in MODELS.items()} == {
        "translation": 2, "similarity": 4, "affine": 6, "homography": 8}


def _well_spread(rng: np.random.Generator, s: int) -> np.ndarray:
    """s points, one per quadrant-ish region, so no three are nearly collinear."""
    anchors = np.array([[0.2, 0.2], [0.8, 0.25], [0.75, 0.8], [0.25, 0.75]])[:s]
    return (anchors + rng.uniform(-0.1, 0.1, (s, 2))) * (WIDTH, HEIGHT)


def _solve_pixels(model: str, src: np.ndarray, dst: np.ndarray):
    """Minimal solver on normalised points, result mapped back to pixels."""
    norm, z, _ = normalisation(src.T, dst.T)
    h, valid = MODELS[model].solve(z[:4, None, :])
    h_px = norm.t_dst_inv() @ h[0] @ norm.t_src()
    with np.errstate(all="ignore"):  # degenerate samples may give h33 = 0
        return h_px / h_px[2, 2], bool(valid[0])


@pytest.mark.parametrize("model", NAMES)
@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1))
def test_minimal_sample_recovered_exactly(model, seed):
    rng = np.random.default_rng(seed)
    h = random_motion(rng, model)
    s = MODELS[model].sample_size
    src = _well_spread(rng, s)
    dst = apply(h, src)
    h_est, valid = _solve_pixels(model, src, dst)
    assert valid
    assert grid_transfer_error(h, h_est, WIDTH, HEIGHT) < 1e-6
    np.testing.assert_allclose(h_est, h, rtol=1e-7, atol=1e-9)


@pytest.mark.parametrize("model", NAMES)
@settings(max_examples=10, deadline=None)
@given(seed=st.integers(0, 2**32 - 1))
def test_noise_free_points_recovered_exactly_by_estimate(model, seed):
    rng = np.random.default_rng(seed)
    h = random_motion(rng, model)
    src = rng.uniform((0, 0), (WIDTH - 1, HEIGHT - 1), (30, 2))
    fit = estimate(src, apply(h, src), model=model, seed=seed, frame_size=(WIDTH, HEIGHT))
    assert fit.ok and fit.inliers.all()
    assert grid_transfer_error(h, fit.matrix, WIDTH, HEIGHT) < 1e-6


@pytest.mark.parametrize("model", ("affine", "homography"))
def test_collinear_sample_rejected(model):
    s = MODELS[model].sample_size
    src = np.stack([np.linspace(0, 1000, s), np.linspace(0, 500, s)], axis=1)
    _, valid = _solve_pixels(model, src, src + 3.0)
    assert not valid


def test_reflected_sample_rejected():
    src = _well_spread(np.random.default_rng(0), 4)
    mirrored = src * (-1.0, 1.0) + (WIDTH, 0.0)
    for model in ("affine", "homography"):
        s = MODELS[model].sample_size
        _, valid = _solve_pixels(model, src[:s], mirrored[:s])
        assert not valid


def test_coincident_sample_rejected():
    src = np.array([[100.0, 100.0], [100.0, 100.0]])
    _, valid = _solve_pixels("similarity", src, src + 1.0)
    assert not valid


@pytest.mark.parametrize("model", NAMES)
def test_projection_onto_each_family(model):
    # A scaled general matrix is normalised (h33 = 1) and projected onto the family:
    # translation keeps the shift, similarity the rotation-and-scale part of the linear
    # block, affine drops the perspective row; non-finite or h33 ~ 0 gives None.
    h = np.array([[1.02, -0.05, 3.0], [0.07, 0.98, -2.0], [1e-4, -2e-4, 1.0]])
    got = MODELS[model].project(2.5 * h)
    want = {
        "translation": [[1.0, 0.0, 3.0], [0.0, 1.0, -2.0], [0.0, 0.0, 1.0]],
        "similarity": [[1.0, -0.06, 3.0], [0.06, 1.0, -2.0], [0.0, 0.0, 1.0]],
        "affine": [[1.02, -0.05, 3.0], [0.07, 0.98, -2.0], [0.0, 0.0, 1.0]],
        "homography": h,
    }[model]
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)
    assert got[2, 2] == 1.0
    bad = h.copy()
    bad[0, 1] = np.nan
    assert MODELS[model].project(bad) is None
    flat = h.copy()
    flat[2, 2] = 0.0
    assert MODELS[model].project(flat) is None


def test_homography_refit_is_the_least_squares_dlt_with_h33_one():
    # Against the homogeneous DLT (the least singular vector of the stacked 2m x 9 system,
    # Hartley and Zisserman 2004, algorithm 4.1, via numpy's SVD): the refit fixes h33 = 1
    # and minimises the same algebraic error over the other eight entries, so it equals the
    # minimiser of |A h|^2 over h with h33 = 1, which the SVD answer approaches for small
    # noise; exact points give the exact homography.
    from stabilize.consensus.solvers import homography_refit

    rng = np.random.default_rng(11)
    h = random_motion(rng, "homography")
    src = rng.uniform(0, (WIDTH, HEIGHT), (200, 2))
    for sigma, tol in ((0.0, 1e-9), (0.5, 1e-3)):
        dst = apply(h, src) + rng.normal(0, sigma, src.shape)
        norm, z, _ = normalisation(src.T, dst.T)
        feat = MODELS["homography"].features(z)
        got = homography_refit(feat, z, np.ones(len(src), bool))
        x, y, u, v = z[:4]
        one, nil = np.ones_like(x), np.zeros_like(x)
        a = np.vstack([np.stack([x, y, one, nil, nil, nil, -u * x, -u * y, -u], 1),
                       np.stack([nil, nil, nil, x, y, one, -v * x, -v * y, -v], 1)])
        # Fixed h33 = 1: ordinary least squares on the other eight columns.
        ls = np.linalg.lstsq(a[:, :8], -a[:, 8], rcond=None)[0]
        np.testing.assert_allclose(got.ravel()[:8], ls, atol=1e-9)
        svd = np.linalg.svd(a)[2][-1]
        np.testing.assert_allclose(got, (svd / svd[8]).reshape(3, 3), atol=tol)
        if sigma == 0.0:
            want = norm.t_dst() @ h @ norm.t_src_inv()
            np.testing.assert_allclose(got, want / want[2, 2], atol=1e-9)
