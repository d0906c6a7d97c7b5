import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from stabilize.consensus.sampling import draw_samples, generator

SEEDS = [0, 1, 5, 2**32 - 1, [0], [3, 4, 5], (1, 2), [0, 0], [2**32 - 1, 0, 7],
         # outside the fast path: handed to numpy as they are
         2**32, -1, [2**40, 1], [], True, np.int64(3), [np.int64(3), 4], None]


def _state(rng: np.random.Generator):
    return rng.bit_generator.state


@pytest.mark.parametrize("seed", SEEDS, ids=repr)
def test_generator_is_default_rng(seed):
    # The same stream as numpy.random.default_rng(seed), or numpy's own error for a seed it
    # refuses (a negative or an empty one).
    try:
        want = np.random.default_rng(seed)
    except (ValueError, TypeError) as err:
        with pytest.raises(type(err)):
            generator(seed)
        return
    got = generator(seed)
    if seed is None:
        return  # fresh entropy: nothing to compare
    assert _state(got) == _state(want)
    np.testing.assert_array_equal(got.random(16), want.random(16))


def test_generator_passes_a_generator_through():
    rng = np.random.default_rng(9)
    assert generator(rng) is rng


@settings(max_examples=30, deadline=None)
@given(seed=st.lists(st.integers(0, 2**32 - 1), min_size=1, max_size=6))
def test_generator_matches_for_any_word_list(seed):
    assert _state(generator(seed)) == _state(np.random.default_rng(seed))
    assert _state(generator(tuple(seed))) == _state(np.random.default_rng(tuple(seed)))


@pytest.mark.parametrize("n", [1, 2, 7, 1000, 2**52, 2**52 + 1, 2**60])
def test_draw_samples_in_range(n):
    rng = np.random.default_rng(1)
    idx = draw_samples(rng, n, 3, 64)
    assert idx.shape == (64, 3)
    assert idx.min() >= 0 and idx.max() < n


class _Top:
    """Stands in for a generator whose uniforms are all the largest double below 1."""

    def random(self, shape):
        return np.full(shape, 1.0 - 2.0**-53)


@pytest.mark.parametrize("n", [1, 3, 1000, 2**31, 2**52, 2**53 + 2, 2**62])
def test_draw_samples_largest_uniform_stays_below_n(n):
    idx = draw_samples(_Top(), n, 2, 4)
    assert (idx == n - 1).all() or (idx < n - 1).all()
    assert idx.max() < n
