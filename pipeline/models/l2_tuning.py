"""Choosing kernel hyperparameters (bandwidth, degree) together with λ by exact LOO.

Squared loss only: each candidate costs one eigendecomposition, after which every λ's
LOO error is exact (l2_squared). Other losses go through cross-validation in
pipeline.selection like λ does.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pipeline.kernels import gram, resolve_params
from pipeline.models.l2 import fit_l2_path, kernel_eigen, l2_lambda_grid


@dataclass(frozen=True)
class KernelChoice:
    kernel: str
    params: dict                 # resolved parameters of the winning candidate
    lam: float
    loo_error: float
    effective_df: float
    table: tuple[dict, ...]      # one row per candidate: params, best λ, its df and LOO


def choose_kernel_by_loo(X, y, kernel: str, candidates, n_lambdas: int = 30,
                         fit_intercept: bool = True) -> KernelChoice:
    """Best (kernel parameters, λ) over ``candidates`` (a list of parameter dicts)."""
    X = np.asarray(X, dtype=float)
    rows = []
    for cand in candidates:
        params = resolve_params(X, kernel, **cand)
        eig = kernel_eigen(gram(X, kernel=kernel, **params), fit_intercept, on_psd_fail="warn")
        path = fit_l2_path(None, y, "squared", l2_lambda_grid(eig, n_lambdas), eigen=eig)
        best = int(np.nanargmin(path.loo_error))
        rows.append({"params": params, "lam": float(path.lambdas[best]),
                     "loo_error": float(path.loo_error[best]),
                     "effective_df": float(path.effective_df[best])})
    if not rows:
        raise ValueError("choose_kernel_by_loo needs at least one candidate parameter set")
    win = min(rows, key=lambda r: r["loo_error"])
    return KernelChoice(kernel, win["params"], win["lam"], win["loo_error"], win["effective_df"],
                        tuple(rows))
