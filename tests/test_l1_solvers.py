"""Every solver back-end against an independent solver on the losses where cvxpy 1.9.3
bound propagation (multiply/maximum/pos/abs of a constant matrix times a free variable)
can hand HiGHS wrong variable bounds and a wrong "optimal" point (e.g. all zeros for
the hinge loss). Our formulations must give the right optimum with every back-end."""
import numpy as np
import pytest
from scipy.optimize import minimize

from pipeline.losses import get_loss
from pipeline.models.sparse import restricted as rs
from pipeline.models.sparse.certificate import primal_value

LAM = 0.02


def _data(task, n=60, p=8, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    if task == "classification":
        return X, np.where(X[:, 0] + 0.5 * rng.normal(size=n) > 0, 1.0, -1.0)
    return X, X[:, 0] - 0.5 * X[:, 1] + rng.normal(size=n)


def _independent_optimum(X, y, loss, lam, alpha):
    """Independent of cvxpy: the split LP through scipy's HiGHS for piecewise-linear losses
    at alpha = 1, else L-BFGS-B on the smooth split form b = b+ - b-, b+, b- >= 0."""
    n, p = X.shape
    if not loss.smooth and alpha == 1.0:
        r = rs.solve_piecewise_lp(X, y, lam, loss)
        return primal_value(X, y, r.coef, r.intercept, lam, alpha, loss)

    def fun(v):
        w = v[:p] - v[p:2 * p]
        f = X @ w + v[-1]
        g = loss.derivative(y, f)
        obj = np.mean(loss.value(y, f)) + lam * (alpha * v[:2 * p].sum() + 0.5 * (1 - alpha) * w @ w)
        gw = X.T @ g / n + lam * (1 - alpha) * w
        grad = np.r_[gw + lam * alpha, -gw + lam * alpha, g.mean()]
        return obj, grad

    bounds = [(0, None)] * (2 * p) + [(None, None)]
    res = minimize(fun, np.zeros(2 * p + 1), jac=True, method="L-BFGS-B", bounds=bounds,
                   options={"ftol": 1e-15, "gtol": 1e-12, "maxiter": 20000})
    return float(res.fun)


CASES = [("hinge", {}, 1.0), ("quantile", {"tau": 0.3}, 1.0), ("squared_hinge", {}, 1.0),
         ("squared_hinge", {}, 0.5)]


@pytest.mark.parametrize("backend", ["CLARABEL", "HIGHS", "SCS", "OSQP"])
@pytest.mark.parametrize("name,params,alpha", CASES)
def test_cvxpy_route_every_backend(name, params, alpha, backend):
    loss = get_loss(name, **params)
    if backend == "OSQP" and not loss.smooth:
        pytest.skip("OSQP is not used for LP-type losses (first-order, stalls on them)")
    X, y = _data(loss.task)
    ref = _independent_optimum(X, y, loss, LAM, alpha)
    r = rs.solve_cvxpy(X, y, LAM, alpha, loss, backends=[backend])
    assert r.status == "optimal", r.status
    ours = primal_value(X, y, r.coef, r.intercept, LAM, alpha, loss)
    rel = 1e-5 if backend == "SCS" else 1e-7  # SCS is a first-order method
    assert ours == pytest.approx(ref, rel=rel)
    assert np.any(r.coef != 0), "the all-zero point is the defect's signature"


@pytest.mark.parametrize("name,params", [("hinge", {}), ("quantile", {"tau": 0.3}), ("absolute", {})])
def test_split_lp_matches_clarabel(name, params):
    loss = get_loss(name, **params)
    X, y = _data(loss.task, seed=1)
    lp = rs.solve_piecewise_lp(X, y, LAM, loss)
    cv = rs.solve_cvxpy(X, y, LAM, 1.0, loss, backends=["CLARABEL"])
    p_lp = primal_value(X, y, lp.coef, lp.intercept, LAM, 1.0, loss)
    p_cv = primal_value(X, y, cv.coef, cv.intercept, LAM, 1.0, loss)
    assert p_lp == pytest.approx(p_cv, rel=1e-7)
    assert p_lp <= p_cv + 1e-12  # the simplex vertex is exact


def test_gram_qp_matches_lbfgs():
    loss = get_loss("squared")
    X, y = _data("regression", seed=2)
    for alpha in (1.0, 0.3):
        r = rs.solve_squared_gram(X, y, LAM, alpha)
        ours = primal_value(X, y, r.coef, r.intercept, LAM, alpha, loss)
        assert ours == pytest.approx(_independent_optimum(X, y, loss, LAM, alpha), rel=1e-8)
