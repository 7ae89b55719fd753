"""Closed-form squared-loss (kernel ridge) path: all λ from one decomposition.

Objective (1/n) Σ ½(yᵢ − fᵢ)² + (λ/2) cᵀKc. With K̃ = UDUᵀ and a = Uᵀ(y − ȳ):
    c(λ) = U diag(1/(d + nλ)) a,   fitted = ȳ + U diag(d/(d + nλ)) a,
    residual = y − fitted = nλ c,  hat diagonal Sᵢᵢ = 1/n + Σⱼ Uᵢⱼ² dⱼ/(dⱼ + nλ).
Leave-one-out residuals are rᵢ/(1 − Sᵢᵢ) and GCV = mean(r²)/(1 − tr S/n)²
(Golub, Heath & Wahba 1979, Technometrics 21(2)), at O(n²) per λ. Here S includes the mean, so
tr S = df + 1 with an intercept. The classical choice (`classical_gcv`: GHW's V(λ) on the centred
problem, as MASS lm.ridge computes it; `classical_gcv_from_intercept_gcv`) counts df alone: mean(r²)/(1 − df/n)².
"""
from __future__ import annotations

import time

import numpy as np
import scipy.linalg

from pipeline.models.ridge.eigen import KernelEigen
from pipeline.models.ridge.result import L2Path


def loo_gcv_stats(resid: np.ndarray, hat_diag: np.ndarray, trace: np.ndarray, finite_coef, factors=None):
    """Mean squared LOO residual rᵢ/(1 − Sᵢᵢ), GCV, and a per-λ verdict; with row `factors` c (Σc = n) both
    means are c-weighted (GCV then is Golub, Heath & Wahba's on the rows scaled by √cᵢ)."""
    n = resid.shape[0]
    c = np.ones(n) if factors is None else np.asarray(factors, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        loo = c @ ((resid / (1.0 - hat_diag)) ** 2) / n
        gcv = (c @ resid**2 / n) / (1.0 - trace / n) ** 2
    ok = np.isfinite(loo) & np.isfinite(gcv) & np.asarray(finite_coef)
    status = tuple("optimal" if good else "numerical trouble: 1 - S_ii = 0" for good in ok)
    return loo, gcv, ok, status


def classical_gcv_from_intercept_gcv(gcv, df, n: int) -> np.ndarray:
    """mean(r²)/(1 − df/n)² from the GCV with the intercept in the trace (both share mean(r²)).

    MASS lm.ridge reports RSS/(n − df)², this divided by n (same minimiser).
    """
    df = np.asarray(df, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.asarray(gcv, float) * ((1.0 - (df + 1.0) / n) / (1.0 - df / n)) ** 2


def _finish(lambdas, C, intercept, df, resid, hat_diag, centred, start, psd_ratio=None):
    loo, gcv, ok, status = loo_gcv_stats(resid, hat_diag, df + (1.0 if centred else 0.0),
                                         np.all(np.isfinite(C), axis=0))
    return L2Path(lambdas=lambdas, dual_coef=np.ascontiguousarray(C.T), intercept=intercept,
                  effective_df=df, loo_error=loo, gcv=gcv, converged=ok, status=status,
                  fit_seconds=time.perf_counter() - start, loss="squared",
                  psd_ratio=psd_ratio)


def weighted_squared_path(eig: KernelEigen, y, lambdas) -> L2Path:
    """The closed form with row factors c (eig of A H_c K H_cᵀ A, A = diag(√c)): with α = Aγ,
    (Ã + nλI)γ = A(y − ȳ_c), b = ȳ_c − k̄_cᵀα, ȳ_c and k̄_c the c-weighted means; 1ᵀα = 0 exactly.
    Residual y − f = nλ γ/√c; the weighted smoother's diagonal Sᵢᵢ = cᵢ/n + Σⱼ Uᵢⱼ² dⱼ/(dⱼ + nλ), so the
    leave-one-out residual (row i left out, the same absolute penalty) is still rᵢ/(1 − Sᵢᵢ); the LOO error
    and GCV are c-weighted means (loo_gcv_stats)."""
    start = time.perf_counter()
    y = np.asarray(y, dtype=float)
    lambdas = np.asarray(lambdas, dtype=float)
    n, c = y.shape[0], eig.factors
    root = np.sqrt(c)
    ybar = float(c @ y / c.sum()) if eig.centred else 0.0
    U, d = eig.eigenvectors, eig.eigenvalues
    a = U.T @ (root * (y - ybar))
    nl = n * lambdas
    inv = 1.0 / (d[:, None] + nl[None, :])
    gamma = U @ (a[:, None] * inv)                  # (n, L)
    if eig.centred:   # the exact γ is orthogonal to √c (see squared_path for why it is enforced)
        gamma -= np.outer(root, root @ gamma) / c.sum()
    C = root[:, None] * gamma
    shrink = d[:, None] * inv
    hat_diag = (U * U) @ shrink + (c[:, None] / n if eig.centred else 0.0)
    df = shrink.sum(axis=0)
    loo, gcv, ok, status = loo_gcv_stats(gamma * nl[None, :] / root[:, None], hat_diag,
                                         df + (1.0 if eig.centred else 0.0), np.all(np.isfinite(C), axis=0), c)
    return L2Path(lambdas=lambdas, dual_coef=np.ascontiguousarray(C.T), intercept=ybar - eig.intercept_shift(C.T),
                  effective_df=df, loo_error=loo, gcv=gcv, converged=ok, status=status,
                  fit_seconds=time.perf_counter() - start, loss="squared", psd_ratio=eig.psd.ratio)


def squared_path(eig: KernelEigen, y, lambdas) -> L2Path:
    if eig.factors is not None:
        return weighted_squared_path(eig, y, lambdas)
    start = time.perf_counter()
    y = np.asarray(y, dtype=float)
    lambdas = np.asarray(lambdas, dtype=float)
    n = y.shape[0]
    ybar = y.mean() if eig.centred else 0.0
    U, d = eig.eigenvectors, eig.eigenvalues
    a = U.T @ (y - ybar)
    nl = n * lambdas
    inv = 1.0 / (d[:, None] + nl[None, :])          # (n, L)
    shrink = d[:, None] * inv                       # dⱼ/(dⱼ + nλ)
    C = U @ (a[:, None] * inv)                      # (n, L) dual coefficients
    if eig.centred:
        # The exact c is orthogonal to 1; near-null eigenvectors of K̃ mix with 1 in
        # floating point, and at small λ that spurious part (×1/(nλ)) would spoil Kc.
        C -= C.mean(axis=0)
    resid = C * nl[None, :]                         # y − fitted = nλ c
    hat_diag = (U * U) @ shrink
    if eig.centred:
        hat_diag += 1.0 / n
    intercept = ybar - eig.intercept_shift(C.T)
    return _finish(lambdas, C, intercept, shrink.sum(axis=0), resid, hat_diag, eig.centred,
                   start, eig.psd.ratio)


def squared_primal_path(Phi, y, lambdas, fit_intercept: bool = True) -> tuple[L2Path, np.ndarray]:
    """Same path from a thin SVD of the centred features, O(np²) when p < n.

    Returns the L2Path (dual coefficients c = residual/(nλ), the representer form
    with K = ΦΦᵀ) and the primal weights w (L, p).
    """
    start = time.perf_counter()
    Phi = np.asarray(Phi, dtype=float)
    y = np.asarray(y, dtype=float)
    lambdas = np.asarray(lambdas, dtype=float)
    n = y.shape[0]
    mean = Phi.mean(axis=0) if fit_intercept else np.zeros(Phi.shape[1])
    ybar = y.mean() if fit_intercept else 0.0
    U, s, Vt = scipy.linalg.svd(Phi - mean, full_matrices=False, check_finite=False)
    nl = n * lambdas
    d = s**2
    a = U.T @ (y - ybar)
    shrink = d[:, None] / (d[:, None] + nl[None, :])       # (r, L)
    W = Vt.T @ (a[:, None] * (s[:, None] / (d[:, None] + nl[None, :])))  # (p, L)
    fitted_c = U @ (a[:, None] * shrink)
    resid = (y - ybar)[:, None] - fitted_c
    C = resid / nl[None, :]
    hat_diag = (U * U) @ shrink
    if fit_intercept:
        hat_diag += 1.0 / n
    intercept = ybar - mean @ W
    path = _finish(lambdas, C, intercept, shrink.sum(axis=0), resid, hat_diag, fit_intercept,
                   start)
    return path, np.ascontiguousarray(W.T)
