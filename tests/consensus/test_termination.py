import math

import pytest

from stabilize.consensus import rounds_needed
from stabilize.consensus.termination import next_batch_size

OUTLIERS = (0.05, 0.10, 0.20, 0.25, 0.30, 0.40, 0.50)

# Hartley and Zisserman, "Multiple View Geometry in Computer Vision", 2nd ed., 2004,
# Table 4.3: samples N for p = 0.99, rows sample size s, columns outlier proportion.
# These values were written from memory and each was checked against the formula
# N = ceil(log(1 - p) / log(1 - (1 - e)^s)) (see test_table_matches_formula).
HZ_TABLE_4_3 = {
    2: (2, 3, 5, 6, 7, 11, 17),
    3: (3, 4, 7, 9, 11, 19, 35),
    4: (3, 5, 9, 13, 17, 34, 72),
    5: (4, 6, 12, 17, 26, 57, 146),
    6: (4, 7, 16, 24, 37, 97, 293),
    7: (4, 8, 20, 33, 54, 163, 588),
    8: (5, 9, 26, 44, 78, 272, 1177),
}


def _formula(e: float, s: int, p: float) -> int:
    return math.ceil(math.log(1 - p) / math.log(1 - (1 - e) ** s))


@pytest.mark.parametrize("s", sorted(HZ_TABLE_4_3))
def test_table_matches_formula(s):
    assert [_formula(e, s, 0.99) for e in OUTLIERS] == list(HZ_TABLE_4_3[s])


@pytest.mark.parametrize("s", sorted(HZ_TABLE_4_3))
def test_hartley_zisserman_table_4_3(s):
    # Source: Hartley and Zisserman 2004, Table 4.3 (p = 0.99).
    assert [rounds_needed(e, s, 0.99) for e in OUTLIERS] == list(HZ_TABLE_4_3[s])


def test_example_value():
    # Hartley and Zisserman 2004, Table 4.3: s = 4, 20 % outliers -> 9.
    assert rounds_needed(0.2, 4, 0.99) == 9
    assert rounds_needed() == 9


def test_edge_cases():
    assert rounds_needed(0.0, 4, 0.99) == 1
    assert rounds_needed(1.0, 4, 0.99) == math.inf
    # w**s underflows: still a finite, huge or infinite count, never an error.
    assert rounds_needed(1 - 1e-200, 8, 0.99) == math.inf
    assert rounds_needed(0.999, 1, 0.999) > 1000
    with pytest.raises(ValueError):
        rounds_needed(0.2, 4, 1.0)
    with pytest.raises(ValueError):
        rounds_needed(-0.1, 4, 0.99)
    with pytest.raises(ValueError):
        rounds_needed(0.2, 0, 0.99)


def test_batch_sizes():
    assert next_batch_size(0, 12, 2000, False) == 12
    assert next_batch_size(0, 3, 2000, False) == 8
    assert next_batch_size(0, 500, 2000, False) == 64
    assert next_batch_size(10, 12, 2000, True) == 2
    assert next_batch_size(12, 12, 2000, True) == 0
    assert next_batch_size(1990, math.inf, 2000, True) == 10
    assert next_batch_size(5, 100, 5, False) == 0
