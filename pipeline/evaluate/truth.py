"""Scores against a synthetic scenario's ground truth: support recovery and coefficient error."""
from __future__ import annotations

import math

import numpy as np

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


def truth_scores(dataset, feature_names, coefficients) -> dict | None:
    """Support recovery (and coefficient error when the truth is linear in the original columns)
    of one fitted model; None without a recorded truth or explicit coefficients."""
    truth = dataset.truth
    if truth is None or coefficients is None:
        return None
    raw = {name: j for j, name in enumerate(dataset.feature_names)}
    selected = [raw[name] for name, c in zip(feature_names, coefficients) if c != 0 and name in raw]
    rec = support_recovery(selected, truth.support, dataset.n_features)
    out = {"true": len(truth.support), "selected": len(selected),
           **{k: rec[k] for k in ("precision", "recall", "f1")}, "coef_error": None}
    if truth.coefficients is not None and list(feature_names)[:len(raw)] == list(dataset.feature_names):
        # Truth is linear in the original columns; compare on them (identity map first in the features).
        out["coef_error"] = coefficient_error(coefficients[:len(raw)], truth.coefficients)
    return out
