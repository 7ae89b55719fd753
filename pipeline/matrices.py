"""A feature matrix is a dense float array or a scipy sparse CSC matrix; these helpers let every stage take
either without densifying a sparse one: its stored size, dense column slices (a working set), column
reductions, and its parts as plain arrays (for stored models and hashes). A mostly-zero dense array can
also travel as its nonzero positions and values (PackedZeros: worker results, cache entries).

Sparse matrices stay in CSC form: a working set is a slice of columns, and Xᵀu is one pass over the
stored entries.
"""
from __future__ import annotations

from dataclasses import dataclass

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


# An array is sent packed (PackedZeros) when at most this share of its entries is nonzero and it has at
# least PACK_MIN_ENTRIES entries: a resample fit's (L, p) weights are mostly exact zeros
PACK_SHARE, PACK_MIN_ENTRIES = 0.25, 1024


@dataclass(frozen=True)
class PackedZeros:
    """A float64 array as the positions (flat, C order) and values of its entries whose bits are not all zero:
    −0.0 and NaN are kept as entries, so `unpacked()` gives back the same bits."""
    shape: tuple
    positions: np.ndarray
    values: np.ndarray

    def unpacked(self) -> np.ndarray:
        """The dense array; ValueError when the parts do not fit together (e.g. a damaged cache entry)."""
        size = int(np.prod(self.shape))
        pos, values = np.asarray(self.positions), np.asarray(self.values)
        if pos.ndim != 1 or pos.dtype.kind not in "iu" or values.shape != pos.shape or values.dtype != np.float64 \
                or (pos.size and (int(pos.min()) < 0 or int(pos.max()) >= size)):
            raise ValueError(f"packed array parts do not fit its shape {self.shape}")
        out = np.zeros(self.shape)
        out.reshape(-1)[self.positions] = self.values
        return out


def pack_zeros(a):
    """`a` as PackedZeros when that is much smaller (see PACK_SHARE), else `a` unchanged."""
    if not isinstance(a, np.ndarray) or a.dtype != np.float64 or a.size < PACK_MIN_ENTRIES:
        return a
    flat = np.ascontiguousarray(a).reshape(-1)
    positions = np.flatnonzero(flat.view(np.uint64))
    if positions.size > PACK_SHARE * flat.size:
        return a
    return PackedZeros(tuple(a.shape), positions.astype(np.int32 if flat.size < 2**31 else np.int64),
                       flat[positions])
