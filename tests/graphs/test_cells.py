"""The grid index's ranking helpers against NumPy's own lexicographic sort (np.lexsort)."""

from __future__ import annotations

import numpy as np
import pytest

from dochar.graphs.cells import group_minima, order_within_groups


def _entries(seed: int, n: int = 400, groups: int = 37):
    rng = np.random.default_rng(seed)
    group = np.sort(rng.integers(0, groups, n))
    # few distinct values, so ties on the first keys are common and later keys decide
    keys = (rng.integers(0, 3, n).astype(float), rng.integers(0, 4, n).astype(float),
            rng.permutation(n).astype(float))
    return group, keys, groups


@pytest.mark.parametrize("seed", range(5))
def test_order_within_groups_is_lexsort(seed):
    group, keys, _ = _entries(seed)
    np.testing.assert_array_equal(order_within_groups(group, keys),
                                  np.lexsort((*reversed(keys), group)))


@pytest.mark.parametrize("seed", range(5))
def test_group_minima_are_the_heads_of_the_lexsort(seed):
    group, keys, groups = _entries(seed)
    shuffled = np.random.default_rng(seed + 100).permutation(len(group))   # any entry order
    group, keys = group[shuffled], tuple(k[shuffled] for k in keys)
    order = np.lexsort((*reversed(keys), group))
    heads = order[np.r_[True, group[order][1:] != group[order][:-1]]]
    np.testing.assert_array_equal(group_minima(group, keys, groups), heads)


def test_group_minima_breaks_a_full_tie_by_first_entry():
    group = np.array([1, 1, 0, 1])
    keys = (np.array([2.0, 2.0, 5.0, 3.0]),)
    np.testing.assert_array_equal(group_minima(group, keys, 2), [2, 0])
    assert len(group_minima(np.zeros(0, dtype=np.int64), (np.zeros(0),), 3)) == 0
