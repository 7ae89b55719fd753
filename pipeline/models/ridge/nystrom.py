"""Large-n route: Nyström low rank (Williams & Seeger 2001, NIPS) for the squared loss.

m landmark rows Z, W = K(Z, Z) = VΛVᵀ, features Φ(x) = K(x, Z) V Λ^{-1/2} so that
ΦΦᵀ = K(X, Z) W⁺ K(Z, X) ≈ K. The ridge path is then solved in the m-dimensional
feature space from one m×m eigendecomposition of the centred ΦᵀΦ, in two passes over
row blocks: O(nm²) time and O(block·m + m²) memory — Φ (n × m) is never held.
LOO and GCV are exact *for the Nyström model* (hat diagonal from the same blocks).
The model is f(x) = b + Σₖ aₖ k(zₖ, x) over the landmarks.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from pipeline.kernels import gram, resolve_params
from pipeline.losses import get_loss
from pipeline.models.ridge.result import L2Path
from pipeline.models.ridge.closed_form import loo_gcv_stats

BLOCK_ROWS = 4096
RANK_TOL = 1e-10


@dataclass(frozen=True)
class NystromPath:
    path: L2Path                 # dual_coef (L, m) over the landmarks
    landmarks: np.ndarray        # (m, p)
    kernel: str
    kernel_params: dict = field(default_factory=dict)

    def predict(self, X, block_rows: int = BLOCK_ROWS) -> np.ndarray:
        """Decision values (L, n_test), cross Gram computed block by block."""
        from pipeline.models.ridge.path import predict_rows
        return predict_rows(self.path, X, self.landmarks, self.kernel, block_rows,
                            **self.kernel_params)


def _feature_map(Z, kernel, params):
    lam, V = scipy.linalg.eigh(gram(Z, kernel=kernel, **params), check_finite=False)
    keep = lam > RANK_TOL * max(lam.max(), 1e-300)
    return V[:, keep] / np.sqrt(lam[keep])[None, :]          # T: Φ = K(x, Z) T


def _landmarks(X, kernel, kernel_params, n_landmarks, seed):
    params = resolve_params(X, kernel, **kernel_params)
    rng = np.random.default_rng(seed)
    Z = X[np.sort(rng.choice(X.shape[0], size=min(n_landmarks, X.shape[0]), replace=False))]
    return params, Z, _feature_map(Z, kernel, params)


def _blocks(X, Z, T, kernel, params, block_rows):
    """Row blocks (start, Φ block) of the Nyström features; Φ is never held whole."""
    def blocks():
        for s in range(0, X.shape[0], block_rows):
            yield s, gram(X[s:s + block_rows], Z, kernel, **params) @ T
    return blocks


def _centred_spectrum(blocks, y, n, k):
    """Pass 1: eigenvalues / vectors of the centred ΦᵀΦ, the feature means and Φᵀy."""
    S, total, cross = np.zeros((k, k)), np.zeros(k), np.zeros(k)
    for s, Phi in blocks():                      # pass 1: ΦᵀΦ, Φᵀ1, Φᵀy
        S += Phi.T @ Phi
        total += Phi.sum(axis=0)
        cross += Phi.T @ y[s:s + len(Phi)]
    mean = total / n
    e, Q = scipy.linalg.eigh(S - n * np.outer(mean, mean), check_finite=False)
    np.maximum(e, 0.0, out=e)
    return e, Q, mean, cross


def nystrom_spectrum(X, kernel: str, n_landmarks: int = 1000, seed=0, block_rows: int = BLOCK_ROWS,
                     **kernel_params) -> np.ndarray:
    """Eigenvalues of the centred Nyström Gram (the nonzero ones): the λ grid of the low-rank route."""
    X = np.asarray(X, dtype=float)
    params, Z, T = _landmarks(X, kernel, kernel_params, n_landmarks, seed)
    blocks = _blocks(X, Z, T, kernel, params, block_rows)
    return _centred_spectrum(blocks, np.zeros(X.shape[0]), X.shape[0], T.shape[1])[0]


def fit_nystrom_path(X, y, kernel: str, lambdas, n_landmarks: int = 1000, seed=0,
                     block_rows: int = BLOCK_ROWS, loss="squared", solver_options=None,
                     **kernel_params) -> NystromPath:
    """Path on m seeded landmarks; kernel defaults resolved on all of X.

    Squared loss: the two-pass closed form below. Other losses: the same solvers as
    the exact route (other_losses) on the centred explicit features Φ̃ (n × m held whole,
    O(nm²) per Newton step); no LOO/GCV then.
    """
    start = time.perf_counter()
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    lambdas = np.asarray(lambdas, dtype=float)
    n = X.shape[0]
    params, Z, T = _landmarks(X, kernel, kernel_params, n_landmarks, seed)
    if not get_loss(loss).quadratic or get_loss(loss).row_factors is not None:   # weighted: the general solver
        return _general_nystrom(X, y, kernel, lambdas, loss, params, Z, T, block_rows,
                                solver_options or {}, start)
    blocks = _blocks(X, Z, T, kernel, params, block_rows)
    e, Q, mean, cross = _centred_spectrum(blocks, y, n, T.shape[1])
    ybar = y.mean()
    nl = n * lambdas
    inv = 1.0 / (e[:, None] + nl[None, :])                   # (k, L)
    W = Q @ ((Q.T @ (cross - n * mean * ybar))[:, None] * inv)   # primal weights (k, L)
    resid = np.empty((n, len(lambdas)))
    hat = np.empty((n, len(lambdas)))
    for s, Phi in blocks():                      # pass 2: residuals and hat diagonal
        Phi -= mean
        resid[s:s + len(Phi)] = (y[s:s + len(Phi)] - ybar)[:, None] - Phi @ W
        P = Phi @ Q
        hat[s:s + len(Phi)] = (P * P) @ inv + 1.0 / n
    df = (e[:, None] * inv).sum(axis=0)
    loo, gcv, ok, status = loo_gcv_stats(resid, hat, df + 1.0, np.isfinite(W).all(axis=0))
    landmark_coef = (T @ W).T                                 # (L, m)
    path = L2Path(lambdas=lambdas, dual_coef=landmark_coef, intercept=ybar - mean @ W,
                  effective_df=df, loo_error=loo, gcv=gcv, converged=ok, status=status,
                  fit_seconds=time.perf_counter() - start, loss="squared",
                  df_kind=f"trace of the Nyström hat matrix minus the intercept (m = {len(Z)})")
    return NystromPath(path, Z, kernel, params)


def _general_nystrom(X, y, kernel, lambdas, loss, params, Z, T, block_rows, options, start):
    from pipeline.models.ridge.other_losses import solve_in_basis
    Phi = np.vstack([gram(X[s:s + block_rows], Z, kernel, **params) @ T
                     for s in range(0, X.shape[0], block_rows)])
    mean = Phi.mean(axis=0)
    Phi -= mean
    b, W, df, ok, status, df_kind = solve_in_basis(Phi, y, loss, lambdas, True, **options)
    # f = b + (Φ − φ̄)w = (b − φ̄ᵀw) + K(x, Z)(T w)
    path = L2Path(lambdas=lambdas, dual_coef=W @ T.T, intercept=b - W @ mean, effective_df=df,
                  loo_error=None, gcv=None, converged=ok, status=status,
                  fit_seconds=time.perf_counter() - start, loss=get_loss(loss).name,
                  df_kind=f"{df_kind} (Nyström, m = {len(Z)})")
    return NystromPath(path, Z, kernel, params)


def nystrom_gap(X, y, kernel: str, lambdas, n_landmarks: int = 1000, subsample: int = 2000,
                seed=0, **kernel_params) -> dict:
    """How far the Nyström LOO curve is from the exact one, on a seeded row subsample.

    Kernel defaults are resolved on all of X, so both routes use the same kernel.
    Returns the best LOO error of each route and the relative gap of the minima.
    """
    from pipeline.models.ridge.path import fit_l2_path
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    params = resolve_params(X, kernel, **kernel_params)
    rng = np.random.default_rng(np.random.SeedSequence(seed).spawn(1)[0])
    rows = np.sort(rng.choice(X.shape[0], size=min(subsample, X.shape[0]), replace=False))
    Xs, ys = X[rows], y[rows]
    exact = fit_l2_path(gram(Xs, kernel=kernel, **params), ys, "squared", lambdas)
    approx = fit_nystrom_path(Xs, ys, kernel, lambdas, min(n_landmarks, len(rows)), seed,
                              **params).path
    best_exact, best_approx = float(np.nanmin(exact.loo_error)), float(np.nanmin(approx.loo_error))
    return {"subsample": len(rows), "n_landmarks": min(n_landmarks, len(rows)),
            "exact_best_loo": best_exact, "nystrom_best_loo": best_approx,
            "relative_gap": (best_approx - best_exact) / best_exact,
            "max_relative_gap_on_grid": float(np.nanmax(np.abs(approx.loo_error - exact.loo_error)
                                                        / exact.loo_error))}
