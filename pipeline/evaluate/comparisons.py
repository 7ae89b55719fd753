"""Comparisons of two models: the paired bootstrap on shared test rows, the corrected
resampled t-test on shared CV folds, and the verdict sentence."""
from __future__ import annotations

import math

import numpy as np
from scipy import stats

from .intervals import bootstrap_draws, bootstrap_interval



def corrected_resampled_ttest(diffs, n_train: int, n_test: int, level: float = 0.9) -> dict:
    """Corrected resampled t-test of Nadeau & Bengio (2003, Machine Learning 52, 239-281).

    `diffs` are the J per-split differences of a score between two models fitted on the
    same splits. The naive variance σ̂²/J ignores that training sets overlap; the
    correction uses (1/J + n_test/n_train)·σ̂², with J − 1 degrees of freedom. For
    K-fold CV repeated R times, J = K·R and n_test/n_train ≈ 1/(K − 1).
    """
    d = np.asarray(diffs, dtype=float).ravel()
    if d.size < 2 or not np.all(np.isfinite(d)):
        raise ValueError(f"need at least 2 finite differences; got {d.size} values")
    if n_train <= 0 or n_test <= 0:
        raise ValueError(f"n_train and n_test must be positive; got {n_train}, {n_test}")
    j = d.size
    mean = float(d.mean())
    # all-equal differences: variance exactly 0 (d.var can leave rounding residue)
    variance = 0.0 if np.ptp(d) == 0 else float(d.var(ddof=1))
    factor = 1.0 / j + n_test / n_train
    se = math.sqrt(factor * variance)
    dof = j - 1
    if se > 0:
        t = mean / se
    else:  # every split gave the same difference
        t = 0.0 if mean == 0 else math.copysign(math.inf, mean)
    p_value = float(2 * stats.t.sf(abs(t), dof))
    half = float(stats.t.ppf((1 + level) / 2, dof)) * se
    return {"mean": mean, "variance": variance, "correction": factor, "se": se, "t": t,
            "dof": dof, "p_value": p_value, "low": mean - half, "high": mean + half, "level": level}


def winner(low: float, high: float, lower_is_better: bool) -> int | None:
    """0 if model a is better, 1 if b is, None when the interval of a − b holds 0 or is undefined."""
    if not (np.isfinite(low) and np.isfinite(high)) or low <= 0 <= high:
        return None
    a_lower = high < 0
    return 0 if a_lower == lower_is_better else 1


def verdict(name_a: str, name_b: str, diff: float, low: float, high: float, metric: str,
            lower_is_better: bool, level: float = 0.9) -> str:
    """One plain sentence about the difference a − b and its interval."""
    detail = (f"{name_a} − {name_b} = {diff:.4g}, {level:.0%} interval [{low:.4g}, {high:.4g}]")
    if not (np.isfinite(low) and np.isfinite(high)):
        return f"On {metric}, {name_a} and {name_b} could not be compared: the interval is undefined."
    win = winner(low, high, lower_is_better)
    if win is None:
        return (f"On {metric}, the difference between {name_a} and {name_b} is not "
                f"distinguishable from noise ({detail}, which contains 0).")
    better, worse = (name_a, name_b) if win == 0 else (name_b, name_a)
    direction = "lower" if lower_is_better else "higher"
    return (f"On {metric}, {better} is better than {worse} by {abs(diff):.4g} "
            f"({direction} is better; {detail}, which excludes 0).")


def compare_pair(y, pred_a, pred_b, metric, *, name_a: str, name_b: str, rng: np.random.Generator,
                 n_boot: int = 2000, level: float = 0.9, method: str = "percentile") -> dict:
    """One verdict-table row: each model's score with its interval and the paired
    difference a − b, all from one shared set of resampled test rows."""
    (metric,), y, (pred_a, pred_b), values, jack = bootstrap_draws([metric], y, [pred_a, pred_b], n_boot,
                                                              level, rng, method)
    (va, vb), (ja, jb) = values[0], jack[0]
    est_a, est_b = metric(y, pred_a), metric(y, pred_b)
    diff = est_a - est_b
    low, high = bootstrap_interval(va - vb, level, f"the {metric.name} difference", method, diff, ja - jb)
    win = winner(low, high, metric.lower_is_better)
    return {
        "metric": metric.name, "lower_is_better": metric.lower_is_better, "level": level, "method": method,
        "name_a": name_a, "estimate_a": est_a, "interval_a": bootstrap_interval(va, level, metric.name, method, est_a, ja),
        "name_b": name_b, "estimate_b": est_b, "interval_b": bootstrap_interval(vb, level, metric.name, method, est_b, jb),
        "diff": diff, "diff_low": low, "diff_high": high,
        "winner": None if win is None else (name_a, name_b)[win],
        "verdict": verdict(name_a, name_b, diff, low, high, metric.name, metric.lower_is_better, level),
    }


def paired_bootstrap_diff(y, pred_a, pred_b, metric, n_boot: int = 2000, level: float = 0.9, *,
                          rng: np.random.Generator, method: str = "percentile") -> tuple[float, float, float]:
    """metric(a) − metric(b) on all rows, with an interval from resampling the SAME rows
    for both, so the noise the two share cancels."""
    row = compare_pair(y, pred_a, pred_b, metric, name_a="a", name_b="b", rng=rng, n_boot=n_boot,
                       level=level, method=method)
    return row["diff"], row["diff_low"], row["diff_high"]


