"""Solvers for the L1 / elastic-net problem restricted to a working set of columns.

Each returns a `Restricted` result: coefficients on the working set, intercept, the
per-sample dual point u (the loss subgradient at the fit, u_i in d loss_i / d f), and
a status text. Three formulations, chosen for speed with a convex solver:

- squared loss: Gram form 0.5 b'Gb - c'b + lam*||b||_1 (intercept eliminated by
  centring) in epigraph form, solved by OSQP;
- piecewise-linear losses with a pure L1 penalty: an explicit split LP solved by
  the HiGHS simplex, whose equality duals are the subgradient at kinks;
- every other case: cvxpy with an auxiliary z = X_W b + b0 whose constraint dual
  is the subgradient.
"""
from __future__ import annotations

import warnings

from dataclasses import dataclass

import numpy as np

from pipeline.losses import Loss
from pipeline.losses_weighted import row_factors
from pipeline.matrices import columns


@dataclass
class Restricted:
    coef: np.ndarray      # (k,)
    intercept: float
    dual: np.ndarray      # (n,) subgradient of the loss at the fit
    status: str           # "optimal" or the solver's message
    solver: str


def _penalty_split(lam: float, alpha: float) -> tuple[float, float]:
    """(L1 weight, L2 weight) of lam*(alpha*|b|_1 + (1-alpha)/2*|b|^2)."""
    return lam * alpha, lam * (1.0 - alpha)


def solve_squared_gram(XW, y, lam, alpha, warm=None, tol=1e-9, factors=None) -> Restricted:
    """`factors`: per-row factors c_i of a weighted squared loss (weighted means and Gram)."""
    import osqp   # solver libraries load only where a fit needs them (penduel validate stays light)
    import scipy.sparse as sp

    n, k = XW.shape
    w = np.ones(n) if factors is None else np.asarray(factors, float)
    x_mean, y_mean = w @ XW / w.sum(), float(w @ y / w.sum())
    Xc = XW - x_mean
    G = (Xc.T * w) @ Xc / n
    c = (Xc.T * w) @ (y - y_mean) / n
    l1, l2 = _penalty_split(lam, alpha)
    # epigraph form: min 0.5 b'(G + l2 I)b - c'b + l1 * 1't, -t <= b <= t. Its KKT matrix
    # holds G once (the split b+ - b- form holds it four times and factors ~8x slower)
    P = sp.block_diag([sp.triu(sp.csc_matrix(G + l2 * np.eye(k))), sp.csc_matrix((k, k))], format="csc")
    q = np.r_[-c, np.full(k, l1)]
    eye = sp.identity(k, format="csc")
    A = sp.vstack([sp.hstack([eye, -eye]), sp.hstack([eye, eye])], format="csc")
    lower = np.r_[np.full(k, -np.inf), np.zeros(k)]
    upper = np.r_[np.zeros(k), np.full(k, np.inf)]
    solver = osqp.OSQP()
    solver.setup(P, q, A, lower, upper, eps_abs=tol, eps_rel=tol,
                 max_iter=20000, polishing=True, verbose=False)
    if warm is not None:
        solver.warm_start(x=np.r_[warm, np.abs(warm)])
    res = solver.solve(raise_error=False)
    status = str(res.info.status)
    x = res.x
    if x is None or not np.all(np.isfinite(x)):
        return Restricted(np.zeros(k) if warm is None else warm, y_mean, w * (y_mean - y), status, "OSQP")
    coef = x[:k]
    b0 = float(y_mean - x_mean @ coef)
    dual = w * ((XW @ coef + b0) - y)
    ok = "solved" in status.lower()
    return Restricted(coef, b0, dual, "optimal" if ok else status, "OSQP")


def solve_piecewise_lp(XW, y, lam, loss: Loss) -> Restricted:
    """Split LP: min (1/n) sum(a r+ + c r-) + lam*sum(b+ + b-) with residual split.

    Regression (quantile/absolute): X b + b0 + r+ - r- = y, slopes a (r>0) and c (r<0).
    Hinge: y*(X b + b0) + xi - s = 1, xi, s >= 0, cost (1/n) on xi. A weighted loss multiplies the
    costs of row i's r+ and r- by its factor c_i.
    """
    import scipy.sparse as sp
    from scipy.optimize import linprog

    n, k = XW.shape
    rows = row_factors(loss, n)
    if loss.task == "regression":
        above, below = loss.slopes
        M, rhs, cost_r = XW, y, (above * rows / n, below * rows / n)
        col_b = np.ones((n, 1))
    else:
        M, rhs, cost_r = XW * y[:, None], np.ones(n), (rows / n, np.zeros(n))
        col_b = y[:, None]
    eye = sp.identity(n, format="csc")
    A_eq = sp.hstack([sp.csc_matrix(M), sp.csc_matrix(-M), sp.csc_matrix(col_b), eye, -eye], format="csc")
    cost = np.r_[np.full(2 * k, lam), 0.0, cost_r[0], cost_r[1]]
    bounds = [(0, None)] * (2 * k) + [(None, None)] + [(0, None)] * (2 * n)
    res = linprog(cost, A_eq=A_eq, b_eq=rhs, bounds=bounds, method="highs-ds")
    if res.status != 0:
        return Restricted(np.zeros(k), 0.0, np.zeros(n), f"HiGHS: {res.message}", "HiGHS")
    x = res.x
    coef, b0 = x[:k] - x[k:2 * k], float(x[2 * k])
    # marginal = d objective / d rhs; d loss / d f follows by the chain rule
    mu = n * res.eqlin.marginals
    dual = -mu if loss.task == "regression" else -mu * y
    lo, hi = loss.subgradient_interval(y, XW @ coef + b0)
    return Restricted(coef, b0, np.clip(dual, lo, hi), "optimal", "HiGHS")


_BACKEND_OPTIONS = {
    "CLARABEL": lambda t: {"tol_gap_abs": t, "tol_gap_rel": t, "tol_feas": t},
    "SCS": lambda t: {"eps_abs": max(t, 1e-9), "eps_rel": max(t, 1e-9), "max_iters": 200000},
    "OSQP": lambda t: {"eps_abs": max(t, 1e-10), "eps_rel": max(t, 1e-10), "max_iter": 200000},
}


def _cvxpy_solver_order(loss: Loss) -> list[str]:
    return list(loss.cvxpy_solvers)


def solve_cvxpy(XW, y, lam, alpha, loss: Loss, warm=None, tol=1e-9, backends=None) -> Restricted:
    """Auxiliary-variable form. The loss is applied to z, never to X_W b directly: with
    cvxpy 1.9.3 bound propagation through multiply/abs/pos of a constant matrix times a
    free variable can hand HiGHS wrong bounds and a wrong "optimal" point."""
    import cvxpy as cp

    n, k = XW.shape
    b = cp.Variable(k)
    b0 = cp.Variable()
    z = cp.Variable(n)
    l1, l2 = _penalty_split(lam, alpha)
    link = z == XW @ b + b0
    objective = loss.cvxpy_sum(y, z) / n + l1 * cp.norm1(b)
    if l2 > 0:
        objective = objective + 0.5 * l2 * cp.sum_squares(b)
    problem = cp.Problem(cp.Minimize(objective), [link])
    status, used = "not run", ""
    for name in backends or _cvxpy_solver_order(loss):
        used = name
        try:
            opts = _BACKEND_OPTIONS.get(name, lambda t: {})(tol)
            with warnings.catch_warnings(record=True) as caught:   # e.g. "Solution may be inaccurate"
                warnings.simplefilter("always")
                problem.solve(solver=name, **opts)
            status = problem.status
            said = "; ".join(dict.fromkeys(str(w.message).strip() for w in caught
                                           if not issubclass(w.category, (FutureWarning, DeprecationWarning))))
            if said and (status != "optimal" or "inaccurate" in said.lower()):   # then not meeting tolerance
                status = f"{'optimal_inaccurate' if status == 'optimal' else status} ({name}: {said[:200]})"
        except cp.error.SolverError as exc:
            status = f"{name}: {exc}"
            continue
        if (status == "optimal" or status.startswith("optimal_inaccurate")) and b.value is not None:
            break
    if b.value is None:
        return Restricted(np.zeros(k), 0.0, np.zeros(n), str(status), used)
    coef, icpt = np.asarray(b.value, float), float(b0.value)
    f = XW @ coef + icpt
    if loss.smooth:
        dual = loss.derivative(y, f)
    else:
        # stationarity in z: (1/n) loss'(z) + dual = 0 with cvxpy's sign for equalities
        dual = np.clip(-n * np.asarray(link.dual_value, float), *loss.dual_bounds(y))
    return Restricted(coef, icpt, dual, "optimal" if status == "optimal" else str(status), used)


class WarmSplitLP:
    """The split LP of `solve_piecewise_lp` kept alive along a path in HiGHS.

    Rows and residual columns are built once; feature columns (b+_j, b-_j) are added
    when a feature first joins the working set, and only their cost lam changes
    between lambdas, so every solve starts from the previous optimal basis.
    """

    def __init__(self, X, y, loss: Loss):
        import highspy

        self.X, self.y, self.loss = X, y, loss
        n = X.shape[0]
        self.n = n
        self.cols: list[int] = []          # features present, in column order
        self.h = highspy.Highs()
        self.h.setOptionValue("output_flag", False)
        self.h.setOptionValue("solver", "simplex")
        inf = highspy.kHighsInf
        rows_c = row_factors(loss, n)      # a weighted loss scales row i's residual costs by c_i
        if loss.task == "regression":
            above, below = loss.slopes
            rhs, cost_pos, cost_neg = y, above * rows_c / n, below * rows_c / n
            self.col_b = np.ones(n)
            self.sign = np.ones(n)
        else:
            rhs, cost_pos, cost_neg = np.ones(n), rows_c / n, np.zeros(n)
            self.col_b = y.copy()
            self.sign = y.copy()           # rows are y_i * f_i
        self.h.addRows(n, rhs, rhs, 0, np.zeros(1, np.int32), np.zeros(0, np.int32), np.zeros(0))
        rows = np.arange(n, dtype=np.int32)
        # intercept (free), then r+ (or xi), then r- (or surplus s)
        self.h.addCols(1, np.zeros(1), np.array([-inf]), np.array([inf]), n,
                       np.zeros(1, np.int32), rows, self.col_b)
        starts = np.arange(n, dtype=np.int32)
        self.h.addCols(n, cost_pos, np.zeros(n), np.full(n, inf), n, starts, rows, np.ones(n))
        self.h.addCols(n, cost_neg, np.zeros(n), np.full(n, inf), n, starts, rows, -np.ones(n))
        self.base = 1 + 2 * n

    def _add(self, new):
        import highspy

        n, k = self.n, len(new)
        block = columns(self.X, new) * self.sign[:, None]                  # (n, k)
        vals = np.stack([block.T, -block.T], axis=1).reshape(-1)     # b+_j, b-_j per feature
        rows = np.tile(np.arange(n, dtype=np.int32), 2 * k)
        starts = (np.arange(2 * k) * n).astype(np.int32)
        self.h.addCols(2 * k, np.zeros(2 * k), np.zeros(2 * k), np.full(2 * k, highspy.kHighsInf),
                       2 * k * n, starts, rows, vals)
        self.cols.extend(int(j) for j in new)

    def solve(self, W, lam) -> tuple[np.ndarray, Restricted]:
        """Solve on the features present plus W; returns (feature indices, result)."""
        present = set(self.cols)
        new = [int(j) for j in W if int(j) not in present]
        if new:
            self._add(new)
        k = len(self.cols)
        idx = np.arange(self.base, self.base + 2 * k, dtype=np.int32)
        self.h.changeColsCost(2 * k, idx, np.full(2 * k, float(lam)))
        self.h.run()
        status = self.h.modelStatusToString(self.h.getModelStatus())
        cols = np.array(self.cols, int)
        if status != "Optimal":
            return cols, Restricted(np.zeros(k), 0.0, np.zeros(self.n), f"HiGHS: {status}", "HiGHS-warm")
        sol = self.h.getSolution()
        x = np.asarray(sol.col_value)
        pairs = x[self.base:self.base + 2 * k].reshape(k, 2)
        coef, b0 = pairs[:, 0] - pairs[:, 1], float(x[0])
        # row duals: d objective / d rhs, as in solve_piecewise_lp
        mu = self.n * np.asarray(sol.row_dual)
        lo, hi = self.loss.subgradient_interval(self.y, self.X[:, cols] @ coef + b0)
        return cols, Restricted(coef, b0, np.clip(-mu * self.sign, lo, hi), "optimal", "HiGHS-warm")
