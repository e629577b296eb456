"""The relational layer's sparse aggregation (a compiled kernel) on one thread and on several:
the row blocks must add up to SciPy's own single product (``scipy.sparse.csr_matrix.__matmul__``,
the reference) bit for bit, whatever the thread count, on matrices whose nonzeros crowd into a few rows or leave rows
empty (where block bounds are easiest to get wrong)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
import torch

from dochar.models.layers.relational import csr_product


@pytest.fixture
def threads():
    before = torch.get_num_threads()
    yield torch.set_num_threads
    torch.set_num_threads(before)


def skewed(rows: int, cols: int, seed: int) -> sp.csr_matrix:
    """Half the nonzeros in the first 3 rows, a third of the rows empty."""
    rng = np.random.default_rng(seed)
    crowded = rng.integers(0, 3, size=6000)
    spread = rng.choice(np.arange(rows)[rng.random(rows) > 1 / 3], size=6000)
    row = np.r_[crowded, spread]
    col = rng.integers(0, cols, size=len(row))
    values = rng.standard_normal(len(row)).astype(np.float32)
    return sp.csr_matrix((values, (row, col)), shape=(rows, cols))


@pytest.mark.parametrize("count", [1, 2, 3, 4])
def test_row_blocks_on_threads_equal_scipys_single_product(threads, count):
    matrix = skewed(4000, 1000, seed=count)
    dense = np.random.default_rng(7).standard_normal((1000, 64)).astype(np.float32)
    threads(count)
    out = csr_product(matrix, dense)
    assert out.dtype == np.float32
    np.testing.assert_array_equal(out, matrix @ dense)


def test_a_strided_dense_operand_and_the_transpose_give_scipys_products(threads):
    matrix = skewed(3000, 800, seed=11)
    wide = np.random.default_rng(3).standard_normal((800, 96)).astype(np.float32)
    threads(2)
    np.testing.assert_array_equal(csr_product(matrix, wide[:, ::2]), matrix @ wide[:, ::2])
    transposed = matrix.T.tocsr()
    grad = np.random.default_rng(4).standard_normal((3000, 32)).astype(np.float32)
    np.testing.assert_array_equal(csr_product(transposed, grad), transposed @ grad)
