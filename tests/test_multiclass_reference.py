"""Reference: a one-versus-rest logistic fit of several classes (the sparse family's binary fits of each
class against the rest, packed as models.multiclass packs them), class by class, against scikit-learn's
L1 logistic regression of each binary problem. The pipeline fits the logistic loss multinomially (see
test_multinomial.py for its references); hinge losses go one versus the rest, and tests/test_multiclass.py
shows that route is these binary fits bit for bit.

Data: scikit-learn's digits (`sklearn.datasets.load_digits`; Alpaydin & Kaynak, UCI "Optical Recognition
of Handwritten Digits", the 8×8 test set), the first 300 rows of digits 0–3, constant pixels dropped,
columns standardised.

Reference: `sklearn.linear_model.LogisticRegression(l1_ratio=1.0, solver="saga", C=1/(n λ))` fitted on
class k coded 1 against the rest (`penalty="l1"` is spelt `l1_ratio=1.0` since scikit-learn 1.8).
Scaling: scikit-learn minimises C Σᵢ log(1 + exp(−yᵢ fᵢ)) + ‖w‖₁; divided by n C this is our objective
(1/n) Σᵢ log(1 + exp(−yᵢ fᵢ)) + λ‖w‖₁ with λ = 1/(n C). Intercept: saga leaves the intercept
unpenalised, as we do (liblinear would penalise it, so it is not used here).
"""
from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_digits
from sklearn.linear_model import LogisticRegression

from pipeline.losses import get_loss
from pipeline.models.multiclass import class_targets, pack
from pipeline.models.sparse import SPARSE

K = 4
OPTIONS = {"tol": 1e-9, "solver": "auto", "alpha": 1.0, "n_lambdas": 8, "lambda_ratio": 0.05}


@pytest.fixture(scope="module")
def digits():
    X, y = load_digits(n_class=K, return_X_y=True)
    X, y = X[:300], y[:300].astype(float)
    X = X[:, X.std(axis=0) > 0]
    return (X - X.mean(axis=0)) / X.std(axis=0), y


def _objective(Z, t, w, b, lam):
    return float(np.mean(np.logaddexp(0.0, -t * (Z @ w + b))) + lam * np.abs(w).sum())


def _check(digits, steps):
    Z, y = digits
    n = len(y)
    loss = get_loss("logistic")
    # one shared grid from the largest per-class λ_max, as models.multiclass builds it
    grid = max((SPARSE.grid(Z, class_targets(y, k), loss, OPTIONS) for k in range(K)), key=lambda g: g[0])
    lambdas = grid[list(steps)]
    fit = pack([SPARSE.fit_path(Z, class_targets(y, k), loss, lambdas, OPTIONS) for k in range(K)])
    assert fit.coef.shape == (len(lambdas), Z.shape[1], K) and fit.converged.all()
    for j, lam in enumerate(lambdas):
        for k in range(K):
            t = class_targets(y, k)
            ref = LogisticRegression(l1_ratio=1.0, solver="saga", C=1.0 / (n * lam), tol=1e-10,
                                     max_iter=100_000).fit(Z, (y == k).astype(int))
            w, b = fit.coef[j, :, k], fit.intercept[j, k]
            assert np.count_nonzero(ref.coef_[0]) > 0        # a fit with a support, where saga converges
            ours, theirs = _objective(Z, t, w, b, lam), _objective(Z, t, ref.coef_[0], ref.intercept_[0], lam)
            assert ours <= theirs + 1e-9 and abs(ours - theirs) <= 1e-8 * theirs, (j, k)
            assert np.max(np.abs(w - ref.coef_[0])) < 1e-5 and abs(b - ref.intercept_[0]) < 1e-5, (j, k)
            assert np.array_equal(w != 0, ref.coef_[0] != 0), (j, k)     # the same support per class
    # the packed fit's support is the union of the classes' supports
    assert np.array_equal(fit.n_nonzero, np.count_nonzero(np.any(fit.coef != 0, axis=2), axis=1))


def test_one_versus_rest_logistic_matches_saga_on_digits_at_one_lambda(digits):
    _check(digits, steps=(4,))


@pytest.mark.slow
def test_one_versus_rest_logistic_matches_saga_on_digits_along_the_path(digits):
    _check(digits, steps=(2, 5, 7))
