"""The sparse family's certificate and supports where they are most easily wrong: a zero optimal
objective (separable data at λ = 0), near-zero objectives, and λ exactly at a knot of the path."""
import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.linear_model import lars_path

from pipeline.losses import get_loss
from pipeline.models.sparse import certificate as cert
from pipeline.models.sparse.path import fit_l1_path


@pytest.fixture(scope="module")
def breast_cancer():
    # Wisconsin diagnostic breast-cancer data as bundled with scikit-learn: 569 rows, 30 features,
    # standardised here; it is linearly separable (the hinge objective reaches 0 at λ = 0)
    X, y = load_breast_cancer(return_X_y=True)
    return (X - X.mean(axis=0)) / X.std(axis=0), np.where(y == 1, 1.0, -1.0)


def test_separable_hinge_at_lambda_zero_is_converged(breast_cancer):
    Z, t = breast_cancer
    path = fit_l1_path(Z, t, "hinge", [0.0])
    assert path.objective[0] < 1e-10                    # the optimum is 0 (separable), reached to rounding
    assert path.converged[0] and path.status[0] == "optimal"
    # the rule: gap <= tol * max(|P|, P0), P0 the intercept-only hinge objective (2 * minority share)
    p0 = cert.reference_objective(t, get_loss("hinge"))
    assert p0 == pytest.approx(2 * np.mean(t < 0))
    assert path.certificate[0] <= 1e-7
    # dividing the same rounding-level gap by |P| alone (the former rule) calls this exact fit unconverged
    gap = path.certificate[0] * p0
    assert gap / max(path.objective[0], 1e-12) > 1e-7


def test_gap_scale_uses_the_intercept_only_objective():
    loss = get_loss("squared")
    y = np.array([1.0, -1.0, 2.0, 0.0])
    assert cert.reference_objective(y, loss) == pytest.approx(0.5 * np.var(y))
    assert cert.gap_scale(1e-14, 0.625) == 0.625
    assert cert.gap_scale(3.0, 0.625) == 3.0


def test_near_zero_objective_squared_is_converged():
    # noise-free y = X b with n < p: the fit interpolates as λ -> 0 and the objective is ~ λ |b|_1
    rng = np.random.default_rng(3)
    X = rng.standard_normal((30, 60))
    b = np.zeros(60)
    b[:4] = [2.0, -1.5, 1.0, 0.5]
    y = X @ b
    t = y - y.mean()
    path = fit_l1_path(X, t, "squared", np.array([1e-6, 1e-9, 1e-12]))
    assert np.all(path.objective < 1e-5) and path.objective[-1] < 1e-10
    assert path.converged.all(), path.certificate
    # the former rule, gap / |P|, fails the last fit although its gap is at rounding level
    gap = path.certificate[-1] * cert.reference_objective(t, get_loss("squared"))
    assert gap < 1e-13 and gap / path.objective[-1] > 1e-7


def test_single_fits_at_the_exact_diabetes_knots():
    # Knots of the lasso path of the diabetes data (Efron, Hastie, Johnstone & Tibshirani 2004, Annals of
    # Statistics 32(2); the data as bundled with scikit-learn: columns centred, unit Euclidean norm) computed
    # with scikit-learn's lars_path(method="lasso"), whose alpha equals our λ (both minimise
    # (1/2n)|y - Xb|² + λ|b|_1). At a knot the entering variable is still exactly zero, so a fit there has
    # one nonzero fewer than just below it; scikit-learn's coefficients at the knots give those counts.
    X, y = load_diabetes(return_X_y=True)
    knots, _, ref = lars_path(X, y, method="lasso")
    knots, ref = knots[:-1], ref[:, :-1]              # the last knot is λ = 0 (least squares)
    expected = np.count_nonzero(ref, axis=0)
    # 0..9 active, then s3 leaves and re-enters (the lasso modification, Efron et al. 2004 §3.1): 9, 9
    assert list(expected) == [0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 9, 9]
    for solver in ("auto", "osqp"):                    # continuation route and solver route
        single = [fit_l1_path(X, y - y.mean(), "squared", [lam], solver=solver) for lam in knots]
        assert [int(s.n_nonzero[0]) for s in single] == list(expected), solver
        path = fit_l1_path(X, y - y.mean(), "squared", knots, solver=solver)
        assert list(path.n_nonzero) == list(expected), solver
        assert np.abs(path.coef - ref.T).max() < 1e-6 * np.abs(ref).max()
        assert path.converged.all()
    # entry order along the path, 1-based as in Efron et al. 2004 (bmi, s5, bp, s3, sex, s6, s1, s4, s2, age;
    # from the paper's text and Figure 1, quoted from memory): the first knot after which each is nonzero
    first = [int(np.flatnonzero(path.coef[:, j])[0]) for j in range(10)]
    assert list(np.argsort(first, kind="stable") + 1) == [3, 9, 4, 7, 2, 10, 5, 8, 6, 1]
