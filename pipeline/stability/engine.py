"""Fit a linear model path on every resample of a data set, outside the pipeline.

The pipeline refits resamples as ordinary fit tasks (see `stage`); this engine serves callers
that have their own path function, such as the resampling benchmark (`make bench`).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy import sparse

from ..execution import run_tasks
from .schemes import in_fit_mask


@dataclass(frozen=True)
class ResampledFits:
    """Outcome of fitting one family on every resample.

    coefs: (M, L, p) coefficient paths over explicit features; intercepts: (M, L);
    predictions: (M, L, n) on every row of X, NaN where the row was in that resample's fit.
    """

    coefs: np.ndarray
    intercepts: np.ndarray
    predictions: np.ndarray
    resamples: tuple


@dataclass(frozen=True)
class _FitTask:
    fit: Callable
    rows: np.ndarray


def _fit_one(task: _FitTask, data):
    X, y = data
    coef, intercept = task.fit(X[task.rows], y[task.rows])
    coef = np.atleast_2d(np.asarray(coef, dtype=float))
    intercept = np.atleast_1d(np.asarray(intercept, dtype=float))
    if np.count_nonzero(coef) < 0.25 * coef.size:
        coef = sparse.csr_matrix(coef)  # sparse paths travel back from workers several times smaller
    return coef, intercept, intercept[:, None] + np.asarray(coef @ X.T)


def _dense(coef) -> np.ndarray:
    return coef.toarray() if sparse.issparse(coef) else coef


def resample_fits(fit: Callable, X: np.ndarray, y: np.ndarray, resamples: list[np.ndarray], *,
                  backend: str = "local", n_jobs: int = 1, progress: str | None = None,
                  scheduler_address: str | None = None) -> ResampledFits:
    """Fit a linear model path on every resample through `run_tasks`.

    fit(X_rows, y_rows) -> (coef (L, p), intercept (L,)) must be a picklable module-level
    callable; X and y are sent once to each worker. Predictions are b + Xw on all rows and
    masked to NaN on the rows each fit saw, so only held-out predictions remain.
    """
    X = np.asarray(X, dtype=float)
    y = np.asarray(y)
    tasks = [_FitTask(fit, np.asarray(rows)) for rows in resamples]
    out = run_tasks(_fit_one, tasks, backend=backend, n_jobs=n_jobs, progress=progress,
                    scheduler_address=scheduler_address, shared=(X, y))
    coefs = np.stack([_dense(o[0]) for o in out])
    intercepts = np.stack([o[1] for o in out])
    predictions = np.stack([o[2] for o in out])
    predictions = np.where(in_fit_mask(X.shape[0], resamples)[:, None, :], np.nan, predictions)
    return ResampledFits(coefs, intercepts, predictions, tuple(resamples))
