"""Non-squared losses in representer form, in the eigen-coordinates of the centred Gram.

With K̃ = UDUᵀ keep the r directions with dⱼ > rank_tol·d_max and write
G = U_r D_r^{1/2}, β = D_r^{1/2} U_rᵀ c. Then Kc = Gβ (+ a constant the intercept
absorbs) and cᵀKc = ‖β‖², so the problem is an ordinary ridge-penalised one in r
variables:  minimise (1/n) Σ loss(yᵢ, b + (Gβ)ᵢ) + (λ/2)‖β‖².

Smooth losses (logistic, squared hinge, Huber): damped Newton on (b, β), warm-started
along the path; the curvature of squared hinge and Huber is the generalised one
(Keerthi & DeCoste 2005, JMLR 6). Non-smooth losses (hinge, absolute, quantile):
cvxpy, with λ a parameter so the problem is compiled once for the whole path.

Effective degrees of freedom reported (intercept excluded):
  smooth      trace of the linearised hat matrix at the optimum,
              tr[(AᵀWA + P)⁻¹AᵀWA] − 1 with A = [1, G], W = loss'' (the usual
              GLM / penalised-likelihood analogue; equals Σ d/(d + nλ) for squared loss);
  non-smooth  number of training points on the kink of the loss (the "elbow") minus
              one, the analogue used for the SVM and quantile-regression paths
              (Hastie, Rosset, Tibshirani & Zhu 2004, JMLR 5; Li, Liu & Zhu 2007, JASA 102).
"""
from __future__ import annotations

import time

import numpy as np
import scipy.linalg

from pipeline.losses import get_loss
from pipeline.models.ridge.eigen import KernelEigen
from pipeline.models.ridge.result import L2Path

RANK_TOL = 1e-10
# Tighter than CLARABEL's defaults (1e-8): the elbow count and reference agreement need it.
DROP_TOL = 1e-10
CLARABEL_TIGHT = {"tol_gap_abs": 1e-11, "tol_gap_rel": 1e-11, "tol_feas": 1e-11, "tol_ktratio": 1e-9}


def _reduced_basis(eig: KernelEigen, rank_tol: float):
    d = eig.eigenvalues
    keep = d > rank_tol * max(d.max(), 1e-300)
    sq = np.sqrt(d[keep])
    return eig.eigenvectors[:, keep] * sq[None, :], eig.eigenvectors[:, keep], sq


def _design(G, with_intercept):
    """A = [1, G] (or G) and the penalty mask (0 on the intercept, 1 on β)."""
    if not with_intercept:
        return G, np.ones(G.shape[1])
    return np.hstack([np.ones((G.shape[0], 1)), G]), np.r_[0.0, np.ones(G.shape[1])]


def _objective(loss, y, A, pen, theta, lam):
    f = A @ theta
    return float(np.mean(loss.value(y, f)) + 0.5 * lam * (pen * theta) @ theta), f


def _hessian(loss, y, A, pen, f, lam):
    n = A.shape[0]
    M = (A.T * (loss.second_derivative(y, f) / n)) @ A
    # the tiny unpenalised-intercept term: Huber / squared hinge can lose all curvature
    ridge = lam * pen + 1e-12 * (1.0 - pen) * (1.0 + np.diag(M))
    return M, scipy.linalg.cho_factor(M + np.diag(ridge), check_finite=False), ridge


def _newton(loss, y, A, pen, theta, lam, tol, max_iter):
    """Damped Newton with Armijo backtracking; returns (θ, converged, iterations, df)."""
    n, q = A.shape
    obj, f = _objective(loss, y, A, pen, theta, lam)
    for it in range(1, max_iter + 1):
        grad = A.T @ (loss.derivative(y, f) / n) + lam * pen * theta
        M, chol, ridge = _hessian(loss, y, A, pen, f, lam)
        step = scipy.linalg.cho_solve(chol, grad, check_finite=False)
        decrement = float(grad @ step)
        if 0.5 * decrement <= tol * max(1.0, abs(obj)):
            return theta, True, it, _linearised_df(chol, ridge, pen)
        t = 1.0
        while True:
            new_theta = theta - t * step
            new_obj, new_f = _objective(loss, y, A, pen, new_theta, lam)
            if new_obj <= obj - 0.25 * t * decrement or t < 1e-10:
                break
            t *= 0.5
        if new_obj > obj:
            return theta, False, it, _linearised_df(chol, ridge, pen)
        theta, obj, f = new_theta, new_obj, new_f
    M, chol, ridge = _hessian(loss, y, A, pen, f, lam)
    return theta, False, max_iter, _linearised_df(chol, ridge, pen)


def _linearised_df(chol, ridge, pen):
    """tr[(M + R)⁻¹M] − (#unpenalised) = q − Σ Rᵢᵢ [(M + R)⁻¹]ᵢᵢ − (#unpenalised)."""
    inv, info = scipy.linalg.lapack.dpotri(chol[0], lower=chol[1])
    if info != 0:
        raise np.linalg.LinAlgError(f"dpotri failed with info={info}")
    return float(len(ridge) - ridge @ np.diag(inv) - np.sum(pen == 0))


def _smooth_path(loss, y, G, lambdas, tol, max_iter, with_intercept, col_scale=None,
                 drop_tol=DROP_TOL):
    """Warm-started Newton along the path.

    With ``col_scale`` (the eigenvalue dⱼ behind each column of G = U D^{1/2}) the
    directions with dⱼ ≤ drop_tol·nλ are left out at that λ: at the optimum such a
    direction moves f by at most (dⱼ/(nλ))·‖loss'‖, i.e. by a drop_tol fraction.
    """
    A, pen = _design(G, with_intercept)
    n, q = A.shape
    start = np.zeros(q)
    if with_intercept:
        start[0] = loss.intercept_only(y)
    scale = None if col_scale is None else (np.r_[np.inf, col_scale] if with_intercept else col_scale)
    theta, out = start.copy(), []
    for lam in lambdas:
        active = np.arange(q) if scale is None else np.flatnonzero(scale > drop_tol * n * lam)
        try:
            sub, ok, it, df = _newton(loss, y, A[:, active], pen[active], theta[active], lam, tol,
                                      max_iter)
            theta = np.zeros(q)
            theta[active] = sub
            out.append((theta.copy(), df, ok, f"{'optimal' if ok else 'not converged'} "
                                              f"(Newton, {it} iterations, {len(active)} directions)"))
        except (np.linalg.LinAlgError, ValueError, FloatingPointError) as exc:
            out.append((np.full(q, np.nan), np.nan, False, f"failed: {exc}"))
            theta = start.copy()
    return out


def _elbow_df(loss, y, f, scale, with_intercept):
    arg = (y - f) if loss.task == "regression" else y * f
    on = np.zeros(len(y), dtype=bool)
    for kink in loss.kinks:
        on |= np.abs(arg - kink) <= 1e-6 * scale
    return float(max(on.sum() - int(with_intercept), 0))


def _nonsmooth_path(loss, y, G, lambdas, solver, solver_opts, with_intercept):
    import cvxpy as cp
    A, pen = _design(G, with_intercept)
    theta = cp.Variable(A.shape[1])
    lam = cp.Parameter(nonneg=True)
    penalised = theta[1:] if with_intercept else theta
    problem = cp.Problem(cp.Minimize(loss.cvxpy_sum(y, A @ theta) / len(y)
                                     + 0.5 * lam * cp.sum_squares(penalised)))
    scale = max(1.0, float(np.std(y))) if loss.task == "regression" else 1.0
    out = []
    for value in lambdas:
        lam.value = float(value)
        try:
            problem.solve(solver=solver, **solver_opts)
            ok = problem.status == cp.OPTIMAL and theta.value is not None
            status = f"{problem.status} ({solver})"
        except cp.error.SolverError as exc:
            ok, status = False, f"failed: {exc}"
        if theta.value is None:
            out.append((np.full(A.shape[1], np.nan), np.nan, False, status))
            continue
        tv = np.asarray(theta.value).copy()
        out.append((tv, _elbow_df(loss, y, A @ tv, scale, with_intercept), ok, status))
    return out


def solve_in_basis(G, y, loss, lambdas, with_intercept: bool, *, tol: float = 1e-12,
                   max_iter: int = 100, solver: str = "CLARABEL", solver_opts: dict | None = None,
                   col_scale=None):
    """min (1/n) Σ loss(y, b + Gβ) + (λ/2)‖β‖² along the path, for any basis G (n × r).

    Returns (b (L,), β (L, r), effective df (L,), converged (L,), status, df_kind).
    """
    loss = get_loss(loss)
    if loss.smooth:
        rows = _smooth_path(loss, y, G, lambdas, tol, max_iter, with_intercept, col_scale)
        df_kind = "trace of the linearised hat matrix at the optimum, minus the intercept"
    else:
        if solver_opts is None:
            solver_opts = CLARABEL_TIGHT if solver == "CLARABEL" else {}
        rows = _nonsmooth_path(loss, y, G, lambdas, solver, solver_opts, with_intercept)
        df_kind = "training points on the loss kink (elbow), minus the intercept"
    theta = np.array([row[0] for row in rows])
    b, beta = (theta[:, 0], theta[:, 1:]) if with_intercept else (np.zeros(len(rows)), theta)
    return (b, beta, np.array([row[1] for row in rows]), np.array([row[2] for row in rows]),
            tuple(row[3] for row in rows), df_kind)


def general_path(eig: KernelEigen, y, loss, lambdas, *, rank_tol: float = RANK_TOL,
                 **solve_options) -> L2Path:
    start = time.perf_counter()
    loss = get_loss(loss)
    G, U_r, sq = _reduced_basis(eig, rank_tol)
    b, beta, df, ok, status, df_kind = solve_in_basis(G, y, loss, lambdas, eig.centred,
                                                      col_scale=sq**2, **solve_options)
    C = (beta / sq[None, :]) @ U_r.T               # c = U_r D_r^{-1/2} β
    if eig.centred:
        C -= C.mean(axis=1, keepdims=True)         # exact c ⟂ 1 (see closed_form)
    return L2Path(lambdas=np.asarray(lambdas, float), dual_coef=C,
                  intercept=b - eig.intercept_shift(C), effective_df=df, loo_error=None,
                  gcv=None, converged=ok, status=status, fit_seconds=time.perf_counter() - start,
                  loss=loss.name, df_kind=df_kind, psd_ratio=eig.psd.ratio)
