"""Resampling schemes and a resampling stage that fits one model family on every resample.

Both families are fitted on the same index arrays, so their stability is compared on
identical resamples. Complementary pairs follow Shah & Samworth (2013, JRSS-B 75(1)).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
from scipy import sparse

from pipeline.execution import run_tasks

SCHEMES = ("subsample", "bootstrap", "complementary_pairs")


def _by_class(n: int, y) -> list[np.ndarray]:
    if y is None:
        return [np.arange(n)]
    y = np.asarray(y)
    if y.shape != (n,):
        raise ValueError(f"y must have shape ({n},), got {y.shape}")
    return [np.flatnonzero(y == label) for label in np.unique(y)]


def _subsample(rng, strata, fraction):
    parts = []
    for rows in strata:
        size = int(np.floor(fraction * rows.size))
        if size < 1:
            raise ValueError(f"fraction {fraction} leaves no row of a group of {rows.size}")
        parts.append(rng.choice(rows, size=size, replace=False))
    return np.sort(np.concatenate(parts))


def _bootstrap(rng, strata):
    return np.sort(np.concatenate([rng.choice(rows, size=rows.size, replace=True) for rows in strata]))


def _complementary_pair(rng, strata):
    # Shah & Samworth: a random split into two disjoint halves of size floor(n/2) each.
    first, second = [], []
    for rows in strata:
        half = rows.size // 2
        if half < 1:
            raise ValueError(f"a group of {rows.size} row(s) cannot be split into two halves")
        order = rng.permutation(rows)
        first.append(order[:half])
        second.append(order[half:2 * half])
    return np.sort(np.concatenate(first)), np.sort(np.concatenate(second))


def resample_indices(n: int, scheme: str = "subsample", n_resamples: int = 100, fraction: float = 0.5,
                     rng: Any = None, y=None) -> list[np.ndarray]:
    """Sorted row-index arrays, one per resample.

    subsample: floor(fraction * n) rows without replacement; bootstrap: n rows with replacement;
    complementary_pairs: n_resamples / 2 random splits into two disjoint halves, returned as
    [A1, A1', A2, A2', ...] (fraction must be 1/2). When y is given every draw is made within
    each class separately, so class proportions are kept. rng: Generator, SeedSequence or int.
    """
    if scheme not in SCHEMES:
        raise ValueError(f"scheme must be one of {SCHEMES}, got {scheme!r}")
    if n < 2:
        raise ValueError(f"n must be at least 2, got {n}")
    if n_resamples < 1:
        raise ValueError(f"n_resamples must be >= 1, got {n_resamples}")
    if not 0 < fraction <= 1:
        raise ValueError(f"fraction must be in (0, 1], got {fraction}")
    rng = np.random.default_rng(rng)
    strata = _by_class(n, y)
    if scheme == "subsample":
        return [_subsample(rng, strata, fraction) for _ in range(n_resamples)]
    if scheme == "bootstrap":
        return [_bootstrap(rng, strata) for _ in range(n_resamples)]
    if n_resamples % 2:
        raise ValueError(f"complementary pairs need an even n_resamples, got {n_resamples}")
    if fraction != 0.5:
        raise ValueError(f"complementary pairs use halves: fraction must be 0.5, got {fraction}")
    return [half for _ in range(n_resamples // 2) for half in _complementary_pair(rng, strata)]


def in_fit_mask(n: int, resamples: list[np.ndarray]) -> np.ndarray:
    """(M, n) boolean: True where row j was used in the fit of resample m."""
    mask = np.zeros((len(resamples), n), dtype=bool)
    for m, rows in enumerate(resamples):
        mask[m, rows] = True
    return mask


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


def held_out_rows(n: int, rows: np.ndarray) -> np.ndarray:
    """Rows of 0..n-1 not used by a resample (out-of-bag rows for the bootstrap)."""
    return np.setdiff1d(np.arange(n), rows)
