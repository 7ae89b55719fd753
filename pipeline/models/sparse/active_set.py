"""Active-set refinement for smooth losses: exact zeros and machine-precision
coefficients on a support, decided by the optimality conditions.

On an orthant of fixed signs the L1 / elastic-net objective is smooth, so Newton
converges fast there. A step that would flip a sign stops at the first zero crossing
and that coordinate leaves the support; a zero coordinate whose gradient exceeds
lam*alpha joins it with the sign its gradient demands. This both polishes a solver's
near-zeros into exact zeros and, warm-started from the previous lambda, often solves
the next lambda without calling a solver at all.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pipeline.losses import Loss
from pipeline.losses_weighted import row_factors
from pipeline.matrices import column_means, columns


@dataclass
class Refined:
    coef: np.ndarray      # over the candidate columns
    intercept: float
    dual: np.ndarray      # loss derivative at the fit
    grad: np.ndarray      # candidate columns' X'dual/n
    ok: bool              # optimality conditions hold on every candidate column
    iterations: int


def orthant_newton(XS, y, theta, signs, lam, alpha, loss: Loss, max_iter=50):
    """Minimise the smooth objective for fixed signs from theta = (b0, b_S); no sign check."""
    n = XS.shape[0]
    A = np.column_stack([np.ones(n), XS])
    l1, l2 = lam * alpha, lam * (1 - alpha)
    reg = np.r_[0.0, np.full(signs.size, l2)]
    lin = np.r_[0.0, l1 * signs]

    def objective(t):
        return float(np.mean(loss.value(y, A @ t)) + lin @ t + 0.5 * float(reg @ (t * t)))

    fval = objective(theta)
    for _ in range(max_iter):
        f = A @ theta
        g = A.T @ loss.derivative(y, f) / n + lin + reg * theta
        if np.max(np.abs(g)) <= 1e-15 * max(1.0, l1, float(np.max(np.abs(A.T @ y))) / n):
            break
        h = loss.second_derivative(y, f)
        rows = h > 0  # Huber / squared hinge: rows on linear pieces add nothing
        Ar = A[rows]
        H = (Ar * h[rows, None]).T @ Ar / n + np.diag(reg)
        H[np.diag_indices_from(H)] += 1e-13 * max(1.0, np.trace(H) / H.shape[0])
        try:
            step = np.linalg.solve(H, g)
        except np.linalg.LinAlgError:
            step = np.linalg.lstsq(H, g, rcond=None)[0]
        t = 1.0
        while True:
            cand = theta - t * step
            fc = objective(cand)
            if fc <= fval - 1e-4 * t * float(g @ step) or t < 1e-10:
                break
            t *= 0.5
        moved = np.max(np.abs(cand - theta))
        if fc > fval:  # no descent left: at the optimum up to rounding
            break
        theta, fval = cand, fc
        if moved <= 1e-15 * max(1.0, float(np.max(np.abs(theta)))):
            break
    return theta


class GramCache:
    """Squared loss: the orthant problem is linear; keep the Gram entries already seen.

    For theta = (b0, b_S): [[1, m_S'], [m_S, X_S'CX_S/n]] theta = [mean y, X_S'Cy/n] - lin,
    with m the column means and C the row factors of a weighted loss (means then weighted: C sums to n).
    """

    def __init__(self, X, y, loss: Loss | None = None):
        self.X, self.n = X, X.shape[0]
        self.c = None if loss is None or loss.row_factors is None else row_factors(loss, self.n)
        self.means = column_means(X) if self.c is None else np.asarray(X.T @ self.c).ravel() / self.n
        self.xty = X.T @ (y if self.c is None else self.c * y) / self.n
        self.ybar = float(np.mean(y if self.c is None else self.c * y))
        self.index = np.zeros(0, int)           # columns whose Gram block is cached, in cache order
        self.position = np.full(X.shape[1], -1)  # column -> its position in the cache (-1: not cached)
        self.block = np.zeros((0, 0))           # grown by doubling; the first len(index) rows/columns are used

    def _ensure(self, S):
        new = S[self.position[S] < 0]
        if new.size == 0:
            return
        m, k = self.index.size, new.size
        if m + k > self.block.shape[0]:
            grown = np.empty((max(2 * self.block.shape[0], m + k, 16),) * 2)
            grown[:m, :m] = self.block[:m, :m]
            self.block = grown
        Xn = columns(self.X, new)
        cXn = Xn if self.c is None else Xn * self.c[:, None]
        self.block[:m, m:m + k] = self.X[:, self.index].T @ cXn / self.n
        self.block[m:m + k, :m] = self.block[:m, m:m + k].T
        self.block[m:m + k, m:m + k] = Xn.T @ cXn / self.n
        self.position[new] = np.arange(m, m + k)
        self.index = np.concatenate([self.index, new])

    def solve(self, S, signs, lam, alpha):
        self._ensure(S)
        pos = self.position[S]
        k = S.size
        H = np.empty((k + 1, k + 1))
        H[0, 0] = 1.0
        H[0, 1:] = H[1:, 0] = self.means[S]
        H[1:, 1:] = self.block[pos[:, None], pos]
        H.flat[k + 2::k + 2] += lam * (1 - alpha)     # the diagonal of H[1:, 1:]
        rhs = np.empty(k + 1)
        rhs[0] = self.ybar
        rhs[1:] = self.xty[S] - lam * alpha * signs
        try:
            return np.linalg.solve(H, rhs)
        except np.linalg.LinAlgError:
            return np.linalg.lstsq(H, rhs, rcond=None)[0]


def refine(X, y, coef, intercept, lam, alpha, loss: Loss, max_iter=300, add_per_round=10,
           tol=1e-9, gram: GramCache | None = None, candidates=None) -> Refined:
    """Active-set refinement over the columns of X, starting from (coef, intercept).

    Needs a smooth loss. ok is False if the support did not settle within max_iter. With
    `candidates` (e.g. the strong-rule set) violators are first sought among them only, and the
    optimality conditions over every column are checked once they hold there; a violator found
    outside joins the candidates: the same conditions are checked, with fewer products with all of X.
    """
    n, k = X.shape
    coef = np.asarray(coef, float).copy()
    S = np.flatnonzero(coef)
    signs = np.sign(coef[S])
    b0 = float(intercept)
    l1 = lam * alpha
    C = None
    if candidates is not None:
        mask = np.zeros(k, bool)
        mask[np.asarray(candidates, int)] = True
        mask[S] = True
        C = np.flatnonzero(mask)          # sorted, as the union of the two
    it = 0
    for it in range(1, max_iter + 1):
        theta0 = np.concatenate(([b0], coef[S]))
        if gram is not None:
            target = gram.solve(S, signs, lam, alpha)
        else:
            target = orthant_newton(columns(X, S), y, theta0, signs, lam, alpha, loss)
        flips = np.flatnonzero(np.sign(target[1:]) != signs)
        if flips.size:
            # go as far as the first sign change, and drop that coordinate
            cur, tgt = theta0[1:][flips], target[1:][flips]
            ratios = np.divide(cur, cur - tgt, out=np.zeros_like(cur), where=cur != tgt)
            gamma = float(np.clip(ratios.min(), 0.0, 1.0))
            theta = theta0 + gamma * (target - theta0)
            coef[S], b0 = theta[1:], float(theta[0])
            leave = flips[np.argmin(ratios)]
            coef[S[leave]] = 0.0
            S, signs = np.delete(S, leave), np.delete(signs, leave)
            continue
        coef[S], b0 = target[1:], float(target[0])
        dual = loss.derivative(y, X[:, S] @ coef[S] + b0)   # only the support: p can be far above |S|
        full = C is None
        if not full:   # violators among the candidates first (only their products with X)
            in_support = np.zeros(k, bool)
            in_support[S] = True
            grad_c = X[:, C].T @ dual / n
            excess_c = np.abs(grad_c) - l1 * (1 + tol)
            excess_c[in_support[C]] = -np.inf
            hit = excess_c > 0
            full = not hit.any()    # settled on the candidates: check every column
            bad, bad_excess, bad_grad = C[hit], excess_c[hit], grad_c[hit]
        if full:
            grad = X.T @ dual / n
            excess = np.abs(grad) - l1 * (1 + tol)
            excess[S] = -np.inf
            bad = np.flatnonzero(excess > 0)
            if bad.size == 0:
                return Refined(coef, b0, dual, grad, True, it)
            bad_excess, bad_grad = excess[bad], grad[bad]
            if C is not None:
                C = np.union1d(C, bad)
        pick = np.argsort(-bad_excess)[:max(add_per_round, S.size // 4)]
        S = np.concatenate([S, bad[pick]])
        signs = np.concatenate([signs, -np.sign(bad_grad[pick])])
    dual = loss.derivative(y, X @ coef + b0)
    return Refined(coef, b0, dual, X.T @ dual / n, False, it)


def polish_zeros(X, y, ref: Refined, lam, alpha, loss: Loss, tol=1e-9, gram: GramCache | None = None,
                 relative=1e-6) -> Refined:
    """Exact zeros after refinement, decided by the optimality conditions.

    At a knot of the path the entering (or leaving) coordinate is zero at the optimum, but the
    orthant solve leaves it at rounding level (1e-13 .. 1e-11). Every coordinate at most `relative`
    times the largest is dropped, the smooth problem is solved again on the remaining support, and
    the result is kept only if no sign flips and every zero coordinate satisfies |grad_j| <= lam*alpha*(1 + tol)
    (the KKT check); otherwise the refined fit is returned unchanged.
    """
    coef = ref.coef
    nz = np.flatnonzero(coef)
    if nz.size == 0 or not ref.ok:
        return ref
    tiny = np.abs(coef[nz]) <= relative * float(np.max(np.abs(coef[nz])))
    if not tiny.any():
        return ref
    S = nz[~tiny]
    signs = np.sign(coef[S])
    if gram is not None:
        target = gram.solve(S, signs, lam, alpha)
    else:
        target = orthant_newton(columns(X, S), y, np.r_[ref.intercept, coef[S]], signs, lam, alpha, loss)
    if np.any(np.sign(target[1:]) != signs):
        return ref
    out = np.zeros_like(coef)
    out[S] = target[1:]
    dual = loss.derivative(y, X @ out + target[0])
    grad = X.T @ dual / X.shape[0]
    off = np.ones(coef.size, bool)
    off[S] = False
    if np.any(np.abs(grad[off]) > lam * alpha * (1 + tol)):
        return ref
    return Refined(out, float(target[0]), dual, grad, True, ref.iterations + 1)
