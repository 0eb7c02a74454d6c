"""Small helpers on scipy.sparse CSR arrays shared by the coupling modules.

Couplings between nodes are stored as ``scipy.sparse.csr_array`` (row = emitting node):
a real vehicle's node sees a small share of the others, so memory and time grow with the
non-zeros, not with n^2.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

__all__ = ["as_csr", "values_at", "row_max", "row_ids", "hit_pairs", "dense"]


def as_csr(matrix, shape=None) -> sp.csr_array:
    """``matrix`` (dense or any sparse) as a float64 CSR array with sorted indices and
    no explicit duplicates."""
    a = sp.csr_array(matrix, shape=shape, dtype=np.float64)
    a.sum_duplicates()
    a.sort_indices()
    return a


def row_ids(matrix) -> np.ndarray:
    """Row index of every stored entry of a CSR array."""
    return np.repeat(np.arange(matrix.shape[0], dtype=np.int64), np.diff(matrix.indptr))


def values_at(matrix, rows, cols) -> np.ndarray:
    """Entries ``matrix[rows[k], cols[k]]`` (0 where nothing is stored) of a CSR array."""
    a = sp.csr_array(matrix)
    if not a.has_sorted_indices:
        a = a.sorted_indices()
    rows = np.asarray(rows, dtype=np.int64)
    cols = np.asarray(cols, dtype=np.int64)
    keys = row_ids(a) * a.shape[1] + a.indices
    want = rows * a.shape[1] + cols
    pos = np.searchsorted(keys, want)
    pos_c = np.minimum(pos, max(keys.size - 1, 0))
    found = (pos < keys.size) & (keys[pos_c] == want) if keys.size else np.zeros(want.size, bool)
    out = np.zeros(want.size, dtype=a.dtype)
    out[found] = a.data[pos_c[found]]
    return out


def row_max(matrix, values=None) -> np.ndarray:
    """Largest stored value per row of a CSR array (0 for empty rows; values >= 0).

    ``values`` replaces the stored data (same length) when given.
    """
    data = matrix.data if values is None else np.asarray(values)
    out = np.zeros(matrix.shape[0])
    if data.size:
        np.maximum.at(out, row_ids(matrix), data)
    return out


def hit_pairs(matrix):
    """The pairs ``i < j`` of a square CSR matrix with a positive entry in at least one
    direction, in row order: ``(iu, ju)`` int64 (the unknowns of reciprocity)."""
    n = matrix.shape[0]
    hit = sp.csr_array((matrix.data > 0, matrix.indices, matrix.indptr), shape=(n, n))
    hit.eliminate_zeros()
    pattern = sp.triu(hit + hit.T, k=1).tocoo()
    order = np.lexsort((pattern.col, pattern.row))
    return pattern.row[order].astype(np.int64), pattern.col[order].astype(np.int64)


def dense(matrix) -> np.ndarray:
    """A dense float copy of a coupling matrix, sparse or not (small models, tests)."""
    return matrix.toarray() if sp.issparse(matrix) else np.asarray(matrix, dtype=np.float64)
