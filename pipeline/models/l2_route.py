"""Exact representer route or low-rank route, chosen by training size.

The exact route costs O(n³) time and O(n²) memory; past ``max_exact_n`` rows (a
config value) the family switches to Nyström with m landmarks, and says so in
``note`` for the report.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from pipeline.kernels import gram, resolve_params
from pipeline.models.l2 import L2Path, fit_l2_path, predict_rows
from pipeline.models.l2_nystrom import fit_nystrom_path


@dataclass(frozen=True)
class RowsFit:
    path: L2Path
    route: str                   # "exact" or "nystrom"
    note: str
    basis_rows: np.ndarray       # training rows (exact) or landmarks (nystrom)
    kernel: str
    kernel_params: dict = field(default_factory=dict)

    def predict(self, X) -> np.ndarray:
        return predict_rows(self.path, X, self.basis_rows, self.kernel, **self.kernel_params)


def fit_l2_rows(X_train, y, loss, lambdas, kernel: str = "rbf", max_exact_n: int = 10_000,
                n_landmarks: int = 1000, seed=0, solver_options=None, **kernel_params) -> RowsFit:
    X_train = np.asarray(X_train, dtype=float)
    n = X_train.shape[0]
    params = resolve_params(X_train, kernel, **kernel_params)
    if n <= max_exact_n:
        path = fit_l2_path(gram(X_train, kernel=kernel, **params), y, loss, lambdas,
                           solver_options=solver_options)
        return RowsFit(path, "exact", "", X_train, kernel, params)
    ny = fit_nystrom_path(X_train, y, kernel, lambdas, n_landmarks, seed, loss=loss,
                          solver_options=solver_options, **params)
    note = (f"n = {n} training rows exceeds the exact-route limit {max_exact_n}: fitted by "
            f"Nyström with m = {len(ny.landmarks)} seeded landmarks (Williams & Seeger 2001), "
            f"O(n m²) instead of O(n³).")
    return RowsFit(ny.path, "nystrom", note, ny.landmarks, kernel, params)
