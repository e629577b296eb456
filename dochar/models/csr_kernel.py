"""Rows of a CSR matrix times a dense matrix, compiled: the relational layer's aggregation.

``out[i] = sum over the row's nonzeros, in stored order, of value * dense[column]``: the same
products and additions in the same order as SciPy's ``csr_matrix @ dense`` (its
``csr_matvecs``), so the results are equal bit for bit (Numba compiles without fast-math: no
fused multiply-add). The loop over a row's outputs vectorises, which SciPy's does not; the
kernel releases the GIL, so row blocks can run on threads. Compiled once per machine and cached
beside this file.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, nogil=True)
def csr_rows_times_dense(indptr: np.ndarray, indices: np.ndarray, values: np.ndarray,
                         dense: np.ndarray, first: int, last: int, out: np.ndarray) -> None:
    """Rows ``first`` to ``last - 1`` of the product into ``out`` (one row of it per row)."""
    for i in range(first, last):
        row = out[i - first]
        row[:] = 0
        for entry in range(indptr[i], indptr[i + 1]):
            value, source = values[entry], dense[indices[entry]]
            for k in range(len(row)):
                row[k] += value * source[k]
