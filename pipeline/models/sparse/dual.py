"""Where the sparse path starts: the intercept-only fit's dual point and λ_max.

λ_max is the smallest λ whose L1 (or elastic-net) solution is all zero; it is read
from the loss subgradient at the intercept-only fit, so it depends on the loss only
through that subgradient.
"""
from __future__ import annotations

import numpy as np

from pipeline.losses import Loss, get_loss
from pipeline.matrices import as_features, is_sparse


def intercept_only_dual(X, y, loss: Loss) -> np.ndarray:
    """Per-sample subgradient g at the intercept-only fit with sum(g) = 0 and ||X^T g||_inf smallest.

    For smooth losses g is the derivative. Where samples sit on a kink the subgradient
    is an interval; a small LP picks the point that makes the zero solution optimal
    for the smallest lambda.
    """
    X, y = as_features(X), np.asarray(y, dtype=float)
    n = y.shape[0]
    b = loss.intercept_only(y)
    f = np.full(n, b)
    low, high = loss.subgradient_interval(y, f)
    free = np.flatnonzero(high - low > 0)
    g = low.copy()
    if free.size == 0:
        return g
    fixed = np.setdiff1d(np.arange(n), free)
    base = X[fixed].T @ g[fixed]
    Xf = X[free].T  # (p, k)
    p, k = Xf.shape
    # variables (g_free, t): minimise t, -t <= base + Xf g <= t, sum g = 0
    cost = np.r_[np.zeros(k), 1.0]
    ones = np.ones((p, 1))
    if is_sparse(Xf):   # a sparse X keeps the LP's constraint matrix sparse
        import scipy.sparse as sp
        A_ub = sp.bmat([[Xf, -ones], [-Xf, -ones]], format="csc")
    else:
        A_ub = np.block([[Xf, -ones], [-Xf, -ones]])
    b_ub = np.r_[-base, base]
    A_eq = np.r_[np.ones(k), 0.0][None, :]
    b_eq = [-g[fixed].sum()]
    bounds = [(lo, hi) for lo, hi in zip(low[free], high[free])] + [(0, None)]
    from scipy.optimize import linprog   # loaded by a fit, not by reading a config

    res = linprog(cost, A_ub=A_ub, b_ub=b_ub, A_eq=A_eq, b_eq=b_eq, bounds=bounds, method="highs")
    if res.status == 0:
        g[free] = res.x[:k]
    else:  # fall back to the midpoint, recentred: never worse than a valid bound
        g[free] = 0.5 * (low[free] + high[free])
    return g


def lambda_max(X, y, loss, alpha: float = 1.0) -> float:
    """Smallest lambda whose L1 (or elastic-net with mixing alpha) solution is all zero."""
    loss = get_loss(loss) if isinstance(loss, str) else loss
    if not 0 < alpha <= 1:
        raise ValueError(f"lambda_max needs 0 < alpha <= 1, got alpha={alpha}")
    X = as_features(X)
    g = intercept_only_dual(X, y, loss)
    return float(np.max(np.abs(X.T @ g)) / (X.shape[0] * alpha)) if X.shape[1] else 0.0
