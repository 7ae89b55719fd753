"""The two multinomial-logistic solvers: the L1 / elastic-net path (sparse/multinomial.py) and the kernel
path with a squared RKHS penalty (ridge/multinomial.py), against scikit-learn, cvxpy and their own certificates.

Scaling used against scikit-learn (`sklearn.linear_model.LogisticRegression`, multinomial for > 2 classes):
it minimises C Σ_i CE_i + Ω(W) with Ω = l1_ratio ||W||_1 + (1 − l1_ratio)/2 ||W||², ours
(1/n) Σ_i CE_i + λ Ω(W); dividing scikit-learn's objective by nC shows C = 1/(nλ) gives the same optimum.
For the kernel path with the linear kernel K = ZZᵀ, (λ/2) Σ_k c_kᵀKc_k = (λ/2)||W||² with W = Zᵀc.
"""
import cvxpy as cp
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.special import softmax
from sklearn.datasets import load_wine
from sklearn.linear_model import LogisticRegression

from pipeline.models.ridge.multinomial import fit_multinomial_kernel_path, predict_multinomial_kernel
from pipeline.models.ridge.other_losses import general_path
from pipeline.models.ridge.eigen import kernel_eigen
from pipeline.models.sparse.multinomial import (balanced_dual, dual_objective, fit_multinomial_l1_path,
                                                multinomial_lambda_max, predict_multinomial_l1,
                                                primal_objective)


@pytest.fixture(scope="module")
def wine():
    # scikit-learn's bundled copy of the UCI Wine data (Forina et al.; 178 wines, 13 measurements,
    # three cultivars); columns standardised to mean 0, variance 1
    X, y = load_wine(return_X_y=True)
    return (X - X.mean(axis=0)) / X.std(axis=0), y


def _one_hot(codes, K):
    return np.eye(K)[codes]


def _random_problem(seed, n=40, p=12, K=3):
    rng = np.random.default_rng(seed)
    Z = rng.standard_normal((n, p))
    B = np.zeros((p, K))
    B[:3] = 2 * rng.standard_normal((3, K))
    prob = softmax(Z @ B, axis=1)
    codes = np.array([rng.choice(K, p=row) for row in prob])
    codes[:K] = np.arange(K)           # every class present
    return (Z - Z.mean(axis=0)) / Z.std(axis=0), codes


@pytest.fixture(scope="module")
def wine_l1_path(wine):
    Z, y = wine
    lam_max = multinomial_lambda_max(Z, y, 3)
    return fit_multinomial_l1_path(Z, y, 3, lam_max * np.array([0.5, 0.2, 0.05, 0.01]), tol=1e-9)


@pytest.mark.parametrize("alpha", [1.0, 0.5])
def test_lambda_max_is_where_the_path_leaves_zero(wine, alpha):
    # λ_max = max_{j,k} |Z_jᵀ(Y_k − π_k)| / (nα): all-zero at λ_max, some coefficient nonzero just below
    Z, y = wine
    lam_max = multinomial_lambda_max(Z, y, 3, alpha)
    direct = np.abs(Z.T @ (_one_hot(y, 3) - np.bincount(y) / len(y))).max() / (len(y) * alpha)
    assert lam_max == pytest.approx(direct, rel=1e-12)
    path = fit_multinomial_l1_path(Z, y, 3, [lam_max, 0.98 * lam_max], alpha=alpha)
    assert path.n_nonzero.tolist() == [0, 1]
    assert np.all(path.converged)
    pi = np.bincount(y) / len(y)
    assert np.allclose(softmax(path.intercept[0]), pi, atol=1e-12)


def test_wine_l1_against_scikit_learn_saga(wine, wine_l1_path):
    # scikit-learn LogisticRegression(solver="saga", l1_ratio=1) (the L1 penalty; C = 1/(nλ), see the top):
    # our objective is no larger, and coefficients, supports and probabilities agree
    Z, y = wine
    n, Y = len(y), _one_hot(y, 3)
    path = wine_l1_path
    for i, lam in enumerate(path.lambdas):
        ref = LogisticRegression(l1_ratio=1.0, solver="saga", C=1 / (n * lam), tol=1e-12,
                                 max_iter=200_000).fit(Z, y)
        W, b = ref.coef_.T, ref.intercept_
        ours = primal_objective(Z, Y, path.coef[i], path.intercept[i], lam, 1.0)
        theirs = primal_objective(Z, Y, W, b, lam, 1.0)
        assert ours <= theirs + 1e-10
        assert np.abs(path.coef[i] - W).max() < 1e-4
        assert np.array_equal(path.coef[i] != 0, np.abs(W) > 1e-8)
        scores = predict_multinomial_l1(path, Z)[i]
        assert np.abs(softmax(scores, axis=1) - ref.predict_proba(Z)).max() < 1e-5


def test_wine_elastic_net_against_scikit_learn_saga(wine):
    # scikit-learn LogisticRegression(solver="saga", l1_ratio=0.5): Ω = ½||W||_1 + ¼||W||², ours with α = 0.5
    Z, y = wine
    n, Y = len(y), _one_hot(y, 3)
    lam = 0.2 * multinomial_lambda_max(Z, y, 3, alpha=0.5)
    path = fit_multinomial_l1_path(Z, y, 3, [lam], alpha=0.5, tol=1e-9)
    ref = LogisticRegression(l1_ratio=0.5, solver="saga", C=1 / (n * lam), tol=1e-12, max_iter=200_000).fit(Z, y)
    assert path.converged[0]
    assert primal_objective(Z, Y, path.coef[0], path.intercept[0], lam, 0.5) <= \
        primal_objective(Z, Y, ref.coef_.T, ref.intercept_, lam, 0.5) + 1e-10
    assert np.array_equal(path.coef[0] != 0, np.abs(ref.coef_.T) > 1e-8)
    assert np.abs(path.coef[0] - ref.coef_.T).max() < 1e-4


def test_gap_certifies_every_fit_of_a_path(wine):
    Z, y = wine
    lam_max = multinomial_lambda_max(Z, y, 3)
    path = fit_multinomial_l1_path(Z, y, 3, lam_max * np.geomspace(1, 0.01, 12), tol=1e-7)
    assert np.all(path.certificate <= 1e-7) and np.all(path.converged)
    assert path.certificate_kind == "duality_gap"
    assert np.all(np.diff(path.n_nonzero[:4]) >= 0) and path.n_nonzero[-1] > path.n_nonzero[0]
    assert path.coef.shape == (12, Z.shape[1], 3) and path.intercept.shape == (12, 3)
    assert np.allclose(path.intercept.sum(axis=1), 0, atol=1e-12)
    # warm starts change the route, not the optimum: a cold fit at the last λ reaches the same objective
    cold = fit_multinomial_l1_path(Z, y, 3, path.lambdas[-1:], tol=1e-7)
    assert cold.converged[0]
    assert cold.objective[0] == pytest.approx(path.objective[-1], rel=2e-7)


def test_balanced_dual_is_feasible():
    # rows of U + Y on the simplex and the column sums of U exactly zero, from arbitrary probabilities
    rng = np.random.default_rng(3)
    codes = rng.integers(0, 4, 50)
    P = softmax(rng.standard_normal((50, 4)) * 2, axis=1)
    Y = _one_hot(codes, 4)
    U = balanced_dual(P, Y)
    Q = U + Y
    assert np.all(Q >= -1e-15) and np.allclose(Q.sum(axis=1), 1.0, atol=1e-14)
    assert np.abs(U.sum(axis=0)).max() < 1e-12


@pytest.mark.parametrize("alpha", [1.0, 0.6])
def test_objective_against_cvxpy_and_dual_bounds_it(alpha):
    # cvxpy (log_sum_exp, solved by CLARABEL) on the same objective: our objective is no larger than the
    # reference's up to its tolerance, and our dual value (a lower bound if the dual is right) is below it
    Z, codes = _random_problem(1)
    n, p = Z.shape
    K, Y = 3, _one_hot(codes, 3)
    lam = 0.1 * multinomial_lambda_max(Z, codes, K, alpha)
    B, b = cp.Variable((p, K)), cp.Variable(K)
    F = Z @ B + np.ones((n, 1)) @ cp.reshape(b, (1, K), order="C")
    ce = cp.sum(cp.log_sum_exp(F, axis=1)) - cp.sum(cp.multiply(Y, F))
    pen = alpha * cp.sum(cp.abs(B)) + (1 - alpha) / 2 * cp.sum_squares(B)
    reference = cp.Problem(cp.Minimize(ce / n + lam * pen))
    reference.solve(solver="CLARABEL")
    path = fit_multinomial_l1_path(Z, codes, K, [lam], alpha=alpha, tol=1e-9)
    ours = primal_objective(Z, Y, path.coef[0], path.intercept[0], lam, alpha)
    assert ours <= reference.value + 1e-7
    assert ours == pytest.approx(reference.value, abs=1e-6)
    P = softmax(Z @ path.coef[0] + path.intercept[0], axis=1)
    assert dual_objective(Z, Y, balanced_dual(P, Y), lam, alpha) <= reference.value + 1e-7
    assert path.certificate[0] <= 1e-9
    # weak duality away from the optimum too: the dual point read from any fit (here the intercept-only one
    # and random coefficients) is made feasible, so its value stays below the optimum
    rng = np.random.default_rng(7)
    for scale in (0.0, 0.3, 3.0):
        Bx, bx = scale * rng.standard_normal((p, K)), rng.standard_normal(K)
        P = softmax(Z @ Bx + bx, axis=1)
        assert dual_objective(Z, Y, balanced_dual(P, Y), lam, alpha) <= reference.value + 1e-7


def test_kernel_path_linear_kernel_against_scikit_learn_lbfgs(wine):
    # scikit-learn LogisticRegression(lbfgs, L2 penalty ½||W||², C = 1/(nλ)); the linear kernel K = ZZᵀ
    Z, y = wine
    n = len(y)
    lams = np.array([1.0, 0.1, 0.01, 0.001])
    path = fit_multinomial_kernel_path(Z @ Z.T, y, 3, lams)
    assert np.all(path.converged) and path.dual_coef.shape == (4, n, 3)
    scores = predict_multinomial_kernel(path, Z @ Z.T)
    for i, lam in enumerate(path.lambdas):
        ref = LogisticRegression(C=1 / (n * lam), tol=1e-13, max_iter=100_000).fit(Z, y)
        assert np.abs(softmax(scores[i], axis=1) - ref.predict_proba(Z)).max() < 2e-6
        W = Z.T @ path.dual_coef[i]                          # the primal weights of the representer fit
        assert np.abs(W - ref.coef_.T).max() < 1e-4 * max(1.0, np.abs(W).max())
    assert np.all(np.diff(path.effective_df) > 0)               # λ decreasing: df grows
    assert path.effective_df[-1] < 2 * Z.shape[1]                # at most (K − 1)·rank


def test_kernel_path_objective_against_cvxpy():
    # cvxpy (log_sum_exp and quad_form, CLARABEL) on (1/n) Σ CE + (λ/2) Σ_k c_kᵀKc_k with a Gaussian Gram
    Z, codes = _random_problem(2, n=30, p=4)
    n, K = len(codes), 3
    D = ((Z[:, None, :] - Z[None, :, :]) ** 2).sum(axis=2)
    G = np.exp(-D / Z.shape[1])
    lam = 0.01
    path = fit_multinomial_kernel_path(G, codes, K, [lam])
    C, b = cp.Variable((n, K)), cp.Variable(K)
    F = G @ C + np.ones((n, 1)) @ cp.reshape(b, (1, K), order="C")
    Y = _one_hot(codes, K)
    ce = cp.sum(cp.log_sum_exp(F, axis=1)) - cp.sum(cp.multiply(Y, F))
    pen = sum(cp.quad_form(C[:, k], cp.psd_wrap(G)) for k in range(K))
    reference = cp.Problem(cp.Minimize(ce / n + lam / 2 * pen))
    reference.solve(solver="CLARABEL")
    Fo = G @ path.dual_coef[0] + path.intercept[0]
    ours = (-np.sum(Y * np.log(softmax(Fo, axis=1))) / n
            + lam / 2 * np.einsum("nk,nm,mk->", path.dual_coef[0], G, path.dual_coef[0]))
    assert ours <= reference.value + 1e-7
    assert ours == pytest.approx(reference.value, abs=1e-6)
    assert path.objective[0] == pytest.approx(ours, abs=1e-10)


def test_two_class_kernel_path_matches_the_binary_logistic_path():
    # internal consistency: with K = 2 the optimum has c_1 = −c_0, so f_1 − f_0 is the binary logistic fit with
    # penalty (λ/4)(c_1 − c_0)ᵀK(c_1 − c_0), i.e. the binary path at λ/2; the linearised df is the same
    Z, codes = _random_problem(4, n=35, p=5, K=2)
    G = Z @ Z.T + 0.5 * (Z @ Z.T) ** 2
    lams = np.array([0.3, 0.03])
    multi = fit_multinomial_kernel_path(G, codes, 2, lams)
    binary = general_path(kernel_eigen(G), 2.0 * codes - 1.0, "logistic", lams / 2)
    margin = np.diff(predict_multinomial_kernel(multi, G), axis=2)[..., 0]
    assert np.allclose(margin, binary.dual_coef @ G + binary.intercept[:, None], atol=1e-7)
    assert np.allclose(multi.effective_df, binary.effective_df, atol=1e-6)


@settings(max_examples=8, deadline=None)
@given(seed=st.integers(0, 2**16), order=st.permutations([0, 1, 2]))
def test_probabilities_do_not_depend_on_the_class_codes(seed, order):
    # renaming the classes permutes the columns of the predicted probabilities and nothing else
    Z, codes = _random_problem(seed, n=30, p=6)
    order = np.array(order)
    renamed = order[codes]
    lam = 0.2 * multinomial_lambda_max(Z, codes, 3)
    assert multinomial_lambda_max(Z, renamed, 3) == pytest.approx(lam / 0.2, rel=1e-12)
    a = softmax(predict_multinomial_l1(fit_multinomial_l1_path(Z, codes, 3, [lam], tol=1e-10), Z)[0], axis=1)
    b = softmax(predict_multinomial_l1(fit_multinomial_l1_path(Z, renamed, 3, [lam], tol=1e-10), Z)[0], axis=1)
    assert np.allclose(b[:, order], a, atol=1e-6)
    G = Z @ Z.T
    a = softmax(predict_multinomial_kernel(fit_multinomial_kernel_path(G, codes, 3, [0.05]), G)[0], axis=1)
    b = softmax(predict_multinomial_kernel(fit_multinomial_kernel_path(G, renamed, 3, [0.05]), G)[0], axis=1)
    assert np.allclose(b[:, order], a, atol=1e-8)


def test_bad_inputs_are_refused():
    Z, codes = _random_problem(5)
    with pytest.raises(ValueError, match="every class"):
        fit_multinomial_l1_path(Z, codes, 4, [0.1])
    with pytest.raises(ValueError, match="codes must be"):
        multinomial_lambda_max(Z, codes + 1, 3)
    with pytest.raises(ValueError, match="every class"):
        fit_multinomial_kernel_path(Z @ Z.T, codes, 4, [0.1])
