"""Cross-validation folds and λ selection rules.

The λ grid is indexed from the simplest model (largest λ, column 0) to the most
complex (smallest λ). A CV error table has one row per split and one column per λ;
a column holding any NaN is a λ where some fit failed, and it is never chosen,
because its mean would be over different folds than the others.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from sklearn.model_selection import KFold, RepeatedKFold, RepeatedStratifiedKFold, StratifiedKFold

RULES = ("min", "one_se")


def _sklearn_seed(rng: np.random.Generator) -> int:
    # scikit-learn splitters take an int seed; draw it from the caller's Generator so the
    # folds follow the one SeedSequence tree.
    return int(rng.integers(0, 2**31 - 1))


def make_folds(
    n: int,
    n_folds: int,
    rng: np.random.Generator,
    y: np.ndarray | None = None,
    stratify: bool = False,
    repeats: int = 1,
) -> list[tuple[np.ndarray, np.ndarray]]:
    """(train_idx, val_idx) pairs of shuffled K-fold CV, repeated `repeats` times.

    With `stratify` the class proportions of `y` are kept in every fold. The
    result depends only on (n, n_folds, y, stratify, repeats) and the state of `rng`.
    """
    if not 2 <= n_folds <= n:
        raise ValueError(f"n_folds must be between 2 and n={n}; got {n_folds}")
    if repeats < 1:
        raise ValueError(f"repeats must be at least 1; got {repeats}")
    if stratify and y is None:
        raise ValueError("stratify=True needs the labels y")
    seed = _sklearn_seed(rng)
    if stratify:
        if repeats == 1:
            splitter = StratifiedKFold(n_folds, shuffle=True, random_state=seed)
        else:
            splitter = RepeatedStratifiedKFold(n_splits=n_folds, n_repeats=repeats, random_state=seed)
    elif repeats == 1:
        splitter = KFold(n_folds, shuffle=True, random_state=seed)
    else:
        splitter = RepeatedKFold(n_splits=n_folds, n_repeats=repeats, random_state=seed)
    labels = np.zeros(n) if y is None else np.asarray(y)
    if len(labels) != n:
        raise ValueError(f"y has {len(labels)} rows but n={n}")
    return [(tr, va) for tr, va in splitter.split(np.zeros((n, 1)), labels)]


def cv_summary(cv_errors: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-column mean and standard error (std with ddof=1 over splits / √n_splits).

    Columns with any NaN get NaN for both. With repeated CV the splits are not
    independent, so this standard error is optimistic (common practice all the same).
    """
    errors = np.asarray(cv_errors, dtype=float)
    if errors.ndim != 2 or errors.shape[0] < 2:
        raise ValueError(f"cv_errors must be (n_splits >= 2, L); got shape {errors.shape}")
    mean = errors.mean(axis=0)
    se = errors.std(axis=0, ddof=1) / np.sqrt(errors.shape[0])
    return mean, se


def choose_lambda_index(cv_errors: np.ndarray, rule: str = "min") -> int:
    """Column index chosen by `rule`.

    "min": the column with the smallest mean CV error (the simplest one on ties).
    "one_se": the simplest column whose mean is within one standard error of the
    minimum, the error bar being that of the minimising column (ESL 2nd ed. §7.10).
    """
    if rule not in RULES:
        raise ValueError(f"unknown selection rule {rule!r}; allowed: {', '.join(RULES)}")
    mean, se = cv_summary(cv_errors)
    valid = np.isfinite(mean)
    if not valid.any():
        raise ValueError("every λ has a failed fit (NaN) in some split; nothing to choose")
    masked = np.where(valid, mean, np.inf)
    best = int(np.argmin(masked))
    if rule == "min":
        return best
    within = valid & (mean <= mean[best] + se[best])
    return int(np.flatnonzero(within)[0])


@dataclass(frozen=True)
class NestedCVResult:
    outer_errors: np.ndarray    # (n_outer_splits,) test error of the select-then-fit procedure
    chosen_index: np.ndarray    # (n_outer_splits,) λ column chosen by the inner CV
    mean: float
    se: float


def nested_cv(
    n: int,
    path_errors: Callable[[np.ndarray, np.ndarray], np.ndarray],
    rng: np.random.Generator,
    n_outer: int = 5,
    n_inner: int = 5,
    rule: str = "min",
    y: np.ndarray | None = None,
    stratify: bool = False,
) -> NestedCVResult:
    """Honest error estimate of the whole procedure "choose λ by inner CV, refit, predict".

    `path_errors(train_idx, eval_idx)` fits the model on `train_idx` along the fixed
    λ grid and returns the (L,) errors on `eval_idx` (NaN where a fit failed). It is
    called for every inner split and once per outer split; the outer test rows never
    take part in choosing λ.
    """
    outer = make_folds(n, n_outer, rng, y=y, stratify=stratify)
    errors, chosen = [], []
    for train, test in outer:
        inner = make_folds(len(train), n_inner, rng, y=None if y is None else np.asarray(y)[train],
                           stratify=stratify)
        table = np.vstack([path_errors(train[tr], train[va]) for tr, va in inner])
        idx = choose_lambda_index(table, rule)
        chosen.append(idx)
        errors.append(float(np.asarray(path_errors(train, test))[idx]))
    errors_arr = np.asarray(errors)
    return NestedCVResult(
        outer_errors=errors_arr,
        chosen_index=np.asarray(chosen, dtype=int),
        mean=float(errors_arr.mean()),
        se=float(errors_arr.std(ddof=1) / np.sqrt(len(errors_arr))),
    )
