"""Sparse family: L1 / elastic-net paths over lambda with working sets, exact zeros
and an optimality certificate per fit.

At each lambda the problem restricted to a working set W is solved by a convex
solver (see restricted); one product X'u checks the optimality conditions on
every column and violators join W. W is seeded by the sequential strong rule
(Tibshirani et al. 2012, JRSS-B 74(2)) or by the previous active set.

For smooth losses, solver "auto" / "active_set" first tries active-set continuation
from the previous lambda (active_set.refine over every column); the convex solver
runs only where that does not settle. A named solver forces that route; routing.SOLVER_TABLE
says which solver takes which problem.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
from threadpoolctl import ThreadpoolController

from pipeline.losses import get_loss
from pipeline.matrices import as_features, columns, is_sparse, times_rows
from pipeline.models.sparse import certificate as cert
from pipeline.models.sparse import restricted as rs
from pipeline.models.sparse.active_set import GramCache, polish_zeros, refine
from pipeline.models.sparse.dual import intercept_only_dual, lambda_max
from pipeline.models.sparse.routing import AUTOMATIC, route as choose_route

SCREENING = ("strong", "active")
# A strong-rule set wider than this many columns per row (wide sparse counts: thousands of columns whose one
# nonzero sits in the same row are identical once scaled, and tie) seeds the working set with its largest
# gradients only; the optimality check over every column still adds each violator, so the fit is unchanged.
MAX_SEED_PER_ROW = 2
_THREADPOOLS: list = []   # one controller per process: building one scans the loaded libraries (~6 ms)


@dataclass(frozen=True)
class L1Path:
    lambdas: np.ndarray        # (L,) decreasing
    coef: np.ndarray           # (L, p), exact zeros off the support
    intercept: np.ndarray      # (L,)
    n_nonzero: np.ndarray      # (L,) int; also the lasso degrees of freedom (Zou et al. 2007)
    certificate: np.ndarray    # (L,) duality gap over max(|objective|, intercept-only objective)
    certificate_kind: str      # "duality_gap" | "kkt_violation"
    converged: np.ndarray      # (L,) bool
    status: tuple[str, ...]    # (L,)
    solver: str
    fit_seconds: float
    alpha: float = 1.0
    loss: str = ""
    objective: np.ndarray = field(default_factory=lambda: np.zeros(0))      # (L,) primal values
    kkt: np.ndarray = field(default_factory=lambda: np.zeros(0))            # (L,) max KKT violation / (lam*alpha)
    working_set_size: np.ndarray = field(default_factory=lambda: np.zeros(0, int))
    rounds: np.ndarray = field(default_factory=lambda: np.zeros(0, int))    # solves per lambda

    @property
    def signs(self) -> np.ndarray:
        return np.sign(self.coef).astype(int)

    @property
    def support(self) -> list[np.ndarray]:
        return [np.flatnonzero(row) for row in self.coef]


def lambda_grid(lam_max: float, n_lambdas: int, ratio: float) -> np.ndarray:
    """Geometric grid lam_max ... ratio*lam_max, decreasing."""
    if n_lambdas < 1 or not 0 < ratio <= 1 or not lam_max > 0:
        raise ValueError(f"lambda_grid needs n_lambdas >= 1, 0 < ratio <= 1, lam_max > 0; "
                         f"got {n_lambdas}, {ratio}, {lam_max}")
    if n_lambdas == 1:
        return np.array([float(lam_max)])
    return lam_max * np.geomspace(1.0, ratio, n_lambdas)


def predict_path(path: L1Path, X) -> np.ndarray:
    """(L, m) decision values b0 + X b for every lambda (X dense or sparse)."""
    return times_rows(path.coef, X) + path.intercept[:, None]


def _solve_restricted(route, XW, y, lam, alpha, loss, warm, tol):
    """One restricted solve by the routed solver (the highs route keeps one warm LP in PathFitter)."""
    if route == "osqp":
        return rs.solve_squared_gram(XW, y, lam, alpha, warm=warm, tol=min(tol, 1e-7) * 1e-2,
                                     factors=loss.row_factors)
    return rs.solve_cvxpy(XW, y, lam, alpha, loss, warm=warm, tol=min(tol, 1e-7) * 1e-2)


class PathFitter:
    """State carried along the path: warm start, last gradient, active set."""

    def __init__(self, X, y, loss, alpha, tol, route, max_rounds, screening, continuation):
        self.X, self.y, self.loss = X, y, loss
        self.continuation = continuation and loss.smooth
        self.gram = GramCache(X, y, loss) if self.continuation and loss.quadratic else None
        self.n, self.p = X.shape
        self.alpha, self.tol, self.route = alpha, tol, route
        self.max_rounds, self.screening = max_rounds, screening
        self.coef = np.zeros(self.p)
        self.intercept = loss.intercept_only(y)
        self.dual = intercept_only_dual(X, y, loss)
        self.grad = X.T @ self.dual / self.n
        self.prev_lam = None
        self.solver_used = set()
        self.lp = None

    def seed(self, lam) -> np.ndarray:
        if self.screening == "strong" and self.prev_lam is not None:
            keep = np.abs(self.grad) >= self.alpha * (2 * lam - self.prev_lam)
            cap = MAX_SEED_PER_ROW * self.n
            if np.count_nonzero(keep) > cap:   # keep the largest gradients; the check over every column adds the rest
                strong = np.flatnonzero(keep)
                keep[:] = False
                keep[strong[np.argsort(-np.abs(self.grad[strong]), kind="stable")[:cap]]] = True
            keep[self.coef != 0] = True
            return np.flatnonzero(keep)     # sorted: the active set joined with the (capped) strong set
        return np.flatnonzero(self.coef)

    def _fit_on(self, W, lam):
        """Solve on W, decide zeros from optimality, refine; returns (coef, b0, u, status)."""
        X, y, loss, alpha = self.X, self.y, self.loss, self.alpha
        coef = np.zeros(self.p)
        if W.size == 0:
            return coef, loss.intercept_only(y), intercept_only_dual(X, y, loss), "optimal"
        if self.route == "highs":  # one LP kept warm along the path
            if self.lp is None:
                self.lp = rs.WarmSplitLP(X, y, loss)
            W, res = self.lp.solve(W, lam)
            XW = columns(X, W)
        else:
            XW = columns(X, W)   # a sparse X densifies the working set's columns only
            res = _solve_restricted(self.route, XW, y, lam, alpha, loss, self.coef[W], self.tol)
        self.solver_used.add(res.solver)
        gradW = XW.T @ res.dual / self.n
        cw = cert.zero_by_optimality(res.coef, gradW, lam, alpha)
        b0, dual = res.intercept, res.dual
        if loss.smooth and res.status == "optimal":
            ref = refine(XW, y, cw, b0, lam, alpha, loss, tol=self.tol * 1e-3)
            ref = polish_zeros(XW, y, ref, lam, alpha, loss, tol=self.tol * 1e-3)
            if ref.ok:
                cw, b0, dual = ref.coef, ref.intercept, ref.dual
        coef[W] = cw
        return coef, b0, dual, res.status

    def _continue(self, lam):
        """Active-set continuation from the previous lambda over every column."""
        ref = refine(self.X, self.y, self.coef, self.intercept, lam, self.alpha, self.loss,
                     tol=self.tol * 1e-3, gram=self.gram, candidates=self.seed(lam))
        if not ref.ok:
            return None
        ref = polish_zeros(self.X, self.y, ref, lam, self.alpha, self.loss, tol=self.tol * 1e-3, gram=self.gram)
        self.solver_used.add("active-set")
        self.coef, self.intercept, self.dual, self.grad = ref.coef, ref.intercept, ref.dual, ref.grad
        self.prev_lam = lam
        return "optimal", ref.iterations, int(np.count_nonzero(ref.coef))

    def step(self, lam):
        if self.continuation:
            done = self._continue(lam)
            if done is not None:
                return done
        W = self.seed(lam)
        status, rounds = "optimal", 0
        viol_tol = lam * self.alpha * (1 + self.tol)
        while True:
            rounds += 1
            coef, b0, dual, status = self._fit_on(W, lam)
            grad = self.X.T @ dual / self.n
            outside = np.ones(self.p, bool)
            outside[W] = False
            excess = np.where(outside, np.abs(grad) - viol_tol, -np.inf)
            bad = np.flatnonzero(excess > 0)
            if bad.size == 0 or rounds >= self.max_rounds or status != "optimal":
                break
            grow = max(10, W.size // 2)
            add = bad[np.argsort(-excess[bad])[:grow]]
            W = np.union1d(W, add)
        self.coef, self.intercept, self.dual, self.grad = coef, b0, dual, grad
        self.prev_lam = lam
        return status, rounds, W.size


def fit_l1_path(X, y, loss, lambdas, *, alpha=1.0, tol=1e-7, solver="auto",
                max_working_set_rounds=50, screening="strong", selection_only=False) -> L1Path:
    """L1 (alpha = 1) or elastic-net path of `loss` over decreasing `lambdas`.

    X is standardised by the caller; y float (regression) or in {-1, +1}
    (classification). A failure at one lambda is recorded, never raised.

    Every fit is converged when its duality gap is at most tol * max(|P|, P_0), P_0 the
    intercept-only objective (certificate.duality_gap). With `selection_only` (fits read only for
    their support and signs, e.g. stability resamples) the certificate is the KKT violation over
    every column instead (certificate.kkt_violation, relative to lam*alpha), read from the gradient
    the fit already holds: a zero is certified when |x_j'u/n| <= lam*alpha*(1 + tol), a nonzero when
    its stationarity equation holds to tol. The fit itself is the same, so the support and signs are
    those of the exact path; only the duality-gap evaluation (two more products with X) is skipped.
    """
    # one BLAS thread: the small dense solves here lose to threading overhead, and
    # parallelism comes from running many fits side by side (pipeline.execution)
    if not _THREADPOOLS:
        _THREADPOOLS.append(ThreadpoolController())
    with _THREADPOOLS[0].limit(limits=1, user_api="blas"):
        return _fit_path(X, y, loss, lambdas, alpha, tol, solver, max_working_set_rounds, screening,
                         selection_only)


def _fit_path(X, y, loss, lambdas, alpha, tol, solver, max_working_set_rounds, screening,
              selection_only=False) -> L1Path:
    start = time.perf_counter()
    loss = get_loss(loss) if isinstance(loss, str) else loss
    # a sparse matrix stays sparse (CSC): Xᵀu products over the stored entries, column slices
    X = as_features(X) if is_sparse(X) else np.ascontiguousarray(X, dtype=float)
    y = np.asarray(y, dtype=float).ravel()
    lambdas = np.sort(np.asarray(lambdas, dtype=float).ravel())[::-1]
    if not 0 < alpha <= 1:
        raise ValueError(f"alpha must be in (0, 1], got {alpha}")
    if screening not in SCREENING:
        raise ValueError(f"unknown screening '{screening}': valid are {', '.join(SCREENING)}")
    if loss.task == "classification" and not np.all(np.isin(y, (-1.0, 1.0))):
        raise ValueError("classification losses need labels in {-1, +1}")
    route = choose_route(loss, alpha, solver)
    fitter = PathFitter(X, y, loss, alpha, tol, route, max_working_set_rounds, screening,
                        continuation=solver in AUTOMATIC)
    L, p = lambdas.size, X.shape[1]
    reference = cert.reference_objective(y, loss)
    coefs, icpts = np.zeros((L, p)), np.zeros(L)
    gaps, kkts, objs = np.zeros(L), np.zeros(L), np.zeros(L)
    sizes, rounds = np.zeros(L, int), np.zeros(L, int)
    statuses = []
    for i, lam in enumerate(lambdas):
        try:
            status, rounds[i], sizes[i] = fitter.step(lam)
        except Exception as exc:  # one bad fit is recorded; the path goes on from the last good point
            status = f"error: {type(exc).__name__}: {exc}"
            fitter.prev_lam = lam
        coefs[i], icpts[i] = fitter.coef, fitter.intercept
        if selection_only:
            S = np.flatnonzero(fitter.coef)
            objs[i] = cert.primal_value(X[:, S], y, fitter.coef[S], fitter.intercept, lam, alpha, loss)
            kkts[i] = gaps[i] = cert.kkt_violation(fitter.grad, fitter.coef, lam, alpha)
        else:
            gaps[i], objs[i], _ = cert.duality_gap(X, y, fitter.coef, fitter.intercept, fitter.dual,
                                                   lam, alpha, loss, reference)
            kkts[i] = cert.kkt_violation(X.T @ fitter.dual / X.shape[0], fitter.coef, lam, alpha)
        statuses.append(status)
    converged = (gaps <= tol) & np.array([s == "optimal" for s in statuses])
    return L1Path(
        lambdas=lambdas, coef=coefs, intercept=icpts,
        n_nonzero=np.count_nonzero(coefs, axis=1), certificate=gaps,
        certificate_kind="kkt_violation" if selection_only else "duality_gap", converged=converged, status=tuple(statuses),
        solver="+".join(sorted(fitter.solver_used)) or route,
        fit_seconds=time.perf_counter() - start, alpha=float(alpha), loss=loss.name,
        objective=objs, kkt=kkts, working_set_size=sizes, rounds=rounds,
    )


def default_lambdas(X, y, loss, n_lambdas=30, ratio=0.01, alpha=1.0) -> np.ndarray:
    """The design's grid: geometric from lambda_max down to ratio * lambda_max."""
    loss = get_loss(loss) if isinstance(loss, str) else loss
    lam_max = lambda_max(X, y, loss, alpha)
    return lambda_grid(lam_max if lam_max > 0 else 1.0, n_lambdas, ratio)


def degrees_of_freedom(path: L1Path, X, factors=None) -> np.ndarray:
    """Effective degrees of freedom per lambda (intercept not counted).

    Lasso: the number of nonzeros (Zou, Hastie & Tibshirani 2007, Annals of Statistics 35(5)).
    Elastic net, squared loss: tr(X_S (X_S'X_S + n lam (1-alpha) I)^{-1} X_S') on centred
    columns of the support S (Zou & Hastie 2005, JRSS-B 67(2)). Other losses with alpha < 1
    get the nonzero count as an upper bound. With the row factors c of a weighted fit the trace is
    of the weighted smoother: columns centred by their weighted means, G = X_S'CX_S.
    """
    if path.alpha >= 1.0 or not get_loss(path.loss).quadratic:
        return path.n_nonzero.astype(float)
    X = as_features(X)
    n = X.shape[0]
    c = np.ones(n) if factors is None else np.asarray(factors, float)
    out = np.zeros(path.lambdas.size)
    for i, (lam, row) in enumerate(zip(path.lambdas, path.coef)):
        S = np.flatnonzero(row)
        if S.size:
            XS = columns(X, S)
            XS = XS - c @ XS / c.sum()   # support columns centred by their (weighted) means
            G = (XS.T * c) @ XS
            ridge = n * lam * (1 - path.alpha)
            out[i] = float(np.trace(np.linalg.solve(G + ridge * np.eye(S.size), G)))
    return out
