"""Reference tests of the sparse family against published values and reference libraries.

Scaling: scikit-learn's `load_diabetes()` (scaled=True) returns columns centred and
scaled to unit Euclidean norm; the published diabetes numbers below are for exactly
that design, with the raw disease-progression response.
"""
import numpy as np
import pytest
from sklearn.datasets import load_diabetes
from sklearn.linear_model import Lasso, LogisticRegression, QuantileRegressor, lars_path

from pipeline.losses import get_loss
from pipeline.models.sparse import lambda_max
from pipeline.models.sparse.path import fit_l1_path, lambda_grid


@pytest.fixture(scope="module")
def diabetes():
    data = load_diabetes()
    return data.data, data.target, list(data.feature_names)


def test_diabetes_lambda_max(diabetes):
    # Efron, Hastie, Johnstone & Tibshirani 2004, Annals of Statistics 32(2), diabetes data:
    # lambda_max = ||X'(y - ybar)||_inf / n = 2.148 on the unit-norm columns
    X, y, _ = diabetes
    assert lambda_max(X, y, get_loss("squared")) == pytest.approx(2.148, abs=5e-4)
    path = fit_l1_path(X, y, "squared", [lambda_max(X, y, get_loss("squared"))])
    assert path.n_nonzero[0] == 0


def test_diabetes_entry_order(diabetes):
    # Efron et al. 2004 (Annals of Statistics 32(2)), lasso path on the diabetes data:
    # variables enter in the order bmi, s5, bp, s3, sex, s6, s1, s4, s2, age.
    # Our supports are read between consecutive knots of scikit-learn's lars_path
    # (second reference), so each grid interval holds exactly one path event.
    X, y, names = diabetes
    knots, _, _ = lars_path(X, y, method="lasso")
    between = np.sqrt(knots[:-2] * knots[1:-1])
    path = fit_l1_path(X, y, "squared", between)
    order = []
    for row in path.coef:
        for j in np.flatnonzero(row):
            if names[j] not in order:
                order.append(names[j])
    assert order == ["bmi", "s5", "bp", "s3", "sex", "s6", "s1", "s4", "s2", "age"]
    assert np.all(path.converged)


def test_diabetes_least_squares_end(diabetes):
    # Efron et al. 2004, Table 1 (OLS column, value from memory to one decimal):
    X, y, names = diabetes
    published = dict(age=-10.0, sex=-239.8, bmi=519.8, bp=324.4, s1=-792.2, s2=476.7,
                     s3=101.0, s4=177.1, s5=751.3, s6=67.6)
    path = fit_l1_path(X, y, "squared", [1e-9])
    for j, name in enumerate(names):
        assert path.coef[0, j] == pytest.approx(published[name], abs=0.06), name


def test_diabetes_matches_lars_path(diabetes):
    # second reference: scikit-learn lars_path(method="lasso"); its alpha is our lambda
    # (objective 1/(2n)||y - Xb||^2 + alpha||b||_1, intercept handled by centring)
    X, y, _ = diabetes
    knots, _, coefs = lars_path(X, y, method="lasso")
    lams = knots[:-1]  # the last knot is lambda = 0
    path = fit_l1_path(X, y, "squared", lams)
    np.testing.assert_allclose(path.coef, coefs[:, :-1].T, atol=1e-4 * np.abs(coefs).max())
    assert np.all(path.kkt <= 1e-6)
    # lasso degrees of freedom = number of nonzeros (Zou, Hastie & Tibshirani 2007), read
    # between knots where the support is unambiguous; the lasso path is linear in lambda
    # between knots, so interpolating lars_path's coefficients is exact there
    mid = np.sqrt(knots[:-2] * knots[1:-1])
    between = fit_l1_path(X, y, "squared", mid)
    ref_mid = np.array([[np.interp(-m, -knots, coefs[j]) for j in range(X.shape[1])] for m in mid])
    np.testing.assert_allclose(between.coef, ref_mid, atol=1e-4 * np.abs(coefs).max())
    np.testing.assert_array_equal(between.n_nonzero, (np.abs(ref_mid) > 1e-8).sum(1))


def _standard_problem(task, n=150, p=40, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    X = (X - X.mean(0)) / X.std(0)
    w = np.zeros(p)
    w[:5] = [2, -1.5, 1, 0.7, -0.5]
    f = X @ w
    if task == "classification":
        return X, np.where(f + rng.logistic(size=n) > 0, 1.0, -1.0)
    return X, f + rng.standard_t(3, size=n)


def test_agrees_with_sklearn_lasso():
    # reference library: scikit-learn Lasso(alpha=lambda), same objective, tight tol
    X, y = _standard_problem("regression")
    lams = lambda_grid(lambda_max(X, y, get_loss("squared")), 6, 0.05)
    path = fit_l1_path(X, y, "squared", lams)
    for lam, coef, b0 in zip(lams, path.coef, path.intercept):
        ref = Lasso(alpha=lam, tol=1e-12, max_iter=100000).fit(X, y)
        np.testing.assert_allclose(coef, ref.coef_, atol=1e-7)
        assert b0 == pytest.approx(ref.intercept_, abs=1e-7)


def test_agrees_with_liblinear_l1_logistic():
    # reference library: scikit-learn LogisticRegression(l1_ratio=1, solver="liblinear"),
    # C = 1/(n*lambda). liblinear penalises its intercept by |b0|/intercept_scaling; at
    # scaling 1e4 the remaining difference in b0 is ~1e-5 and shrinks as 1/scaling.
    X, y = _standard_problem("classification")
    n = X.shape[0]
    loss = get_loss("logistic")
    lams = lambda_grid(lambda_max(X, y, loss), 5, 0.05)[1:]
    path = fit_l1_path(X, y, loss, lams)
    for lam, coef, b0, obj in zip(lams, path.coef, path.intercept, path.objective):
        ref = LogisticRegression(l1_ratio=1.0, solver="liblinear", C=1 / (n * lam), tol=1e-10,
                                 intercept_scaling=1e4, max_iter=100000).fit(X, y)
        w, c = ref.coef_[0], ref.intercept_[0]
        ref_obj = np.mean(loss.value(y, X @ w + c)) + lam * np.abs(w).sum()
        assert obj <= ref_obj + 1e-12
        assert obj == pytest.approx(ref_obj, rel=1e-8)
        np.testing.assert_allclose(coef, w, atol=1e-5)
        assert b0 == pytest.approx(c, abs=1e-4)
        assert set(np.flatnonzero(coef)) == set(np.flatnonzero(np.abs(w) > 1e-6))


@pytest.mark.parametrize("tau", [0.3, 0.5, 0.8])
def test_agrees_with_sklearn_quantile_regressor(tau):
    # reference library: scikit-learn QuantileRegressor(quantile=tau, alpha=lambda, solver="highs");
    # its objective (1/n) sum pinball + alpha ||b||_1 is ours (intercept unpenalised)
    X, y = _standard_problem("regression", n=120, p=25, seed=int(10 * tau))
    loss = get_loss("quantile", tau=tau)
    lams = lambda_grid(lambda_max(X, y, loss), 4, 0.05)
    path = fit_l1_path(X, y, loss, lams)
    for lam, coef, b0, obj in zip(lams, path.coef, path.intercept, path.objective):
        ref = QuantileRegressor(quantile=tau, alpha=lam, solver="highs").fit(X, y)
        ref_obj = np.mean(loss.value(y, X @ ref.coef_ + ref.intercept_)) + lam * np.abs(ref.coef_).sum()
        # LP optima need not be unique (at lambda_max HiGHS may return another optimal
        # vertex): compare objective values, never worse than the reference
        assert obj == pytest.approx(ref_obj, rel=1e-9, abs=1e-12)
        assert obj <= ref_obj + 1e-12 * max(1.0, ref_obj)


def test_engel_median_regression():
    # Koenker & Bassett (1978/1982) Engel food-expenditure data as shipped with statsmodels:
    # median regression foodexp ~ income, intercept 81.482, slope 0.5602 (value from memory),
    # cross-checked with statsmodels QuantReg(q=0.5).
    import statsmodels.api as sm
    from statsmodels.datasets import engel

    data = engel.load_pandas().data
    X, y = data[["income"]].to_numpy(), data["foodexp"].to_numpy()
    path = fit_l1_path(X, y, get_loss("quantile", tau=0.5), [0.0])
    assert path.intercept[0] == pytest.approx(81.482, abs=5e-4)
    assert path.coef[0, 0] == pytest.approx(0.5602, abs=5e-5)
    ref = sm.QuantReg(y, sm.add_constant(X)).fit(q=0.5).params
    assert path.intercept[0] == pytest.approx(ref[0], rel=1e-5)
    assert path.coef[0, 0] == pytest.approx(ref[1], rel=1e-5)
    assert path.converged[0]
