"""Comparisons of two models: the paired difference on shared test rows, the corrected
resampled t-test on shared CV folds, and the verdict sentence.

One sign convention: a difference is the first model's ADVANTAGE over the second in the metric's
better direction — positive means the first (the sparse family in a verdict) is better.
"""
from __future__ import annotations

import math

import numpy as np

from .bounded import bounded_difference, bounded_interval
from .intervals import bootstrap_draws, bootstrap_interval
from .metrics import as_metric



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
    from scipy import stats   # loaded when a comparison is computed, not when a config is read

    p_value = float(2 * stats.t.sf(abs(t), dof))
    half = float(stats.t.ppf((1 + level) / 2, dof)) * se
    return {"mean": mean, "variance": variance, "correction": factor, "se": se, "t": t,
            "dof": dof, "p_value": p_value, "low": mean - half, "high": mean + half, "level": level}


def winner(low: float, high: float, lower_is_better: bool) -> int | None:
    """0 if model a is better, 1 if b is, None when the interval of the raw difference a − b holds 0
    or is undefined."""
    if not (np.isfinite(low) and np.isfinite(high)) or low <= 0 <= high:
        return None
    a_lower = high < 0
    return 0 if a_lower == lower_is_better else 1


def advantage_winner(low: float, high: float) -> int | None:
    """From an interval of a's advantage over b (positive = a better): 0 if a wins, 1 if b does,
    None when it holds 0 or is undefined."""
    return winner(low, high, lower_is_better=False)


def verdict(name_a: str, name_b: str, advantage: float, low: float, high: float, metric: str,
            level: float = 0.9, unit: str = "") -> str:
    """One plain sentence about a's advantage over b (positive = a better) and its interval."""
    u = f" {unit}" if unit else ""
    detail = f"{level:.0%} interval {low:.3g} to {high:.3g}{u}"
    if not (np.isfinite(low) and np.isfinite(high)):
        return f"On {metric}, {name_a} and {name_b} could not be compared: the interval is undefined."
    win = advantage_winner(low, high)
    if win is None:
        return (f"On {metric}, {name_a} and {name_b} are not distinguishable: {name_a}'s advantage is "
                f"{advantage:.3g}{u} ({detail}, which contains 0).")
    better, worse = (name_a, name_b) if win == 0 else (name_b, name_a)
    return (f"On {metric}, {better} is better than {worse} by {abs(advantage):.3g}{u} "
            f"({name_a}'s advantage {advantage:.3g}, {detail}, which excludes 0).")


def _one_interval(metric, y, pred, values, jack, est, level, method):
    if metric.interval == "bootstrap":
        return bootstrap_interval(values, level, metric.name, method, est, jack)
    hits = metric.hits(y, pred) if metric.hits is not None else None
    return bounded_interval(metric.interval, y, pred, level, estimate=est, hits=hits)


def compare_pair(y, pred_a, pred_b, metric, *, name_a: str, name_b: str, rng: np.random.Generator,
                 n_boot: int = 2000, level: float = 0.9, method: str = "percentile", unit: str = "") -> dict:
    """One verdict-table row: each model's score with its interval and a's advantage over b in the
    metric's better direction (positive = a better): b − a for a loss, a − b for a score.

    Means of per-row losses use a paired bootstrap (both models on the same resampled rows);
    bounded scores (accuracy, balanced accuracy, AUC) use the intervals of `bounded` and MOVER."""
    (metric,), y, (pred_a, pred_b), values, jack = bootstrap_draws([metric], y, [pred_a, pred_b], n_boot,
                                                              level, rng, method)
    (va, vb), (ja, jb) = values[0], jack[0]
    est_a, est_b = metric(y, pred_a), metric(y, pred_b)
    sign = -1.0 if metric.lower_is_better else 1.0
    interval_a = _one_interval(metric, y, pred_a, va, ja, est_a, level, method)
    interval_b = _one_interval(metric, y, pred_b, vb, jb, est_b, level, method)
    if metric.interval == "bootstrap":
        low, high = bootstrap_interval(sign * (va - vb), level, f"the {metric.name} difference", method,
                                       sign * (est_a - est_b), sign * (ja - jb))
    else:
        hits = None if metric.hits is None else (metric.hits(y, pred_a), metric.hits(y, pred_b))
        lo, hi = bounded_difference(metric.interval, y, (est_a, est_b), (interval_a, interval_b), hits)
        low, high = (lo, hi) if sign > 0 else (-hi, -lo)
    advantage = sign * (est_a - est_b)
    win = advantage_winner(low, high)
    return {
        "metric": metric.name, "lower_is_better": metric.lower_is_better, "level": level,
        "method": method if metric.interval == "bootstrap" else metric.interval,
        "name_a": name_a, "estimate_a": est_a, "interval_a": interval_a,
        "name_b": name_b, "estimate_b": est_b, "interval_b": interval_b,
        "diff": advantage, "diff_low": low, "diff_high": high,
        "winner": None if win is None else (name_a, name_b)[win],
        "verdict": verdict(name_a, name_b, advantage, low, high, metric.label, level, unit),
    }


def paired_bootstrap_diff(y, pred_a, pred_b, metric, n_boot: int = 2000, level: float = 0.9, *,
                          rng: np.random.Generator, method: str = "percentile") -> tuple[float, float, float]:
    """metric(a) − metric(b) on all rows, with an interval from resampling the SAME rows
    for both, so the noise the two share cancels."""
    metric = as_metric(metric)
    row = compare_pair(y, pred_a, pred_b, metric, name_a="a", name_b="b", rng=rng, n_boot=n_boot,
                       level=level, method=method)
    if metric.lower_is_better:   # compare_pair states a's advantage; this helper keeps the raw a − b
        return -row["diff"], -row["diff_high"], -row["diff_low"]
    return row["diff"], row["diff_low"], row["diff_high"]


