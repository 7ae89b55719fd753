"""Sparse family against reference solvers, side by side in one process.

Design: n x p standard Gaussian, columns standardised, 20 true nonzeros, 30 lambdas
from lambda_max to 0.01 lambda_max. Each record states whether its goal is met and
the worst objective difference against the reference.
"""
from __future__ import annotations

import warnings

import numpy as np

from benchmarks.harness import timed_pair
from pipeline.losses import get_loss
from pipeline.models.sparse.path import default_lambdas, fit_l1_path
from pipeline.models.sparse.certificate import primal_value

N_LAMBDAS, RATIO = 30, 0.01


def _design(n, p, task="regression", seed=0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, p))
    X = (X - X.mean(0)) / X.std(0)
    w = np.zeros(p)
    w[:20] = rng.choice([-1.0, 1.0], 20) * rng.uniform(0.5, 2.0, 20)
    f = X @ w
    if task == "classification":
        return X, np.where(f + rng.logistic(size=n) > 0, 1.0, -1.0)
    return X, f + rng.standard_t(3, size=n)


def _objectives(X, y, loss, lams, coefs, intercepts):
    return np.array([primal_value(X, y, c, b, lam, 1.0, loss) for lam, c, b in zip(lams, coefs, intercepts)])


def _worst_rel_gap(ours, ref):
    """Largest (ours - ref)/|ref|: positive means ours is worse."""
    return float(np.max((ours - ref) / np.maximum(np.abs(ref), 1e-300)))


def _squared_vs_lasso_path(name, n, p, min_ratio, solver):
    from sklearn.linear_model import lasso_path

    X, y = _design(n, p)
    loss = get_loss("squared")
    lams = default_lambdas(X, y, loss, N_LAMBDAS, RATIO)
    Xc, yc = X - X.mean(0), y - y.mean()
    out = {}

    def ours():
        out["path"] = fit_l1_path(X, y, loss, lams, solver=solver)

    def reference():
        _, coefs, _ = lasso_path(Xc, yc, alphas=lams, tol=1e-10, max_iter=100000)
        out["ref"] = coefs.T

    rec = timed_pair(name, ours, "sklearn lasso_path(tol=1e-10)", reference,
                     goal=f"ratio >= {min_ratio}, objective gap <= 1e-8 at every lambda",
                     repeats=1 if p > 10000 else 3, min_ratio=min_ratio)
    path = out["path"]
    ref_obj = _objectives(X, y, loss, lams, out["ref"], y.mean() - out["ref"] @ X.mean(0))
    gap = _worst_rel_gap(path.objective, ref_obj)
    rec.update(route=path.solver, solver_option=solver, worst_rel_objective_gap=gap,
               max_duality_gap=float(path.certificate.max()), all_converged=bool(path.converged.all()))
    rec["met"] = bool(rec["met"] and gap <= 1e-8 and path.converged.all())
    return rec


def bench_l1_sq_convex_vs_lasso_path():
    return [_squared_vs_lasso_path("l1_sq_convex_vs_lasso_path", 400, 4000, 0.5, "auto"),
            _squared_vs_lasso_path("l1_sq_osqp_only_vs_lasso_path", 400, 4000, 0.5, "osqp")]


def bench_l1_sq_convex_vs_lasso_path_large():
    return [_squared_vs_lasso_path("l1_sq_convex_vs_lasso_path_large", 1000, 20000, 1.5, "auto")]


def bench_l1_huber_ws_vs_full():
    """Full problem in cvxpy (lambda a Parameter, CLARABEL) timed on 3 of the 30 lambdas and
    scaled by 10, as the goal allows; objective compared on those 3."""
    import cvxpy as cp

    X, y = _design(400, 4000)
    n, p = X.shape
    loss = get_loss("huber", delta=1.0)
    lams = default_lambdas(X, y, loss, N_LAMBDAS, RATIO)
    sample = [0, 15, 29]
    b, b0, lam = cp.Variable(p), cp.Variable(), cp.Parameter(nonneg=True)
    problem = cp.Problem(cp.Minimize(loss.cvxpy_sum(y, X @ b + b0) / n + lam * cp.norm1(b)))
    out = {"ref": []}

    def ours():
        out["path"] = fit_l1_path(X, y, loss, lams)

    def reference():
        out["ref"] = []
        for i in sample:
            lam.value = lams[i]
            problem.solve(solver="CLARABEL")
            out["ref"].append(problem.value)

    rec = timed_pair("l1_huber_ws_vs_full", ours, "cvxpy full problem, CLARABEL (3 lambdas x 10)",
                     reference, goal="ratio >= 30, objective difference <= 1e-6", repeats=1)
    rec["reference_seconds"] *= N_LAMBDAS / len(sample)
    rec["ratio"] = rec["reference_seconds"] / rec["ours_seconds"]
    path = out["path"]
    diff = float(np.max(np.abs(path.objective[sample] - np.array(out["ref"])) / np.abs(out["ref"])))
    rec.update(route=path.solver, rel_objective_difference=diff, all_converged=bool(path.converged.all()),
               max_duality_gap=float(path.certificate.max()))
    rec["met"] = bool(rec["ratio"] >= 30 and diff <= 1e-6 and path.converged.all())
    return [rec]


def bench_l1_logistic_vs_liblinear():
    from sklearn.linear_model import LogisticRegression

    X, y = _design(400, 4000, "classification")
    n = X.shape[0]
    loss = get_loss("logistic")
    lams = default_lambdas(X, y, loss, N_LAMBDAS, RATIO)
    out = {}

    def ours():
        out["path"] = fit_l1_path(X, y, loss, lams)

    def reference():
        # C = 1/(n lambda); liblinear also penalises its intercept (default scaling 1)
        fits = []
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for lam in lams:
                m = LogisticRegression(l1_ratio=1.0, solver="liblinear", C=1 / (n * lam), tol=1e-7).fit(X, y)
                fits.append((m.coef_[0], m.intercept_[0]))
        out["ref"] = fits

    rec = timed_pair("l1_logistic_vs_liblinear", ours, "liblinear L1 logistic x30 (tol=1e-7)", reference,
                     goal="ratio >= 0.5", repeats=1, min_ratio=0.5)
    path = out["path"]
    ref_obj = _objectives(X, y, loss, lams, [c for c, _ in out["ref"]], [b for _, b in out["ref"]])
    rec.update(route=path.solver, worst_rel_objective_gap=_worst_rel_gap(path.objective, ref_obj),
               all_converged=bool(path.converged.all()), max_duality_gap=float(path.certificate.max()))
    return [rec]


def bench_l1_quantile_vs_quantileregressor():
    """QuantileRegressor timed on 3 of the 30 lambdas and scaled by 10 (each fit takes ~10 s)."""
    from sklearn.linear_model import QuantileRegressor

    X, y = _design(400, 4000)
    loss = get_loss("quantile", tau=0.3)
    lams = default_lambdas(X, y, loss, N_LAMBDAS, RATIO)
    sample = [0, 15, 29]
    out = {}

    def ours():
        out["path"] = fit_l1_path(X, y, loss, lams)

    def reference():
        out["ref"] = [QuantileRegressor(quantile=0.3, alpha=lams[i], solver="highs").fit(X, y) for i in sample]

    rec = timed_pair("l1_quantile_vs_quantileregressor", ours,
                     "sklearn QuantileRegressor(highs) (3 lambdas x 10)", reference,
                     goal="ratio >= 3", repeats=1)
    rec["reference_seconds"] *= N_LAMBDAS / len(sample)
    rec["ratio"] = rec["reference_seconds"] / rec["ours_seconds"]
    path = out["path"]
    ref_obj = _objectives(X, y, loss, lams[sample], [m.coef_ for m in out["ref"]],
                          [m.intercept_ for m in out["ref"]])
    rec.update(route=path.solver, worst_rel_objective_gap=_worst_rel_gap(path.objective[sample], ref_obj),
               all_converged=bool(path.converged.all()))
    rec["met"] = bool(rec["ratio"] >= 3 and path.converged.all())
    return [rec]


def bench_l1_screening_strong_vs_active():
    """Which working-set seed is faster per loss: the sequential strong rule (ours here) or
    the previous active set plus the worst violators (the 'reference' column). n=300, p=3000."""
    records = []
    for name, task in [("squared", "regression"), ("huber", "regression"), ("quantile", "regression"),
                       ("absolute", "regression"), ("logistic", "classification"),
                       ("hinge", "classification"), ("squared_hinge", "classification")]:
        X, y = _design(300, 3000, task, seed=1)
        loss = get_loss(name)
        lams = default_lambdas(X, y, loss, N_LAMBDAS, RATIO)
        out = {}

        def strong():
            out["strong"] = fit_l1_path(X, y, loss, lams, screening="strong")

        def active():
            out["active"] = fit_l1_path(X, y, loss, lams, screening="active")

        rec = timed_pair(f"l1_screening_{name}", strong, "previous active set + violators", active,
                         goal="information: ratio > 1 means the strong rule is faster", repeats=1)
        rec.update(route=out["strong"].solver,
                   same_objective=bool(np.allclose(out["strong"].objective, out["active"].objective,
                                                   rtol=1e-7)),
                   both_converged=bool(out["strong"].converged.all() and out["active"].converged.all()))
        records.append(rec)
    return records
