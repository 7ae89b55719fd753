"""Ridge-type (L2) family in representer form: grid, exact path over λ, prediction.

    minimise (1/n) Σ loss(yᵢ, b + (Kc)ᵢ) + (λ/2) cᵀKc,  intercept b unpenalised.

The caller builds K from features fitted on training rows only. Classification
labels are {−1, +1}. A solver failure at one λ does not raise: that λ gets
converged False and a status message, and the path goes on.
"""
from __future__ import annotations

import numpy as np

from pipeline.losses import get_loss
from pipeline.models.interface import widen_points
from pipeline.models.ridge.eigen import KernelEigen, effective_df, kernel_eigen
from pipeline.models.ridge.result import L2Path
from pipeline.models.ridge.closed_form import squared_path, squared_primal_path

__all__ = ["L2Path", "KernelEigen", "kernel_eigen", "l2_lambda_grid", "spectrum_lambda_grid", "fit_l2_path",
           "fit_l2_primal_path", "predict_path", "predict_rows", "kfold_errors", "primal_weights"]

# Blocks of test rows in prediction: memory stays at block × n floats.
PREDICT_BLOCK_ROWS = 4096


def _df_to_lambda(d: np.ndarray, n: int, target: float) -> float:
    """λ with Σ d/(d + nλ) = target, by bisection in log λ (df falls as λ grows)."""
    lo, hi = np.log(1e-16 * max(d.max(), 1e-300) / n), np.log(1e8 * max(d.max(), 1e-300) / n)
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if effective_df(d, [np.exp(mid)], n)[0] > target:
            lo = mid
        else:
            hi = mid
    return float(np.exp(0.5 * (lo + hi)))


def l2_lambda_grid(K, n_lambdas: int, df_range=(1.0, None), min_lambda_ratio: float = 1e-10,
                   fit_intercept: bool = True, widen=(0, 0), factors=None) -> np.ndarray:
    """Decreasing λ grid from df(λ_max) = df_range[0] to df(λ_min) = df_range[1], evenly spaced in
    log(df / (r − df)), r the rank of the centred Gram (see spectrum_lambda_grid).

    ``df_range[1]`` None means min(n, r) − 1. λ_min is kept ≥ min_lambda_ratio·d_max/n
    so that K̃ + nλI stays well conditioned (fast-decaying spectra such as the rbf
    one cannot reach df ≈ n − 1 otherwise). ``K`` may be a KernelEigen already made. With row
    ``factors`` the spectrum is the weighted one (eigen.py), so integer weights give the grid of the
    repeated rows.
    """
    eig = K if isinstance(K, KernelEigen) else kernel_eigen(K, fit_intercept, on_psd_fail="ignore",
                                                            factors=factors)
    return spectrum_lambda_grid(eig.eigenvalues, eig.n, n_lambdas, df_range, min_lambda_ratio, widen)


def spectrum_lambda_grid(d, n: int, n_lambdas: int, df_range=(1.0, None),
                         min_lambda_ratio: float = 1e-10, widen=(0, 0)) -> np.ndarray:
    """l2_lambda_grid from the (centred) Gram eigenvalues d of n rows, or of a low-rank stand-in.

    The effective degrees of freedom df(λ) = Σ d/(d + nλ) run from 0 (λ → ∞, the intercept
    alone) to r (λ → 0, interpolation), r the numerical rank. The grid is even in
    u = log(df / (r − df)): geometric in df near 0 and in r − df near r, so the same grid fits
    any feature map or kernel whatever its scale. ``widen`` = (a, b) adds a·w points beyond the
    largest λ (towards df 0) and b·w beyond the smallest (towards df r), w = widen_points, at
    the same spacing: the runner widens an end that cross-validation chose.
    """
    d = np.asarray(d, dtype=float)
    rank = float(np.sum(d > 1e-12 * max(d.max(), 1e-300)))
    if rank < 1:
        return np.full(max(n_lambdas, 1), 1.0)   # a constant Gram: every λ gives the same fit
    df_lo, df_hi = df_range
    df_hi = min(n, rank) - 1 if df_hi is None else df_hi
    df_lo = min(df_lo, 0.5 * rank)
    df_hi = min(max(df_hi, df_lo), 0.999 * rank)
    lam_max = _df_to_lambda(d, n, df_lo)
    if n_lambdas == 1:
        return np.array([lam_max])
    u_lo, u_hi = np.log(df_lo / (rank - df_lo)), np.log(df_hi / (rank - df_hi))
    step = (u_hi - u_lo) / (n_lambdas - 1)
    extra = widen_points(n_lambdas)
    lo_pts, hi_pts = int(widen[0]) * extra, int(widen[1]) * extra
    u = u_lo + step * np.arange(-lo_pts, n_lambdas + hi_pts)
    u[lo_pts + n_lambdas - 1] = u_hi   # the ends exactly where asked
    u[lo_pts] = u_lo
    df = rank / (1.0 + np.exp(-u))
    floor = min_lambda_ratio * d.max() / n
    lambdas = np.array([max(_df_to_lambda(d, n, x), floor) for x in df])
    keep = np.concatenate([[True], np.diff(lambdas) < -1e-12 * lambdas[:-1]])   # drop points the floor merged
    return lambdas[keep]


def fit_l2_path(K, y, loss, lambdas, *, fit_intercept: bool = True, eigen: KernelEigen | None = None,
                psd_tol: float = 1e-8, on_psd_fail: str = "raise", solver_options: dict | None = None
                ) -> L2Path:
    """Fit the whole λ path on the training Gram K (n, n).

    Squared loss: closed form from one eigendecomposition, with exact LOO and GCV.
    Other losses: see pipeline.models.ridge.other_losses (Newton in eigen-coordinates for
    smooth losses, cvxpy for non-smooth ones), warm-started along the path.
    The PSD check runs on the eigenvalues (raise / warn / ignore per on_psd_fail).
    """
    y = np.asarray(y, dtype=float).ravel()
    lambdas = np.asarray(lambdas, dtype=float).ravel()
    if np.any(lambdas <= 0):
        raise ValueError("every λ must be positive (an unpenalised fit has no unique optimum)")
    loss = get_loss(loss)
    # the squared loss's closed form decomposes the weighted Gram; other losses carry their weights in the
    # loss itself and use the plain centred Gram (1ᵀc = 0 holds for the weighted optimum too)
    factors = loss.row_factors if loss.quadratic else None
    eig = eigen if eigen is not None else kernel_eigen(K, fit_intercept, psd_tol, on_psd_fail, factors)
    if eig.n != y.shape[0]:
        raise ValueError(f"Gram has {eig.n} rows but y has {y.shape[0]}")
    if loss.quadratic:
        return squared_path(eig, y, lambdas)
    from pipeline.models.ridge.other_losses import general_path  # cvxpy import only when needed
    return general_path(eig, y, loss, lambdas, **(solver_options or {}))


def fit_l2_primal_path(Phi, y, lambdas, fit_intercept: bool = True) -> tuple[L2Path, np.ndarray]:
    """Squared-loss path through the explicit features Φ (n, p), cheaper when p < n.

    Gives the same path as fit_l2_path(ΦΦᵀ, …); also returns primal weights (L, p).
    """
    return squared_primal_path(Phi, y, lambdas, fit_intercept)


def predict_path(path: L2Path, K_test_train, block_rows: int = PREDICT_BLOCK_ROWS) -> np.ndarray:
    """Decision values (L, m) for the test rows of the cross Gram K_test_train (m, n)."""
    Kt = np.asarray(K_test_train, dtype=float)
    if Kt.ndim != 2 or Kt.shape[1] != path.dual_coef.shape[1]:
        raise ValueError(f"cross Gram must have {path.dual_coef.shape[1]} columns, got {Kt.shape}")
    out = np.empty((path.dual_coef.shape[0], Kt.shape[0]))
    for start in range(0, Kt.shape[0], block_rows):
        out[:, start:start + block_rows] = path.dual_coef @ Kt[start:start + block_rows].T
    out += path.intercept[:, None]
    return out


def predict_rows(path: L2Path, X_test, X_train, kernel: str, block_rows: int = PREDICT_BLOCK_ROWS,
                 **kernel_params) -> np.ndarray:
    """Decision values (L, m) computing the cross Gram block by block: memory block × n."""
    from pipeline.kernels import gram, resolve_params
    params = resolve_params(X_train, kernel, **kernel_params)
    X_test = np.asarray(X_test, dtype=float)
    out = np.empty((path.dual_coef.shape[0], X_test.shape[0]))
    for start in range(0, X_test.shape[0], block_rows):
        block = gram(X_test[start:start + block_rows], X_train, kernel, **params)
        out[:, start:start + block_rows] = path.dual_coef @ block.T
    out += path.intercept[:, None]
    return out


def primal_weights(path: L2Path, Phi_train) -> np.ndarray:
    """w = Φᵀc (L, p) for an explicit-feature kernel K = ΦΦᵀ; f = b + Φw."""
    return path.dual_coef @ np.asarray(Phi_train, dtype=float)


def kfold_errors(K, y, loss, lambdas, folds) -> np.ndarray:
    """Held-out mean loss, one row per (train_idx, val_idx) fold, one column per λ.

    Each fold fits on its own sub-Gram K[train, train] (one decomposition per fold)
    and predicts with K[val, train]; the table feeds pipeline.selection directly.
    """
    K = np.asarray(K, dtype=float)
    y = np.asarray(y, dtype=float)
    lo = get_loss(loss)
    table = np.empty((len(folds), len(lambdas)))
    for i, (tr, va) in enumerate(folds):
        path = fit_l2_path(K[np.ix_(tr, tr)], y[tr], lo, lambdas, on_psd_fail="warn")
        pred = predict_path(path, K[np.ix_(va, tr)])
        table[i] = [np.mean(lo.value(y[va], f)) if ok else np.nan
                    for f, ok in zip(pred, path.converged)]
    return table
