"""The evaluation stage: everything measured on the fitted models, returned as one frozen value.

Held-out metrics with intervals (seed stream `test_intervals`, drawn in `test_metrics`), the paired
verdict between families on the test rows in each loss's own decision metric (stream
`paired_difference`, drawn in `paired_verdicts`), the corrected t-test on the shared CV folds and
ground-truth scores. Every difference is the sparse family's advantage (positive = sparse better).
The report and the tracking store only reshape and store what this stage returns.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from .. import seeds
from ..models.families import compared_pair
from .bounded import bounded_interval
from .comparisons import compare_pair, corrected_resampled_ttest
from .decision import Decision, decide, reconcile
from .intervals import bootstrap_metrics
from .metrics import PRIMARY, bound_metric, classes_form, classes_loss_metric, loss_metric, primary_metric, task_metrics
from .truth import truth_scores
from .weighted import maybe_weighted

N_BOOT = 1000       # resamples of the test rows, for metric intervals and the paired verdict


@dataclass(frozen=True)
class Evaluation:
    primary: str                                   # the task's default decision metric (metrics.PRIMARY)
    primary_lower_is_better: bool
    fold_tests: dict = field(default_factory=dict)  # loss label -> corrected t-test across CV folds
    verdicts: tuple = ()                            # one row per loss: sparse advantage and sentence
    truth: dict = field(default_factory=dict)       # (loss label, family) -> ground-truth scores
    decisions: dict = field(default_factory=dict)   # loss label -> Decision (the metric that judged it)
    level: float = 0.9                              # the one confidence level of every interval


def _with_bounded_interval(m, y, pred, est, boot_interval, level):
    if m.interval == "bootstrap":
        return boot_interval
    return bounded_interval(m.interval, y, pred, level, estimate=est, hits=None if m.hits is None else m.hits(y, pred))


def test_metrics(task: str, y, pred, loss, rng, *, level: float, decision: Decision | None = None,
                 scale: float = 1.0, strategy: str = "", weights=None) -> tuple[dict, dict]:
    """Held-out metrics at the chosen λ, each with an interval at `level`: a seeded bootstrap over the
    test rows for means of per-row losses (all from the same resampled rows), a bounded interval for
    proportions and AUC (`bounded`). The decision's metrics are included (pinball at τ, Huber at δ);
    classification adds the loss's own mean held-out value. With K > 2 classes `pred` is (m, K) and each
    metric is its K-class form; `strategy` says how the classes were fitted (models.multiclass). With
    `weights` (the test rows' weights, verdict.weighted_metrics) every metric is weighted and its interval
    bootstrapped (`weighted`)."""
    names = list(task_metrics(task))
    names += [n for n in (decision.names if decision else ()) if n not in names]
    wanted = [classes_form(bound_metric(name, loss, scale), pred) for name in names]
    if task == "classification":  # regression losses are read on the fitting scale, see FitOutcome.eval_loss
        wanted.append(loss_metric(loss) if np.ndim(pred) < 2 else classes_loss_metric(loss, strategy))
    wanted = [maybe_weighted(m, weights) for m in wanted]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # resamples where a metric is undefined are dropped
        boot = bootstrap_metrics(y, pred, wanted, n_boot=N_BOOT, level=level, rng=rng)
    metrics, intervals = {}, {}
    for m in wanted:
        key = "own_loss" if m.name not in names else m.name
        est, lo, hi = boot[m.name]
        metrics[key] = float(est)
        intervals[key] = tuple(float(v) for v in _with_bounded_interval(m, y, pred, est, (lo, hi), level))
    return metrics, intervals


def family_pairs(results) -> list[tuple[str, object, object]]:
    """Per loss label (in result order): the (sparse, ridge-type) results compared, or (None, None)
    when only one family was fitted."""
    by_loss: dict[str, dict] = {}
    for r in results:
        by_loss.setdefault(r.loss_label, {})[r.family] = r
    first, second = (f.key for f in compared_pair())
    return [(label, d[first], d[second]) if first in d and second in d else (label, None, None)
            for label, d in by_loss.items()]


def fold_comparisons(results, fold_sizes, level: float = 0.9) -> dict:
    """Per loss: corrected resampled t-test (Nadeau & Bengio 2003) of the two families' CV losses at
    their chosen λ, fold by fold on identical folds, as the sparse family's advantage (ridge-type
    loss − sparse loss: positive = sparse better)."""
    out = {}
    n_tr, n_te = fold_sizes
    for label, a, b in family_pairs(results):
        if a is None:
            continue
        diffs = b.cv_errors[:, b.chosen_index] - a.cv_errors[:, a.chosen_index]
        try:
            out[label] = corrected_resampled_ttest(diffs, n_tr, n_te, level=level)
        except ValueError:
            continue
    return out


def paired_verdicts(results, y_test, decisions: dict, rng, *, level: float, scales: dict | None = None,
                    fold_tests: dict | None = None, weights=None) -> tuple[dict, ...]:
    """Per loss: its decision metric on the test rows, the sparse family's advantage with a paired
    interval, the verdict sentence and, when the fold test disagrees, which to trust."""
    from ..losses import get_loss

    out = []
    for label, a, b in family_pairs(results):
        d = decisions[label]
        row = {"loss": label, "metric": d.metric, "diff": None, "low": None, "high": None,
               "sentence": "Only one family was fitted.", "reconcile": None}
        if a is not None:
            loss = get_loss(a.loss_name, **a.loss_params)
            metric = maybe_weighted(bound_metric(d.metric, loss, (scales or {}).get(label, 1.0)), weights)
            pair = compare_pair(y_test, a.test_pred, b.test_pred, metric, name_a=a.title, name_b=b.title,
                                rng=rng, n_boot=N_BOOT, level=level, unit=d.unit)
            row.update(diff=pair["diff"], low=pair["diff_low"], high=pair["diff_high"], sentence=pair["verdict"],
                       interval_method=pair["method"],
                       reconcile=reconcile(pair["diff_low"], pair["diff_high"], (fold_tests or {}).get(label),
                                           a.title, b.title))
            at_end = [r for r in (a, b) if getattr(r, "grid_end", None)]
            if at_end:   # a family whose chosen λ is still an end of its grid: no winner from it
                row.update(comparable=False, reconcile=None, sentence="Not comparable at this setting: " + "; ".join(
                    f"{r.title} chose the {r.grid_end} λ of its grid "
                    + ("even after widening it" if sum(r.grid_widened) else "where no wider grid can go further")
                    for r in at_end)
                    + f", so no winner is declared on {metric.name} (the difference is shown for reference only).")
        out.append(row)
    return tuple(out)


def evaluate_results(results, *, task: str, y_test, fold_sizes, dataset, feature_names, seed: int,
                     level: float = 0.9, decisions: dict | None = None, scales: dict | None = None,
                     weights=None) -> Evaluation:
    """The comparisons and scores of the evaluation stage (the held-out metrics with their intervals
    are already on each family result, from `test_metrics`); `weights`: the test rows' weights when the
    metrics are weighted."""
    rng = seeds.generator(seed, "paired_difference")
    if decisions is None:
        decisions = {r.loss_label: decide(r.loss_name, task) for r in results}
    folds = fold_comparisons(results, fold_sizes, level)
    return Evaluation(
        primary=PRIMARY[task], primary_lower_is_better=primary_metric(task).lower_is_better,
        fold_tests=folds,
        verdicts=paired_verdicts(results, y_test, decisions, rng, level=level, scales=scales, fold_tests=folds,
                                 weights=weights),
        truth={(r.loss_label, r.family): truth_scores(dataset, feature_names, r.coefficients) for r in results},
        decisions=decisions, level=level)
