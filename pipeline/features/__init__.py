"""Explicit feature maps, always fitted on training rows only.

`FeatureBuilder` standardises the input columns, applies each configured map and
concatenates the outputs, then standardises every output column. Both families
receive the same standardised matrix Z; coefficients on Z are mapped back to the
scale of the map outputs (for the identity map: the original columns) with
`to_output_scale`.

Other modules add maps by calling `register_map(kind, factory)`; a factory takes
(map spec, seed) and returns a scikit-learn transformer that acts on standardised
inputs and has `get_feature_names_out(input_names)`.
"""
from __future__ import annotations

from typing import Callable

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.preprocessing import StandardScaler

from .basic import IdentityColumns, PolynomialTerms, RandomFourier

_MAPS: dict[str, Callable] = {}


def register_map(kind: str, factory: Callable) -> None:
    _MAPS[kind] = factory


register_map("identity", lambda spec, seed: IdentityColumns())
register_map("polynomial", lambda spec, seed: PolynomialTerms(spec.degree, spec.interaction_only))
register_map("random_fourier", lambda spec, seed: RandomFourier(spec.n_components, spec.bandwidth, seed))


def output_width(spec, n_inputs: int, n_rows: int | None = None) -> int:
    """Columns a map will produce, known before building it (for the memory estimate)."""
    if spec.kind == "identity":
        return n_inputs
    if spec.kind == "polynomial":
        from math import comb
        if spec.interaction_only:
            return sum(comb(n_inputs, d) for d in range(2, spec.degree + 1))
        return sum(comb(n_inputs + d - 1, d) for d in range(2, spec.degree + 1))
    if spec.kind == "random_fourier":
        return spec.n_components
    if spec.kind == "spline":
        return n_inputs * (spec.n_knots + spec.degree - 1)
    if spec.kind == "kernel_dictionary":
        return spec.n_centres or n_rows or n_inputs
    return getattr(spec, "n_components", n_inputs)


class FeatureBuilder(TransformerMixin, BaseEstimator):
    """Standardise inputs → feature maps → standardised outputs, fitted on the rows given to fit."""

    def __init__(self, maps=(), seed: int = 0, input_names=None):
        self.maps = maps
        self.seed = seed
        self.input_names = input_names

    def fit(self, X, y=None):
        X = np.asarray(X, dtype=float)
        names = list(self.input_names) if self.input_names is not None else [f"x{j}" for j in range(X.shape[1])]
        self.input_scaler_ = StandardScaler().fit(X)
        Xs = self.input_scaler_.transform(X)
        self.transformers_, out_names = [], []
        for i, spec in enumerate(self.maps):
            if spec.kind not in _MAPS:
                raise ValueError(f"unknown feature map '{spec.kind}'; known: {sorted(_MAPS)}")
            t = _MAPS[spec.kind](spec, int(self.seed) * 1000 + i)
            t.fit(X if spec.kind == "identity" else Xs)
            self.transformers_.append(t)
            out_names.extend(t.get_feature_names_out(names))
        self.feature_names_out_ = np.asarray(out_names, dtype=object)
        self.output_scaler_ = StandardScaler().fit(self._raw_outputs(X, Xs))
        return self

    def _raw_outputs(self, X, Xs):
        blocks = [t.transform(X if spec.kind == "identity" else Xs) for spec, t in zip(self.maps, self.transformers_)]
        return np.hstack(blocks) if len(blocks) > 1 else blocks[0]

    def transform(self, X):
        X = np.asarray(X, dtype=float)
        Xs = self.input_scaler_.transform(X)
        return self.output_scaler_.transform(self._raw_outputs(X, Xs))

    def get_feature_names_out(self, input_features=None):
        return self.feature_names_out_

    def to_output_scale(self, coef, intercept):
        """Coefficients on Z → coefficients on the raw map outputs (identity map: original columns)."""
        scale = self.output_scaler_.scale_
        mean = self.output_scaler_.mean_
        coef = np.asarray(coef, dtype=float)
        w = coef / scale
        return w, np.asarray(intercept, dtype=float) - w @ mean

from . import extra  # noqa: E402,F401  (registers spline, random_relu, kernel_dictionary)
