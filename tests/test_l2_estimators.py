"""The L2 estimators: scikit-learn's own estimator checks and agreement with the path API."""
import numpy as np
import pytest
from sklearn.kernel_ridge import KernelRidge
from sklearn.svm import SVC
from sklearn.utils.estimator_checks import parametrize_with_checks

from pipeline.kernels import gram
from pipeline.models.estimators import KernelL2Classifier, KernelL2Regressor
from pipeline.models.ridge.path import fit_l2_path, l2_lambda_grid


@parametrize_with_checks([KernelL2Regressor(), KernelL2Classifier()])
def test_sklearn_estimator_contract(estimator, check):
    check(estimator)


@pytest.mark.slow
@parametrize_with_checks([KernelL2Regressor(loss="huber"), KernelL2Regressor(loss="quantile", lam=1e-2),
                          KernelL2Classifier(loss="hinge", lam=1e-2),
                          KernelL2Classifier(loss="squared_hinge", kernel="linear")])
def test_sklearn_estimator_contract_other_losses(estimator, check):
    check(estimator)


def test_regressor_default_picks_the_loo_minimiser_and_matches_kernel_ridge():
    # Reference: scikit-learn KernelRidge(alpha = n·λ) without intercept, at our chosen λ.
    rng = np.random.default_rng(0)
    X = rng.normal(size=(80, 3))
    y = np.sin(X[:, 0]) + 0.1 * rng.normal(size=80)
    est = KernelL2Regressor(kernel="rbf", kernel_params={"bandwidth": 1.2}, fit_intercept=False,
                            n_lambdas=15).fit(X, y)
    K = gram(X, kernel="rbf", bandwidth=1.2)
    grid = l2_lambda_grid(K, 15, fit_intercept=False)
    path = fit_l2_path(K, y, "squared", grid, fit_intercept=False)
    assert est.lam_ == pytest.approx(grid[np.argmin(path.loo_error)], rel=1e-12)
    ref = KernelRidge(alpha=len(y) * est.lam_, kernel="rbf", gamma=1 / (2 * 1.2**2)).fit(X, y)
    Xt = rng.normal(size=(20, 3))
    np.testing.assert_allclose(est.predict(Xt), ref.predict(Xt), rtol=1e-7, atol=1e-9)


def test_classifier_maps_labels_and_matches_svc():
    # Reference: scikit-learn SVC(C = 1/(nλ), rbf γ = 1/(2ℓ²)); string labels map to {−1, +1}.
    rng = np.random.default_rng(1)
    X = rng.normal(size=(60, 2))
    labels = np.where(X[:, 0] * X[:, 1] > 0, "same", "differ")
    lam = 1e-2
    est = KernelL2Classifier(loss="hinge", lam=lam, kernel_params={"bandwidth": 1.0}).fit(X, labels)
    ref = SVC(C=1 / (60 * lam), kernel="rbf", gamma=0.5, tol=1e-12).fit(X, labels)
    Xt = rng.normal(size=(30, 2))
    np.testing.assert_allclose(est.decision_function(Xt), ref.decision_function(Xt), atol=1e-5)
    assert list(est.classes_) == ["differ", "same"]
    np.testing.assert_array_equal(est.predict(Xt), ref.predict(Xt))


def test_wrong_family_of_loss_is_refused():
    X = np.random.default_rng(2).normal(size=(10, 2))
    with pytest.raises(ValueError, match="regression loss"):
        KernelL2Classifier(loss="huber").fit(X, np.arange(10) % 2)
    with pytest.raises(ValueError, match="classification loss"):
        KernelL2Regressor(loss="logistic").fit(X, X[:, 0])
