"""Unit and property tests of pipeline.losses: value, derivative, conjugate, cvxpy form."""
import cvxpy as cp
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import minimize_scalar

from pipeline.losses import LOSS_NAMES, get_loss
from pipeline.models.sparse import intercept_only_dual, lambda_max

ALL = [get_loss(n) for n in LOSS_NAMES] + [get_loss("huber", delta=0.3), get_loss("quantile", tau=0.2)]
IDS = [f"{l.name}-{getattr(l, 'delta', getattr(l, 'tau', ''))}" for l in ALL]


def _targets(loss, rng, n):
    if loss.task == "classification":
        return rng.choice([-1.0, 1.0], size=n)
    return rng.normal(size=n) * 2


def test_names_and_tasks():
    assert LOSS_NAMES == ("squared", "absolute", "huber", "quantile", "logistic", "hinge", "squared_hinge")
    tasks = {n: get_loss(n).task for n in LOSS_NAMES}
    assert {n for n, t in tasks.items() if t == "classification"} == {"logistic", "hinge", "squared_hinge"}
    assert {n for n in LOSS_NAMES if not get_loss(n).smooth} == {"absolute", "quantile", "hinge"}


def test_table_entries_agree_with_their_loss_objects():
    from pipeline.losses import LOSSES
    for name, kind in LOSSES.items():
        loss = kind.factory(**{p.name: p.default for p in kind.params})
        assert loss.name == name and loss.task == kind.task and kind.title
        for p in kind.params:   # each declared parameter reaches the object
            assert getattr(loss, p.name) == p.default
    assert LOSSES["huber"].param_names == ("delta",) and LOSSES["quantile"].param_names == ("tau",)


def test_unknown_name_lists_valid_and_closest():
    with pytest.raises(ValueError, match="did you mean 'huber'") as info:
        get_loss("hubr")
    assert "squared_hinge" in str(info.value)
    with pytest.raises(ValueError):
        get_loss("quantile", tau=1.5)
    with pytest.raises(ValueError):
        get_loss("squared", delta=2.0)
    with pytest.raises(ValueError):
        get_loss("absolute", tau=0.3)


def test_squared_is_half_square():
    loss = get_loss("squared")
    np.testing.assert_allclose(loss.value([3.0], [1.0]), [2.0])
    np.testing.assert_allclose(loss.derivative([3.0], [1.0]), [-2.0])


@pytest.mark.parametrize("loss", ALL, ids=IDS)
def test_derivative_matches_finite_difference(loss):
    rng = np.random.default_rng(1)
    y = _targets(loss, rng, 200)
    f = rng.normal(size=200) * 2
    h = 1e-6
    fd = (loss.value(y, f + h) - loss.value(y, f - h)) / (2 * h)
    # kinks are measure-zero; skip points within h of one
    arg = (y - f) if loss.task == "regression" else y * f
    away = np.all([np.abs(arg - k) > 10 * h for k in loss.kinks], axis=0) if loss.kinks else np.ones(200, bool)
    np.testing.assert_allclose(loss.derivative(y, f)[away], fd[away], atol=1e-5)


@pytest.mark.parametrize("loss", ALL, ids=IDS)
def test_cvxpy_sum_equals_value_sum(loss):
    rng = np.random.default_rng(2)
    y = _targets(loss, rng, 30)
    f = rng.normal(size=30)
    expr = loss.cvxpy_sum(y, cp.Constant(f))
    assert expr.is_convex()
    np.testing.assert_allclose(float(expr.value), loss.value(y, f).sum(), rtol=1e-10)


@pytest.mark.parametrize("loss", ALL, ids=IDS)
def test_conjugate_is_a_numerical_supremum(loss):
    """loss*(y, u) = sup_f u f - loss(y, f), checked by 1-D maximisation at points inside the domain."""
    rng = np.random.default_rng(3)
    for _ in range(6):
        y = float(_targets(loss, rng, 1)[0])
        u = float(loss.derivative([y], [rng.normal()])[0])  # always inside the domain
        res = minimize_scalar(lambda f: -(u * f - float(loss.value([y], [f])[0])),
                              bounds=(-50, 50), method="bounded", options={"xatol": 1e-10})
        assert float(loss.conjugate([y], [u])[0]) == pytest.approx(-res.fun, abs=1e-6)


@settings(max_examples=60, deadline=None)
@given(st.sampled_from(range(len(ALL))), st.floats(-5, 5), st.floats(-5, 5), st.floats(-3, 3))
def test_fenchel_young_inequality(i, y, f, u):
    """loss(f) + loss*(u) >= u f for every u, equality at u = loss'(f)."""
    loss = ALL[i]
    if loss.task == "classification":
        y = 1.0 if y >= 0 else -1.0
    lhs = loss.value([y], [f])[0] + loss.conjugate([y], [u])[0]
    assert lhs >= u * f - 1e-9
    g = loss.derivative([y], [f])[0]
    eq = loss.value([y], [f])[0] + loss.conjugate([y], [g])[0]
    assert eq == pytest.approx(g * f, abs=1e-8)


@pytest.mark.parametrize("loss", ALL, ids=IDS)
def test_intercept_only_minimises_mean_loss(loss):
    rng = np.random.default_rng(4)
    y = _targets(loss, rng, 41)
    if loss.task == "classification":
        y[:28] = 1.0  # unbalanced so the optimum is unique and interior for logistic
        y[28:] = -1.0
    b = loss.intercept_only(y)
    best = minimize_scalar(lambda c: float(np.mean(loss.value(y, c))), bounds=(-10, 10),
                           method="bounded", options={"xatol": 1e-12})
    assert np.mean(loss.value(y, b)) <= best.fun + 1e-9


def test_lambda_max_squared_formula():
    rng = np.random.default_rng(5)
    X, y = rng.normal(size=(50, 7)), rng.normal(size=50)
    expect = np.max(np.abs(X.T @ (y - y.mean()))) / 50
    assert lambda_max(X, y, get_loss("squared")) == pytest.approx(expect, rel=1e-12)
    assert lambda_max(X, y, "squared", alpha=0.5) == pytest.approx(2 * expect, rel=1e-12)


@pytest.mark.parametrize("name", ["absolute", "quantile", "hinge"])
def test_intercept_only_dual_is_a_balanced_subgradient(name):
    loss = get_loss(name)
    rng = np.random.default_rng(6)
    X = rng.normal(size=(31, 5))
    y = _targets(loss, rng, 31)
    g = intercept_only_dual(X, y, loss)
    f = np.full(31, loss.intercept_only(y))
    lo, hi = loss.subgradient_interval(y, f)
    assert abs(g.sum()) < 1e-9
    assert np.all(g >= lo - 1e-12) and np.all(g <= hi + 1e-12)
