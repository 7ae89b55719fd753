"""Evaluation: the metric registry, each loss's decision metric, bootstrap intervals (means of per-row
losses) and bounded intervals (proportions, AUC), paired comparisons stated as the sparse family's
advantage, verdict and summary sentences, ground-truth scores and the evaluation stage.

Point estimates come from scikit-learn's metric functions. Each metric also has a
vectorised numpy form over a (B, n) matrix of resampled row indices, used only to
evaluate thousands of bootstrap resamples at once; tests check it against
scikit-learn resample by resample.
"""
from .bounded import INTERVAL_SOURCES, auc_interval, balanced_interval, wilson
from .comparisons import (advantage_winner, compare_pair, corrected_resampled_ttest, paired_bootstrap_diff, verdict,
                          winner)
from .decision import Decision, decide, decisions_for, reconcile
from .intervals import INTERVAL_METHODS, bootstrap_ci, bootstrap_indices, bootstrap_metrics
from .metrics import (CLASSIFICATION_METRICS, METRICS, PRIMARY, REGRESSION_METRICS, Metric, as_metric,
                      bound_metric, classification_metrics, loss_metric, metric_function, primary_metric,
                      regression_metrics, task_metrics, unit_text)
from .stage import N_BOOT, Evaluation, evaluate_results, fold_comparisons, paired_verdicts, test_metrics
from .truth import coefficient_error, support_recovery, truth_scores

__all__ = [
    "Decision", "INTERVAL_SOURCES", "advantage_winner", "auc_interval", "balanced_interval", "bound_metric", "decide",
    "decisions_for", "reconcile", "unit_text", "wilson",
    "CLASSIFICATION_METRICS", "INTERVAL_METHODS", "N_BOOT", "METRICS", "PRIMARY", "REGRESSION_METRICS", "Evaluation",
    "Metric", "as_metric", "bootstrap_ci", "bootstrap_indices", "bootstrap_metrics", "classification_metrics",
    "coefficient_error", "compare_pair", "corrected_resampled_ttest", "evaluate_results", "fold_comparisons",
    "loss_metric", "metric_function", "paired_bootstrap_diff", "paired_verdicts", "primary_metric",
    "regression_metrics", "support_recovery", "task_metrics", "test_metrics", "truth_scores", "verdict", "winner",
]
