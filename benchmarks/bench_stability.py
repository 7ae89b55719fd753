"""Resampling stage: parallel speed-up, and the L1 stability stage against a loop of lasso_path.

Problem (issue 6): n = 400, p = 4000, 10 true effects, subsamples of n/2, 30 λ values on one
grid for all subsamples. The grid runs from λ_max of the full standardised data down to
5 % of it: the sparse end where stability selection works (the Meinshausen–Bühlmann bound
allows q ≤ √(E[V]·(2π−1)·p) ≈ 57 selected features for E[V] = 1, π = 0.9).
"""
from __future__ import annotations

import functools
import os
import time

import numpy as np
from sklearn.linear_model import lasso_path
from threadpoolctl import threadpool_limits

from benchmarks.harness import timed_pair
from pipeline.stability import resample_indices, selection_probabilities
from pipeline.stability.engine import resample_fits

N, P, N_TRUE, N_LAMBDAS, RATIO = 400, 4000, 10, 30, 0.05


def _problem(seed: int = 0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((N, P))
    beta = np.zeros(P)
    beta[:N_TRUE] = rng.choice([-1.0, 1.0], N_TRUE) * rng.uniform(1.0, 2.0, N_TRUE)
    y = X @ beta + rng.standard_normal(N)
    return X, y


def _grid(X, y):
    from pipeline.models.sparse.path import lambda_grid
    from pipeline.models.sparse import lambda_max

    Xs = (X - X.mean(axis=0)) / X.std(axis=0)
    return lambda_grid(lambda_max(Xs, y - y.mean(), "squared"), N_LAMBDAS, RATIO)


def _standardised(X, y):
    mean, scale = X.mean(axis=0), X.std(axis=0)
    return (X - mean) / scale, y - y.mean(), mean, scale


def _to_original_scale(coef, y_mean, mean, scale):
    coef = coef / scale
    return coef, y_mean - coef @ mean


def fit_project_l1(X, y, lambdas):
    """The project's L1 path, squared loss, on standardised columns of one subsample."""
    from pipeline.losses import get_loss
    from pipeline.models.sparse.path import fit_l1_path

    Xs, yc, mean, scale = _standardised(X, y)
    path = fit_l1_path(Xs, yc, get_loss("squared"), lambdas)
    return _to_original_scale(path.coef, y.mean(), mean, scale)


def fit_sklearn_lasso(X, y, lambdas):
    """scikit-learn lasso_path: alpha = λ (both minimise (1/2n)‖y − Xw‖² + λ‖w‖₁)."""
    Xs, yc, mean, scale = _standardised(X, y)
    _, coefs, _ = lasso_path(Xs, yc, alphas=lambdas)
    return _to_original_scale(coefs.T, y.mean(), mean, scale)


def bench_resampling_two_workers():
    X, y = _problem()
    fit = functools.partial(fit_project_l1, lambdas=_grid(X, y))
    resamples = resample_indices(N, "subsample", 100, rng=np.random.SeedSequence(1))

    def stage(n_jobs):
        return resample_fits(fit, X, y, resamples, backend="processes" if n_jobs > 1 else "local",
                             n_jobs=n_jobs)

    load_before = os.getloadavg()[0]   # other work on the machine distorts a parallel speed-up
    start = time.perf_counter()
    stage(2)                      # first call starts the loky workers; later calls reuse them
    cold = time.perf_counter() - start
    one, two = stage(1), stage(2)
    identical = all(getattr(one, k).tobytes() == getattr(two, k).tobytes()
                    for k in ("coefs", "intercepts", "predictions"))
    return [timed_pair("resampling_two_workers", lambda: stage(2), "same stage on one process",
                       lambda: stage(1), goal="ratio >= 1.7 (2 workers vs 1, 100 L1 path fits)",
                       repeats=3, min_ratio=1.7,
                       extra={"first_call_seconds_with_pool_start": cold, "bit_identical": identical,
                              "load_average_1min_before": load_before,
                              "load_average_1min_after": os.getloadavg()[0]})]


def bench_stability_l1_vs_lasso_path_loop():
    X, y = _problem()
    lambdas = _grid(X, y)
    resamples = resample_indices(N, "subsample", 100, rng=np.random.SeedSequence(2))
    ours_fit = functools.partial(fit_project_l1, lambdas=lambdas)
    results = {}

    def ours():
        results["ours"] = resample_fits(ours_fit, X, y, resamples, backend="processes", n_jobs=2)

    def reference():
        # one BLAS thread, as each of our tasks gets: on a busy machine threaded BLAS inside
        # coordinate descent slows it many times over, which would flatter the ratio
        with threadpool_limits(limits=1):
            results["ref"] = np.stack([fit_sklearn_lasso(X[rows], y[rows], lambdas)[0] for rows in resamples])

    resample_fits(ours_fit, X, y, resamples[:2], backend="processes", n_jobs=2)  # warm the pool
    start = time.perf_counter()
    resample_fits(ours_fit, X, y, resamples)
    ours_one_process = time.perf_counter() - start
    record = timed_pair("stability_l1_vs_lasso_path_loop", ours,
                        "sequential loop of sklearn lasso_path (1 BLAS thread)", reference,
                        goal="seconds for 100 subsamples x 30 λ (n=400, p=4000); ours on 2 worker processes",
                        repeats=1, min_ratio=1.0)
    ours_probs = selection_probabilities(results["ours"].coefs)
    ref_probs = selection_probabilities(results["ref"])
    record.update({"ours_one_process_seconds": ours_one_process,
                   "max_abs_selection_probability_difference": float(np.abs(ours_probs - ref_probs).max()),
                   "lambda_ratio": RATIO, "load_average_1min_after": os.getloadavg()[0]})
    return [record]
