"""The family registry and interface: the pipeline's fit task and the scikit-learn estimators fit
through the same code, so on the same rows and λ they give identical coefficients."""
import numpy as np
import pytest

from pipeline.config import IdentityMap
from pipeline.fitting import FitTask, Shared, run_fit
from pipeline.losses import get_loss
from pipeline.models.estimators import (KernelL2Classifier, KernelL2Regressor, SparseL1Classifier,
                                        SparseL1Regressor, warm_start_grid)
from pipeline.models.families import FAMILIES, KEYS, compared_pair, get_family
from pipeline.models.interface import Family
from pipeline.models.sparse import SOLVER_TABLE, SOLVERS, lambda_max
from pipeline.models.sparse.routing import route


def _data(task, n=80, p=6, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p)) * rng.uniform(0.5, 3.0, size=p) + rng.normal(size=p)
    f = X[:, 0] - 0.5 * X[:, 2] + 0.3 * rng.normal(size=n)
    return X, (np.where(f > np.median(f), 1.0, -1.0) if task == "classification" else 3.0 + 2.0 * f)


def _shared(X, y, task):
    options = {"l1": {"tol": 1e-7, "solver": "auto", "alpha": 1.0, "n_lambdas": 5, "lambda_ratio": 0.05},
               "l2": {"kernel": "linear", "kernel_params": (), "n_lambdas": 5, "landmark_seed": 0}}
    return Shared(X=X, y=y, task=task, feature_maps=(IdentityMap(kind="identity"),), feature_seed=0,
                  input_names=tuple(f"x{j}" for j in range(X.shape[1])), family_options=options)


def _final(family, loss, X, y, lambdas):
    rows = np.arange(len(y))
    return run_fit(FitTask(split="final", family=family, loss_name=loss, loss_params=(), loss_label=loss,
                           train_idx=rows, eval_idx=rows, lambdas=np.asarray(lambdas, float)),
                   _shared(X, y, "classification" if loss == "logistic" else "regression"))


def _standardised(X):
    sd = X.std(axis=0)
    return (X - X.mean(axis=0)) / sd


def test_registry_lists_each_family_once_with_the_whole_interface():
    assert KEYS == ("l1", "l2") and len({f.title for f in FAMILIES}) == 2
    for fam in FAMILIES:
        assert isinstance(fam, Family) and get_family(fam.key) is fam
        for attr in ("title", "colour", "marker", "has_support", "selected_set", "df_description",
                     "gives_certificate", "grid_reads_loss"):
            assert getattr(fam, attr) is not None
    # Okabe & Ito colour-blind-safe blue and vermilion, as before the registry
    assert [f.colour for f in FAMILIES] == ["#0072B2", "#D55E00"]
    assert compared_pair() == FAMILIES
    with pytest.raises(ValueError, match="unknown model family 'l3'"):
        get_family("l3")


def test_solver_table_routes_by_loss_properties_and_refuses_what_a_solver_cannot():
    assert SOLVERS == ("auto", "active_set") + tuple(r.name for r in SOLVER_TABLE)
    assert route(get_loss("squared"), 1.0, "auto") == "osqp"
    assert route(get_loss("quantile", tau=0.3), 1.0, "auto") == "highs"
    assert route(get_loss("hinge"), 1.0, "active_set") == "highs"
    assert route(get_loss("hinge"), 0.5, "auto") == "cvxpy"
    assert route(get_loss("logistic"), 1.0, "auto") == "cvxpy"
    with pytest.raises(ValueError, match="solver 'highs' handles piecewise-linear"):
        route(get_loss("huber"), 1.0, "highs")
    with pytest.raises(ValueError, match="solver 'osqp' handles the squared loss"):
        route(get_loss("absolute"), 1.0, "osqp")
    with pytest.raises(ValueError, match="unknown solver"):
        route(get_loss("squared"), 1.0, "simplex")


def test_sparse_estimator_and_fit_task_give_identical_coefficients():
    X, y = _data("classification")
    lam = 0.2 * lambda_max(_standardised(X), y, get_loss("logistic"))
    est = SparseL1Classifier(loss="logistic", lam=lam).fit(X, y)
    top = lambda_max(_standardised(X), y, get_loss("logistic"))
    out = _final("l1", "logistic", X, y, warm_start_grid(top, lam))
    assert np.count_nonzero(est.coef_[0]) >= 1
    np.testing.assert_allclose(out.coef[-1], est.coef_[0], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(out.intercept[-1], est.intercept_[0], rtol=1e-9, atol=1e-12)

    Xr, yr = _data("regression", seed=1)
    lam = 0.05
    est = SparseL1Regressor(loss="absolute", lam=lam).fit(Xr, yr)
    fam = get_family("l1")
    Z = _standardised(Xr)
    fit = fam.fit_path(Z, yr, get_loss("absolute"), warm_start_grid(lambda_max(Z, yr, "absolute"), lam),
                       {"alpha": 1.0, "tol": 1e-7, "solver": "auto"})
    np.testing.assert_allclose(fit.coef[-1] / Xr.std(axis=0), est.coef_, rtol=1e-9, atol=1e-12)


def test_ridge_estimator_and_fit_task_give_identical_coefficients():
    X, y = _data("classification", seed=2)
    Z = _standardised(X)
    lam = 0.01
    est = KernelL2Classifier(kernel="linear", loss="logistic", lam=lam).fit(Z, y)
    out = _final("l2", "logistic", X, y, [lam])
    np.testing.assert_allclose(out.coef[0] * X.std(axis=0), est.dual_coef_[0] @ Z, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(out.eval_pred[0], est.decision_function(Z), rtol=1e-9, atol=1e-12)

    # squared loss: the fit task reads targets in standard-deviation units, so its λ is the same
    Xr, yr = _data("regression", seed=3)
    Zr = _standardised(Xr)
    est = KernelL2Regressor(kernel="linear", lam=lam).fit(Zr, (yr - yr.mean()) / yr.std())
    out = _final("l2", "squared", Xr, yr, [lam])
    np.testing.assert_allclose(out.coef[0] * Xr.std(axis=0) / yr.std(), est.dual_coef_[0] @ Zr,
                               rtol=1e-9, atol=1e-12)
