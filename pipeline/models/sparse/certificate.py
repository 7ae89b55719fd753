"""Optimality of an L1 / elastic-net fit: primal value, a feasible dual point, the
duality gap, the KKT violation, and the polish that turns near-zeros into exact zeros.

Problem: min_{b0, b} P = (1/n) sum loss(y_i, b0 + x_i'b) + lam*(alpha*|b|_1 + (1-alpha)/2*|b|^2).
Fenchel dual over u (per-sample, in the domain of loss*, sum u = 0):
    D(u) = -(1/n) sum loss*(y_i, u_i) - lam * sum_j h(-x_j'u / (n lam)),
with h the conjugate of alpha|t| + (1-alpha)/2 t^2: the indicator of |v| <= 1 at alpha = 1,
(|v| - alpha)_+^2 / (2(1-alpha)) otherwise. A point built from the residual and scaled to
feasibility gives the gap (Fercoq, Gramfort & Salmon 2015, ICML; Ndiaye et al. 2017, JMLR 18).
"""
from __future__ import annotations

import numpy as np

from pipeline.losses import Loss
from pipeline.matrices import abs_column_sums


def primal_value(X, y, coef, intercept, lam, alpha, loss: Loss) -> float:
    f = X @ coef + intercept
    pen = alpha * np.abs(coef).sum() + 0.5 * (1 - alpha) * float(coef @ coef)
    return float(np.mean(loss.value(y, f)) + lam * pen)


def _balance(u: np.ndarray) -> np.ndarray:
    """Make sum(u) = 0 by shrinking the larger of the positive and negative parts.

    Shrinking towards 0 keeps u inside every loss-conjugate domain used here
    (intervals that contain 0).
    """
    pos, neg = np.maximum(u, 0), np.maximum(-u, 0)
    sp_, sn = pos.sum(), neg.sum()
    if sp_ > sn and sp_ > 0:
        pos = pos * (sn / sp_)
    elif sn > sp_ and sn > 0:
        neg = neg * (sp_ / sn)
    return pos - neg


def dual_value(X, y, u, lam, alpha, loss: Loss) -> tuple[float, np.ndarray]:
    """Dual objective at u made feasible; returns (value, the feasible u)."""
    n = y.shape[0]
    u = _balance(np.asarray(u, float))
    xu = X.T @ u
    if alpha >= 1.0:
        top = float(np.max(np.abs(xu))) if xu.size else 0.0
        if lam > 0:
            scale = min(1.0, n * lam / top) if top > 0 else 1.0
        else:  # unpenalised: feasible only if X'u = 0 up to rounding, else no certificate
            rounding = 1e-10 * float(abs_column_sums(X).max(initial=0.0)) * float(np.abs(u).max(initial=0.0))
            scale = 1.0 if top <= rounding else 0.0
        u, xu = u * scale, xu * scale
        pen = 0.0
    else:
        v = np.abs(xu) / (n * lam)
        pen = lam * float(np.sum(np.maximum(v - alpha, 0.0) ** 2)) / (2 * (1 - alpha))
    conj = loss.conjugate(y, u)
    return float(-np.mean(conj) - pen), u


def reference_objective(y, loss: Loss) -> float:
    """The intercept-only objective (1/n) sum loss(y_i, b0*): the value of every fit at lambda >= lambda_max.

    It does not vanish unless the targets are constant, so it gives the duality gap a scale where the
    optimal objective itself is zero or near it (separable data at lambda = 0, an interpolating fit).
    """
    y = np.asarray(y, float)
    return float(np.mean(loss.value(y, np.full(y.shape[0], loss.intercept_only(y)))))


def gap_scale(primal: float, reference: float) -> float:
    """The convergence rule's denominator: max(|P|, reference) (1e-300 only for constant targets)."""
    return max(abs(primal), reference, 1e-300)


def duality_gap(X, y, coef, intercept, u, lam, alpha, loss: Loss,
                reference: float | None = None) -> tuple[float, float, float]:
    """(scaled gap, primal, dual): the absolute gap P - D over max(|P|, reference).

    A fit is converged when this is at most tol, i.e. P - D <= tol * max(|P|, reference), with reference
    the intercept-only objective (`reference_objective`, computed here when not given). Dividing by |P|
    alone calls an exact fit unconverged where the optimum is zero: on separable data at lambda = 0 the
    hinge objective is 0 up to rounding and any rounding-level gap becomes a large relative one.
    """
    p = primal_value(X, y, coef, intercept, lam, alpha, loss)
    d, _ = dual_value(X, y, u, lam, alpha, loss)
    gap = max(p - d, 0.0)
    ref = reference_objective(y, loss) if reference is None else reference
    return gap / gap_scale(p, ref), p, d


def kkt_violation(grad, coef, lam, alpha) -> float:
    """Largest violation of the optimality conditions, relative to lam*alpha.

    grad_j = x_j'u/n (absolute, not relative, when lam = 0). Zero coefficient: |grad_j| <= lam*alpha. Nonzero:
    grad_j + lam*(alpha*sign(b_j) + (1-alpha) b_j) = 0.
    """
    l1, l2 = lam * alpha, lam * (1 - alpha)
    nz = coef != 0
    out = np.maximum(np.abs(grad) - l1, 0.0)
    out[nz] = np.abs(grad[nz] + l1 * np.sign(coef[nz]) + l2 * coef[nz])
    if not out.size:
        return 0.0
    return float(out.max() / l1) if l1 > 0 else float(out.max())  # lam = 0: absolute gradient


def zero_by_optimality(coef, grad, lam, alpha, margin=1e-6) -> np.ndarray:
    """Zero every coefficient whose gradient is strictly inside the subdifferential box.

    At an optimum b_j != 0 forces |grad_j| = lam*alpha + lam*(1-alpha)|b_j| > ...; a gradient
    clearly below lam*alpha with a tiny b_j is solver noise, not support.
    """
    out = coef.copy()
    scale = max(float(np.max(np.abs(coef))), 1e-300)
    small = np.abs(coef) <= 1e-6 * scale
    out[small & (np.abs(grad) < lam * alpha * (1 - margin))] = 0.0
    out[np.abs(coef) <= 1e-13 * scale] = 0.0
    return out
