"""Extra explicit maps for the sparse family: spline basis, random ReLU units, and a
kernel dictionary (columns k(x, z_j) at training rows or cluster centres: the L1
counterpart of the representer form). Each can hand out its columns in blocks, so
an optimality check over all columns never needs the whole matrix at once.

Their settings and registration ("spline", "random_relu", "kernel_dictionary") are in maps.py.
"""
from __future__ import annotations

from typing import Iterator

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.cluster import KMeans
from sklearn.preprocessing import SplineTransformer

from ..kernels import get_kernel, gram
from .maps import KernelDictionaryMap, RandomReLUMap, SplineMap  # noqa: F401  (their settings)


class _Blockwise:
    """Columns in blocks: subclasses give the width and one block's columns."""

    def n_columns(self) -> int:
        raise NotImplementedError

    def columns(self, X, start: int, stop: int) -> np.ndarray:
        raise NotImplementedError

    def iter_blocks(self, X, block_cols: int = 1024) -> Iterator[tuple[int, np.ndarray]]:
        """(first column index, block) pairs covering every column once."""
        for start in range(0, self.n_columns(), block_cols):
            yield start, self.columns(X, start, min(start + block_cols, self.n_columns()))

    def transform(self, X):
        return self.columns(np.asarray(X, float), 0, self.n_columns())


def blockwise_xt_dot(producer: _Blockwise, X, u, block_cols: int = 1024) -> np.ndarray:
    """Phi(X)' u without forming Phi(X): the product the L1 optimality check needs."""
    out = np.empty(producer.n_columns())
    for start, block in producer.iter_blocks(X, block_cols):
        out[start:start + block.shape[1]] = block.T @ u
    return out


class SplineBasis(_Blockwise, TransformerMixin, BaseEstimator):
    """B-spline basis per input column (scikit-learn SplineTransformer), knots at quantiles."""

    def __init__(self, n_knots=6, degree=3):
        self.n_knots = n_knots
        self.degree = degree

    def fit(self, X, y=None):
        self.spline_ = SplineTransformer(n_knots=self.n_knots, degree=self.degree,
                                         knots="quantile", extrapolation="linear").fit(X)
        self.width_ = self.spline_.n_features_out_
        return self

    def n_columns(self):
        return self.width_

    def columns(self, X, start, stop):
        return self.spline_.transform(X)[:, start:stop]

    def get_feature_names_out(self, input_features):
        names = self.spline_.get_feature_names_out(list(input_features))
        return [f"spline_{n}" for n in names]


class RandomReLU(_Blockwise, TransformerMixin, BaseEstimator):
    """max(0, w'x + c) with w uniform on the sphere and c ~ N(0, 1): random ReLU units."""

    def __init__(self, n_components=500, seed=0):
        self.n_components = n_components
        self.seed = seed

    def fit(self, X, y=None):
        rng = np.random.default_rng(self.seed)
        d = np.asarray(X).shape[1]
        w = rng.standard_normal((d, self.n_components))
        self.weights_ = w / np.maximum(np.linalg.norm(w, axis=0), 1e-300)
        self.offsets_ = rng.standard_normal(self.n_components)
        return self

    def n_columns(self):
        return self.n_components

    def columns(self, X, start, stop):
        return np.maximum(X @ self.weights_[:, start:stop] + self.offsets_[start:stop], 0.0)

    def get_feature_names_out(self, input_features):
        return [f"relu_{j:05d}" for j in range(self.n_components)]


class KernelDictionary(_Blockwise, TransformerMixin, BaseEstimator):
    """Columns k(x, z_j): centres z_j are training rows ("rows") or k-means centres ("kmeans")."""

    def __init__(self, kernel="rbf", n_centres=None, centres="rows", bandwidth=None, seed=0):
        self.kernel = kernel
        self.n_centres = n_centres
        self.centres = centres
        self.bandwidth = bandwidth
        self.seed = seed

    def fit(self, X, y=None):
        X = np.asarray(X, float)
        rng = np.random.default_rng(self.seed)
        m = X.shape[0] if self.n_centres is None else min(int(self.n_centres), X.shape[0])
        if self.centres == "rows":
            pick = np.sort(rng.choice(X.shape[0], m, replace=False)) if m < X.shape[0] else np.arange(m)
            self.centres_ = X[pick]
        elif self.centres == "kmeans":
            km = KMeans(n_clusters=m, n_init=3, random_state=int(rng.integers(2**31 - 1))).fit(X)
            self.centres_ = km.cluster_centers_
        else:
            raise ValueError(f"centres must be 'rows' or 'kmeans', got {self.centres!r}")
        kernel = get_kernel(self.kernel)
        params = {} if self.bandwidth is None or "bandwidth" not in kernel.params else \
            {"bandwidth": float(self.bandwidth)}
        self.kernel_params_ = kernel.resolve(X, **params)
        return self

    def n_columns(self):
        return self.centres_.shape[0]

    def columns(self, X, start, stop):
        return gram(X, self.centres_[start:stop], kernel=self.kernel, **self.kernel_params_)

    def get_feature_names_out(self, input_features):
        return [f"k_{self.kernel}_{j:05d}" for j in range(self.n_columns())]
