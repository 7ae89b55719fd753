"""Synthetic scenarios with recorded ground truth (invented data, for demos and tests).

`SCENARIOS` is the one table of scenarios (name, description, task, maker); the config's
choices and `penduel scenarios` read it. A new scenario is one `register_scenario` call.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from .. import seeds
from .dataset import Dataset, Truth


@dataclass(frozen=True)
class Scenario:
    name: str
    description: str
    task: str                                      # the task of the rows it draws
    make: Callable[..., Dataset]                   # (scenario settings, numpy Generator) → Dataset


SCENARIOS: dict[str, Scenario] = {}


def register_scenario(scenario: Scenario) -> Scenario:
    SCENARIOS[scenario.name] = scenario
    return scenario


def make_scenario(src) -> Dataset:
    rng = seeds.generator(src.seed, "scenario")  # its own stream: the nested-CV stream drew the same numbers
    return SCENARIOS[src.name].make(src, rng)


def _ar1_columns(rng, n, p, rho):
    """Columns where neighbours have correlation rho (stationary AR(1) along the column index)."""
    Z = np.empty((n, p))
    Z[:, 0] = rng.standard_normal(n)
    innov = rng.standard_normal((n, p)) * np.sqrt(1 - rho**2)
    for j in range(1, p):
        Z[:, j] = rho * Z[:, j - 1] + innov[:, j]
    return Z


def _spread_support(rng, p, k):
    """k well-separated column indices (absorption bands sit apart on the spectrum)."""
    edges = np.linspace(0, p, k + 1).astype(int)
    return np.sort([int(rng.integers(lo + (hi - lo) // 4, max(lo + (hi - lo) // 4 + 1, hi - (hi - lo) // 4)))
                    for lo, hi in zip(edges[:-1], edges[1:])])


def _spectral_bands(src, rng) -> Dataset:
    n, p, k = src.n_samples, src.n_features, src.n_informative
    latent = _ar1_columns(rng, n, p, src.correlation)
    reflectance = 0.40 + 0.05 * latent          # reflectance units, centred near 40 %
    support = _spread_support(rng, p, k)
    beta_latent = rng.choice([-1.0, 1.0], size=k) * rng.uniform(1.0, 2.0, size=k)
    y = 21.0 + latent[:, support] @ beta_latent + src.noise * rng.standard_normal(n)
    coef = np.zeros(p)
    coef[support] = beta_latent / 0.05          # per unit of reflectance
    intercept = 21.0 - 0.40 * coef.sum()
    wavelengths = np.round(np.linspace(900, 1700, p)).astype(int)
    names = tuple(f"band_{i:03d}_{w}nm" for i, w in enumerate(wavelengths))
    return Dataset(X=reflectance, y=y, feature_names=names, target_name="sugar_brix", task="regression",
                   source=f"synthetic scenario spectral_bands (seed {src.seed})",
                   truth=Truth(support=tuple(int(s) for s in support), coefficients=coef, intercept=intercept))


def _binary_blobs(src, rng) -> Dataset:
    n, p, k = src.n_samples, src.n_features, src.n_informative
    X = rng.standard_normal((n, p))
    support = np.sort(rng.choice(p, size=k, replace=False))
    beta = rng.choice([-1.0, 1.0], size=k) * rng.uniform(1.0, 2.0, size=k)
    logit = X[:, support] @ beta
    prob = 1.0 / (1.0 + np.exp(-logit / src.noise))
    y = np.where(rng.uniform(size=n) < prob, 1.0, -1.0)
    if (y > 0).all() or (y < 0).all():
        y[0] = -y[0]
    coef = np.zeros(p)
    coef[support] = beta
    names = tuple(f"x{j:04d}" for j in range(p))
    return Dataset(X=X, y=y, feature_names=names, target_name="label", task="classification",
                   source=f"synthetic scenario binary_blobs (seed {src.seed})", class_labels=("neg", "pos"),
                   truth=Truth(support=tuple(int(s) for s in support), coefficients=coef))


def _dense_effects(src, rng) -> Dataset:
    n, p = src.n_samples, src.n_features
    X = _ar1_columns(rng, n, p, min(src.correlation, 0.5))
    beta = rng.standard_normal(p) * (2.0 / np.sqrt(p))   # total signal variance about 4, spread over all columns
    y = X @ beta + src.noise * rng.standard_normal(n)
    names = tuple(f"x{j:04d}" for j in range(p))
    return Dataset(X=X, y=y, feature_names=names, target_name="response", task="regression",
                   source=f"synthetic scenario dense_effects (seed {src.seed})",
                   truth=Truth(support=tuple(range(p)), coefficients=beta))


register_scenario(Scenario("spectral_bands", "correlated bands, sparse signal", "regression", _spectral_bands))
register_scenario(Scenario("binary_blobs", "two-class, few informative features", "classification",
                           _binary_blobs))
register_scenario(Scenario("dense_effects", "many small effects", "regression", _dense_effects))
