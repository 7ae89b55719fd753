"""scikit-learn-compatible estimators: thin wrappers over the family interface the pipeline fits with
(`RIDGE` / `SPARSE` grid, fit_path and predict), so what a user imports and what a run fits are one code.

L2 (representer form) part: KernelL2Regressor, KernelL2Classifier. Both minimise
(1/n) Σ loss(yᵢ, b + (Kc)ᵢ) + (λ/2) cᵀKc with the intercept unpenalised; with
``lam=None`` and the squared loss, λ is the exact-LOO minimiser over a df-spanning
grid; otherwise ``lam=None`` means the fixed value ``DEFAULT_LAM``.
"""
from __future__ import annotations

from types import SimpleNamespace

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data

from pipeline.kernels import resolve_params
from pipeline.losses import get_loss
from pipeline.models.ridge import RIDGE, RidgeModel
from pipeline.models.sparse import SPARSE, lambda_max

# ---------------------------------------------------------------- L2 family
DEFAULT_LAM = 1e-3


class _KernelL2Base(BaseEstimator):
    _allowed_task = "regression"

    def _check_params(self):
        loss = get_loss(self.loss, **(self.loss_params or {}))
        if loss.task != self._allowed_task:
            raise ValueError(f"{type(self).__name__} takes a {self._allowed_task} loss; "
                             f"{loss.name!r} is a {loss.task} loss")
        if self.lam is not None and not self.lam > 0:
            raise ValueError(f"lam must be positive or None, got {self.lam!r}")
        return loss

    def _fit_targets(self, X, targets, n_lambdas=30):
        """Fit one path per column of targets (n, k) through the ridge family."""
        loss = self._check_params()
        self.kernel_params_ = resolve_params(X, self.kernel, **(self.kernel_params or {}))
        options = {"kernel": self.kernel, "kernel_params": tuple(sorted(self.kernel_params_.items())),
                   "n_lambdas": n_lambdas, "fit_intercept": self.fit_intercept, "on_psd_fail": "warn"}
        coefs, intercepts, dfs = [], [], []
        for t in targets.T:
            if self.lam is None and loss.quadratic and X.shape[0] > 2:
                fit = RIDGE.fit_path(X, t, loss, RIDGE.grid(X, t, loss, options), options)
                best = int(np.nanargmin(fit.loo_error))
            else:
                lam = DEFAULT_LAM if self.lam is None else self.lam
                fit = RIDGE.fit_path(X, t, loss, [lam], options)
                best = 0
            self.lam_ = float(fit.lambdas[best])
            coefs.append(fit.model.path.dual_coef[best])
            intercepts.append(fit.intercept[best])
            dfs.append(fit.effective_df[best])
            self.basis_ = fit.model.basis            # training rows, or landmarks past the exact-route row limit
        self.dual_coef_ = np.array(coefs)          # (k, n_basis)
        self.intercept_ = np.array(intercepts)     # (k,)
        self.effective_df_ = np.array(dfs)
        return self

    def _decision(self, X):
        check_is_fitted(self, "dual_coef_")
        X = validate_data(self, X, reset=False)
        path = SimpleNamespace(dual_coef=self.dual_coef_, intercept=self.intercept_)
        return RidgeModel(path, self.basis_, self.kernel, self.kernel_params_).predict(X).T  # (m, k)


class KernelL2Regressor(RegressorMixin, _KernelL2Base):
    """Kernel ridge-type regressor; losses squared, absolute, huber, quantile."""

    def __init__(self, kernel="rbf", kernel_params=None, loss="squared", loss_params=None,
                 lam=None, n_lambdas=30, fit_intercept=True):
        self.kernel = kernel
        self.kernel_params = kernel_params
        self.loss = loss
        self.loss_params = loss_params
        self.lam = lam
        self.n_lambdas = n_lambdas
        self.fit_intercept = fit_intercept

    def fit(self, X, y):
        X, y = validate_data(self, X, y, y_numeric=True, dtype=float)
        return self._fit_targets(X, y.reshape(-1, 1), self.n_lambdas)

    def predict(self, X):
        return self._decision(X)[:, 0]


class KernelL2Classifier(ClassifierMixin, _KernelL2Base):
    """Kernel ridge-type classifier; losses logistic, hinge, squared_hinge.

    Labels are mapped to {−1, +1} internally; more than two classes are fitted one
    versus rest, all classes sharing one eigendecomposition of the Gram.
    """
    _allowed_task = "classification"

    def __init__(self, kernel="rbf", kernel_params=None, loss="logistic", loss_params=None,
                 lam=None, fit_intercept=True):
        self.kernel = kernel
        self.kernel_params = kernel_params
        self.loss = loss
        self.loss_params = loss_params
        self.lam = lam
        self.fit_intercept = fit_intercept

    def fit(self, X, y):
        X, y = validate_data(self, X, y, dtype=float)
        check_classification_targets(y)
        self.classes_, codes = np.unique(y, return_inverse=True)
        if len(self.classes_) < 2:
            raise ValueError(f"classification needs at least two classes; got 1 class, {self.classes_.tolist()}")
        signs = np.where(codes[:, None] == np.arange(len(self.classes_))[None, :], 1.0, -1.0)
        targets = signs[:, 1:] if len(self.classes_) == 2 else signs
        return self._fit_targets(X, targets)

    def decision_function(self, X):
        scores = self._decision(X)
        return scores[:, 0] if len(self.classes_) == 2 else scores

    def predict(self, X):
        scores = self.decision_function(X)
        if scores.ndim == 1:
            return self.classes_[(scores > 0).astype(int)]
        return self.classes_[np.argmax(scores, axis=1)]


# ---------------------------------------------------------------- L1 family
DEFAULT_L1_FRACTION = 0.05   # lam = this fraction of lambda_max when lam is None


def signed_targets(y):
    """(classes, targets in {-1, +1}): one column for two classes, one per class (versus rest) beyond."""
    check_classification_targets(y)
    classes, codes = np.unique(y, return_inverse=True)
    if len(classes) < 2:
        raise ValueError(f"classification needs at least two classes; got 1 class, {classes.tolist()}")
    signs = np.where(codes[:, None] == np.arange(len(classes))[None, :], 1.0, -1.0)
    return classes, (signs[:, 1:] if len(classes) == 2 else signs)


def warm_start_grid(top: float, lam: float) -> list[float]:
    """A short path from lambda_max down to lam: warm starts make the final fit cheap."""
    return [lam] if top <= lam or lam == 0 else list(np.geomspace(top, lam, 6))


class _SparseL1Base(BaseEstimator):
    """Columns are standardised on the training rows; the penalty acts on that scale and
    coef_ / intercept_ are reported on the input scale. l1_ratio is the elastic-net
    mixing (alpha of the design notes): penalty l1_ratio*|b|_1 + (1-l1_ratio)/2*|b|^2."""
    _allowed_task = "regression"

    def _check_loss(self):
        loss = get_loss(self.loss, **(self.loss_params or {}))
        if loss.task != self._allowed_task:
            raise ValueError(f"{type(self).__name__} takes a {self._allowed_task} loss; "
                             f"{loss.name!r} is a {loss.task} loss")
        if self.lam is not None and not self.lam >= 0:
            raise ValueError(f"lam must be >= 0 or None, got {self.lam!r}")
        if not 0 < self.l1_ratio <= 1:
            raise ValueError(f"l1_ratio must be in (0, 1], got {self.l1_ratio!r}")
        return loss

    def _fit_targets(self, X, targets):
        """Fit each column of targets through the sparse family, on columns standardised here."""
        loss = self._check_loss()
        mean, scale = X.mean(axis=0), X.std(axis=0)
        scale[scale == 0] = 1.0
        Z = (X - mean) / scale
        options = {"alpha": self.l1_ratio, "tol": self.tol, "solver": self.solver}
        coefs, intercepts, gaps, lams = [], [], [], []
        for t in targets.T:
            top = lambda_max(Z, t, loss, self.l1_ratio) if Z.shape[1] else 0.0
            lam = DEFAULT_L1_FRACTION * top if self.lam is None else float(self.lam)
            fit = SPARSE.fit_path(Z, t, loss, warm_start_grid(top, lam), options)
            w = fit.coef[-1] / scale
            coefs.append(w)
            intercepts.append(fit.intercept[-1] - w @ mean)
            gaps.append(fit.certificate[-1])
            lams.append(lam)
        self.lam_ = np.array(lams)
        self.certificate_ = np.array(gaps)   # duality gap over max(|objective|, intercept-only objective)
        return np.array(coefs), np.array(intercepts)


class SparseL1Regressor(RegressorMixin, _SparseL1Base):
    """L1 / elastic-net regressor; losses squared, absolute, huber, quantile."""

    def __init__(self, loss="squared", loss_params=None, lam=None, l1_ratio=1.0, tol=1e-7, solver="auto"):
        self.loss = loss
        self.loss_params = loss_params
        self.lam = lam
        self.l1_ratio = l1_ratio
        self.tol = tol
        self.solver = solver

    def fit(self, X, y):
        X, y = validate_data(self, X, y, y_numeric=True, dtype=float)
        coefs, intercepts = self._fit_targets(X, y.reshape(-1, 1).astype(float))
        self.coef_, self.intercept_ = coefs[0], float(intercepts[0])
        return self

    def predict(self, X):
        check_is_fitted(self, "coef_")
        X = validate_data(self, X, reset=False, dtype=float)
        return X @ self.coef_ + self.intercept_


class SparseL1Classifier(ClassifierMixin, _SparseL1Base):
    """L1 / elastic-net classifier; losses logistic, hinge, squared_hinge.

    Labels are mapped to {−1, +1} internally; more than two classes one versus rest.
    """
    _allowed_task = "classification"

    def __init__(self, loss="logistic", loss_params=None, lam=None, l1_ratio=1.0, tol=1e-7, solver="auto"):
        self.loss = loss
        self.loss_params = loss_params
        self.lam = lam
        self.l1_ratio = l1_ratio
        self.tol = tol
        self.solver = solver

    def fit(self, X, y):
        X, y = validate_data(self, X, y, dtype=float)
        self.classes_, targets = signed_targets(y)
        self.coef_, self.intercept_ = self._fit_targets(X, targets)   # (k, p), (k,)
        return self

    def decision_function(self, X):
        check_is_fitted(self, "coef_")
        X = validate_data(self, X, reset=False, dtype=float)
        scores = X @ self.coef_.T + self.intercept_
        return scores[:, 0] if len(self.classes_) == 2 else scores

    def predict(self, X):
        scores = self.decision_function(X)
        if scores.ndim == 1:
            return self.classes_[(scores > 0).astype(int)]
        return self.classes_[np.argmax(scores, axis=1)]
