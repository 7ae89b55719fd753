"""L2 (representer) family: path speed against grid search and the eigh floor; memory at scale.

Memory figures are the peak resident set of a fresh child process that runs only that workload
(its own VmHWM, see harness.own_peak_mib), so they include the interpreter and imported libraries;
`rss_before_workload_mib` is what the imports alone hold.
"""
from __future__ import annotations

import time

import numpy as np

from benchmarks.harness import child_main, load_average, memory_record, run_fresh, timed_pair

PATH_N, PATH_P, N_LAMBDAS, BANDWIDTH = 2000, 10, 30, 3.0


def _regression_data(n, p, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    y = np.sin(X[:, 0]) + X[:, 1] * X[:, 2] + 0.3 * rng.normal(size=n)
    return X, y


def bench_l2_path_vs_gridsearch():
    from sklearn.kernel_ridge import KernelRidge
    from sklearn.model_selection import GridSearchCV

    from pipeline.kernels import gram
    from pipeline.models.ridge.path import fit_l2_path, l2_lambda_grid

    X, y = _regression_data(PATH_N, PATH_P)
    n = len(y)
    lambdas = l2_lambda_grid(gram(X, kernel="rbf", bandwidth=BANDWIDTH), N_LAMBDAS)

    def ours():  # Gram + whole path + exact LOO, then the LOO choice
        path = fit_l2_path(gram(X, kernel="rbf", bandwidth=BANDWIDTH), y, "squared", lambdas)
        return path.lambdas[np.nanargmin(path.loo_error)]

    def reference():  # KernelRidge alpha = nλ, γ = 1/(2ℓ²); 5-fold CV over the same grid
        search = GridSearchCV(KernelRidge(kernel="rbf", gamma=1 / (2 * BANDWIDTH**2)),
                              {"alpha": list(n * lambdas)}, cv=5,
                              scoring="neg_mean_squared_error")
        return search.fit(X, y).best_params_["alpha"] / n

    return [timed_pair("l2_path_vs_gridsearch", ours, "GridSearchCV(KernelRidge, cv=5)", reference,
                       goal="ratio >= 20 (n=2000, rbf, 30 λ, with LOO)", repeats=3, min_ratio=20.0,
                       extra={"n": n, "n_lambdas": N_LAMBDAS, **load_average()})]


def bench_l2_path_vs_eigh_floor():
    from pipeline.kernels import gram
    from pipeline.models.ridge.path import fit_l2_path, l2_lambda_grid

    X, y = _regression_data(PATH_N, PATH_P)
    K = gram(X, kernel="rbf", bandwidth=BANDWIDTH)
    lambdas = l2_lambda_grid(K, N_LAMBDAS)
    return [timed_pair("l2_path_vs_eigh_floor", lambda: fit_l2_path(K, y, "squared", lambdas),
                       "one numpy.linalg.eigh of the same K", lambda: np.linalg.eigh(K),
                       goal="ratio >= 0.667 (at most 1.5x one eigh)", repeats=5, min_ratio=0.667,
                       extra={"n": PATH_N, "n_lambdas": N_LAMBDAS, **load_average()})]


# ------------------------------------------------------------- child workloads
def _child_nystrom() -> dict:
    from pipeline.models.ridge.path import predict_rows
    from pipeline.models.ridge.nystrom import fit_nystrom_path, nystrom_gap

    X, y = _regression_data(50_000, PATH_P, seed=1)
    lambdas = np.geomspace(1e-1, 1e-7, N_LAMBDAS)
    start = time.perf_counter()
    ny = fit_nystrom_path(X, y, "rbf", lambdas, n_landmarks=1000, seed=0, bandwidth=BANDWIDTH)
    fit_s = time.perf_counter() - start
    pred = predict_rows(ny.path, X[:5000], ny.landmarks, "rbf", bandwidth=BANDWIDTH)
    gap = nystrom_gap(X, y, "rbf", lambdas, n_landmarks=1000, subsample=2000, bandwidth=BANDWIDTH)
    return {"fit_seconds": fit_s, "n": 50_000, "n_landmarks": 1000, "n_lambdas": N_LAMBDAS,
            "predict_finite": bool(np.isfinite(pred).all()),
            "best_loo": float(np.nanmin(ny.path.loo_error)),
            **{f"gap_{k}": v for k, v in gap.items()}}


def _child_million_features() -> dict:
    from pipeline.features.basic import random_fourier_blocks
    from pipeline.kernels import feature_gram
    from pipeline.models.ridge.path import fit_l2_path, predict_path

    X, y = _regression_data(2500, PATH_P, seed=2)
    Xtr, ytr, Xte, yte = X[:2000], y[:2000], X[2000:], y[2000:]
    lambdas = np.geomspace(1e-1, 1e-6, N_LAMBDAS)
    start = time.perf_counter()
    blocks = random_fourier_blocks(PATH_P, 1_000_000, BANDWIDTH, seed=0, block_size=10_000)
    K, K_cross = feature_gram(blocks, Xtr, Xte)
    gram_s = time.perf_counter() - start
    path = fit_l2_path(K, ytr, "squared", lambdas)
    test_mse = np.mean((predict_path(path, K_cross) - yte) ** 2, axis=1)
    return {"seconds": time.perf_counter() - start, "gram_seconds": gram_s, "n": 2000,
            "n_features": 1_000_000, "explicit_matrix_gib": 2000 * 1_000_000 * 8 / 2**30,
            "best_test_mse": float(test_mse.min())}


def bench_l2_nystrom_large_n():
    r = run_fresh("bench_l2", "nystrom")
    peak = r.pop("peak_mib")
    return [memory_record("l2_nystrom_large_n", peak, goal="peak <= 2048 MiB (n=50000, m=1000, 30 λ)",
                          limit_mib=2048, extra={**r, **load_average()})]


def bench_l2_million_features_memory():
    r = run_fresh("bench_l2", "million")
    peak = r.pop("peak_mib")
    return [memory_record("l2_million_features_memory", peak,
                          goal="peak <= 2048 MiB (1e6 random Fourier features, n=2000, fit+predict)",
                          limit_mib=2048, extra={**r, **load_average()})]


if __name__ == "__main__":
    child_main({"nystrom": _child_nystrom, "million": _child_million_features})
