"""Explicit feature maps, always fitted on training rows only.

`FeatureBuilder` standardises the input columns, applies each configured map and
concatenates the outputs, then standardises every output column. Both families
receive the same standardised matrix Z; coefficients on Z are mapped back to the
scale of the map outputs (for the identity map: the original columns) with
`to_output_scale`. Sparse input rows stay a sparse matrix when every map takes one (the identity
map does): the scalers then scale without centring, and Z is sparse too.

`MAPS` (pipeline.features.registry) is the one table of maps; a new map is one
`register_map(MapKind(...))` call beside its transformer (see basic.py, extra.py).
"""
from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.preprocessing import StandardScaler

import scipy.sparse as sp

from .. import seeds
from ..matrices import as_features, dense, is_sparse
from . import basic, extra  # noqa: F401  (importing them registers their maps)
from .registry import MAPS, MapKind, get_map, output_width, register_map

__all__ = ["FeatureBuilder", "MAPS", "MapKind", "get_map", "keeps_sparse", "output_width", "register_map"]


def keeps_sparse(X, maps) -> bool:
    """Whether features built from X stay sparse: X is sparse and every map takes sparse input."""
    return is_sparse(X) and all(get_map(spec.kind).sparse_input for spec in maps)


class FeatureBuilder(TransformerMixin, BaseEstimator):
    """Standardise inputs → feature maps → standardised outputs, fitted on the rows given to fit.

    `seed` is the experiment seed: map i draws from child i of its "features" stream.
    """

    def __init__(self, maps=(), seed: int = 0, input_names=None):
        self.maps = maps
        self.seed = seed
        self.input_names = input_names

    def fit(self, X, y=None):
        self.sparse_ = keeps_sparse(X, self.maps)
        X = self._rows(X)
        names = list(self.input_names) if self.input_names is not None else [f"x{j}" for j in range(X.shape[1])]
        # sparse rows are scaled, never centred (centring would fill every zero); the families fit the
        # intercept explicitly, so the fit on scaled columns is the fit on standardised ones moved by a constant
        self.input_scaler_ = StandardScaler(with_mean=not self.sparse_).fit(X)
        Xs = self.input_scaler_.transform(X)
        self.transformers_, out_names = [], []
        map_seeds = seeds.child_int_seeds(int(self.seed), "features", len(self.maps))
        for spec, seed in zip(self.maps, map_seeds):
            entry = get_map(spec.kind)
            t = entry.build(spec, seed)
            t.fit(Xs if entry.standardised_input else X)
            self.transformers_.append(t)
            out_names.extend(t.get_feature_names_out(names))
        self.feature_names_out_ = np.asarray(out_names, dtype=object)
        self.output_scaler_ = StandardScaler(with_mean=not self.sparse_).fit(self._raw_outputs(X, Xs))
        return self

    def _rows(self, X):
        """Sparse rows stay sparse (CSC) when every map takes them; otherwise rows are dense floats."""
        return as_features(X) if self.sparse_ else dense(X)

    def _raw_outputs(self, X, Xs):
        blocks = [t.transform(Xs if get_map(spec.kind).standardised_input else X)
                  for spec, t in zip(self.maps, self.transformers_)]
        if len(blocks) == 1:
            return blocks[0]
        return sp.hstack(blocks, format="csc") if self.sparse_ else np.hstack(blocks)

    def transform(self, X):
        X = self._rows(X)
        Xs = self.input_scaler_.transform(X)
        return as_features(self.output_scaler_.transform(self._raw_outputs(X, Xs)))   # sparse: CSC again

    def get_feature_names_out(self, input_features=None):
        return self.feature_names_out_

    def to_output_scale(self, coef, intercept):
        """Coefficients on Z → coefficients on the raw map outputs (identity map: original columns)."""
        scale = self.output_scaler_.scale_
        mean = self.output_scaler_.mean_ if self.output_scaler_.with_mean else np.zeros_like(scale)
        coef = np.asarray(coef, dtype=float)
        w = coef / scale
        return w, np.asarray(intercept, dtype=float) - w @ mean
