"""Nyström large-n route: agreement with the exact route and with its own explicit form."""
import numpy as np
import pytest

from pipeline.kernels import gram
from pipeline.models.ridge.path import fit_l2_path, fit_l2_primal_path, predict_path
from pipeline.models.ridge.nystrom import fit_nystrom_path, nystrom_gap


def _data(n=400, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 3))
    return X, np.sin(X[:, 0]) + X[:, 1] * X[:, 2] + 0.2 * rng.normal(size=n)


def test_all_rows_as_landmarks_is_the_exact_route():
    # With m = n landmarks K(X, Z)W⁺K(Z, X) = K, so the paths coincide where nλ is not
    # far below the dropped eigenvalues (rank cut at 1e-10·d_max).
    X, y = _data(n=150)
    lambdas = np.geomspace(1e-1, 1e-5, 6)
    exact = fit_l2_path(gram(X, kernel="rbf", bandwidth=1.0), y, "squared", lambdas)
    ny = fit_nystrom_path(X, y, "rbf", lambdas, n_landmarks=150, bandwidth=1.0)
    np.testing.assert_allclose(ny.path.loo_error, exact.loo_error, rtol=1e-6)
    np.testing.assert_allclose(ny.path.effective_df, exact.effective_df, rtol=1e-6)
    Xt = np.random.default_rng(9).normal(size=(30, 3))
    np.testing.assert_allclose(ny.predict(Xt),
                               predict_path(exact, gram(Xt, X, kernel="rbf", bandwidth=1.0)),
                               atol=1e-6)


def test_blockwise_two_pass_equals_ridge_on_explicit_nystrom_features():
    # The two-pass solve must equal the primal ridge path on Φ = K(X, Z)W^{-1/2} built whole.
    X, y = _data()
    lambdas = np.geomspace(1e-1, 1e-4, 5)
    ny = fit_nystrom_path(X, y, "matern32", lambdas, n_landmarks=40, seed=3, block_rows=64)
    Z = ny.landmarks
    w, V = np.linalg.eigh(gram(Z, kernel="matern32", **ny.kernel_params))
    Phi = gram(X, Z, "matern32", **ny.kernel_params) @ (V / np.sqrt(w))
    ref, _ = fit_l2_primal_path(Phi, y, lambdas)
    for field in ("loo_error", "gcv", "effective_df", "intercept"):
        np.testing.assert_allclose(getattr(ny.path, field), getattr(ref, field), rtol=1e-7)
    np.testing.assert_allclose(ny.predict(X[:20]), predict_path(ref, Phi[:20] @ Phi.T), atol=1e-8)


def test_gap_report_shrinks_with_more_landmarks():
    X, y = _data(n=600, seed=1)
    lambdas = np.geomspace(1e-1, 1e-5, 8)
    few = nystrom_gap(X, y, "rbf", lambdas, n_landmarks=10, subsample=300)
    many = nystrom_gap(X, y, "rbf", lambdas, n_landmarks=200, subsample=300)
    assert few["subsample"] == many["subsample"] == 300
    assert abs(many["relative_gap"]) < abs(few["relative_gap"])
    assert abs(many["relative_gap"]) < 0.02


@pytest.mark.parametrize("loss", ["logistic", "hinge"])
def test_other_losses_with_all_rows_as_landmarks_match_the_exact_route(loss):
    X, y = _data(n=80, seed=2)
    labels = np.where(y > np.median(y), 1.0, -1.0)
    lambdas = np.array([1e-1, 1e-2])
    K = gram(X, kernel="rbf", bandwidth=1.0)
    exact = fit_l2_path(K, labels, loss, lambdas)
    ny = fit_nystrom_path(X, labels, "rbf", lambdas, n_landmarks=80, loss=loss, bandwidth=1.0)
    assert ny.path.converged.all() and ny.path.loo_error is None
    Xt = np.random.default_rng(4).normal(size=(25, 3))
    np.testing.assert_allclose(ny.predict(Xt), predict_path(exact, gram(Xt, X, "rbf", bandwidth=1.0)),
                               atol=1e-5)


def test_route_switches_past_the_size_limit_and_says_so():
    from pipeline.losses import get_loss
    from pipeline.models.ridge import RIDGE
    X, y = _data(n=300, seed=5)
    lambdas = np.array([1e-2])
    options = {"kernel": "rbf", "kernel_params": (), "n_lambdas": 5, "landmark_seed": 0}
    sq = get_loss("squared")
    exact = RIDGE.fit_path(X, y, sq, lambdas, {**options, "max_exact_rows": 300})
    low = RIDGE.fit_path(X, y, sq, lambdas, {**options, "max_exact_rows": 299, "n_landmarks": 120})
    assert exact.solver == "representer" and exact.note == ""
    assert low.solver == "nystrom" and "exceed 299" in low.note
    assert low.model.basis.shape == (120, 3)
    Xt = X[:40]
    # Low rank (m = 120 of 300) on a smooth target at moderate λ: close, not equal.
    np.testing.assert_allclose(RIDGE.predict(low, Xt), RIDGE.predict(exact, Xt), atol=1e-3)
    # the grid of the low-rank route comes from its own spectrum and spans the same df range
    grid = RIDGE.grid(X, y, sq, {**options, "max_exact_rows": 299, "n_landmarks": 120})
    assert grid.shape == (5,) and np.all(np.diff(grid) < 0)