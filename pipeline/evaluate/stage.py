"""The evaluation stage: everything measured on the fitted models, returned as one frozen value.

Held-out metrics with intervals (seed stream `test_intervals`, drawn in `test_metrics`), the paired
bootstrap verdict between families on the test rows (stream `paired_difference`, drawn in
`paired_verdicts`), the corrected t-test on the shared CV folds and ground-truth scores. The report
and the tracking store only reshape and store what this stage returns.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, field

from .. import seeds
from ..models.families import compared_pair
from .comparisons import corrected_resampled_ttest, paired_bootstrap_diff, verdict
from .intervals import bootstrap_metrics
from .metrics import (PRIMARY, classification_metrics, loss_metric, metric_function, primary_metric,
                      regression_metrics)
from .truth import truth_scores

N_BOOT = 1000       # resamples of the test rows, for metric intervals and the paired verdict
LEVEL = 0.9


@dataclass(frozen=True)
class Evaluation:
    primary: str                                   # the decision metric (metrics.PRIMARY)
    primary_lower_is_better: bool
    fold_tests: dict = field(default_factory=dict)  # loss label -> corrected t-test across CV folds
    verdicts: tuple = ()                            # one row per loss: paired difference and sentence
    truth: dict = field(default_factory=dict)       # (loss label, family) -> ground-truth scores


def test_metrics(task: str, y, pred, loss, rng) -> tuple[dict, dict]:
    """Held-out metrics at the chosen λ, each with a seeded 90 % bootstrap interval, all from the
    same resampled rows. Classification adds the loss's own mean held-out value."""
    tau = getattr(loss, "tau", 0.5)
    metrics = regression_metrics(y, pred, tau=tau) if task == "regression" else classification_metrics(y, pred)
    wanted = [metric_function(name, tau=tau) for name in metrics]
    if task == "classification":  # regression losses are read on the fitting scale, see FitOutcome.eval_loss
        wanted.append(loss_metric(loss))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # resamples where a metric is undefined are dropped
        boot = bootstrap_metrics(y, pred, wanted, n_boot=N_BOOT, level=LEVEL, rng=rng)
    intervals = {}
    for m in wanted:
        key = "own_loss" if m.name not in metrics else m.name
        est, lo, hi = boot[m.name]
        metrics[key] = float(est)
        intervals[key] = (float(lo), float(hi))
    return metrics, intervals


def family_pairs(results) -> list[tuple[str, object, object]]:
    """Per loss label (in result order): the (sparse, ridge-type) results compared as a − b, or
    (None, None) when only one family was fitted."""
    by_loss: dict[str, dict] = {}
    for r in results:
        by_loss.setdefault(r.loss_label, {})[r.family] = r
    first, second = (f.key for f in compared_pair())
    return [(label, d[first], d[second]) if first in d and second in d else (label, None, None)
            for label, d in by_loss.items()]


def fold_comparisons(results, fold_sizes) -> dict:
    """Per loss: corrected resampled t-test (Nadeau & Bengio 2003) of the two families' CV losses at
    their chosen λ, fold by fold on identical folds."""
    out = {}
    n_tr, n_te = fold_sizes
    for label, a, b in family_pairs(results):
        if a is None:
            continue
        diffs = a.cv_errors[:, a.chosen_index] - b.cv_errors[:, b.chosen_index]
        try:
            out[label] = corrected_resampled_ttest(diffs, n_tr, n_te, level=LEVEL)
        except ValueError:
            continue
    return out


def paired_verdicts(results, y_test, task: str, rng) -> tuple[dict, ...]:
    """Per loss: the primary metric's difference a − b on the test rows with a paired bootstrap
    interval (both families on the same resampled rows) and its sentence."""
    metric = primary_metric(task)
    out = []
    for label, a, b in family_pairs(results):
        row = {"loss": label, "diff": None, "low": None, "high": None, "sentence": "Only one family was fitted."}
        if a is not None:
            diff, lo, hi = paired_bootstrap_diff(y_test, a.test_pred, b.test_pred, metric, n_boot=N_BOOT,
                                                 level=LEVEL, rng=rng)
            row.update(diff=diff, low=lo, high=hi,
                       sentence=verdict(a.title, b.title, diff, lo, hi, metric.name, metric.lower_is_better))
            at_end = [r for r in (a, b) if getattr(r, "grid_end", None)]
            if at_end:   # a family whose chosen λ is still an end of its grid: no winner from it
                row.update(comparable=False, sentence="Not comparable at this setting: " + "; ".join(
                    f"{r.title} chose the {r.grid_end} λ of its grid "
                    + ("even after widening it" if sum(r.grid_widened) else "where no wider grid can go further")
                    for r in at_end)
                    + f", so no winner is declared on {metric.name} (the difference is shown for reference only).")
        out.append(row)
    return tuple(out)


def evaluate_results(results, *, task: str, y_test, fold_sizes, dataset, feature_names, seed: int) -> Evaluation:
    """The comparisons and scores of the evaluation stage (the held-out metrics with their intervals
    are already on each family result, from `test_metrics`)."""
    rng = seeds.generator(seed, "paired_difference")
    return Evaluation(
        primary=PRIMARY[task], primary_lower_is_better=primary_metric(task).lower_is_better,
        fold_tests=fold_comparisons(results, fold_sizes),
        verdicts=paired_verdicts(results, y_test, task, rng),
        truth={(r.loss_label, r.family): truth_scores(dataset, feature_names, r.coefficients) for r in results})
