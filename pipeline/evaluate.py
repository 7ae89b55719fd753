"""Held-out metrics, bootstrap intervals, paired comparisons and ground-truth scores.

Point estimates come from scikit-learn's metric functions. Each metric also has a
vectorised numpy form over a (B, n) matrix of resampled row indices, used only to
evaluate thousands of bootstrap resamples at once; tests check it against
scikit-learn resample by resample.

Classification: labels are in {-1, +1}, `pred` is the real-valued decision f(x).
The predicted label is +1 where f(x) > 0 (scikit-learn's convention for decision
functions). Log-loss and Brier score use the probability sigmoid(f(x)) — exact for
the logistic loss, a stated convention for the hinge losses, whose margins are not
calibrated probabilities.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy import stats
from scipy.special import expit
from sklearn import metrics as skm

# ---------------------------------------------------------------- metrics


@dataclass(frozen=True)
class Metric:
    """A held-out score: `metric(y, pred) -> float`, plus what the bootstrap needs."""

    name: str
    task: str                     # "regression" | "classification" | "any"
    lower_is_better: bool
    single: Callable[[np.ndarray, np.ndarray], float] = field(repr=False)
    # (y, pred, idx) -> (B,) values on the resamples y[idx[b]], pred[idx[b]]
    resampled: Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray] | None = field(default=None, repr=False)

    def __call__(self, y, pred) -> float:
        return float(self.single(np.asarray(y), np.asarray(pred)))

    def on_resamples(self, y: np.ndarray, pred: np.ndarray, idx: np.ndarray) -> np.ndarray:
        """Values on each resample given by the rows of the (B, n) index matrix `idx`."""
        if self.resampled is not None:
            return np.asarray(self.resampled(y, pred, idx), dtype=float)
        return np.array([self(y[i], pred[i]) for i in idx])


def _mean_of(pointwise: Callable[[np.ndarray, np.ndarray], np.ndarray]):
    """Resampled form of a mean of per-row losses: the losses are computed once on all
    rows and only gathered per resample (no (B, n) arithmetic)."""
    return lambda y, pred, idx: pointwise(y, pred)[idx].mean(axis=1)


def _resample_counts(idx: np.ndarray, n: int) -> np.ndarray:
    """(B, n) how often each original row appears in each resample."""
    b = idx.shape[0]
    flat = (idx + n * np.arange(b)[:, None]).ravel()
    return np.bincount(flat, minlength=b * n).reshape(b, n)


def _labels(decision):
    return np.where(decision > 0, 1.0, -1.0)


def _squared(y, f):
    return (y - f) ** 2


def _absolute(y, f):
    return np.abs(y - f)


def _pinball(tau):
    def pointwise(y, f):
        r = y - f
        return np.maximum(tau * r, (tau - 1) * r)
    return pointwise


def _rmse_resampled(y, f, idx):
    return np.sqrt(_squared(y, f)[idx].mean(axis=1))


def _r2_resampled(y, f, idx):
    sse = _squared(y, f)[idx].sum(axis=1)
    y_rows = y[idx]
    sst = np.sum((y_rows - y_rows.mean(axis=1, keepdims=True)) ** 2, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        r2 = 1.0 - sse / sst
    # scikit-learn's force_finite: constant y gives 1 for a perfect fit, else 0
    return np.where(sst == 0, np.where(sse == 0, 1.0, 0.0), r2)


def _hits(y, decision):
    return (_labels(decision) == y).astype(float)


def _balanced_accuracy_resampled(y, decision, idx):
    hit, pos = (_labels(decision) == y)[idx], (y > 0)[idx]
    with np.errstate(divide="ignore", invalid="ignore"):
        tpr = np.sum(hit & pos, axis=1) / np.sum(pos, axis=1)
        tnr = np.sum(hit & ~pos, axis=1) / np.sum(~pos, axis=1)
    return np.nanmean(np.stack([tpr, tnr]), axis=0)


def _roc_auc_resampled(y, decision, idx):
    # Mann-Whitney form of the AUC with ties counted one half, from resample counts:
    # rows are sorted once by decision and grouped into tie blocks, so no resample is
    # sorted again (O(B n) instead of O(B n log n)).
    order = np.argsort(decision, kind="stable")
    f_sorted = decision[order]
    starts = np.concatenate([[0], np.flatnonzero(np.diff(f_sorted)) + 1])
    counts = _resample_counts(idx, len(y))[:, order].astype(float)
    pos = (y[order] > 0)
    pos_groups = np.add.reduceat(counts * pos, starts, axis=1)
    neg_groups = np.add.reduceat(counts * ~pos, starts, axis=1)
    below = np.cumsum(neg_groups, axis=1) - neg_groups
    n_pos, n_neg = pos_groups.sum(axis=1), neg_groups.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        auc = np.sum(pos_groups * (below + neg_groups / 2), axis=1) / (n_pos * n_neg)
    return np.where((n_pos > 0) & (n_neg > 0), auc, np.nan)


def _roc_auc_single(y, decision):
    if np.unique(y).size < 2:
        return math.nan  # undefined with one class present
    return skm.roc_auc_score(y, decision)


_EPS = np.finfo(float).eps


def _log_loss_pointwise(y, decision):
    # same clipping of probabilities as scikit-learn's log_loss (float64 machine eps)
    p = expit(decision)
    return -np.log(np.clip(np.where(y > 0, p, 1 - p), _EPS, 1 - _EPS))


def _brier_pointwise(y, decision):
    return (expit(decision) - (y > 0)) ** 2


def _build_metrics(tau: float) -> dict[str, Metric]:
    reg, cls = "regression", "classification"
    return {
        "mse": Metric("mse", reg, True, skm.mean_squared_error, _mean_of(_squared)),
        "rmse": Metric("rmse", reg, True, skm.root_mean_squared_error, _rmse_resampled),
        "mae": Metric("mae", reg, True, skm.mean_absolute_error, _mean_of(_absolute)),
        "pinball": Metric("pinball", reg, True, lambda y, f: skm.mean_pinball_loss(y, f, alpha=tau),
                          _mean_of(_pinball(tau))),
        "r2": Metric("r2", reg, False, skm.r2_score, _r2_resampled),
        "accuracy": Metric("accuracy", cls, False, lambda y, f: skm.accuracy_score(y, _labels(f)),
                           _mean_of(_hits)),
        "balanced_accuracy": Metric("balanced_accuracy", cls, False,
                                    lambda y, f: skm.balanced_accuracy_score(y, _labels(f)),
                                    _balanced_accuracy_resampled),
        "roc_auc": Metric("roc_auc", cls, False, _roc_auc_single, _roc_auc_resampled),
        "log_loss": Metric("log_loss", cls, True, lambda y, f: skm.log_loss(y, expit(f), labels=[-1, 1]),
                           _mean_of(_log_loss_pointwise)),
        "brier": Metric("brier", cls, True, lambda y, f: skm.brier_score_loss(y, expit(f), pos_label=1),
                        _mean_of(_brier_pointwise)),
    }


REGRESSION_METRICS = ("mse", "rmse", "mae", "pinball", "r2")
CLASSIFICATION_METRICS = ("accuracy", "balanced_accuracy", "roc_auc", "log_loss", "brier")


def metric_function(name: str, tau: float = 0.5) -> Metric:
    """The metric called `name`; `tau` is the quantile level of the pinball loss."""
    table = _build_metrics(tau)
    if name not in table:
        raise ValueError(f"unknown metric {name!r}; allowed: {', '.join(table)}")
    return table[name]


def loss_metric(loss) -> Metric:
    """Mean held-out value of a loss object (anything with `.name`, `.task` and a
    per-row `.value(y, f)`), so each loss's own objective can be bootstrapped."""
    return Metric(f"{loss.name}_loss", getattr(loss, "task", "any"), True,
                  lambda y, f: float(np.mean(loss.value(y, f))),
                  _mean_of(loss.value))


def regression_metrics(y, pred, tau: float = 0.5) -> dict[str, float]:
    table = _build_metrics(tau)
    return {name: table[name](y, pred) for name in REGRESSION_METRICS}


def classification_metrics(y, decision) -> dict[str, float]:
    y = np.asarray(y)
    if not np.isin(y, (-1, 1)).all():
        raise ValueError("classification labels must be -1 or +1 (map them before evaluating)")
    table = _build_metrics(0.5)
    return {name: table[name](y, decision) for name in CLASSIFICATION_METRICS}


def _as_metric(metric) -> Metric:
    if isinstance(metric, Metric):
        return metric
    if isinstance(metric, str):
        return metric_function(metric)
    if callable(metric):  # a plain function: taken as lower-is-better, evaluated resample by resample
        return Metric(getattr(metric, "__name__", "metric"), "any", True, metric)
    raise TypeError(f"metric must be a name, a Metric or a callable; got {type(metric).__name__}")


# ---------------------------------------------------------------- bootstrap

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


def _interval(values, level, what, method="percentile", estimate=None, jack=None) -> tuple[float, float]:
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
        if p.shape != y.shape or y.ndim != 1:
            raise ValueError(f"y and predictions must be 1-D of equal length; got {y.shape} and {p.shape}")
    return y, preds


def _bootstrap(metrics, y, preds, n_boot, level, rng, method):
    """Checked inputs, resampled values and (for BCa) leave-one-out values."""
    metrics = [_as_metric(m) for m in metrics]
    y, preds = _check_inputs(y, preds, level, n_boot, method)
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
    metrics, y, (pred,), values, jack = _bootstrap(metrics, y, [pred], n_boot, level, rng, method)
    names = [m.name for m in metrics]
    if len(set(names)) < len(names):
        raise ValueError(f"metric names must be distinct to key the result; got {names}")
    out = {}
    for m, v, j in zip(metrics, values, jack):
        est = m(y, pred)
        out[m.name] = (est, *_interval(v[0], level, m.name, method, est, j[0]))
    return out


def paired_bootstrap_diff(y, pred_a, pred_b, metric, n_boot: int = 2000, level: float = 0.9, *,
                          rng: np.random.Generator, method: str = "percentile") -> tuple[float, float, float]:
    """metric(a) − metric(b) on all rows, with an interval from resampling the SAME rows
    for both, so the noise the two share cancels."""
    row = compare_pair(y, pred_a, pred_b, metric, name_a="a", name_b="b", rng=rng, n_boot=n_boot,
                       level=level, method=method)
    return row["diff"], row["diff_low"], row["diff_high"]


# ---------------------------------------------------------------- comparisons


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


def _winner(low: float, high: float, lower_is_better: bool) -> int | None:
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
    win = _winner(low, high, lower_is_better)
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
    (metric,), y, (pred_a, pred_b), values, jack = _bootstrap([metric], y, [pred_a, pred_b], n_boot,
                                                              level, rng, method)
    (va, vb), (ja, jb) = values[0], jack[0]
    est_a, est_b = metric(y, pred_a), metric(y, pred_b)
    diff = est_a - est_b
    low, high = _interval(va - vb, level, f"the {metric.name} difference", method, diff, ja - jb)
    win = _winner(low, high, metric.lower_is_better)
    return {
        "metric": metric.name, "lower_is_better": metric.lower_is_better, "level": level, "method": method,
        "name_a": name_a, "estimate_a": est_a, "interval_a": _interval(va, level, metric.name, method, est_a, ja),
        "name_b": name_b, "estimate_b": est_b, "interval_b": _interval(vb, level, metric.name, method, est_b, jb),
        "diff": diff, "diff_low": low, "diff_high": high,
        "winner": None if win is None else (name_a, name_b)[win],
        "verdict": verdict(name_a, name_b, diff, low, high, metric.name, metric.lower_is_better, level),
    }


# ---------------------------------------------------------------- ground truth


def support_recovery(selected_idx, true_idx, p: int) -> dict:
    """Precision, recall and F1 of a selected feature set against the true support.

    Precision is NaN when nothing was selected, recall NaN when the truth is empty
    (undefined rather than a made-up 0 or 1)."""
    sel, true = (np.unique(np.asarray(a, dtype=int).ravel()) for a in (selected_idx, true_idx))
    for what, idx in (("selected", sel), ("true", true)):
        if idx.size and (idx[0] < 0 or idx[-1] >= p):
            raise ValueError(f"{what} indices must lie in [0, {p}); got range [{idx[0]}, {idx[-1]}]")
    tp = int(np.intersect1d(sel, true).size)
    fp, fn = int(sel.size - tp), int(true.size - tp)
    precision = tp / sel.size if sel.size else math.nan
    recall = tp / true.size if true.size else math.nan
    f1 = 2 * tp / (2 * tp + fp + fn) if (2 * tp + fp + fn) else math.nan
    return {"precision": precision, "recall": recall, "f1": f1,
            "true_positives": tp, "false_positives": fp, "false_negatives": fn,
            "n_selected": int(sel.size), "n_true": int(true.size)}


def coefficient_error(w_hat, w_true) -> dict:
    """Distances between estimated and true coefficients (truth linear in the features)."""
    w_hat, w_true = np.asarray(w_hat, dtype=float).ravel(), np.asarray(w_true, dtype=float).ravel()
    if w_hat.shape != w_true.shape:
        raise ValueError(f"coefficient vectors differ in length: {w_hat.size} vs {w_true.size}")
    err = w_hat - w_true
    norm_true = float(np.linalg.norm(w_true))
    l2 = float(np.linalg.norm(err))
    return {"l2": l2, "l1": float(np.abs(err).sum()), "linf": float(np.abs(err).max(initial=0.0)),
            "relative_l2": l2 / norm_true if norm_true > 0 else math.nan}
