"""The motion-model objects: one protocol for every family, on invented exact motions."""

import numpy as np
import pytest

from stabilize.geometry import apply
from stabilize.motion_models import MOTION_MODELS, model_named

W, H = 640, 480


def _motion(name: str, rng: np.random.Generator) -> np.ndarray:
    a = np.radians(rng.uniform(-2, 2))
    s = rng.uniform(0.98, 1.02)
    m = np.eye(3)
    m[:2, 2] = rng.uniform(-8, 8, 2)
    if name != "translation":
        m[:2, :2] = s * np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
    if name in ("affine", "homography"):
        m[:2, :2] += rng.uniform(-0.01, 0.01, (2, 2))
    if name == "homography":
        m[2, :2] = rng.uniform(-2e-5, 2e-5, 2)
    return m


@pytest.mark.parametrize("name", list(MOTION_MODELS))
def test_estimate_residuals_params(name):
    rng = np.random.default_rng([3, len(name)])
    model = model_named(name)
    m = _motion(name, rng)
    src = rng.uniform([0, 0], [W - 1, H - 1], (200, 2))
    dst = apply(m[None], src)[0]
    fit = model.estimate(src, dst, frame_size=(W, H), seed=1)
    assert fit.ok and fit.model == name
    assert np.max(model.residuals(fit.matrix, src, dst)) < 1e-6
    assert model.params(fit.matrix).shape == (model.dof,)
    np.testing.assert_allclose(model.params(fit.matrix), model.params(m), atol=1e-8)
    # The parameters hold everything: the rest of the matrix is fixed by the family.
    flat = np.eye(3).ravel()
    flat[list(model.free)] = model.params(m)
    if name == "similarity":
        flat[1], flat[4] = -flat[3], flat[0]
    np.testing.assert_allclose(flat.reshape(3, 3), m / m[2, 2], atol=1e-12)


@pytest.mark.parametrize("name", list(MOTION_MODELS))
def test_encode_decode_round_trip(name):
    rng = np.random.default_rng([5, len(name)])
    model = model_named(name)
    p = np.stack([_motion(name, rng) for _ in range(6)])
    q = model.encode(p, W, H)
    assert q.shape == (6, 8 if model.uses_corners else 4)
    np.testing.assert_allclose(model.decode(q, W, H), p, atol=1e-9)


def test_lookup_at_the_edge():
    assert model_named(model_named("affine")) is model_named("affine")
    assert [m.sample_size for m in MOTION_MODELS.values()] == [1, 2, 3, 4]
    with pytest.raises(ValueError, match="unknown model 'spline'"):
        model_named("spline")
