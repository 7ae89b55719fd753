"""Bootstrap intervals of held-out metrics over test rows.

One (B, n) index matrix of resampled rows serves every metric and every prediction vector,
so intervals of several metrics (or of two models, see `comparisons`) are on the same rows.
"""
from __future__ import annotations

import math
import warnings

import numpy as np

from .metrics import Metric, as_metric, classes_form


# Resamples are evaluated in blocks of at most this many (row, resample) cells,
# so 2000 resamples of a large test set do not need one huge index matrix.
_BLOCK_CELLS = 2**22


def bootstrap_indices(n: int, n_boot: int, rng: np.random.Generator) -> np.ndarray:
    """(n_boot, n) row indices drawn with replacement; share one matrix to get paired resamples."""
    return rng.integers(0, n, size=(n_boot, n))


def _resampled_values(metrics: list[Metric], y, preds, n_boot, rng) -> np.ndarray:
    """(n_metrics, n_preds, n_boot) values; one index matrix serves every metric and
    every prediction vector, so all of them see the same resampled rows."""
    n = len(y)
    step = max(1, _BLOCK_CELLS // max(n, 1))
    blocks = []
    for start in range(0, n_boot, step):
        idx = bootstrap_indices(n, min(step, n_boot - start), rng)
        blocks.append(np.array([[m.on_resamples(y, pred, idx) for pred in preds] for m in metrics]))
    return np.concatenate(blocks, axis=-1)


def _jackknife_values(metrics: list[Metric], y, preds) -> np.ndarray:
    """(n_metrics, n_preds, n) values with each row left out in turn (blocked like the
    bootstrap, since the leave-one-out index matrix is n × (n − 1))."""
    n = len(y)
    base = np.arange(n - 1)
    step = max(1, _BLOCK_CELLS // max(n, 1))
    blocks = []
    for start in range(0, n, step):
        left_out = np.arange(start, min(start + step, n))
        idx = base[None, :] + (base[None, :] >= left_out[:, None])
        blocks.append(np.array([[m.on_resamples(y, pred, idx) for pred in preds] for m in metrics]))
    return np.concatenate(blocks, axis=-1)


INTERVAL_METHODS = ("percentile", "bca")


def _finite(values: np.ndarray, what: str) -> np.ndarray:
    finite = values[np.isfinite(values)]
    if finite.size < values.size:
        warnings.warn(f"{values.size - finite.size} of {values.size} bootstrap resamples left "
                      f"{what} undefined and were dropped", RuntimeWarning, stacklevel=4)
    return finite


def bootstrap_interval(values, level, what, method="percentile", estimate=None, jack=None) -> tuple[float, float]:
    """Percentile interval (Efron & Tibshirani 1993, An Introduction to the Bootstrap, §13.3)
    or bias-corrected and accelerated interval (same book, §14.3, eqs. 14.9-14.15)."""
    finite = _finite(values, what)
    if finite.size == 0:
        return math.nan, math.nan
    alpha = np.array([(1 - level) / 2, (1 + level) / 2])
    if method == "bca" and np.ptp(finite) > 0:
        if not np.all(np.isfinite(jack)):
            warnings.warn(f"leaving a row out left {what} undefined; no BCa interval", RuntimeWarning,
                          stacklevel=3)
            return math.nan, math.nan
        # ties at the estimate count one half, so discrete scores (accuracy) stay usable
        share = (np.sum(finite < estimate) + 0.5 * np.sum(finite == estimate)) / finite.size
        if not 0 < share < 1:
            warnings.warn(f"the {what} estimate lies outside its bootstrap distribution; no BCa "
                          "interval", RuntimeWarning, stacklevel=3)
            return math.nan, math.nan
        from scipy import stats   # loaded when an interval is computed, not when a config is read

        z0 = stats.norm.ppf(share)
        dev = jack.mean() - jack
        denom = 6 * np.sum(dev**2) ** 1.5
        accel = np.sum(dev**3) / denom if denom > 0 else 0.0
        z = stats.norm.ppf(alpha)
        alpha = stats.norm.cdf(z0 + (z0 + z) / (1 - accel * (z0 + z)))
    low, high = np.quantile(finite, alpha)
    return float(low), float(high)


def _check_inputs(y, preds, level, n_boot, method="percentile"):
    if not 0 < level < 1:
        raise ValueError(f"level must be strictly between 0 and 1; got {level}")
    if n_boot < 1:
        raise ValueError(f"n_boot must be positive; got {n_boot}")
    if method not in INTERVAL_METHODS:
        raise ValueError(f"unknown interval method {method!r}; allowed: {', '.join(INTERVAL_METHODS)}")
    y = np.asarray(y)
    preds = [np.asarray(p) for p in preds]
    for p in preds:
        # one decision value per row, or (K > 2 classes) one row of K class scores
        if y.ndim != 1 or p.shape[:1] != y.shape or p.ndim > 2:
            raise ValueError(f"y and predictions must be 1-D of equal length (or predictions (n, K) for K "
                             f"classes); got {y.shape} and {p.shape}")
    return y, preds


def bootstrap_draws(metrics, y, preds, n_boot, level, rng, method):
    """Checked inputs, resampled values and (for BCa) leave-one-out values."""
    y, preds = _check_inputs(y, preds, level, n_boot, method)
    metrics = [classes_form(as_metric(m), preds[0]) for m in metrics]
    values = _resampled_values(metrics, y, preds, n_boot, rng)
    jack = _jackknife_values(metrics, y, preds) if method == "bca" else np.full(values.shape[:2] + (0,), 0.0)
    return metrics, y, preds, values, jack


def bootstrap_ci(y, pred, metric, n_boot: int = 2000, level: float = 0.9, *,
                 rng: np.random.Generator, method: str = "percentile") -> tuple[float, float, float]:
    """(estimate on all rows, low, high) of a bootstrap interval over test rows;
    `method` "percentile" (default) or "bca"."""
    return bootstrap_metrics(y, pred, [metric], n_boot, level, rng=rng, method=method).popitem()[1]


def bootstrap_metrics(y, pred, metrics, n_boot: int = 2000, level: float = 0.9, *,
                      rng: np.random.Generator, method: str = "percentile") -> dict[str, tuple[float, float, float]]:
    """bootstrap_ci for several metrics at once, all on the same resampled rows
    (one index matrix), keyed by metric name."""
    metrics, y, (pred,), values, jack = bootstrap_draws(metrics, y, [pred], n_boot, level, rng, method)
    names = [m.name for m in metrics]
    if len(set(names)) < len(names):
        raise ValueError(f"metric names must be distinct to key the result; got {names}")
    out = {}
    for m, v, j in zip(metrics, values, jack):
        est = m(y, pred)
        out[m.name] = (est, *bootstrap_interval(v[0], level, m.name, method, est, j[0]))
    return out
