"""The whole squared-loss job written by hand with scikit-learn, as a careful user would (benchmark reference).

    python -m benchmarks.by_hand_job DATA.csv OUT.npz TOL

Same steps as `penduel run` on the same CSV: a 25 % test split; 5-fold CV over 30 λ for the lasso
(`lasso_path`, warm-started along the grid, alpha = λ: both minimise (1/2n)‖y − Xw‖² + λ‖w‖₁) and for
ridge (`Ridge(alpha = n·λ)`, one fit per λ); the λ of least CV error; refits on the training rows; a
paired bootstrap (1000 resamples of the test rows) of the RMSE difference; and 50 subsamples of half the
training rows refitted along both paths for the selection probabilities. Columns are standardised on
the training rows of each fit only. One process, one loop: no parallelism.
"""
from __future__ import annotations

import sys
import time

START = time.perf_counter()

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from sklearn.linear_model import Ridge, lasso_path  # noqa: E402
from sklearn.model_selection import KFold, train_test_split  # noqa: E402
from sklearn.preprocessing import StandardScaler  # noqa: E402

N_LAMBDAS, RATIO, FOLDS, N_BOOT, N_SUB = 30, 0.01, 5, 1000, 50


def lasso_fit(X, y, lambdas, tol):
    """Coefficients (L, p) and intercepts (L,) on the original columns, standardised on these rows."""
    scaler = StandardScaler().fit(X)
    coefs = lasso_path(scaler.transform(X), y - y.mean(), alphas=lambdas, tol=tol, max_iter=100_000)[1].T
    coefs = coefs / scaler.scale_
    return coefs, y.mean() - coefs @ scaler.mean_


def ridge_fit(X, y, lambdas):
    scaler = StandardScaler().fit(X)
    Z = scaler.transform(X)
    fits = [Ridge(alpha=len(y) * lam).fit(Z, y) for lam in lambdas]
    coefs = np.array([m.coef_ for m in fits]) / scaler.scale_
    return coefs, np.array([m.intercept_ for m in fits]) - coefs @ scaler.mean_


def main(data_path: str, out_path: str, tol: float) -> None:
    frame = pd.read_csv(data_path)
    y = frame.pop("y").to_numpy(float)
    X = frame.to_numpy(float)
    tr, te = train_test_split(np.arange(len(y)), test_size=0.25, random_state=0)
    Xtr, ytr, Xte, yte = X[tr], y[tr], X[te], y[te]
    Ztr = StandardScaler().fit_transform(Xtr)
    lam_max = np.max(np.abs(Ztr.T @ (ytr - ytr.mean()))) / len(ytr)
    l1_grid = np.geomspace(lam_max, RATIO * lam_max, N_LAMBDAS)
    l2_grid = np.geomspace(1e2, 1e-4, N_LAMBDAS)
    fits = {"l1": lambda X_, y_: lasso_fit(X_, y_, l1_grid, tol), "l2": lambda X_, y_: ridge_fit(X_, y_, l2_grid)}
    cv = {k: np.zeros((FOLDS, N_LAMBDAS)) for k in fits}
    for k, (a, b) in enumerate(KFold(FOLDS, shuffle=True, random_state=0).split(Xtr)):
        for name, fit in fits.items():
            coefs, icpt = fit(Xtr[a], ytr[a])
            cv[name][k] = np.mean((ytr[b][:, None] - Xtr[b] @ coefs.T - icpt[None, :]) ** 2, axis=0)
    test_sq, final = {}, {}
    for name, fit in fits.items():
        best = int(np.argmin(cv[name].mean(0)))
        coefs, icpt = fit(Xtr, ytr)
        final[name] = coefs
        test_sq[name] = (yte - Xte @ coefs[best] - icpt[best]) ** 2
    rng = np.random.default_rng(0)
    boot = rng.integers(0, len(yte), (N_BOOT, len(yte)))
    diff = np.sqrt(test_sq["l1"][boot].mean(1)) - np.sqrt(test_sq["l2"][boot].mean(1))
    selected = np.zeros((N_LAMBDAS, X.shape[1]))
    for _ in range(N_SUB):
        rows = rng.choice(len(ytr), len(ytr) // 2, replace=False)
        selected += lasso_fit(Xtr[rows], ytr[rows], l1_grid, tol)[0] != 0
        ridge_fit(Xtr[rows], ytr[rows], l2_grid)
    np.savez(out_path, l1_final=final["l1"], l1_grid=l1_grid, train_rows=tr, selection=selected / N_SUB,
             diff_interval=np.quantile(diff, [0.05, 0.95]), seconds=time.perf_counter() - START)


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2], float(sys.argv[3]))
