"""Squared-loss L2 path: reference tests against scikit-learn, brute force and invariants.

Conversion (DESIGN.md §3): our objective (1/n) Σ ½(y − f)² + (λ/2) cᵀKc has the optimum
of scikit-learn KernelRidge(alpha = nλ) / Ridge(alpha = nλ), both of which minimise
½‖y − f‖² + (α/2)‖f‖²_H. KernelRidge fits no intercept, so it is compared with
fit_intercept=False (or with the centred Gram); Ridge leaves its intercept unpenalised.
"""
import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from sklearn.kernel_ridge import KernelRidge
from sklearn.linear_model import Ridge

from pipeline.kernels import gram
from pipeline.models.ridge.path import (fit_l2_path, fit_l2_primal_path, l2_lambda_grid, predict_path,
                                predict_rows, primal_weights)


def _data(n=120, p=4, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    y = np.sin(2 * X[:, 0]) + X[:, 1] ** 2 + 0.2 * rng.normal(size=n)
    Xt = rng.normal(size=(40, p))
    return X, y, Xt


# sklearn gamma conventions: rbf exp(−γd²) ⇒ γ = 1/(2ℓ²); laplacian exp(−γd₁) ⇒ γ = 1/ℓ;
# polynomial (γ xᵀz + coef0)^degree ⇒ γ = scale.
SKLEARN_KERNELS = [
    ("rbf", {"bandwidth": 1.5}, {"kernel": "rbf", "gamma": 1 / (2 * 1.5**2)}),
    ("laplacian", {"bandwidth": 3.0}, {"kernel": "laplacian", "gamma": 1 / 3.0}),
    ("polynomial", {"degree": 3, "coef0": 1.0, "scale": 0.25},
     {"kernel": "polynomial", "degree": 3, "coef0": 1.0, "gamma": 0.25}),
]


@pytest.mark.parametrize("kernel,ours,theirs", SKLEARN_KERNELS)
def test_matches_sklearn_kernel_ridge(kernel, ours, theirs):
    # Reference: scikit-learn KernelRidge, alpha = nλ, no intercept on either side.
    X, y, Xt = _data()
    n = len(y)
    lambdas = np.array([1e-1, 1e-2, 1e-3])
    path = fit_l2_path(gram(X, kernel=kernel, **ours), y, "squared", lambdas, fit_intercept=False)
    pred = predict_path(path, gram(Xt, X, kernel=kernel, **ours))
    for i, lam in enumerate(lambdas):
        ref = KernelRidge(alpha=n * lam, **theirs).fit(X, y)
        np.testing.assert_allclose(pred[i], ref.predict(Xt), rtol=1e-7, atol=1e-8)
        np.testing.assert_allclose(path.dual_coef[i], ref.dual_coef_, rtol=1e-6, atol=1e-8)
        assert path.intercept[i] == 0.0


def test_intercept_matches_kernel_ridge_on_centred_gram():
    # Reference: KernelRidge(kernel="precomputed", alpha = nλ) on HKH and y − ȳ, H = I − 11ᵀ/n
    # (the unpenalised intercept profiled out); our raw-kernel predictions must agree.
    X, y, Xt = _data(seed=1)
    n = len(y)
    K, Kt = gram(X, kernel="rbf", bandwidth=2.0), gram(Xt, X, kernel="rbf", bandwidth=2.0)
    H = np.eye(n) - 1.0 / n
    lam = 3e-3
    ref = KernelRidge(alpha=n * lam, kernel="precomputed").fit(H @ K @ H, y - y.mean())
    Kt_c = (Kt - K.mean(axis=0)) @ H  # k̃(x, x_j) = ⟨φ(x) − φ̄, φ(x_j) − φ̄⟩
    expected = y.mean() + ref.predict(Kt_c)
    path = fit_l2_path(K, y, "squared", [lam])
    np.testing.assert_allclose(predict_path(path, Kt)[0], expected, rtol=1e-7, atol=1e-8)
    assert abs(path.dual_coef[0].sum()) < 1e-8 * np.abs(path.dual_coef[0]).sum()


def test_linear_kernel_equals_primal_ridge():
    # Reference: scikit-learn Ridge(alpha = nλ, fit_intercept=True); representer theorem
    # w = Φᵀc for K = ΦΦᵀ (Kimeldorf & Wahba 1971).
    X, y, Xt = _data(seed=2)
    n = len(y)
    lambdas = np.array([1.0, 1e-2, 1e-4])
    path = fit_l2_path(X @ X.T, y, "squared", lambdas)
    W = primal_weights(path, X)
    pred = predict_path(path, Xt @ X.T)
    for i, lam in enumerate(lambdas):
        ref = Ridge(alpha=n * lam).fit(X, y)
        np.testing.assert_allclose(W[i], ref.coef_, rtol=1e-7, atol=1e-9)
        np.testing.assert_allclose(path.intercept[i], ref.intercept_, rtol=1e-7, atol=1e-9)
        np.testing.assert_allclose(pred[i], ref.predict(Xt), rtol=1e-7, atol=1e-9)


def test_primal_route_equals_dual_route():
    X, y, Xt = _data(n=90, p=6, seed=3)
    lambdas = np.geomspace(1.0, 1e-4, 7)
    dual = fit_l2_path(X @ X.T, y, "squared", lambdas)
    primal, W = fit_l2_primal_path(X, y, lambdas)
    for field in ("dual_coef", "intercept", "effective_df", "loo_error", "gcv"):
        np.testing.assert_allclose(getattr(primal, field), getattr(dual, field), rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(W, primal_weights(dual, X), rtol=1e-7, atol=1e-10)


def test_loo_equals_brute_force_refits():
    # Brute force: refit on n − 1 rows with the same absolute penalty nλ (ridge α), i.e.
    # λ' = nλ/(n − 1) in our per-sample scaling; the shortcut is exact for that refit.
    X, y, _ = _data(n=40, seed=4)
    n = len(y)
    K = gram(X, kernel="matern32", bandwidth=1.7)
    lambdas = np.array([1e-1, 1e-3])
    path = fit_l2_path(K, y, "squared", lambdas)
    for j, lam in enumerate(lambdas):
        errs = []
        for i in range(n):
            keep = np.arange(n) != i
            sub = fit_l2_path(K[np.ix_(keep, keep)], y[keep], "squared", [lam * n / (n - 1)])
            errs.append(y[i] - predict_path(sub, K[i:i + 1, keep])[0, 0])
        np.testing.assert_allclose(path.loo_error[j], np.mean(np.square(errs)), rtol=1e-8)


def test_gcv_and_df_against_explicit_hat_matrix():
    # Definitions: S = 11ᵀ/n + K̃(K̃ + nλI)⁻¹; GCV = n‖(I − S)y‖²/(n − tr S)² (Golub, Heath &
    # Wahba 1979, eq. 1.4); df = tr S − 1 (ESL 2nd ed. eq. 3.50 on centred inputs).
    X, y, _ = _data(n=50, seed=5)
    n = len(y)
    K = gram(X, kernel="rbf", bandwidth=1.0)
    H = np.eye(n) - 1.0 / n
    Kc = H @ K @ H
    lam = 2e-3
    S = np.ones((n, n)) / n + Kc @ np.linalg.inv(Kc + n * lam * np.eye(n))
    path = fit_l2_path(K, y, "squared", [lam])
    r = y - S @ y
    np.testing.assert_allclose(path.effective_df[0], np.trace(S) - 1, rtol=1e-9)
    np.testing.assert_allclose(path.gcv[0], n * (r @ r) / (n - np.trace(S)) ** 2, rtol=1e-8)


def test_lambda_grid_spans_the_requested_df():
    X, y, _ = _data(n=100, seed=6)
    K = gram(X, kernel="laplacian")
    lambdas = l2_lambda_grid(K, 12, df_range=(1.0, 60.0))
    assert np.all(np.diff(lambdas) < 0)
    df = fit_l2_path(K, y, "squared", lambdas).effective_df
    np.testing.assert_allclose([df[0], df[-1]], [1.0, 60.0], rtol=1e-6)
    assert np.all(np.diff(df) > 0)


def test_predict_rows_blockwise_equals_full_cross_gram():
    X, y, Xt = _data(seed=7)
    path = fit_l2_path(gram(X, kernel="matern52"), y, "squared", [1e-2, 1e-3])
    full = predict_path(path, gram(Xt, X, kernel="matern52"), block_rows=7)
    np.testing.assert_allclose(predict_rows(path, Xt, X, "matern52", block_rows=9), full, rtol=1e-12)


def test_nonpositive_lambda_is_refused():
    X, y, _ = _data(n=20)
    with pytest.raises(ValueError, match="positive"):
        fit_l2_path(X @ X.T, y, "squared", [1e-2, 0.0])


@settings(max_examples=25, deadline=None)
@given(shift=st.floats(-1e3, 1e3), const=st.floats(0.0, 50.0), seed=st.integers(0, 1000))
def test_intercept_absorbs_shifts_of_y_and_constant_kernel_offsets(shift, const, seed):
    # Invariants of an unpenalised intercept: y + t moves only b; K + s·11ᵀ changes nothing
    # on the data (the centred Gram is the same).
    X, y, _ = _data(n=30, p=3, seed=seed)
    K = gram(X, kernel="rbf", bandwidth=1.0)
    base = fit_l2_path(K, y, "squared", [1e-2])
    moved = fit_l2_path(K + const, y + shift, "squared", [1e-2])
    fitted = predict_path(base, K)[0]
    np.testing.assert_allclose(predict_path(moved, K + const)[0], fitted + shift,
                               rtol=1e-7, atol=1e-7 * (1 + abs(shift)))
    np.testing.assert_allclose(moved.effective_df, base.effective_df, rtol=1e-7)


def test_kfold_errors_equal_brute_force_refits_per_fold():
    # Brute force: refit on each training fold, score ½(y − f)² on its held-out fold.
    # (The per-fold fit itself is checked against scikit-learn above.)
    from sklearn.model_selection import KFold
    from pipeline.models.ridge.path import kfold_errors
    X, y, _ = _data(n=60, seed=8)
    K = gram(X, kernel="rbf", bandwidth=1.0)
    folds = list(KFold(4, shuffle=True, random_state=0).split(X))
    lambdas = np.array([1e-1, 1e-3])
    table = kfold_errors(K, y, "squared", lambdas, folds)
    assert table.shape == (4, 2)
    for i, (tr, va) in enumerate(folds):
        for j, lam in enumerate(lambdas):
            sub = fit_l2_path(K[np.ix_(tr, tr)], y[tr], "squared", [lam])
            f = predict_path(sub, K[np.ix_(va, tr)])[0]
            assert table[i, j] == pytest.approx(np.mean(0.5 * (y[va] - f) ** 2), rel=1e-12)


def test_fit_stops_on_a_non_psd_gram_unless_asked_to_warn():
    from pipeline.kernels import KernelNotPSDError
    rng = np.random.default_rng(10)
    A = rng.normal(size=(30, 30))
    bad = A + A.T                         # symmetric, indefinite
    y = rng.normal(size=30)
    with pytest.raises(KernelNotPSDError, match="smallest/largest eigenvalue ratio"):
        fit_l2_path(bad, y, "squared", [1e-1])
    with pytest.warns(RuntimeWarning):
        path = fit_l2_path(bad, y, "squared", [1e-1], on_psd_fail="warn")
    assert path.psd_ratio < 0
