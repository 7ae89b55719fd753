"""Losses of the margin m = y*f with y in {-1, +1} (classification); importing registers them."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import expit, xlogy

from .losses import (CLASSIFICATION, Loss, as_float, near_kink, outside_domain, register_loss, root_weights,
                     row_weights, weighted_sum)


@dataclass(frozen=True)
class MarginLoss(Loss):
    """Loss of the margin m = y*f; conjugate of loss(y, .) at u is phi*(u*y) since y^2 = 1."""

    def __post_init__(self):
        object.__setattr__(self, "task", CLASSIFICATION)
        object.__setattr__(self, "multiclass", "one_versus_rest")

    def _arg(self, y, f):
        return as_float(y) * as_float(f)

    def dual_bounds(self, y):
        # u*y in [-reach, 0]: reach 1 for most margin losses, inf for the squared hinge
        y = as_float(y)
        reach = self.dual_reach
        return np.where(y > 0, -reach, 0.0), np.where(y > 0, 0.0, reach)

    def _class_counts(self, y, weights=None) -> tuple[float, float]:
        """Rows (or total weight) of the +1 and the -1 class."""
        y = as_float(y)
        w = row_weights(weights, y.shape[0])
        return float(w[y > 0].sum()), float(w[y < 0].sum())


@dataclass(frozen=True)
class LogisticLoss(MarginLoss):
    def __post_init__(self):
        super().__post_init__()
        object.__setattr__(self, "name", "logistic")
        object.__setattr__(self, "gives_probabilities", True)
        object.__setattr__(self, "multiclass", "multinomial")   # softmax cross-entropy beyond two classes
        object.__setattr__(self, "cvxpy_solvers", ("CLARABEL", "SCS"))

    def value(self, y, f):
        return np.logaddexp(0.0, -self._arg(y, f))

    def derivative(self, y, f):
        y = as_float(y)
        return -y * expit(-self._arg(y, f))

    def second_derivative(self, y, f):
        p = expit(self._arg(y, f))
        return p * (1.0 - p)

    def cvxpy_sum(self, y, f_expr, weights=None):
        import cvxpy as cp
        return weighted_sum(cp.logistic(-cp.multiply(y, f_expr)), weights)

    def conjugate(self, y, u):
        v = as_float(u) * as_float(y)
        ok = (v >= -1 - 1e-12) & (v <= 1e-12)
        a = np.clip(-v, 0.0, 1.0)
        return outside_domain(ok, xlogy(a, a) + xlogy(1 - a, 1 - a))

    def intercept_only(self, y, weights=None):
        pos, neg = self._class_counts(y, weights)
        # one class only: the optimum runs off to infinity; a large finite logit stands in
        pos, neg = max(pos, 1e-12), max(neg, 1e-12)
        return float(np.log(pos / neg))


@dataclass(frozen=True)
class HingeLoss(MarginLoss):
    def __post_init__(self):
        super().__post_init__()
        object.__setattr__(self, "name", "hinge")
        object.__setattr__(self, "smooth", False)
        object.__setattr__(self, "kinks", (1.0,))
        object.__setattr__(self, "slopes", (0.0, 1.0))

    def value(self, y, f):
        return np.maximum(0.0, 1.0 - self._arg(y, f))

    def derivative(self, y, f):
        m = self._arg(y, f)
        y = as_float(y)
        return np.where(m < 1, -y, np.where(m > 1, 0.0, -0.5 * y))

    def subgradient_interval(self, y, f):
        m = self._arg(y, f)
        at_kink = near_kink(m, 1.0, y, f)
        y = as_float(y)
        g = np.where((m < 1) & ~at_kink, -y, 0.0)
        other = np.where(at_kink, -y, g)
        return np.minimum(g, other), np.maximum(g, other)

    def second_derivative(self, y, f):
        return np.zeros_like(as_float(f))

    def cvxpy_sum(self, y, f_expr, weights=None):
        import cvxpy as cp
        # max(0, 1-m) = 0.5|1-m| + 0.5(1-m): avoids pos() (cvxpy/HiGHS bound defect)
        slack = 1 - cp.multiply(y, f_expr)
        return 0.5 * weighted_sum(cp.abs(slack), weights) + 0.5 * weighted_sum(slack, weights)

    def conjugate(self, y, u):
        v = as_float(u) * as_float(y)
        ok = (v >= -1 - 1e-12) & (v <= 1e-12)
        return outside_domain(ok, v)

    def intercept_only(self, y, weights=None):
        pos, neg = self._class_counts(y, weights)
        return 1.0 if pos > neg else (-1.0 if neg > pos else 0.0)


@dataclass(frozen=True)
class SquaredHingeLoss(MarginLoss):
    def __post_init__(self):
        super().__post_init__()
        object.__setattr__(self, "name", "squared_hinge")
        object.__setattr__(self, "dual_reach", np.inf)

    def value(self, y, f):
        return np.maximum(0.0, 1.0 - self._arg(y, f)) ** 2

    def derivative(self, y, f):
        return -2.0 * as_float(y) * np.maximum(0.0, 1.0 - self._arg(y, f))

    def second_derivative(self, y, f):
        return 2.0 * (self._arg(y, f) < 1).astype(float)

    def cvxpy_sum(self, y, f_expr, weights=None):
        import cvxpy as cp
        return cp.sum_squares(root_weights(weights, cp.pos(1 - cp.multiply(y, f_expr))))

    def conjugate(self, y, u):
        v = as_float(u) * as_float(y)
        ok = v <= 1e-12
        return outside_domain(ok, v + 0.25 * v**2)

    def intercept_only(self, y, weights=None):
        pos, neg = self._class_counts(y, weights)
        total = pos + neg
        return float((pos - neg) / total) if total else 0.0



register_loss("logistic", CLASSIFICATION, "Logistic", LogisticLoss, judged_by=("log_loss", "balanced_accuracy"),
              judged_why="the logistic loss fits probabilities, which the held-out log-loss scores")
_MARGIN_WHY = "a hinge-type fit gives labels, not calibrated probabilities, so it is judged on its labels"
register_loss("hinge", CLASSIFICATION, "Hinge", HingeLoss, judged_by=("balanced_accuracy", "misclassification"),
              judged_why=_MARGIN_WHY)
register_loss("squared_hinge", CLASSIFICATION, "Squared hinge", SquaredHingeLoss,
              judged_by=("balanced_accuracy", "misclassification"), judged_why=_MARGIN_WHY)
