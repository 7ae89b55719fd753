"""Held-out classification scores for K > 2 classes: the point and resampled forms behind the K-class
metrics of `metrics.METRICS` (each classification Metric carries its K-class form in `classes`).

Targets are class codes 0..K−1 and `F` holds the decision values (m, K); the predicted class is the
argmax of a row. Probabilities are the softmax of the decision values — exact for a multinomial
(softmax) logistic fit, and the same rule as the two-class metrics, whose probability sigmoid(f) is the
softmax of the scores (0, f). For one-versus-rest fits (hinge, squared hinge, and logistic until its
multinomial fitter is wired in) the softmax of the K scores is a stated convention, not a calibrated
probability. ROC AUC is the macro average over classes of each class's AUC against the rest, each
scored by its softmax probability (scikit-learn's `roc_auc_score(multi_class="ovr", average="macro")`);
balanced accuracy is the mean recall over the classes present.
"""
from __future__ import annotations

import numpy as np
from scipy.special import softmax

from .deferred import skm

_EPS = np.finfo(float).eps
# what the report says about the class probabilities behind log-loss, Brier score and ROC AUC
PROBABILITY_SENTENCE = ("Log-loss, Brier score and ROC AUC (the macro average of each class's AUC against the rest) "
                        "read the softmax of the class scores as probabilities: exact for a multinomial (softmax) fit, "
                        "a convention for classes fitted one versus the rest, whose scores are not calibrated "
                        "probabilities; the predicted class is the one of the largest score.")


def predicted(F) -> np.ndarray:
    return np.argmax(F, axis=-1)


def probabilities(F) -> np.ndarray:
    return softmax(np.asarray(F, float), axis=-1)


def hits(y, F) -> np.ndarray:
    return (predicted(F) == np.asarray(y)).astype(float)


def misses(y, F) -> np.ndarray:
    return 1.0 - hits(y, F)


def accuracy(y, F) -> float:
    return skm.accuracy_score(np.asarray(y).astype(int), predicted(F))


def balanced_accuracy(y, F) -> float:
    return skm.balanced_accuracy_score(np.asarray(y).astype(int), predicted(F))


def balanced_accuracy_resampled(y, F, idx) -> np.ndarray:
    """(B,) mean recall over the classes present in each resample."""
    y = np.asarray(y).astype(int)
    hit, truth = (predicted(F) == y)[idx], y[idx]
    recalls = []
    for k in range(np.asarray(F).shape[1]):
        mine = truth == k
        with np.errstate(divide="ignore", invalid="ignore"):
            recalls.append(np.sum(hit & mine, axis=1) / np.sum(mine, axis=1))
    return np.nanmean(np.stack(recalls), axis=0)


def macro_auc(y, F) -> float:
    """Mean over classes of the AUC of class k against the rest on its softmax probability; NaN when a
    class is absent from y (its AUC is undefined)."""
    y = np.asarray(y).astype(int)
    P = probabilities(F)
    K = P.shape[1]
    if len(np.unique(y)) < K:
        return float("nan")
    return float(np.mean([skm.roc_auc_score(y == k, P[:, k]) for k in range(K)]))


def macro_auc_resampled(binary_resampled):
    """The resampled macro AUC from the two-class resampled AUC (Mann–Whitney with ties one half)."""
    def resampled(y, F, idx):
        y = np.asarray(y).astype(int)
        P = probabilities(F)
        per_class = [binary_resampled(np.where(y == k, 1.0, -1.0), P[:, k], idx) for k in range(P.shape[1])]
        return np.mean(np.stack(per_class), axis=0)     # NaN where a class is missing from a resample
    return resampled


def log_loss_pointwise(y, F) -> np.ndarray:
    # clipped as scikit-learn's log_loss clips probabilities (float64 machine eps)
    P = probabilities(F)
    y = np.asarray(y).astype(int)
    return -np.log(np.clip(P[np.arange(len(y)), y], _EPS, 1 - _EPS))


def log_loss(y, F) -> float:
    F = np.asarray(F, float)
    return skm.log_loss(np.asarray(y).astype(int), probabilities(F), labels=list(range(F.shape[1])))


def brier_pointwise(y, F) -> np.ndarray:
    """Σ_k (p_k − 1[y = k])² per row: Brier's (1950) score over all classes, as scikit-learn's
    brier_score_loss computes it for several classes (twice the two-class score's scale)."""
    P = probabilities(F)
    onehot = np.eye(P.shape[1])[np.asarray(y).astype(int)]
    return np.sum((P - onehot) ** 2, axis=1)


def brier(y, F) -> float:
    F = np.asarray(F, float)
    return skm.brier_score_loss(np.asarray(y).astype(int), probabilities(F), labels=list(range(F.shape[1])))


def confusion(y, F, n_classes: int) -> np.ndarray:
    """(K, K) counts: row = true class, column = predicted class (also for two classes: F (m,), y ±1)."""
    y = np.asarray(y)
    if np.ndim(F) == 1:
        truth, guess = (y > 0).astype(int), (np.asarray(F) > 0).astype(int)
    else:
        truth, guess = y.astype(int), predicted(F)
    return skm.confusion_matrix(truth, guess, labels=list(range(n_classes)))
