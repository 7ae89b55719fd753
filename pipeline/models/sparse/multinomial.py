"""Multinomial logistic regression with an L1 (or elastic-net) penalty along a λ path.

Problem, for codes y_i in 0..K-1, features Z (n × p, standardised by the caller), coefficients B (p × K)
and unpenalised intercepts b (K):
    P(B, b) = (1/n) Σ_i [logsumexp_k f_ik − f_i,y_i] + λ (α ||B||_1 + (1−α)/2 ||B||_F²),  f_i = b + Bᵀz_i.

Fenchel dual, over U (n × K) with rows u_i = q_i − e_{y_i}, q_i on the probability simplex (the conjugate of
logsumexp is the negative entropy there) and column sums ΣU = 0 (the unpenalised intercepts):
    D(U) = −(1/n) Σ_i Σ_k q_ik log q_ik − λ Σ_{j,k} h(−(ZᵀU)_jk / (nλ)),
h the conjugate of α|t| + (1−α)/2 t², as in certificate.dual_value. The dual point is built from the fitted
probabilities, q_i = p_i, then made feasible in two moves: (1) each class's rows are pulled towards their
labels by a factor s_c so that the column sums vanish exactly (s is the stationary distribution of the K-state
chain "label c → predicted class k", see `balanced_dual`); (2) at α = 1 all of U is scaled to ||ZᵀU||_∞ ≤ nλ.
Both moves keep every q_i on the simplex. The certificate is (P − D) / max(|P|, P_0), P_0 the intercept-only
objective, the same rule as the binary path (certificate.duality_gap).

Solver: working sets seeded by the sequential strong rule (Tibshirani et al. 2012, JRSS-B 74(2)) applied to
each feature's largest class gradient, warm starts along λ; on a working set, accelerated proximal gradient
(FISTA, Beck & Teboulle 2009, SIAM J. Imaging Sci. 2(1)) with gradient-based restart (O'Donoghue & Candès
2015, Found. Comput. Math. 15) and a step from Böhning's bound on the softmax Hessian (Böhning 1992,
Ann. Inst. Stat. Math. 44), alternating with Newton steps on the current signs when the gap stalls.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
from scipy.special import xlogy
from threadpoolctl import ThreadpoolController

from pipeline.models.sparse.certificate import gap_scale

FISTA_ITER = 400           # proximal-gradient iterations between Newton attempts on the current signs
_THREADPOOLS: list = []   # one controller per process (building one scans the loaded libraries)


def log_softmax(F, axis=1):
    """Row-wise log-probabilities of class scores F (n × K), stable for large scores."""
    F = F - F.max(axis=axis, keepdims=True)
    return F - np.log(np.exp(F).sum(axis=axis, keepdims=True))


@dataclass(frozen=True)
class MultinomialL1Path:
    lambdas: np.ndarray        # (L,) decreasing
    coef: np.ndarray           # (L, p, K), exact zeros off the support
    intercept: np.ndarray      # (L, K), centred to sum 0 (probabilities do not see a common shift)
    n_nonzero: np.ndarray      # (L,) features nonzero in any class
    certificate: np.ndarray    # (L,) duality gap over max(|P|, intercept-only objective)
    certificate_kind: str      # "duality_gap"
    converged: np.ndarray      # (L,) bool: certificate <= tol and status "optimal"
    status: tuple[str, ...]
    solver: str
    fit_seconds: float
    alpha: float = 1.0
    objective: np.ndarray = field(default_factory=lambda: np.zeros(0))        # (L,) primal values
    working_set_size: np.ndarray = field(default_factory=lambda: np.zeros(0, int))


def _check(Z, codes, n_classes):
    Z = np.ascontiguousarray(Z, dtype=float)
    codes = np.asarray(codes).ravel()
    if Z.ndim != 2 or codes.shape[0] != Z.shape[0]:
        raise ValueError(f"need Z (n, p) and n codes, got {Z.shape} and {codes.shape}")
    if n_classes < 2 or not np.all(np.isin(codes, np.arange(n_classes))):
        raise ValueError(f"codes must be integers 0..{n_classes - 1}")
    counts = np.bincount(codes.astype(int), minlength=n_classes)
    if np.any(counts == 0):
        raise ValueError(f"every class needs a training row; class codes without one: "
                         f"{np.flatnonzero(counts == 0).tolist()}")
    Y = np.zeros((Z.shape[0], n_classes))
    Y[np.arange(Z.shape[0]), codes.astype(int)] = 1.0
    return Z, codes.astype(int), Y, counts


def intercept_only_intercepts(counts) -> np.ndarray:
    """The class log-frequencies, centred to sum 0: the intercepts of every fit at λ >= λ_max."""
    logp = np.log(np.asarray(counts, float) / np.sum(counts))
    return logp - logp.mean()


def multinomial_lambda_max(Z, codes, n_classes, alpha=1.0) -> float:
    """Smallest λ whose solution is B = 0: max_{j,k} |Z_jᵀ(Y_k − π_k)| / (n α), π the class frequencies."""
    if not 0 < alpha <= 1:
        raise ValueError(f"multinomial_lambda_max needs 0 < alpha <= 1, got alpha={alpha}")
    Z, _, Y, counts = _check(Z, codes, n_classes)
    if Z.shape[1] == 0:
        return 0.0
    G = Z.T @ (Y - counts / counts.sum())
    return float(np.max(np.abs(G)) / (Z.shape[0] * alpha))


def intercept_only_objective(counts) -> float:
    """(1/n) Σ CE at the intercept-only fit: the entropy of the class frequencies."""
    pi = np.asarray(counts, float) / np.sum(counts)
    return float(-np.sum(xlogy(pi, pi)))


def _penalty(B, alpha):
    return alpha * float(np.abs(B).sum()) + 0.5 * (1 - alpha) * float(np.sum(B * B))


def primal_objective(Z, Y, B, b, lam, alpha) -> float:
    logp = log_softmax(Z @ B + b, axis=1)
    return float(-np.sum(Y * logp) / Z.shape[0] + lam * _penalty(B, alpha))


def balanced_dual(P, Y) -> np.ndarray:
    """U = Q − Y with Q rows on the simplex and ΣU = 0 exactly, from fitted probabilities P.

    Q_i = s_c P_i + (1 − s_c) e_c for a row of class c. Column sums vanish when Σ_c s_c C_ck = s_k n_k with
    C_ck = Σ_{i in c} P_ik and n_c the class counts; w_c = s_c n_c is then the stationary distribution of the
    row-stochastic M = diag(n)⁻¹C. It is positive (all P_ik > 0), and s is scaled to max s = 1.
    """
    counts = Y.sum(axis=0)
    M = (Y.T @ P) / counts[:, None]
    vals, vecs = np.linalg.eig(M.T)
    w = np.abs(np.real(vecs[:, np.argmin(np.abs(vals - 1.0))]))
    s = w / counts
    s = s / s.max()
    srow = Y @ s
    return srow[:, None] * (P - Y)


def dual_objective(Z, Y, U, lam, alpha) -> float:
    """D(U) for a U with ΣU = 0 and rows U_i + e_{y_i} on the simplex; scaled here to dual feasibility."""
    n = Z.shape[0]
    ZU = Z.T @ U
    if alpha >= 1.0:
        top = float(np.max(np.abs(ZU))) if ZU.size else 0.0
        scale = min(1.0, n * lam / top) if top > 0 else 1.0
        U, pen = U * scale, 0.0
    else:
        v = np.abs(ZU) / (n * lam)
        pen = lam * float(np.sum(np.maximum(v - alpha, 0.0) ** 2)) / (2 * (1 - alpha))
    Q = U + Y
    return float(-np.sum(xlogy(Q, Q)) / n - pen)


def relative_gap(Z, Y, B, b, lam, alpha, reference) -> tuple[float, float]:
    """(P − D) / max(|P|, reference) and P, with the dual point read from the fit's probabilities."""
    logp = log_softmax(Z @ B + b, axis=1)
    primal = float(-np.sum(Y * logp) / Z.shape[0] + lam * _penalty(B, alpha))
    dual = dual_objective(Z, Y, balanced_dual(np.exp(logp), Y), lam, alpha)
    return max(primal - dual, 0.0) / gap_scale(primal, reference), primal


class _Restricted:
    """The problem on working-set columns Zw: FISTA with restart, plus Newton on fixed signs."""

    def __init__(self, Zw, Y, lam, alpha, reference):
        self.Z, self.Y, self.lam, self.alpha, self.ref = Zw, Y, lam, alpha, reference
        self.n = Zw.shape[0]
        A = np.hstack([np.ones((self.n, 1)), Zw])
        small = A.T @ A if A.shape[1] < self.n else A @ A.T
        top = float(scipy.linalg.eigvalsh(small, subset_by_index=[small.shape[0] - 1] * 2)[0])
        # Böhning: diag(p) − ppᵀ ⪯ ½ I, so the smooth part's gradient is Lipschitz with ||A||²/(2n)
        self.step = 1.0 / (0.5 * top / self.n + lam * (1 - alpha))

    def smooth_grad(self, B, b):
        R = np.exp(log_softmax(self.Z @ B + b, axis=1)) - self.Y
        return self.Z.T @ R / self.n + self.lam * (1 - self.alpha) * B, R.sum(axis=0) / self.n

    def prox(self, B):
        t = self.step * self.lam * self.alpha
        return np.sign(B) * np.maximum(np.abs(B) - t, 0.0)

    def gap(self, B, b):
        return relative_gap(self.Z, self.Y, B, b, self.lam, self.alpha, self.ref)[0]

    def fista(self, B, b, target, max_iter, check_every=25):
        xB, xb, yB, yb, t = B, b, B.copy(), b.copy(), 1.0
        gap = np.inf
        for it in range(1, max_iter + 1):
            gB, gb = self.smooth_grad(yB, yb)
            nB, nb = self.prox(yB - self.step * gB), yb - self.step * gb
            # restart when the momentum points uphill (gradient scheme of O'Donoghue & Candès)
            if np.sum((yB - nB) * (nB - xB)) + np.sum((yb - nb) * (nb - xb)) > 0:
                t = 1.0
            t_next = 0.5 * (1 + np.sqrt(1 + 4 * t * t))
            mom = (t - 1) / t_next
            yB, yb = nB + mom * (nB - xB), nb + mom * (nb - xb)
            xB, xb, t = nB, nb, t_next
            if it % check_every == 0:
                gap = self.gap(xB, xb)
                if gap <= target:
                    break
        if it % check_every:
            gap = self.gap(xB, xb)
        return xB, xb - xb.mean(), gap

    def newton_on_signs(self, B, b, max_iter=30):
        """Newton on (b, nonzero entries of B) with their signs fixed; a step stops at the first sign change,
        the coordinates reaching zero leave, and Newton goes on with the smaller support."""
        used = 0
        while used < max_iter and np.any(B):
            B, b, shrank, its = self._sign_pass(B, b, max_iter - used)
            used += its
            if not shrank:
                break
        return B, b

    def _sign_pass(self, B, b, max_iter):
        """One support's Newton iterations; returns (B, b, the support shrank, iterations)."""
        mask = B != 0
        Z, Y, lam, alpha, n = self.Z, self.Y, self.lam, self.alpha, self.n
        K = Y.shape[1]
        cols = [np.flatnonzero(mask[:, k]) for k in range(K)]
        blocks = [np.column_stack([np.ones(n), Z[:, c]]) for c in cols]
        offs = np.cumsum([0] + [blk.shape[1] for blk in blocks])
        theta = np.concatenate([np.r_[b[k], B[cols[k], k]] for k in range(K)])
        signs = np.concatenate([np.r_[0.0, np.sign(B[cols[k], k])] for k in range(K)])
        is_b = np.zeros(theta.size, bool)
        is_b[offs[:-1]] = True

        def unpack(th):
            Bn, bn = np.zeros_like(B), np.zeros(K)
            for k in range(K):
                bn[k] = th[offs[k]]
                Bn[cols[k], k] = th[offs[k] + 1: offs[k + 1]]
            return Bn, bn

        def value(th):
            Bn, bn = unpack(th)
            return primal_objective(Z, Y, Bn, bn, lam, alpha), Bn, bn

        fval, Bc, bc = value(theta)
        its = 0
        for its in range(1, max_iter + 1):
            P = np.exp(log_softmax(Z @ Bc + bc, axis=1))
            R = P - Y
            g = np.concatenate([blocks[k].T @ R[:, k] for k in range(K)]) / n
            g += lam * alpha * signs + lam * (1 - alpha) * np.where(is_b, 0.0, theta)
            H = np.zeros((theta.size, theta.size))
            for k in range(K):
                for m in range(k, K):
                    w = P[:, k] * ((k == m) - P[:, m])
                    blk = (blocks[k].T * w) @ blocks[m] / n
                    H[offs[k]:offs[k + 1], offs[m]:offs[m + 1]] = blk
                    H[offs[m]:offs[m + 1], offs[k]:offs[k + 1]] = blk.T
            H[np.ix_(is_b, is_b)] += 1.0          # the common intercept shift: no curvature, no gradient
            H[np.diag_indices_from(H)] += lam * (1 - alpha) * ~is_b + 1e-12 * max(1.0, np.trace(H) / H.shape[0])
            try:
                step = np.linalg.solve(H, g)
            except np.linalg.LinAlgError:
                step = np.linalg.lstsq(H, g, rcond=None)[0]
            # largest step keeping the signs; coordinates reaching zero leave the support
            moving = (~is_b) & (signs * step > 0)
            tmax = float(np.min(theta[moving] / step[moving])) if np.any(moving) else np.inf
            t = min(1.0, tmax)
            while True:
                cand = theta - t * step
                if t == tmax:
                    hit = moving & np.isclose(theta / np.where(step == 0, 1, step), tmax, rtol=1e-12, atol=0)
                    cand[hit] = 0.0
                fc, Bn, bn = value(cand)
                if fc <= fval - 1e-4 * t * float(g @ step) or t < 1e-10:
                    break
                t *= 0.5
            if fc >= fval:
                break
            theta, fval, Bc, bc = cand, fc, Bn, bn
            if t == tmax:   # the support shrank: rebuild on the new signs
                return Bc, bc - bc.mean(), True, its
            if float(g @ step) <= 1e-16 * max(1.0, abs(fval)):
                break
        return Bc, bc - bc.mean(), False, its

    def solve(self, B, b, target, max_rounds=40, fista_iter=FISTA_ITER):
        gap = self.gap(B, b)
        for _ in range(max_rounds):
            if gap <= target:
                break
            B, b, gap = self.fista(B, b, target, fista_iter)
            if gap <= target or not np.any(B):
                continue
            Bn, bn = self.newton_on_signs(B, b)
            gn = self.gap(Bn, bn)
            if gn < gap:
                B, b, gap = Bn, bn, gn
        return B, b, gap


def _seed_set(grad, active, lam, prev_lam, alpha):
    """Working set to start λ with: the support plus the features the sequential strong rule keeps (on
    max_k |grad_jk|), the strongest first, at most max(10, 2·|support|) in all; violators join later."""
    if prev_lam is None:
        return active
    score = np.abs(grad).max(axis=1)
    score[active] = -np.inf
    strong = np.flatnonzero(score >= alpha * (2 * lam - prev_lam))
    room = max(10, 2 * active.size) - active.size
    return np.union1d(active, strong[np.argsort(-score[strong])[:max(room, 0)]])


def fit_multinomial_l1_path(Z, codes, n_classes, lambdas, alpha=1.0, tol=1e-7, *,
                            max_working_set_rounds=30) -> MultinomialL1Path:
    """Multinomial L1 / elastic-net path over `lambdas` (sorted decreasing), warm-started along it.

    Every fit carries its relative duality gap (module docstring); converged means gap <= tol. A failure at
    one λ is recorded in `status`, never raised. BLAS runs on one thread: the products here are small, and
    parallelism comes from running fits side by side.
    """
    if not _THREADPOOLS:
        _THREADPOOLS.append(ThreadpoolController())
    with _THREADPOOLS[0].limit(limits=1, user_api="blas"):
        return _fit_path(Z, codes, n_classes, lambdas, alpha, tol, max_working_set_rounds)


def _fit_path(Z, codes, n_classes, lambdas, alpha, tol, max_working_set_rounds):
    start = time.perf_counter()
    if not 0 < alpha <= 1:
        raise ValueError(f"alpha must be in (0, 1], got {alpha}")
    Z, _, Y, counts = _check(Z, codes, n_classes)
    lambdas = np.sort(np.asarray(lambdas, dtype=float).ravel())[::-1]
    if lambdas.size and lambdas[-1] <= 0:
        raise ValueError("the multinomial L1 path needs every λ > 0")
    n, p = Z.shape
    K = n_classes
    reference = intercept_only_objective(counts)
    B, b = np.zeros((p, K)), intercept_only_intercepts(counts)
    grad = Z.T @ (counts / n - Y) / n
    prev = None
    L = lambdas.size
    coefs, icpts = np.zeros((L, p, K)), np.zeros((L, K))
    gaps, objs, sizes = np.full(L, np.inf), np.zeros(L), np.zeros(L, int)
    statuses = []
    for i, lam in enumerate(lambdas):
        try:
            W = _seed_set(grad, np.flatnonzero(np.any(B != 0, axis=1)), lam, prev, alpha)
            target = 0.1 * tol
            for _ in range(max_working_set_rounds):
                sub = _Restricted(Z[:, W], Y, lam, alpha, reference)
                BW, b, _ = sub.solve(B[W], b, target)
                B = np.zeros((p, K))
                B[W] = BW
                R = np.exp(log_softmax(Z @ B + b, axis=1)) - Y
                grad = Z.T @ R / n
                outside = np.ones(p, bool)
                outside[W] = False
                excess = np.where(outside, np.abs(grad).max(axis=1) - lam * alpha, -np.inf)
                gaps[i], objs[i] = relative_gap(Z, Y, B, b, lam, alpha, reference)
                bad = np.flatnonzero(excess > 0)
                if gaps[i] <= tol or bad.size == 0 and target < 1e-3 * tol:
                    break
                if bad.size:
                    W = np.union1d(W, bad[np.argsort(-excess[bad])[:max(10, W.size // 2)]])
                else:      # every column is inside its box, but the gap is not small enough: solve tighter
                    target *= 0.1
            status = "optimal" if gaps[i] <= tol else "gap above tolerance"
            sizes[i] = W.size
        except (np.linalg.LinAlgError, ValueError, FloatingPointError) as exc:
            status = f"error: {type(exc).__name__}: {exc}"
        prev = lam
        coefs[i], icpts[i] = B, b
        statuses.append(status)
    return MultinomialL1Path(
        lambdas=lambdas, coef=coefs, intercept=icpts,
        n_nonzero=np.count_nonzero(np.any(coefs != 0, axis=2), axis=1), certificate=gaps,
        certificate_kind="duality_gap", converged=(gaps <= tol) & np.array([st == "optimal" for st in statuses], bool),
        status=tuple(statuses),
        solver="working-set FISTA + sign-fixed Newton", fit_seconds=time.perf_counter() - start,
        alpha=float(alpha), objective=objs, working_set_size=sizes)


def predict_multinomial_l1(path: MultinomialL1Path, Z) -> np.ndarray:
    """(L, m, K) class scores b + Bᵀz for every λ; softmax of a row gives the class probabilities."""
    return np.einsum("mp,lpk->lmk", np.asarray(Z, float), path.coef) + path.intercept[:, None, :]
