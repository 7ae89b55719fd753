"""scikit-learn estimator contract and reference agreement of the L1 estimators."""
import numpy as np
import pytest
from sklearn.linear_model import Lasso
from sklearn.utils.estimator_checks import check_estimator

from pipeline.models.estimators import SparseL1Classifier, SparseL1Regressor


@pytest.mark.parametrize("est", [SparseL1Regressor(), SparseL1Regressor(loss="huber", l1_ratio=0.5),
                                 SparseL1Classifier(), SparseL1Classifier(loss="hinge")],
                         ids=["squared", "huber-enet", "logistic", "hinge"])
def test_check_estimator(est):
    check_estimator(est)


def test_regressor_matches_sklearn_lasso_on_standardised_columns():
    # reference library: scikit-learn Lasso(alpha=lambda) on columns standardised with the
    # training mean and (population) standard deviation; coefficients mapped back by 1/scale
    rng = np.random.default_rng(0)
    X = rng.normal(size=(80, 6)) * [1, 2, 5, 0.5, 1, 3] + 4
    y = X @ [1.0, 0, -0.5, 2.0, 0, 0] + rng.normal(size=80)
    est = SparseL1Regressor(lam=0.05).fit(X, y)
    mean, scale = X.mean(0), X.std(0)
    ref = Lasso(alpha=0.05, tol=1e-12, max_iter=100000).fit((X - mean) / scale, y)
    np.testing.assert_allclose(est.coef_, ref.coef_ / scale, atol=1e-8)
    np.testing.assert_allclose(est.predict(X), ref.predict((X - mean) / scale), atol=1e-7)
    assert est.certificate_[0] <= 1e-7


def test_classifier_labels_and_multiclass():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(90, 4))
    y = np.array(["a", "b", "c"])[np.argmax(X[:, :3], axis=1)]
    est = SparseL1Classifier(lam=0.01).fit(X, y)
    assert est.coef_.shape == (3, 4)
    assert np.mean(est.predict(X) == y) > 0.8
    with pytest.raises(ValueError, match="classification loss"):
        SparseL1Regressor(loss="logistic").fit(X, X[:, 0])
