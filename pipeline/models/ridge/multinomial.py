"""Multinomial logistic regression in representer form with a squared RKHS penalty, along a λ path.

Problem, for codes y_i in 0..K-1 and training Gram K (n × n):
    minimise (1/n) Σ_i [logsumexp_k f_ik − f_i,y_i] + (λ/2) Σ_k c_kᵀ K c_k,   f_k = K c_k + b_k.

ONE eigendecomposition of the (centred, with an intercept) Gram serves every class and λ (eigen.kernel_eigen).
With K̃ = U D Uᵀ, keep the r directions with d_j > rank_tol·d_max (the null space carries neither fit nor
penalty), write G = U_r D_r^{1/2} and β_k = D_r^{1/2} U_rᵀ c_k: then K̃c_k = Gβ_k and c_kᵀK̃c_k = ||β_k||², so
the problem is a ridge-penalised multinomial regression in (r + 1)K variables. It is solved by damped Newton
(Armijo backtracking), warm-started along the decreasing path. The common shift of the K intercepts changes no
probability; its Hessian direction is filled with a unit curvature (the gradient along it is zero), which keeps
the intercepts at their starting sum, 0. The raw intercept is moved back as in eigen.py: b − k̄ᵀc.

converged: the largest absolute entry of the objective's gradient in (b, β) is at most `tol`.
Effective degrees of freedom: the trace of the linearised hat matrix at the optimum, summed over the classes,
tr[(H + R)⁺H] with H the cross-entropy Hessian in (b, β) and R the penalty's, minus the K − 1 identifiable
intercept directions (the usual penalised-likelihood analogue, as for the binary smooth losses in
other_losses.py; it tends to (K − 1)·r as λ → 0).
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
from scipy.special import log_softmax

from pipeline.models.ridge.eigen import kernel_eigen

RANK_TOL = 1e-10
DF_KIND = ("trace of the linearised hat matrix at the optimum summed over classes, "
           "minus the K-1 identifiable intercepts")


@dataclass(frozen=True)
class MultinomialL2Path:
    """f_k(x) = intercept[λ, k] + Σ_j dual_coef[λ, j, k] k(x_j, x)."""
    lambdas: np.ndarray        # (L,) decreasing
    dual_coef: np.ndarray      # (L, n, K)
    intercept: np.ndarray      # (L, K)
    effective_df: np.ndarray   # (L,)
    df_kind: str
    converged: np.ndarray      # (L,) bool, gradient-norm test
    status: tuple[str, ...]
    fit_seconds: float
    objective: np.ndarray = field(default_factory=lambda: np.zeros(0))       # (L,)
    gradient_norm: np.ndarray = field(default_factory=lambda: np.zeros(0))   # (L,) max |gradient|
    rank: int = 0              # eigen-directions kept


def _one_hot(codes, n_classes, n):
    codes = np.asarray(codes).ravel()
    if codes.shape[0] != n:
        raise ValueError(f"need {n} class codes, got {codes.shape[0]}")
    if n_classes < 2 or not np.all(np.isin(codes, np.arange(n_classes))):
        raise ValueError(f"codes must be integers 0..{n_classes - 1}")
    Y = np.zeros((n, n_classes))
    Y[np.arange(n), codes.astype(int)] = 1.0
    if np.any(Y.sum(axis=0) == 0):
        raise ValueError(f"every class needs a training row; class codes without one: "
                         f"{np.flatnonzero(Y.sum(axis=0) == 0).tolist()}")
    return Y


class _Problem:
    """(1/n) Σ CE(b + Gβ) + (λ/2)||β||² in θ = (b_0, β_0, b_1, β_1, ...) (b omitted without intercept)."""

    def __init__(self, G, Y, with_intercept):
        self.n, self.K = Y.shape
        self.A = np.hstack([np.ones((self.n, 1)), G]) if with_intercept else G
        self.q = self.A.shape[1]
        self.Y, self.with_intercept = Y, with_intercept
        pen = np.ones(self.q)
        if with_intercept:
            pen[0] = 0.0
        self.pen = np.tile(pen, self.K)
        self.intercepts = np.flatnonzero(self.pen == 0)

    def scores(self, theta):
        return self.A @ theta.reshape(self.K, self.q).T

    def value(self, theta, lam):
        logp = log_softmax(self.scores(theta), axis=1)
        return float(-np.sum(self.Y * logp) / self.n + 0.5 * lam * np.sum(self.pen * theta * theta)), logp

    def gradient(self, P, theta, lam):
        return ((self.A.T @ (P - self.Y)) / self.n).T.ravel() + lam * self.pen * theta

    def loss_hessian(self, P):
        K, q = self.K, self.q
        H = np.zeros((K * q, K * q))
        for k in range(K):
            for m in range(k, K):
                blk = (self.A.T * (P[:, k] * ((k == m) - P[:, m]) / self.n)) @ self.A
                H[k * q:(k + 1) * q, m * q:(m + 1) * q] = blk
                H[m * q:(m + 1) * q, k * q:(k + 1) * q] = blk.T
        return H

    def system(self, H, lam):
        """M = H + R (+ unit curvature on the common intercept shift), Cholesky-factored; also diag(M) − H."""
        M = H + np.diag(lam * self.pen)
        if self.with_intercept:
            M[np.ix_(self.intercepts, self.intercepts)] += 1.0 / self.K
        M[np.diag_indices_from(M)] += 1e-13 * max(1.0, float(np.trace(M)) / M.shape[0])
        return scipy.linalg.cho_factor(M, check_finite=False), M - H

    def df(self, chol, extra):
        """tr[(H + R)⁺H] − (K − 1), from the inverse of M = H + extra (extra = R, the intercept-shift fill and
        the rounding ridge): tr[M⁻¹H] = q − tr[M⁻¹ extra]. The intercept-shift direction is in the null
        space of H, so what it adds is removed with it."""
        inv, info = scipy.linalg.lapack.dpotri(chol[0], lower=chol[1])
        if info != 0:
            raise np.linalg.LinAlgError(f"dpotri failed with info={info}")
        inv = np.triu(inv) + np.triu(inv, 1).T if not chol[1] else np.tril(inv) + np.tril(inv, -1).T
        trace = inv.shape[0] - float(np.sum(inv * extra))
        return trace - (self.K - 1 if self.with_intercept else 0)


def _newton(prob: _Problem, theta, lam, tol, max_iter, H=None):
    """Damped Newton that keeps a Hessian while it works; returns (θ, objective, max |gradient|, df,
    iterations, converged, the Hessian at θ).

    The Hessian (from the previous λ's optimum, or fresh) is rebuilt only when the gradient fell by less than
    a factor 4 over the last step or a step found no descent; the convergence test reads the exact gradient,
    and the degrees of freedom always use the Hessian at the returned θ.
    """
    obj, logp = prob.value(theta, lam)
    P = np.exp(logp)
    fresh = H is None
    H = prob.loss_hessian(P) if H is None else H
    chol, extra = prob.system(H, lam)
    last = np.inf
    for it in range(max_iter + 1):
        grad = prob.gradient(P, theta, lam)
        gnorm = float(np.max(np.abs(grad)))
        done = gnorm <= tol or it == max_iter
        if not fresh and (done or gnorm > 0.25 * last):
            H = prob.loss_hessian(P)
            chol, extra = prob.system(H, lam)
            fresh = True
        if done:
            return theta, obj, gnorm, prob.df(chol, extra), it, gnorm <= tol, H
        step = scipy.linalg.cho_solve(chol, grad, check_finite=False)
        decrement = float(grad @ step)
        t = 1.0
        while True:
            cand = theta - t * step
            new_obj, new_logp = prob.value(cand, lam)
            if new_obj <= obj - 0.25 * t * decrement or t < 1e-12:
                break
            t *= 0.5
        if new_obj > obj:      # no descent left at rounding level
            return theta, obj, gnorm, prob.df(chol, extra), it, gnorm <= tol, H
        theta, obj, logp, last, fresh = cand, new_obj, new_logp, gnorm, False
        P = np.exp(logp)
    raise AssertionError("unreachable")


def fit_multinomial_kernel_path(gram_matrix, codes, n_classes, lambdas, fit_intercept=True, *,
                                tol=1e-9, max_iter=100, rank_tol=RANK_TOL) -> MultinomialL2Path:
    """Multinomial kernel logistic path over `lambdas` (sorted decreasing), one eigendecomposition for all.

    A failure at one λ is recorded in `status` (coefficients NaN there), never raised.
    """
    start = time.perf_counter()
    lambdas = np.sort(np.asarray(lambdas, dtype=float).ravel())[::-1]
    if lambdas.size and lambdas[-1] <= 0:
        raise ValueError("the multinomial kernel path needs every λ > 0")
    eig = kernel_eigen(gram_matrix, fit_intercept=fit_intercept)
    n = eig.n
    Y = _one_hot(codes, n_classes, n)
    d = eig.eigenvalues
    keep = d > rank_tol * max(float(d.max()), 1e-300)
    sq = np.sqrt(d[keep])
    U = eig.eigenvectors[:, keep]
    prob = _Problem(U * sq[None, :], Y, fit_intercept)
    q, K, L = prob.q, n_classes, lambdas.size
    theta0 = np.zeros(K * q)
    if fit_intercept:
        logp = np.log(Y.mean(axis=0))
        theta0[prob.intercepts] = logp - logp.mean()
    theta = theta0.copy()
    C, icpt = np.full((L, n, K), np.nan), np.full((L, K), np.nan)
    df, objs, gnorms = np.full(L, np.nan), np.full(L, np.nan), np.full(L, np.nan)
    ok, status, H = np.zeros(L, bool), [], None
    for i, lam in enumerate(lambdas):
        try:
            theta, objs[i], gnorms[i], df[i], it, ok[i], H = _newton(prob, theta, lam, tol, max_iter, H)
            status.append(f"{'optimal' if ok[i] else 'not converged'} (Newton, {it} iterations, "
                          f"{int(keep.sum())} directions)")
        except (np.linalg.LinAlgError, ValueError, FloatingPointError) as exc:
            status.append(f"failed: {type(exc).__name__}: {exc}")
            theta, H = theta0.copy(), None
            continue
        T = theta.reshape(K, q)
        b, beta = (T[:, 0], T[:, 1:]) if fit_intercept else (np.zeros(K), T)
        Ck = (beta / sq[None, :]) @ U.T                # c_k = U_r D_r^{-1/2} β_k, one row per class
        if eig.centred:
            Ck -= Ck.mean(axis=1, keepdims=True)       # exact c ⟂ 1 (see eigen.py)
        C[i] = Ck.T
        icpt[i] = b - Ck @ eig.column_mean
    return MultinomialL2Path(lambdas=lambdas, dual_coef=C, intercept=icpt, effective_df=df, df_kind=DF_KIND,
                             converged=ok, status=tuple(status), fit_seconds=time.perf_counter() - start,
                             objective=objs, gradient_norm=gnorms, rank=int(keep.sum()))


def predict_multinomial_kernel(path: MultinomialL2Path, cross_gram) -> np.ndarray:
    """(L, m, K) class scores; cross_gram is k(new rows, training rows), shape (m, n)."""
    return np.einsum("mn,lnk->lmk", np.asarray(cross_gram, float), path.dual_coef) + path.intercept[:, None, :]
