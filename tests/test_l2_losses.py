"""Non-squared losses in representer form: reference optima, failure handling, invariants.

Conversions (DESIGN.md §3): our objective (1/n) Σ loss + (λ/2)‖w‖² (linear kernel, w = Φᵀc)
equals [C Σ loss + ½‖w‖²]/(nC) with C = 1/(nλ), the form minimised by scikit-learn's
LogisticRegression, LinearSVC and SVC. Labels are {−1, +1} on both sides.
"""
import numpy as np
import pytest
import cvxpy as cp
from hypothesis import given, settings, strategies as st
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC, LinearSVC

from pipeline.kernels import gram
from pipeline.losses import get_loss
from pipeline.models.ridge.path import fit_l2_path, predict_path, primal_weights


@pytest.fixture(scope="module")
def cancer():
    # Wisconsin diagnostic breast cancer data (UCI), shipped with scikit-learn; standardised.
    X, y = load_breast_cancer(return_X_y=True)
    return StandardScaler().fit_transform(X), np.where(y == 1, 1.0, -1.0)


def _objective(loss, X, y, w, b, lam):
    return float(np.mean(get_loss(loss).value(y, X @ w + b)) + 0.5 * lam * w @ w)


def test_logistic_matches_sklearn_logistic_regression(cancer):
    # Reference: scikit-learn LogisticRegression(C = 1/(nλ)), intercept unpenalised (lbfgs).
    # The data are linearly separable, so λ > 0 is needed for an optimum to exist.
    X, y = cancer
    n = len(y)
    lambdas = np.array([1e-1, 1e-2, 1e-3])
    path = fit_l2_path(X @ X.T, y, "logistic", lambdas)
    assert path.converged.all()
    W = primal_weights(path, X)
    for i, lam in enumerate(lambdas):
        ref = LogisticRegression(C=1 / (n * lam), tol=1e-12, max_iter=100_000).fit(X, y)
        ours = _objective("logistic", X, y, W[i], path.intercept[i], lam)
        theirs = _objective("logistic", X, y, ref.coef_[0], ref.intercept_[0], lam)
        assert abs(ours - theirs) <= 1e-6 * theirs


def test_squared_hinge_matches_sklearn_linear_svc_without_intercept(cancer):
    # Reference: scikit-learn LinearSVC(loss="squared_hinge", C = 1/(nλ), fit_intercept=False):
    # LinearSVC penalises its own intercept, so both sides fit none. Loss max(0, 1 − yf)².
    X, y = cancer
    n = len(y)
    lambdas = np.array([1e-1, 1e-2, 1e-3])
    path = fit_l2_path(X @ X.T, y, "squared_hinge", lambdas, fit_intercept=False)
    assert path.converged.all() and np.all(path.intercept == 0)
    W = primal_weights(path, X)
    for i, lam in enumerate(lambdas):
        ref = LinearSVC(C=1 / (n * lam), loss="squared_hinge", fit_intercept=False, tol=1e-12,
                        max_iter=1_000_000).fit(X, y)
        ours = _objective("squared_hinge", X, y, W[i], 0.0, lam)
        theirs = _objective("squared_hinge", X, y, ref.coef_[0], 0.0, lam)
        assert abs(ours - theirs) <= 1e-6 * theirs


@pytest.mark.parametrize("lam", [1e-1, 1e-2])
def test_hinge_matches_sklearn_svc_rbf(cancer, lam):
    # Reference: scikit-learn SVC(kernel="rbf", gamma = 1/(2ℓ²), C = 1/(nλ)); libsvm leaves
    # the intercept unpenalised, as we do. Agreement is limited by the interior-point
    # tolerance and the dropped eigen-directions (d < 1e-10·d_max).
    X, y = cancer
    Xs, ys = X[:120, :5], y[:120]
    n = len(ys)
    K = gram(Xs, kernel="rbf", bandwidth=2.0)
    path = fit_l2_path(K, ys, "hinge", [lam])
    ref = SVC(C=1 / (n * lam), kernel="rbf", gamma=1 / 8, tol=1e-12).fit(Xs, ys)
    Xt = X[120:200, :5]
    ours = predict_path(path, gram(Xt, Xs, kernel="rbf", bandwidth=2.0))[0]
    theirs = ref.decision_function(Xt)
    assert path.converged[0]
    np.testing.assert_allclose(ours, theirs, atol=1e-5 * np.abs(theirs).max())


@pytest.mark.parametrize("loss,params", [("huber", {"delta": 0.5}), ("absolute", {}),
                                         ("quantile", {"tau": 0.8})])
def test_regression_losses_match_primal_problem_solved_by_cvxpy(loss, params):
    # Reference: cvxpy (CLARABEL) on the primal problem in w with explicit features; the
    # representer route must reach the same optimum (representer theorem).
    rng = np.random.default_rng(0)
    X = rng.normal(size=(80, 4))
    y = X @ np.array([1.0, -0.5, 0.0, 2.0]) + rng.standard_t(2, size=80)
    n, lam = len(y), 1e-2
    lo = get_loss(loss, **params)
    w, b = cp.Variable(4), cp.Variable()
    ref = cp.Problem(cp.Minimize(lo.cvxpy_sum(y, X @ w + b) / n + 0.5 * lam * cp.sum_squares(w)))
    ref.solve(solver="CLARABEL")
    path = fit_l2_path(X @ X.T, y, lo, [lam])
    W = primal_weights(path, X)
    ours = float(np.mean(lo.value(y, X @ W[0] + path.intercept[0])) + 0.5 * lam * W[0] @ W[0])
    assert path.converged[0]
    assert abs(ours - ref.value) <= 1e-6 * abs(ref.value)
    np.testing.assert_allclose(W[0], w.value, atol=1e-4)


def test_huber_with_wide_delta_is_the_squared_path():
    # When every residual sits inside δ the Huber optimum is the squared-loss optimum,
    # and the linearised-hat df is Σ d/(d + nλ).
    rng = np.random.default_rng(1)
    X = rng.normal(size=(60, 3))
    y = np.cos(X[:, 0]) + 0.1 * rng.normal(size=60)
    K = gram(X, kernel="rbf", bandwidth=1.0)
    lambdas = np.array([1e-1, 1e-2])
    sq = fit_l2_path(K, y, "squared", lambdas)
    hub = fit_l2_path(K, y, get_loss("huber", delta=100.0), lambdas)
    np.testing.assert_allclose(predict_path(hub, K), predict_path(sq, K), atol=1e-8)
    np.testing.assert_allclose(hub.effective_df, sq.effective_df, rtol=1e-6)
    assert hub.loo_error is None and sq.loo_error is not None


def test_a_failing_lambda_is_recorded_not_raised():
    rng = np.random.default_rng(2)
    X = rng.normal(size=(30, 3))
    y = np.sign(X[:, 0] + 0.3 * rng.normal(size=30))
    K = X @ X.T
    path = fit_l2_path(K, y, "hinge", [1e-1, 1e-2], solver_options={"solver": "NO_SUCH_SOLVER"})
    assert not path.converged.any() and all("failed" in s for s in path.status)
    assert np.isnan(path.dual_coef).all()
    slow = fit_l2_path(K, y, "logistic", [1e-3], solver_options={"max_iter": 1})
    assert not slow.converged[0] and "not converged" in slow.status[0]


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 10_000), loss=st.sampled_from(["logistic", "squared_hinge"]))
def test_flipping_labels_flips_the_decision_function(seed, loss):
    # Margin losses depend on y·f only, so the optimum for −y is −f.
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(25, 2))
    y = np.where(X[:, 0] + 0.5 * rng.normal(size=25) > 0, 1.0, -1.0)
    if abs(y.sum()) == len(y):
        y[0] = -y[0]
    K = gram(X, kernel="matern52", bandwidth=1.0)
    f = predict_path(fit_l2_path(K, y, loss, [1e-2]), K)
    g = predict_path(fit_l2_path(K, -y, loss, [1e-2]), K)
    np.testing.assert_allclose(g, -f, atol=1e-8)
