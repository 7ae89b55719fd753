"""The basic maps' transformers: identity, polynomial terms, random Fourier features (their settings and
registration: maps.py)."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.preprocessing import PolynomialFeatures

from ..kernels import median_bandwidth
from ..matrices import as_features
from .maps import IdentityMap, PolynomialMap, RandomFourierMap  # noqa: F401  (their settings)


class IdentityColumns(TransformerMixin, BaseEstimator):
    def fit(self, X, y=None):
        self.n_features_in_ = X.shape[1]
        return self

    def transform(self, X):
        return as_features(X)

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
        """Factors joined by '×'; a column name holding a space, '×' or '^' is bracketed, so a term's factors
        can always be read back (a name like 'net income' never looks like two factors)."""
        def factor(name, power):
            name = f"({name})" if any(c in name for c in " ×^") else name
            return name if power == 1 else f"{name}^{power}"
        inputs = [str(n) for n in input_features]
        return ["×".join(factor(inputs[j], int(p)) for j, p in enumerate(row) if p)
                for row, k in zip(self.poly_.powers_, self.keep_) if k]


@dataclass(frozen=True)
class FourierBlock:
    """One seeded block of random Fourier columns; a plain value, so it pickles to any worker."""

    seed: np.random.SeedSequence
    n_features_in: int
    width: int
    bandwidth: float
    scale: float

    def __call__(self, X) -> np.ndarray:
        rng = np.random.default_rng(self.seed)
        W = rng.normal(scale=1.0 / self.bandwidth, size=(self.n_features_in, self.width))
        u = rng.uniform(0.0, 2.0 * np.pi, size=self.width)
        out = np.asarray(X, dtype=float) @ W
        out += u
        np.cos(out, out=out)
        out *= self.scale
        return out


def random_fourier_blocks(n_features_in: int, n_components: int, bandwidth: float,
                          seed=0, block_size: int = 10_000) -> list[FourierBlock]:
    """Seeded blocks of random Fourier features for the rbf kernel (Rahimi & Recht 2007).

    φ(x) = √(2/D) cos(Wᵀx + u), W ~ N(0, ℓ⁻² I), u ~ U[0, 2π); E φ(x)ᵀφ(z) = rbf(x, z).
    Each block draws from its own child of one SeedSequence, so a block is the
    same whichever pass or worker evaluates it; `pipeline.kernels.feature_gram` sums
    their Gram matrices without holding all columns.
    """
    children = np.random.SeedSequence(seed).spawn((n_components + block_size - 1) // block_size)
    scale = np.sqrt(2.0 / n_components)
    widths = [min(block_size, n_components - i * block_size) for i in range(len(children))]
    return [FourierBlock(c, n_features_in, w, float(bandwidth), scale) for c, w in zip(children, widths)]


class RandomFourier(TransformerMixin, BaseEstimator):
    """cos(ωᵀx + b) features whose inner products approximate exp(−‖x−x'‖²/(2σ²)) (Rahimi & Recht 2007)."""

    def __init__(self, n_components=300, bandwidth="median", seed=0):
        self.n_components = n_components
        self.bandwidth = bandwidth
        self.seed = seed

    def fit(self, X, y=None):
        X = np.asarray(X, dtype=float)
        self.bandwidth_ = median_bandwidth(X) if self.bandwidth == "median" else float(self.bandwidth)
        self.blocks_ = random_fourier_blocks(X.shape[1], self.n_components, self.bandwidth_, self.seed)
        return self

    def transform(self, X):
        blocks = [phi(X) for phi in self.blocks_]
        return np.hstack(blocks) if len(blocks) > 1 else blocks[0]

    def get_feature_names_out(self, input_features):
        return [f"rff_{j:05d}" for j in range(self.n_components)]
