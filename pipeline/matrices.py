"""A feature matrix is a dense float array or a scipy sparse CSC matrix; these helpers let every stage take
either without densifying a sparse one: its stored size, dense column slices (a working set), column
reductions, and its parts as plain arrays (for stored models and hashes).

Sparse matrices stay in CSC form: a working set is a slice of columns, and Xᵀu is one pass over the
stored entries.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp

MIB = 2**20
PARTS = ("data", "indices", "indptr", "shape")


def is_sparse(X) -> bool:
    return sp.issparse(X)


def as_features(X):
    """Float CSC for a sparse matrix, a float array otherwise (no copy when already so)."""
    if sp.issparse(X):
        return sp.csc_matrix(X, dtype=float)
    return np.asarray(X, dtype=float)


def dense(X) -> np.ndarray:
    return X.toarray() if sp.issparse(X) else np.asarray(X, dtype=float)


def columns(X, idx) -> np.ndarray:
    """The columns idx of X as a dense (n, len(idx)) array: only a working set is ever densified."""
    return X[:, idx].toarray() if sp.issparse(X) else np.asarray(X, dtype=float)[:, idx]


def column_means(X) -> np.ndarray:
    return np.asarray(X.mean(axis=0), dtype=float).ravel()


def column_ranges(X) -> np.ndarray:
    """max − min of every column (a sparse column's unstored entries are zeros)."""
    if sp.issparse(X):
        return (X.max(axis=0).toarray() - X.min(axis=0).toarray()).ravel()
    return np.ptp(X, axis=0)


def abs_column_sums(X) -> np.ndarray:
    return np.asarray(abs(X).sum(axis=0), dtype=float).ravel()


def times_rows(A, X) -> np.ndarray:
    """A Xᵀ for a dense (L, p) block A: (L, n), with X dense or sparse."""
    if sp.issparse(X):
        return np.asarray((X @ A.T).T)
    return A @ np.asarray(X, float).T


def stored_bytes(X) -> int:
    """What X holds in memory: stored entries with their row indices and column pointers when sparse."""
    if sp.issparse(X):
        X = sp.csc_matrix(X)
        return int(X.data.nbytes + X.indices.nbytes + X.indptr.nbytes)
    return int(np.asarray(X).nbytes)


def dense_mib(n_rows: int, n_cols: int) -> float:
    return n_rows * n_cols * 8 / MIB


def density(X) -> float:
    n, p = X.shape
    return (X.nnz if sp.issparse(X) else int(np.count_nonzero(X))) / max(n * p, 1)


def to_parts(name: str, X) -> dict[str, np.ndarray]:
    """Plain arrays of X under `name` (sparse: name_data, name_indices, name_indptr, name_shape)."""
    if not sp.issparse(X):
        return {name: np.asarray(X, float)}
    X = sp.csc_matrix(X, dtype=float)
    return {f"{name}_data": X.data, f"{name}_indices": X.indices, f"{name}_indptr": X.indptr,
            f"{name}_shape": np.asarray(X.shape, np.int64)}


def from_parts(name: str, arrays) -> "np.ndarray | sp.csc_matrix | None":
    """The matrix `to_parts` stored under `name`, or None when absent."""
    if name in arrays:
        return arrays[name]
    if f"{name}_data" not in arrays:
        return None
    return sp.csc_matrix((arrays[f"{name}_data"], arrays[f"{name}_indices"], arrays[f"{name}_indptr"]),
                         shape=tuple(int(s) for s in arrays[f"{name}_shape"]))
