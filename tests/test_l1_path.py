"""Path behaviour of pipeline.models.sparse for every loss: KKT at every point, all-zero at
lambda_max, exact zeros, certificates, agreement with an independent full cvxpy solve."""
import cvxpy as cp
import numpy as np
import pytest

from pipeline.losses import LOSS_NAMES, get_loss
from pipeline.models.sparse import lambda_max
from pipeline.models.sparse.path import L1Path, default_lambdas, fit_l1_path, lambda_grid, predict_path


def _problem(task, n=120, p=30, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    X = (X - X.mean(0)) / X.std(0)
    w = np.zeros(p)
    w[:4] = [1.5, -1.0, 0.8, 0.5]
    f = X @ w + 0.3
    if task == "classification":
        return X, np.where(f + 0.7 * rng.normal(size=n) > 0, 1.0, -1.0)
    return X, f + 0.5 * rng.standard_t(3, size=n)


def _full_cvxpy(X, y, loss, lam, alpha=1.0):
    """Independent reference: the whole problem in cvxpy, solved by CLARABEL."""
    n, p = X.shape
    b, b0 = cp.Variable(p), cp.Variable()
    pen = alpha * cp.norm1(b) + (1 - alpha) / 2 * cp.sum_squares(b)
    obj = loss.cvxpy_sum(y, X @ b + b0) / n + lam * pen
    prob = cp.Problem(cp.Minimize(obj))
    prob.solve(solver="CLARABEL", tol_gap_abs=1e-10, tol_gap_rel=1e-10, tol_feas=1e-10)
    return prob.value


@pytest.mark.parametrize("name", LOSS_NAMES)
def test_path_kkt_zero_start_and_certificate(name):
    loss = get_loss(name)
    X, y = _problem(loss.task)
    lams = default_lambdas(X, y, loss, n_lambdas=8, ratio=0.02)
    path = fit_l1_path(X, y, loss, lams)
    assert isinstance(path, L1Path)
    assert np.all(np.diff(path.lambdas) < 0)
    assert path.n_nonzero[0] == 0, "at lambda_max the solution is all zero"
    assert path.n_nonzero[-1] > 0
    assert np.all(path.converged), (path.certificate, path.status)
    assert np.all(path.kkt <= 1e-6), path.kkt
    assert path.certificate_kind == "duality_gap"
    np.testing.assert_array_equal(path.n_nonzero, (path.coef != 0).sum(1))
    # just below lambda_max something enters
    below = fit_l1_path(X, y, loss, [0.97 * lams[0]])
    assert below.n_nonzero[0] >= 1


@pytest.mark.parametrize("name", LOSS_NAMES)
def test_objective_matches_full_cvxpy(name):
    loss = get_loss(name)
    X, y = _problem(loss.task, n=80, p=15, seed=1)
    lam = 0.1 * lambda_max(X, y, loss)
    path = fit_l1_path(X, y, loss, [lam])
    ref = _full_cvxpy(X, y, loss, lam)
    assert path.objective[0] == pytest.approx(ref, rel=1e-6, abs=1e-9)
    assert path.objective[0] <= ref + 1e-7 * max(1.0, abs(ref))


@pytest.mark.parametrize("name", ["squared", "huber", "logistic", "hinge", "quantile"])
def test_elastic_net_matches_full_cvxpy(name):
    loss = get_loss(name)
    X, y = _problem(loss.task, n=80, p=15, seed=2)
    lam = 0.1 * lambda_max(X, y, loss, alpha=0.5)
    path = fit_l1_path(X, y, loss, [lam], alpha=0.5)
    assert path.converged[0], path.certificate
    assert path.objective[0] == pytest.approx(_full_cvxpy(X, y, loss, lam, alpha=0.5), rel=1e-6)


def test_exact_zeros_not_tiny_values():
    X, y = _problem("regression", n=100, p=60, seed=3)
    path = fit_l1_path(X, y, "squared", default_lambdas(X, y, "squared", 10, 0.05))
    nz = path.coef[path.coef != 0]
    assert np.min(np.abs(nz)) > 1e-8
    assert np.all(path.n_nonzero < 60)


def test_screening_rules_agree():
    X, y = _problem("classification", seed=4)
    lams = default_lambdas(X, y, "logistic", 6, 0.05)
    a = fit_l1_path(X, y, "logistic", lams, screening="strong")
    b = fit_l1_path(X, y, "logistic", lams, screening="active")
    np.testing.assert_allclose(a.coef, b.coef, atol=1e-6)


@pytest.mark.parametrize("name", ["squared", "huber", "logistic", "squared_hinge"])
def test_solver_routes_agree(name):
    """Active-set continuation, the forced convex-solver route and cvxpy give one path."""
    loss = get_loss(name)
    X, y = _problem(loss.task, n=90, p=40, seed=5)
    lams = default_lambdas(X, y, loss, 6, 0.02)
    auto = fit_l1_path(X, y, loss, lams)
    forced = fit_l1_path(X, y, loss, lams, solver="osqp" if name == "squared" else "cvxpy")
    assert "active-set" in auto.solver and "active-set" not in forced.solver
    assert np.all(auto.converged) and np.all(forced.converged)
    np.testing.assert_allclose(auto.objective, forced.objective, rtol=1e-9)
    np.testing.assert_array_equal(auto.n_nonzero, forced.n_nonzero)


def test_lambda_grid_and_predict():
    g = lambda_grid(2.0, 5, 0.01)
    assert g[0] == 2.0 and g[-1] == pytest.approx(0.02) and np.allclose(g[1:] / g[:-1], g[1] / g[0])
    with pytest.raises(ValueError):
        lambda_grid(1.0, 0, 0.1)
    X, y = _problem("regression", n=50, p=5)
    path = fit_l1_path(X, y, "squared", g)
    pred = predict_path(path, X[:7])
    assert pred.shape == (5, 7)
    np.testing.assert_allclose(pred[2], X[:7] @ path.coef[2] + path.intercept[2])


def test_solver_failure_is_recorded_not_raised(monkeypatch):
    from pipeline.models.sparse import restricted as l1_restricted

    X, y = _problem("regression", n=60, p=10)
    lams = default_lambdas(X, y, "squared", 4, 0.1)
    calls = {"n": 0}
    real = l1_restricted.solve_squared_gram

    def flaky(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 2:
            raise RuntimeError("simulated solver crash")
        return real(*args, **kwargs)

    monkeypatch.setattr(l1_restricted, "solve_squared_gram", flaky)
    path = fit_l1_path(X, y, "squared", lams, solver="osqp")
    failed = [i for i, s in enumerate(path.status) if s.startswith("error")]
    assert len(failed) == 1 and not path.converged[failed[0]]
    assert "simulated solver crash" in path.status[failed[0]]
    assert path.converged[failed[0] + 1:].all()


def test_bad_inputs():
    X, y = _problem("regression", n=30, p=4)
    with pytest.raises(ValueError, match="labels"):
        fit_l1_path(X, y, "logistic", [0.1])
    with pytest.raises(ValueError, match="solver"):
        fit_l1_path(X, y, "squared", [0.1], solver="nope")
    with pytest.raises(ValueError, match="alpha"):
        fit_l1_path(X, y, "squared", [0.1], alpha=0.0)


def test_degrees_of_freedom():
    from pipeline.models.sparse.path import degrees_of_freedom

    X, y = _problem("regression", n=100, p=20, seed=6)
    lams = default_lambdas(X, y, "squared", 5, 0.05)
    lasso = fit_l1_path(X, y, "squared", lams)
    np.testing.assert_array_equal(degrees_of_freedom(lasso, X), lasso.n_nonzero)
    enet = fit_l1_path(X, y, "squared", lams / 0.5, alpha=0.5)
    df = degrees_of_freedom(enet, X)
    assert np.all(df <= enet.n_nonzero + 1e-12) and np.all(df[enet.n_nonzero > 0] < enet.n_nonzero[enet.n_nonzero > 0])
    # the ridge part vanishes as lambda*(1-alpha) -> 0: the trace tends to the support size
    near = fit_l1_path(X, y, "squared", [1e-6], alpha=0.5)
    assert degrees_of_freedom(near, X)[0] == pytest.approx(near.n_nonzero[0], rel=1e-4)
