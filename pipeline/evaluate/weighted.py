"""Weighted held-out metrics (verdict.weighted_metrics): each metric with the test rows' weights.

A metric's weighted form (`Metric.weighted`) takes a (B, n) matrix of row weights; the estimate uses the
test rows' weights w, and a bootstrap resample uses w times how often it drew each row, so the interval
is the usual percentile bootstrap of the weighted metric. Bounded intervals (Wilson, MOVER, Newcombe)
count rows and have no weighted form here, so every weighted metric gets the bootstrap interval.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from .metrics import Metric, resample_counts


def weighted_metric(metric: Metric, weights) -> Metric:
    """`metric` computed with row weights `weights` (one per test row, positive)."""
    if metric.weighted is None:
        raise ValueError(f"metric '{metric.name}' has no weighted form; set verdict.weighted_metrics to false")
    w = np.asarray(weights, dtype=float)
    form = metric.weighted

    def single(y, pred):
        return float(form(np.asarray(y), np.asarray(pred), w[None, :])[0])

    def resampled(y, pred, idx):
        return form(y, pred, resample_counts(idx, len(y)) * w[None, :])

    return dataclasses.replace(metric, single=single, resampled=resampled, interval="bootstrap", hits=None)


def maybe_weighted(metric: Metric, weights) -> Metric:
    """The metric itself when `weights` is None, else its weighted form."""
    return metric if weights is None else weighted_metric(metric, weights)
