"""Intervals for scores bounded by 0 and 1 that stay honest at the bounds.

A percentile bootstrap of a proportion cannot see beyond the sample: a perfectly classified test set
gives every resample accuracy 1 and the interval [1, 1]. The intervals here are never of zero width
for a finite sample:

- accuracy and misclassification (a count of hits out of n): the Wilson score interval
  (Wilson 1927, J. Am. Stat. Assoc. 22, 209-212; recommended for small n and near 0 or 1 by
  Brown, Cai & DasGupta 2001, Statistical Science 16, 101-133);
- balanced accuracy (the mean of the true-positive and true-negative rates, two independent
  binomial proportions): Wilson limits of each rate combined by the MOVER rule for a sum
  (Zou & Donner 2008, Statistics in Medicine 27, 1693-1702, eqs. 6-7), halved;
- ROC AUC: the score interval that inverts the Hanley & McNeil (1982, Radiology 143, 29-36,
  Table 2 / eq. 2) variance evaluated at the candidate AUC θ rather than at the estimate, with
  n₊ − 1 and n₋ − 1 both replaced by N − 1, N = (n₊ + n₋)/2 — Newcombe's "method 5" (Newcombe
  2006, Statistics in Medicine 25, 559-573). The formula is written from our reading of that
  paper; `tests/test_coverage.py` checks the coverage it claims by simulation.

Differences between two models on the same rows use the MOVER rule for a difference
for paired data (Newcombe 1998, Statistics in Medicine 17, 2635-2650, method 10; the general
form with a correlation term is Zou & Donner 2008 eq. 9): the per-row correctness indicators of the two models give the
correlation (0 when undefined, as Newcombe does when a margin is empty); for the AUC the
correlation is taken as 0, which widens the interval when the two models' scores agree.
"""
from __future__ import annotations

import math

import numpy as np

# What each interval method is, in one phrase with its source (shown in the report).
INTERVAL_SOURCES = {
    "bootstrap": "percentile bootstrap over the test rows (Efron & Tibshirani 1993, §13.3)",
    "wilson": "Wilson score interval (Wilson 1927)",
    "mover_wilson": "per-class Wilson intervals combined by the MOVER rule (Zou & Donner 2008)",
    "newcombe_auc": "score interval on the Hanley–McNeil variance (Newcombe 2006, method 5)",
    "mover_wilson_classes": "per-class Wilson intervals of the recalls of every class combined by the MOVER "
                            "rule (Zou & Donner 2008)",
}


def _z(level: float) -> float:
    from scipy import stats   # loaded when an interval is computed, not when a config is read

    return float(stats.norm.ppf((1 + level) / 2))


def wilson(successes: float, n: int, level: float) -> tuple[float, float]:
    """Wilson (1927) score interval of a binomial proportion; (nan, nan) for n = 0."""
    if n <= 0:
        return math.nan, math.nan
    z = _z(level)
    p = successes / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return max(0.0, centre - half), min(1.0, centre + half)


def mover_sum(estimates, lows, highs) -> tuple[float, float]:
    """Zou & Donner (2008) eqs. 6-7: limits of a sum of independent estimates from their own limits."""
    est = float(np.sum(estimates))
    low = est - math.sqrt(sum((e - lo) ** 2 for e, lo in zip(estimates, lows)))
    high = est + math.sqrt(sum((hi - e) ** 2 for e, hi in zip(estimates, highs)))
    return low, high


def mover_difference(a, la, ha, b, lb, hb, r: float = 0.0) -> tuple[float, float]:
    """Limits of a − b from each estimate's limits; `r` the correlation of the two estimates
    (Newcombe 1998 method 10; Zou & Donner 2008 eq. 9)."""
    d = a - b
    dl2 = (a - la) ** 2 + (hb - b) ** 2 - 2 * r * (a - la) * (hb - b)
    du2 = (ha - a) ** 2 + (b - lb) ** 2 - 2 * r * (ha - a) * (b - lb)
    return d - math.sqrt(max(dl2, 0.0)), d + math.sqrt(max(du2, 0.0))


def _hanley_mcneil_variance(theta: float, n_pos: int, n_neg: int) -> float:
    """Hanley & McNeil (1982) variance of the AUC at θ, with n₊ − 1 and n₋ − 1 both N − 1
    (Newcombe 2006): θ(1 − θ)[1 + (N − 1)((1 − θ)/(2 − θ) + θ/(1 + θ))] / (n₊ n₋)."""
    big_n = (n_pos + n_neg) / 2
    return theta * (1 - theta) * (1 + (big_n - 1) * ((1 - theta) / (2 - theta) + theta / (1 + theta))) / (n_pos * n_neg)


def auc_interval(auc: float, n_pos: int, n_neg: int, level: float) -> tuple[float, float]:
    """Newcombe (2006) method 5: the θ with (AUC − θ)² = z² V(θ), one on each side of the estimate."""
    if not (n_pos > 0 and n_neg > 0 and math.isfinite(auc)):
        return math.nan, math.nan
    z2 = _z(level) ** 2

    def gap(theta):
        return (auc - theta) ** 2 - z2 * _hanley_mcneil_variance(theta, n_pos, n_neg)

    # gap(0) = AUC² and gap(1) = (1 − AUC)²; just inside the estimate gap < 0 (V > 0 inside (0, 1)), so one
    # root lies on each side. At AUC = 1 (or 0) the variance vanishes at the estimate: step just inside it.
    from scipy import optimize

    low, high = 0.0, 1.0
    if auc > 0:
        inner = min(auc, 1 - 1e-9)
        low = optimize.brentq(gap, 0.0, inner) if gap(inner) < 0 else inner
    if auc < 1:
        inner = max(auc, 1e-9)
        high = optimize.brentq(gap, inner, 1.0) if gap(inner) < 0 else inner
    return float(low), float(high)


def _classes(y):
    pos = np.asarray(y) > 0
    return pos, int(pos.sum()), int((~pos).sum())


def balanced_interval(hits, y, level: float) -> tuple[float, float]:
    """Balanced accuracy: Wilson intervals of the true-positive and true-negative rates, combined by
    MOVER for the sum, halved. A rate of an empty class is left out (as scikit-learn's score does)."""
    pos, n_pos, n_neg = _classes(y)
    parts = [(hits[mask].mean(), *wilson(hits[mask].sum(), n, level)) for mask, n in ((pos, n_pos), (~pos, n_neg)) if n]
    if not parts:
        return math.nan, math.nan
    est, lows, highs = zip(*parts)
    low, high = mover_sum(est, lows, highs)
    return low / len(parts), high / len(parts)


def classes_balanced_interval(hits, y, level: float) -> tuple[float, float]:
    """Balanced accuracy of K classes (codes 0..K−1): the Wilson interval of each class's recall (independent
    binomial proportions), combined by MOVER for their sum and divided by the number of classes present."""
    y = np.asarray(y).astype(int)
    parts = [(hits[y == k].mean(), *wilson(hits[y == k].sum(), int((y == k).sum()), level))
             for k in np.unique(y)]
    est, lows, highs = zip(*parts)
    low, high = mover_sum(est, lows, highs)
    return max(0.0, low / len(parts)), min(1.0, high / len(parts))


def _correlation(hits_a, hits_b) -> float:
    if np.ptp(hits_a) == 0 or np.ptp(hits_b) == 0:
        return 0.0
    return float(np.corrcoef(hits_a, hits_b)[0, 1])


def bounded_interval(kind: str, y, pred, level: float, *, estimate: float, hits=None) -> tuple[float, float]:
    """The interval of `kind` (a key of INTERVAL_SOURCES other than bootstrap) for one model."""
    y = np.asarray(y)
    if kind == "newcombe_auc":
        _, n_pos, n_neg = _classes(y)
        return auc_interval(estimate, n_pos, n_neg, level)
    if kind == "mover_wilson":
        return balanced_interval(hits, y, level)
    if kind == "mover_wilson_classes":
        return classes_balanced_interval(hits, y, level)
    if kind == "wilson":   # the estimate is a proportion of rows: hits/n, or its complement
        return wilson(estimate * len(y), len(y), level)
    raise ValueError(f"unknown interval kind {kind!r}; allowed: {', '.join(INTERVAL_SOURCES)}")


def bounded_difference(kind, y, est, intervals, hits=None) -> tuple[float, float]:
    """Limits of est[0] − est[1] (two models on the same rows) by MOVER from their own limits."""
    r = 0.0 if kind == "newcombe_auc" or hits is None else _correlation(*hits)
    (la, ha), (lb, hb) = intervals
    if not all(map(math.isfinite, (la, ha, lb, hb))):
        return math.nan, math.nan
    return mover_difference(est[0], la, ha, est[1], lb, hb, r)
