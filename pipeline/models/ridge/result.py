"""The result of fitting the representer (L2) family along a λ path."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class L2Path:
    """f_λ(x) = intercept[λ] + Σⱼ dual_coef[λ, j] k(x_j, x), one row per λ.

    ``effective_df`` excludes the intercept (it is Σ dⱼ/(dⱼ + nλ) for the squared
    loss; ``df_kind`` names the analogue used for other losses). ``loo_error`` and
    ``gcv`` are mean squared leave-one-out residual and generalised CV, squared loss
    only. The leave-one-out refit keeps the same absolute penalty nλ (ridge α), the
    usual definition for which the hat-diagonal shortcut is exact.
    """
    lambdas: np.ndarray
    dual_coef: np.ndarray
    intercept: np.ndarray
    effective_df: np.ndarray
    loo_error: np.ndarray | None
    gcv: np.ndarray | None
    converged: np.ndarray
    status: tuple[str, ...]
    fit_seconds: float
    loss: str = "squared"
    df_kind: str = "trace of the hat matrix minus the intercept"
    psd_ratio: float | None = None   # smallest / largest eigenvalue of the Gram used

    @property
    def n_lambdas(self) -> int:
        return len(self.lambdas)
