"""`FeatureBuilder`: standardise the input columns, apply each configured map, concatenate, standardise every
output column — fitted on the rows given to fit only.

The two standardisations are plain column means and standard deviations (numpy): at the sizes resample fits
see (a few hundred rows, thousands of columns) scikit-learn's scaler spent more time validating its input
than the fit spent solving, once per resample.
"""
from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin

from .. import seeds
from ..matrices import as_features, dense, is_sparse
from .registry import get_map


class Standardiser:
    """Column means and scales of the rows given to fit; (X − mean_) / scale_.

    A constant column keeps scale 1 (so it maps to zeros), with the rule scikit-learn's StandardScaler uses
    (sklearn.preprocessing._data: a variance within n·eps·var + (n·mean·eps)² of zero counts as constant, and a
    scale below 10·eps is replaced by 1), so both give the same result on degenerate columns.
    """

    def __init__(self, centre: bool = True):
        self.centre = centre   # False for sparse rows: scaled only (centring would fill every zero)

    def fit(self, X) -> "Standardiser":
        if is_sparse(X):
            n = X.shape[0]
            self.mean_ = np.asarray(X.mean(axis=0)).ravel()
            var = np.maximum(np.asarray(X.multiply(X).mean(axis=0)).ravel() - self.mean_ ** 2, 0.0)
            self._set_scale(var, n)
            return self
        self.fit_transform(X)
        return self

    def fit_transform(self, X):
        """fit(X) and transform(X) in one pass: the centred copy is made once and divided in place (the same
        operations in the same order as numpy's var and transform, so the same bits; a resample fit used to
        copy its design four times here)."""
        if is_sparse(X):
            return self.fit(X).transform(X)
        if not self.centre:
            return self._fit_uncentred(X)
        X = np.asarray(X, dtype=float)
        n = X.shape[0]
        self.mean_ = X.mean(axis=0)
        out = X - self.mean_
        var = np.add.reduce(out * out, axis=0) / n if n else np.full(X.shape[1], np.nan)
        self._set_scale(var, n)
        out /= self.scale_
        return out

    def _fit_uncentred(self, X) -> np.ndarray:
        X = np.asarray(X, dtype=float)
        self.mean_ = X.mean(axis=0)
        self._set_scale(X.var(axis=0), X.shape[0])
        return self.transform(X)

    def _set_scale(self, var, n) -> None:
        eps = np.finfo(np.float64).eps
        constant = var <= n * eps * var + (n * self.mean_ * eps) ** 2
        scale = np.sqrt(var)
        scale[constant | (scale < 10 * eps)] = 1.0
        self.scale_ = scale
        self.var_ = var
        if not self.centre:
            self.mean_ = np.zeros_like(scale)     # the offset removed: none

    def transform(self, X):
        if is_sparse(X):
            return as_features(X.multiply(1.0 / self.scale_[None, :]))   # CSC again
        out = np.array(X, dtype=float)      # a copy, as every caller keeps its input
        out -= self.mean_
        out /= self.scale_
        return out


class FeatureBuilder(TransformerMixin, BaseEstimator):
    """Standardise inputs → feature maps → standardised outputs, fitted on the rows given to fit.

    `seed` is the experiment seed: map i draws from child i of its "features" stream.
    """

    def __init__(self, maps=(), seed: int = 0, input_names=None):
        self.maps = maps
        self.seed = seed
        self.input_names = input_names

    def fit(self, X, y=None):
        self._fit(X)
        return self

    def fit_transform(self, X, y=None, **fit_params):
        """The fitted rows' Z from one pass (fit then transform would build the map outputs twice)."""
        return self._fit(X)

    def _rows(self, X):
        """Sparse rows stay sparse (CSC) when every map takes them; otherwise rows are dense floats."""
        return as_features(X) if self.sparse_ else dense(X)

    def _fit(self, X) -> np.ndarray:
        """Fit every step; returns the standardised outputs of X (Z of the fitted rows)."""
        from . import keeps_sparse
        self.sparse_ = keeps_sparse(X, self.maps)
        X = self._rows(X)
        # sparse rows are scaled, never centred; the families fit the intercept explicitly, so the fit on
        # scaled columns is the fit on standardised ones moved by a constant
        names = list(self.input_names) if self.input_names is not None else [f"x{j}" for j in range(X.shape[1])]
        # only maps that read standardised inputs need the input scaler (the identity map reads raw columns)
        self.input_scaler_ = Standardiser(not self.sparse_) if self._reads_standardised() else None
        Xs = self.input_scaler_.fit_transform(X) if self.input_scaler_ is not None else None
        self.transformers_, out_names = [], []
        map_seeds = seeds.child_int_seeds(int(self.seed), "features", len(self.maps))
        for spec, seed in zip(self.maps, map_seeds):
            entry = get_map(spec.kind)
            t = entry.build(spec, seed)
            t.fit(Xs if entry.standardised_input else X)
            self.transformers_.append(t)
            out_names.extend(t.get_feature_names_out(names))
        self.feature_names_out_ = np.asarray(out_names, dtype=object)
        self.output_scaler_ = Standardiser(not self.sparse_)
        return self.output_scaler_.fit_transform(self._raw_outputs(X, Xs))

    def _reads_standardised(self) -> bool:
        return any(get_map(spec.kind).standardised_input for spec in self.maps)

    def _raw_outputs(self, X, Xs):
        blocks = [t.transform(Xs if get_map(spec.kind).standardised_input else X)
                  for spec, t in zip(self.maps, self.transformers_)]
        if len(blocks) == 1:
            return blocks[0]
        if self.sparse_:
            import scipy.sparse as sp
            return sp.hstack(blocks, format="csc")
        return np.hstack(blocks)

    def transform(self, X):
        X = self._rows(X)
        Xs = self.input_scaler_.transform(X) if self.input_scaler_ is not None else None
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
