"""The metric registry: every held-out metric is one `Metric` in `METRICS`, and the metric that
decides between the families is declared once per task in `PRIMARY`.

Point estimates come from scikit-learn's metric functions. Each metric also has a
vectorised numpy form over a (B, n) matrix of resampled row indices, used only to
evaluate thousands of bootstrap resamples at once; tests check it against
scikit-learn resample by resample.

Classification: labels are in {-1, +1}, `pred` is the real-valued decision f(x).
The predicted label is +1 where f(x) > 0 (scikit-learn's convention for decision
functions). Log-loss and Brier score use the probability sigmoid(f(x)) — exact for
the logistic loss, a stated convention for the hinge losses, whose margins are not
calibrated probabilities. With K > 2 classes each classification metric has a K-class
form (`Metric.classes`, `classes_form`; formulas and conventions in `classes.py`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy.special import expit


from .deferred import skm

from . import classes as cls


@dataclass(frozen=True)
class Metric:
    """A held-out score: `metric(y, pred) -> float`, plus what the bootstrap needs."""

    name: str
    task: str                     # "regression" | "classification" | "any"
    lower_is_better: bool
    single: Callable[[np.ndarray, np.ndarray], float] = field(repr=False)
    # (y, pred, idx) -> (B,) values on the resamples y[idx[b]], pred[idx[b]]
    resampled: Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray] | None = field(default=None, repr=False)
    title: str = ""               # how tables and figures name it
    # "target": in the units of y; "target squared"; "none": unit-free (ratios, probabilities, scores)
    unit: str = "none"
    # metrics with a quantile level (pinball): tau -> the metric at that level
    at_level: Callable[[float], "Metric"] | None = field(default=None, repr=False, compare=False)
    # metrics that take the loss's parameters (pinball at τ, Huber at δ): (loss, target scale) -> metric
    from_loss: Callable[[object, float], "Metric"] | None = field(default=None, repr=False, compare=False)
    # how its interval is made: "bootstrap" (means of per-row losses) or a key of bounded.INTERVAL_SOURCES
    interval: str = "bootstrap"
    # proportions: (y, pred) -> per-row 0/1 correctness, for paired differences of bounded intervals
    hits: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = field(default=None, repr=False, compare=False)
    # computed only when a loss is judged by it or the config names it (not in every metrics table)
    on_demand: bool = False
    # classification: the same score for K > 2 classes (codes 0..K−1, decision values (m, K)); see classes.py
    classes: "Metric | None" = field(default=None, repr=False, compare=False)
    # (y, pred, W) -> (B,) the metric with row weights W[b] (B, n): weighted held-out metrics
    # (verdict.weighted_metrics, pipeline.evaluate.weighted); None: this metric has no weighted form
    weighted: Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray] | None = field(default=None, repr=False,
                                                                                         compare=False)

    @property
    def higher_is_better(self) -> bool:
        return not self.lower_is_better

    @property
    def label(self) -> str:
        return self.title or self.name

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


def _weighted_mean_of(pointwise: Callable[[np.ndarray, np.ndarray], np.ndarray]):
    """Weighted form of a mean of per-row losses: sum w l / sum w for each row of weights W (B, n)."""
    return lambda y, pred, W: (W @ pointwise(y, pred)) / W.sum(axis=1)


def resample_counts(idx: np.ndarray, n: int) -> np.ndarray:
    return _resample_counts(idx, n)


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
    return _roc_auc_counted(y, decision, _resample_counts(idx, len(y)))


def _roc_auc_counted(y, decision, counts):
    # Mann-Whitney form of the AUC with ties counted one half, from per-row counts (or weights) (B, n):
    # rows are sorted once by decision and grouped into tie blocks, so no resample is
    # sorted again (O(B n) instead of O(B n log n)).
    order = np.argsort(decision, kind="stable")
    f_sorted = decision[order]
    starts = np.concatenate([[0], np.flatnonzero(np.diff(f_sorted)) + 1])
    counts = counts[:, order].astype(float)
    pos = (y[order] > 0)
    pos_groups = np.add.reduceat(counts * pos, starts, axis=1)
    neg_groups = np.add.reduceat(counts * ~pos, starts, axis=1)
    below = np.cumsum(neg_groups, axis=1) - neg_groups
    n_pos, n_neg = pos_groups.sum(axis=1), neg_groups.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        auc = np.sum(pos_groups * (below + neg_groups / 2), axis=1) / (n_pos * n_neg)
    return np.where((n_pos > 0) & (n_neg > 0), auc, np.nan)


def _r2_weighted(y, f, W):
    total = W.sum(axis=1)
    mean = (W @ y) / total
    sse = W @ _squared(y, f)
    sst = np.sum(W * (y[None, :] - mean[:, None]) ** 2, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(sst == 0, np.where(sse == 0, 1.0, 0.0), 1.0 - sse / sst)


def _balanced_accuracy_weighted(y, decision, W):
    hit, pos = (_labels(decision) == y), y > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        tpr = (W @ (hit & pos)) / (W @ pos)
        tnr = (W @ (hit & ~pos)) / (W @ ~pos)
    return np.nanmean(np.stack([tpr, tnr]), axis=0)


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


def _pinball_metric(tau: float) -> Metric:
    return Metric("pinball", "regression", True, lambda y, f: skm.mean_pinball_loss(y, f, alpha=tau),
                  _mean_of(_pinball(tau)), title=f"pinball loss at τ = {tau:g}", unit="target",
                  weighted=_weighted_mean_of(_pinball(tau)),
                  at_level=_pinball_metric, from_loss=lambda loss, scale: _pinball_metric(getattr(loss, "tau", 0.5)))


def _huber(delta):
    def pointwise(y, f):
        a = np.abs(y - f)
        return np.where(a <= delta, 0.5 * a**2, delta * a - 0.5 * delta**2)
    return pointwise


def _huber_metric(delta: float) -> Metric:
    """Mean Huber loss with its threshold in the target's unit: the loss's δ is set on the
    standardised target, so it is δ times the training target's standard deviation here."""
    pointwise = _huber(delta)
    return Metric("huber", "regression", True, lambda y, f: float(np.mean(pointwise(y, f))), _mean_of(pointwise),
                  title=f"mean Huber loss (threshold {delta:.3g})", unit="target squared", on_demand=True,
                  weighted=_weighted_mean_of(pointwise),
                  from_loss=lambda loss, scale: _huber_metric(getattr(loss, "delta", 1.0) * scale))


def _misses(y, decision):
    return (_labels(decision) != y).astype(float)


_REG, _CLS = "regression", "classification"

# The registry. Order within a task is the order metrics are reported in.
METRICS: dict[str, Metric] = {m.name: m for m in (
    Metric("mse", _REG, True, skm.mean_squared_error, _mean_of(_squared), title="MSE", unit="target squared",
           weighted=_weighted_mean_of(_squared)),
    Metric("rmse", _REG, True, skm.root_mean_squared_error, _rmse_resampled, title="RMSE", unit="target",
           weighted=lambda y, f, W: np.sqrt(_weighted_mean_of(_squared)(y, f, W))),
    Metric("mae", _REG, True, skm.mean_absolute_error, _mean_of(_absolute), title="MAE", unit="target",
           weighted=_weighted_mean_of(_absolute)),
    _pinball_metric(0.5),
    Metric("r2", _REG, False, skm.r2_score, _r2_resampled, title="R²", weighted=_r2_weighted),
    _huber_metric(1.0),
    Metric("accuracy", _CLS, False, lambda y, f: skm.accuracy_score(y, _labels(f)), _mean_of(_hits),
           title="accuracy", interval="wilson", hits=_hits, weighted=_weighted_mean_of(_hits),
           classes=Metric("accuracy", _CLS, False, cls.accuracy, _mean_of(cls.hits), title="accuracy",
                          interval="wilson", hits=cls.hits)),
    Metric("misclassification", _CLS, True, lambda y, f: 1.0 - skm.accuracy_score(y, _labels(f)),
           _mean_of(_misses), title="misclassification rate", interval="wilson", hits=_hits,
           weighted=_weighted_mean_of(_misses),
           classes=Metric("misclassification", _CLS, True, lambda y, f: 1.0 - cls.accuracy(y, f),
                          _mean_of(cls.misses), title="misclassification rate", interval="wilson", hits=cls.hits)),
    Metric("balanced_accuracy", _CLS, False, lambda y, f: skm.balanced_accuracy_score(y, _labels(f)),
           _balanced_accuracy_resampled, title="balanced accuracy", interval="mover_wilson", hits=_hits,
           weighted=_balanced_accuracy_weighted,
           classes=Metric("balanced_accuracy", _CLS, False, cls.balanced_accuracy, cls.balanced_accuracy_resampled,
                          title="balanced accuracy", interval="mover_wilson_classes", hits=cls.hits)),
    Metric("roc_auc", _CLS, False, _roc_auc_single, _roc_auc_resampled, title="ROC AUC", interval="newcombe_auc",
           weighted=_roc_auc_counted,
           classes=Metric("roc_auc", _CLS, False, cls.macro_auc, cls.macro_auc_resampled(_roc_auc_resampled),
                          title="ROC AUC (macro one-versus-rest)")),
    Metric("log_loss", _CLS, True, lambda y, f: skm.log_loss(y, expit(f), labels=[-1, 1]),
           _mean_of(_log_loss_pointwise), title="log-loss", weighted=_weighted_mean_of(_log_loss_pointwise),
           classes=Metric("log_loss", _CLS, True, cls.log_loss, _mean_of(cls.log_loss_pointwise),
                          title="log-loss (softmax of the class scores)")),
    Metric("brier", _CLS, True, lambda y, f: skm.brier_score_loss(y, expit(f), pos_label=1),
           _mean_of(_brier_pointwise), title="Brier score", weighted=_weighted_mean_of(_brier_pointwise),
           classes=Metric("brier", _CLS, True, cls.brier, _mean_of(cls.brier_pointwise),
                          title="Brier score (sum over classes)")),
)}

# The decision metric per task: verdicts, the summary table and cross-execution comparisons use it.
PRIMARY = {_REG: "rmse", _CLS: "balanced_accuracy"}


def task_metrics(task: str) -> tuple[str, ...]:
    """The metrics every result of a task reports (on-demand ones only when a loss is judged by them)."""
    return tuple(name for name, m in METRICS.items() if m.task == task and not m.on_demand)


REGRESSION_METRICS = task_metrics(_REG)
CLASSIFICATION_METRICS = task_metrics(_CLS)


def metric_function(name: str, tau: float = 0.5) -> Metric:
    """The metric called `name`; `tau` is the quantile level of the pinball loss."""
    if name not in METRICS:
        raise ValueError(f"unknown metric {name!r}; allowed: {', '.join(METRICS)}")
    m = METRICS[name]
    return m.at_level(tau) if m.at_level is not None else m


def bound_metric(name: str, loss=None, scale: float = 1.0) -> Metric:
    """The metric called `name` with the loss's parameters (pinball at its τ, Huber at its δ times the
    target scale); the plain registry entry without a loss."""
    m = metric_function(name)
    return m.from_loss(loss, scale) if (m.from_loss is not None and loss is not None) else m


def unit_text(metric: Metric, unit: str | None) -> str:
    """The metric's unit given the target's unit: '' for unit-free metrics or an unnamed unit."""
    if not unit or metric.unit == "none":
        return ""
    return unit if metric.unit == "target" else f"({unit})²"


def primary_metric(task: str) -> Metric:
    """The metric that decides between the families for a task."""
    return METRICS[PRIMARY[task]]


def loss_metric(loss) -> Metric:
    """Mean held-out value of a loss object (anything with `.name`, `.task` and a
    per-row `.value(y, f)`), so each loss's own objective can be bootstrapped."""
    return Metric(f"{loss.name}_loss", getattr(loss, "task", "any"), True,
                  lambda y, f: float(np.mean(loss.value(y, f))),
                  _mean_of(loss.value), weighted=_weighted_mean_of(loss.value))


def regression_metrics(y, pred, tau: float = 0.5) -> dict[str, float]:
    return {name: metric_function(name, tau)(y, pred) for name in REGRESSION_METRICS}


def classification_metrics(y, decision) -> dict[str, float]:
    y = np.asarray(y)
    if not np.isin(y, (-1, 1)).all():
        raise ValueError("classification labels must be -1 or +1 (map them before evaluating)")
    return {name: METRICS[name](y, decision) for name in CLASSIFICATION_METRICS}


def classes_form(metric: Metric, pred) -> Metric:
    """The metric for these decision values: itself for one column per row, its K-class form for (m, K)
    (a metric without one, such as a K-class form itself or a loss metric, is taken to read (m, K))."""
    if np.ndim(pred) < 2 or metric.classes is None:
        return metric
    return metric.classes


def classes_loss_metric(loss, strategy: str) -> Metric:
    """Mean held-out value of a loss on K > 2 classes, as the fit used it (models.multiclass.row_losses)."""
    from ..models.multiclass import row_losses

    def pointwise(y, F):
        return row_losses(loss, y, F, strategy)
    return Metric(f"{loss.name}_loss", getattr(loss, "task", "any"), True, lambda y, F: float(np.mean(pointwise(y, F))),
                  _mean_of(pointwise))


def as_metric(metric) -> Metric:
    if isinstance(metric, Metric):
        return metric
    if isinstance(metric, str):
        return metric_function(metric)
    if callable(metric):  # a plain function: taken as lower-is-better, evaluated resample by resample
        return Metric(getattr(metric, "__name__", "metric"), "any", True, metric)
    raise TypeError(f"metric must be a name, a Metric or a callable; got {type(metric).__name__}")
