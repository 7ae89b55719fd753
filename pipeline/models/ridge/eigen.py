"""One eigendecomposition of the (centred) training Gram, shared by every λ and loss.

With an unpenalised intercept b the optimum of
    (1/n) Σ loss(yᵢ, b + (Kc)ᵢ) + (λ/2) cᵀKc
has 1ᵀc = 0 (stationarity in b together with c = −loss'/(nλ)). On that subspace
Kc = HKHc + const with H = I − 11ᵀ/n, so every loss can be solved with the centred
Gram K̃ = HKH and the intercept moved back afterwards: b = b̃ − k̄ᵀc, where k̄ is the
column mean of K.

Row weights (factors cᵢ, Σc = n) for the squared loss's closed form: with H_c = I − 1cᵀ/n and
A = diag(√c) the decomposition is of A H_c K H_cᵀ A (the weighted analogue of W^{1/2} K W^{1/2}),
whose eigenvalues are those of the Gram of the rows repeated by integer weights (scaled by n/Σw), and
k̄ is the weighted column mean Kc/n.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from pipeline.kernels import PSDReport, psd_from_eigenvalues


@dataclass(frozen=True)
class KernelEigen:
    eigenvalues: np.ndarray    # (n,) ascending, of K̃ (or K when not centred), clipped at 0
    eigenvectors: np.ndarray   # (n, n) orthonormal columns
    column_mean: np.ndarray    # (n,) k̄ = column mean of K; zeros when not centred
    centred: bool
    psd: PSDReport
    factors: np.ndarray | None = None   # row factors cᵢ of a weighted decomposition (see the module text)

    @property
    def n(self) -> int:
        return self.eigenvectors.shape[0]

    def intercept_shift(self, dual_coef: np.ndarray) -> np.ndarray:
        """k̄ᵀc for each row of dual_coef (L, n): the centred → raw intercept move."""
        return dual_coef @ self.column_mean


def kernel_eigen(K, fit_intercept: bool = True, psd_tol: float = 1e-8,
                 on_psd_fail: str = "raise", factors=None) -> KernelEigen:
    """Eigendecompose HKH (or K); the eigenvalues also give the PSD check for free.

    With an intercept the check is of K on the subspace orthogonal to the constant
    vector, which is the part the fit uses. With row `factors` (Σc = n): A H_c K H_cᵀ A.
    """
    K = np.asarray(K, dtype=float)
    n = K.shape[0]
    if K.ndim != 2 or K.shape[1] != n:
        raise ValueError(f"training Gram must be square, got shape {K.shape}")
    scale = float(np.abs(K).max()) or 1.0
    asym = float(np.abs(K - K.T).max()) / scale
    c = None if factors is None else np.asarray(factors, dtype=float)
    if fit_intercept:
        kbar = K.mean(axis=0) if c is None else K @ c / c.sum()
        Kc = K - kbar[None, :]
        Kc -= kbar[:, None]
        Kc += kbar.mean() if c is None else c @ kbar / c.sum()
    else:
        kbar = np.zeros(n)
        Kc = K.copy()
    if c is not None:
        root = np.sqrt(c)
        Kc *= root[:, None]
        Kc *= root[None, :]
    d, U = scipy.linalg.eigh(Kc, overwrite_a=True, check_finite=False, driver="evr")
    report = psd_from_eigenvalues(d, psd_tol, on_psd_fail, asym)
    np.maximum(d, 0.0, out=d)  # tiny negative round-off would otherwise flip signs
    return KernelEigen(d, U, kbar, fit_intercept, report, c)


def effective_df(eigenvalues: np.ndarray, lambdas: np.ndarray, n: int) -> np.ndarray:
    """df(λ) = Σ dⱼ / (dⱼ + nλ), the trace of the smoother without its intercept part."""
    d = np.asarray(eigenvalues)[:, None]
    return (d / (d + n * np.asarray(lambdas)[None, :])).sum(axis=0)
