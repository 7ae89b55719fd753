"""The basic maps: identity, polynomial terms, random Fourier features."""
from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.kernel_approximation import RBFSampler
from sklearn.preprocessing import PolynomialFeatures


class IdentityColumns(TransformerMixin, BaseEstimator):
    def fit(self, X, y=None):
        self.n_features_in_ = X.shape[1]
        return self

    def transform(self, X):
        return np.asarray(X, dtype=float)

    def get_feature_names_out(self, input_features):
        return list(input_features)


class PolynomialTerms(TransformerMixin, BaseEstimator):
    """Products of standardised inputs of total degree 2..degree (degree 1 is the identity map's job)."""

    def __init__(self, degree=2, interaction_only=False):
        self.degree = degree
        self.interaction_only = interaction_only

    def fit(self, X, y=None):
        self.poly_ = PolynomialFeatures(self.degree, interaction_only=self.interaction_only,
                                        include_bias=False).fit(X)
        self.keep_ = self.poly_.powers_.sum(axis=1) >= 2
        return self

    def transform(self, X):
        return self.poly_.transform(X)[:, self.keep_]

    def get_feature_names_out(self, input_features):
        names = self.poly_.get_feature_names_out(list(input_features))
        return [n.replace(" ", "*") for n, k in zip(names, self.keep_) if k]


def median_distance(X, rng, max_rows=1000) -> float:
    """Median pairwise Euclidean distance of (up to max_rows sampled) rows: a common-practice bandwidth."""
    if X.shape[0] > max_rows:
        X = X[rng.choice(X.shape[0], max_rows, replace=False)]
    sq = (X**2).sum(1)
    d2 = np.maximum(sq[:, None] + sq[None, :] - 2 * X @ X.T, 0.0)
    iu = np.triu_indices(X.shape[0], 1)
    med = float(np.sqrt(np.median(d2[iu])))
    return med if med > 0 else 1.0


class RandomFourier(TransformerMixin, BaseEstimator):
    """cos(ωᵀx + b) features whose inner products approximate exp(−‖x−x'‖²/(2σ²)) (Rahimi & Recht 2007)."""

    def __init__(self, n_components=300, bandwidth="median", seed=0):
        self.n_components = n_components
        self.bandwidth = bandwidth
        self.seed = seed

    def fit(self, X, y=None):
        rng = np.random.default_rng(self.seed)
        sigma = median_distance(X, rng) if self.bandwidth == "median" else float(self.bandwidth)
        self.bandwidth_ = sigma
        self.sampler_ = RBFSampler(gamma=1.0 / (2 * sigma**2), n_components=self.n_components,
                                   random_state=int(rng.integers(2**31 - 1))).fit(X)
        return self

    def transform(self, X):
        return self.sampler_.transform(X)

    def get_feature_names_out(self, input_features):
        return [f"rff_{j:05d}" for j in range(self.n_components)]
