"""Row weights on any loss: the weighted loss every solver takes in place of the plain one.

Objective with row weights w_i > 0:  (1/sum w) sum_i w_i loss_i + lambda*penalty.
Written in the solvers' own form (1/n) sum_i c_i loss_i with per-row factors c_i = n w_i / sum(w),
so a fit with integer weights is the unweighted fit on the rows repeated w_i times, and scaling every
weight by one constant changes nothing. The factors scale the value, the derivative, the second
derivative and the subgradient interval; the conjugate of c*loss is c*loss*(u/c), whose domain is
the plain one scaled by c; cvxpy sums and intercept-only fits take the weights themselves. Every
solver route of both families then works unchanged, and the duality gap it reports is the weighted
problem's. The few routes that build the squared loss in closed form read `row_factors`.

`class_balance` gives the weights of `class_weight: balanced`.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .losses import Loss, as_float

# the properties of the plain loss a weighted one carries unchanged
_CARRIED = ("name", "task", "smooth", "kinks", "quadratic", "slopes", "dual_reach", "cvxpy_solvers",
            "gives_probabilities", "multiclass")


@dataclass(frozen=True, eq=False)
class WeightedLoss(Loss):
    """`base` with row weights `weights` (positive, one per training row, any scale)."""

    base: Loss = field(default=None)
    weights: np.ndarray = field(default=None, repr=False)

    def __post_init__(self):
        w = as_float(self.weights).ravel()
        if w.size == 0 or not np.all(np.isfinite(w)) or np.any(w <= 0):
            raise ValueError("row weights must be positive finite numbers")
        for name in _CARRIED:
            object.__setattr__(self, name, getattr(self.base, name))
        object.__setattr__(self, "weights", w)
        object.__setattr__(self, "row_factors", w * (w.size / w.sum()))

    def _c(self, y):
        c = self.row_factors
        if np.shape(y)[-1:] != c.shape:
            raise ValueError(f"a weighted loss has {c.size} rows, got targets of shape {np.shape(y)}")
        return c

    def value(self, y, f):
        return self._c(y) * self.base.value(y, f)

    def derivative(self, y, f):
        return self._c(y) * self.base.derivative(y, f)

    def second_derivative(self, y, f):
        return self._c(y) * self.base.second_derivative(y, f)

    def subgradient_interval(self, y, f):
        c = self._c(y)
        low, high = self.base.subgradient_interval(y, f)
        return c * low, c * high

    def dual_bounds(self, y):
        c = self._c(y)
        low, high = self.base.dual_bounds(y)
        return c * low, c * high

    def conjugate(self, y, u):
        c = self._c(y)
        return c * self.base.conjugate(y, as_float(u) / c)

    def cvxpy_sum(self, y, f_expr, weights=None):
        c = self._c(y) if weights is None else self._c(y) * as_float(weights)
        return self.base.cvxpy_sum(y, f_expr, weights=c)

    def intercept_only(self, y, weights=None):
        # the user's weights, not the factors: integer weights then give the repeated rows' answer exactly
        w = self.weights if weights is None else self.weights * as_float(weights)
        return self.base.intercept_only(y, weights=w)

    def _arg(self, y, f):
        return self.base._arg(y, f)


def weighted(loss: Loss, weights) -> Loss:
    """`loss` with row weights; the loss itself when `weights` is None."""
    if weights is None:
        return loss
    return WeightedLoss(base=loss, weights=weights)


def row_factors(loss: Loss, n: int) -> np.ndarray:
    """The per-row factors c_i of `loss` on n rows (ones for an unweighted loss)."""
    c = getattr(loss, "row_factors", None)
    return np.ones(n) if c is None else c


def class_balance(y, weights=None) -> np.ndarray:
    """Weights of `class_weight: balanced`: row i of class k gets n / (K * n_k), n the rows (or, with row
    weights, their total), n_k the rows (total weight) of class k and K the classes present; multiplied by
    the row weights when given. Computed on the rows passed (the training rows of each fit)."""
    y = np.asarray(y)
    w = np.ones(y.shape[0]) if weights is None else as_float(weights)
    classes, codes = np.unique(y, return_inverse=True)
    totals = np.bincount(codes, weights=w, minlength=classes.size)
    return w * (w.sum() / (classes.size * totals[codes]))


def weights_label(column: str | None, class_weight: str) -> str:
    """How one family's fits are weighted, in a few words: the column, 'balanced', both, or 'none'."""
    parts = ([f"column '{column}'"] if column else []) + (["balanced"] if class_weight == "balanced" else [])
    return " × ".join(parts) or "none"


def describe_weighting(column: str | None, by_family: dict, weighted_metrics: bool) -> str:
    """One sentence for the report: which weights each family's fits used and whether metrics are weighted.
    `by_family`: family title -> its class_weight setting. Empty when nothing is weighted."""
    labels = {title: weights_label(column, cw) for title, cw in by_family.items()}
    if all(label == "none" for label in labels.values()):
        return ""
    fits = "; ".join(f"{title}: {label}" for title, label in labels.items())
    balanced = any(cw == "balanced" for cw in by_family.values())
    return (f"Row weights used in fitting (every CV fold, refit, stability resample and the final fit; objective "
            f"(1/Σw) Σ wᵢ lossᵢ + λ·penalty; the CV errors that choose λ are weighted the same way): {fits}"
            + ("; 'balanced' gives each training row n / (K · n_class), computed on the training rows of each fit"
               if balanced else "")
            + (". Held-out metrics, their intervals and the paired comparison are weighted by the test rows' "
               f"column '{column}' (bootstrap intervals)." if weighted_metrics else
               ". Held-out metrics are unweighted: every test row counts once."))
