"""One object per loss, shared by the L1 and L2 families.

Every loss is a function of the decision value f for a fixed target y:
regression losses of the residual r = y - f, classification losses of the
margin m = y*f with y in {-1, +1}. Objective convention: (1/n) sum loss + lambda*penalty,
squared loss written 0.5*(y - f)**2.
"""
from __future__ import annotations

import difflib
from dataclasses import dataclass, field

import cvxpy as cp
import numpy as np
from scipy.optimize import minimize_scalar
from scipy.special import expit, xlogy

REGRESSION = "regression"
CLASSIFICATION = "classification"


def _as_float(a) -> np.ndarray:
    return np.asarray(a, dtype=float)


def _outside(mask: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Convex conjugates are +inf outside their domain."""
    return np.where(mask, values, np.inf)


def _near_kink(arg, kink, y, f) -> np.ndarray:
    """Samples whose loss argument sits on a kink up to rounding of the fit."""
    scale = 1.0 + np.abs(_as_float(y)) + np.abs(_as_float(f))
    return np.abs(arg - kink) <= 1e-9 * scale


@dataclass(frozen=True)
class Loss:
    """Base: subclasses fill the per-sample formulas."""

    name: str = field(init=False, default="")
    task: str = field(init=False, default=REGRESSION)
    smooth: bool = field(init=False, default=True)
    # kinks of the loss in its own variable (residual or margin); used to find
    # samples where the subgradient is an interval, not a point
    kinks: tuple[float, ...] = field(init=False, default=())
    # objective quadratic in f (closed-form paths, Gram-form solvers, exact LOO/GCV)
    quadratic: bool = field(init=False, default=False)
    # piecewise-linear losses: (slope for argument > kink, |slope| below it); None otherwise
    slopes: tuple[float, float] | None = field(init=False, default=None)
    # margin losses: how far u*y reaches below 0 in the conjugate's domain (1 or inf)
    dual_reach: float = field(init=False, default=1.0)
    # preferred cvxpy back-ends, in order, for this loss's restricted problems
    cvxpy_solvers: tuple[str, ...] = field(init=False, default=("CLARABEL", "OSQP", "SCS"))

    def value(self, y, f) -> np.ndarray:
        raise NotImplementedError

    def derivative(self, y, f) -> np.ndarray:
        raise NotImplementedError

    def cvxpy_sum(self, y, f_expr):
        raise NotImplementedError

    def conjugate(self, y, u) -> np.ndarray:
        raise NotImplementedError

    def intercept_only(self, y) -> float:
        raise NotImplementedError

    def second_derivative(self, y, f) -> np.ndarray:
        """d^2 loss / d f^2 where it exists (0 on linear pieces)."""
        raise NotImplementedError

    def subgradient_interval(self, y, f) -> tuple[np.ndarray, np.ndarray]:
        """Per-sample [low, high] of the subdifferential d loss / d f."""
        g = self.derivative(y, f)
        return g, g.copy()

    def dual_bounds(self, y) -> tuple[np.ndarray, np.ndarray]:
        """Per-sample domain [low, high] of the conjugate loss*(y, .)."""
        y = _as_float(y)
        if self.task == REGRESSION:
            return np.full(y.shape, -np.inf), np.full(y.shape, np.inf)
        # margin losses: u*y in [-1, 0] (squared hinge: u*y <= 0)
        reach = self.dual_reach
        return np.where(y > 0, -reach, 0.0), np.where(y > 0, 0.0, reach)

    # the variable the loss is written in: residual y - f or margin y*f
    def _arg(self, y, f):
        y, f = _as_float(y), _as_float(f)
        return (y - f) if self.task == REGRESSION else (y * f)


# ---------------------------------------------------------------- regression
@dataclass(frozen=True)
class SquaredLoss(Loss):
    def __post_init__(self):
        object.__setattr__(self, "name", "squared")
        object.__setattr__(self, "quadratic", True)

    def value(self, y, f):
        return 0.5 * self._arg(y, f) ** 2

    def derivative(self, y, f):
        return -self._arg(y, f)

    def second_derivative(self, y, f):
        return np.ones_like(_as_float(f))

    def cvxpy_sum(self, y, f_expr):
        return 0.5 * cp.sum_squares(y - f_expr)

    def conjugate(self, y, u):
        u = _as_float(u)
        return u * _as_float(y) + 0.5 * u**2

    def intercept_only(self, y):
        return float(np.mean(y))


@dataclass(frozen=True)
class QuantileLoss(Loss):
    """Pinball loss rho_tau(r) = r*(tau - 1[r < 0]); tau = 0.5 is half the absolute loss."""

    tau: float = 0.5

    def __post_init__(self):
        if not 0.0 < self.tau < 1.0:
            raise ValueError(f"quantile loss needs 0 < tau < 1, got tau={self.tau}")
        object.__setattr__(self, "name", "quantile")
        object.__setattr__(self, "smooth", False)
        object.__setattr__(self, "kinks", (0.0,))
        object.__setattr__(self, "slopes", (self.tau, 1.0 - self.tau))

    def value(self, y, f):
        r = self._arg(y, f)
        above, below = self.slopes
        return np.where(r >= 0, above * r, -below * r)

    def derivative(self, y, f):
        # at r == 0 return the midpoint of the subdifferential
        r = self._arg(y, f)
        above, below = self.slopes
        return np.where(r > 0, -above, np.where(r < 0, below, 0.5 * (below - above)))

    def subgradient_interval(self, y, f):
        r = self._arg(y, f)
        kink = _near_kink(r, 0.0, y, f)
        above, below = self.slopes
        low = np.where(kink | (r > 0), -above, below)
        high = np.where(kink | (r < 0), below, -above)
        return low, high

    def second_derivative(self, y, f):
        return np.zeros_like(_as_float(f))

    def dual_bounds(self, y):
        above, below = self.slopes
        shape = np.shape(y)
        return np.full(shape, -above), np.full(shape, below)

    def cvxpy_sum(self, y, f_expr):
        # written with abs and a linear term, not pos/maximum: see the cvxpy/HiGHS
        # bound-propagation defect guarded in tests/test_l1_solvers.py
        above, below = self.slopes
        r = y - f_expr
        return 0.5 * (above + below) * cp.sum(cp.abs(r)) + 0.5 * (above - below) * cp.sum(r)

    def conjugate(self, y, u):
        u = _as_float(u)
        above, below = self.slopes
        ok = (u >= -above - 1e-12) & (u <= below + 1e-12)
        return _outside(ok, u * _as_float(y))

    def intercept_only(self, y):
        above, below = self.slopes
        return float(np.quantile(_as_float(y), above / (above + below), method="inverted_cdf"))


@dataclass(frozen=True)
class AbsoluteLoss(QuantileLoss):
    """|y - f|: the pinball loss with both slopes 1."""

    def __post_init__(self):
        if self.tau != 0.5:
            raise ValueError("the absolute loss takes no tau; use the quantile loss")
        super().__post_init__()
        object.__setattr__(self, "name", "absolute")
        object.__setattr__(self, "slopes", (1.0, 1.0))


@dataclass(frozen=True)
class HuberLoss(Loss):
    """0.5 r^2 for |r| <= delta, delta*|r| - 0.5 delta^2 beyond."""

    delta: float = 1.0

    def __post_init__(self):
        if not self.delta > 0:
            raise ValueError(f"Huber loss needs delta > 0, got delta={self.delta}")
        object.__setattr__(self, "name", "huber")

    def value(self, y, f):
        r = np.abs(self._arg(y, f))
        d = self.delta
        return np.where(r <= d, 0.5 * r**2, d * r - 0.5 * d**2)

    def derivative(self, y, f):
        return -np.clip(self._arg(y, f), -self.delta, self.delta)

    def second_derivative(self, y, f):
        return (np.abs(self._arg(y, f)) <= self.delta).astype(float)

    def dual_bounds(self, y):
        shape = np.shape(y)
        return np.full(shape, -self.delta), np.full(shape, self.delta)

    def cvxpy_sum(self, y, f_expr):
        # cvxpy's huber(x, M) is x^2 inside, 2M|x| - M^2 outside: twice ours
        return 0.5 * cp.sum(cp.huber(y - f_expr, self.delta))

    def conjugate(self, y, u):
        u = _as_float(u)
        ok = np.abs(u) <= self.delta + 1e-12
        return _outside(ok, u * _as_float(y) + 0.5 * u**2)

    def intercept_only(self, y):
        y = _as_float(y)
        lo, hi = float(np.min(y)), float(np.max(y))
        if hi - lo == 0:
            return lo
        res = minimize_scalar(lambda b: float(np.sum(self.value(y, b))), bounds=(lo, hi),
                              method="bounded", options={"xatol": 1e-12 * max(1.0, hi - lo)})
        b = float(res.x)
        # exact finish: sum clip(y - b, -delta, delta) = 0 is linear in b once the
        # set of samples inside the quadratic zone is fixed
        for _ in range(50):
            r = y - b
            inside = np.abs(r) <= self.delta
            if not inside.any():
                break
            outside = np.sum(np.sign(r[~inside])) * self.delta
            new = float((np.sum(y[inside]) + outside) / inside.sum())
            if new == b:
                break
            b = new
        return b


# ------------------------------------------------------------ classification
@dataclass(frozen=True)
class _MarginLoss(Loss):
    """Loss of the margin m = y*f; conjugate of loss(y, .) at u is phi*(u*y) since y^2 = 1."""

    def __post_init__(self):
        object.__setattr__(self, "task", CLASSIFICATION)

    def _class_counts(self, y) -> tuple[int, int]:
        y = _as_float(y)
        return int(np.sum(y > 0)), int(np.sum(y < 0))


@dataclass(frozen=True)
class LogisticLoss(_MarginLoss):
    def __post_init__(self):
        super().__post_init__()
        object.__setattr__(self, "name", "logistic")
        object.__setattr__(self, "cvxpy_solvers", ("CLARABEL", "SCS"))

    def value(self, y, f):
        return np.logaddexp(0.0, -self._arg(y, f))

    def derivative(self, y, f):
        y = _as_float(y)
        return -y * expit(-self._arg(y, f))

    def second_derivative(self, y, f):
        p = expit(self._arg(y, f))
        return p * (1.0 - p)

    def cvxpy_sum(self, y, f_expr):
        return cp.sum(cp.logistic(-cp.multiply(y, f_expr)))

    def conjugate(self, y, u):
        v = _as_float(u) * _as_float(y)
        ok = (v >= -1 - 1e-12) & (v <= 1e-12)
        a = np.clip(-v, 0.0, 1.0)
        return _outside(ok, xlogy(a, a) + xlogy(1 - a, 1 - a))

    def intercept_only(self, y):
        pos, neg = self._class_counts(y)
        # one class only: the optimum runs off to infinity; a large finite logit stands in
        pos, neg = max(pos, 1e-12), max(neg, 1e-12)
        return float(np.log(pos / neg))


@dataclass(frozen=True)
class HingeLoss(_MarginLoss):
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
        y = _as_float(y)
        return np.where(m < 1, -y, np.where(m > 1, 0.0, -0.5 * y))

    def subgradient_interval(self, y, f):
        m = self._arg(y, f)
        at_kink = _near_kink(m, 1.0, y, f)
        y = _as_float(y)
        g = np.where((m < 1) & ~at_kink, -y, 0.0)
        other = np.where(at_kink, -y, g)
        return np.minimum(g, other), np.maximum(g, other)

    def second_derivative(self, y, f):
        return np.zeros_like(_as_float(f))

    def cvxpy_sum(self, y, f_expr):
        # max(0, 1-m) = 0.5|1-m| + 0.5(1-m): avoids pos() (cvxpy/HiGHS bound defect)
        slack = 1 - cp.multiply(y, f_expr)
        return 0.5 * cp.sum(cp.abs(slack)) + 0.5 * cp.sum(slack)

    def conjugate(self, y, u):
        v = _as_float(u) * _as_float(y)
        ok = (v >= -1 - 1e-12) & (v <= 1e-12)
        return _outside(ok, v)

    def intercept_only(self, y):
        pos, neg = self._class_counts(y)
        return 1.0 if pos > neg else (-1.0 if neg > pos else 0.0)


@dataclass(frozen=True)
class SquaredHingeLoss(_MarginLoss):
    def __post_init__(self):
        super().__post_init__()
        object.__setattr__(self, "name", "squared_hinge")
        object.__setattr__(self, "dual_reach", np.inf)

    def value(self, y, f):
        return np.maximum(0.0, 1.0 - self._arg(y, f)) ** 2

    def derivative(self, y, f):
        return -2.0 * _as_float(y) * np.maximum(0.0, 1.0 - self._arg(y, f))

    def second_derivative(self, y, f):
        return 2.0 * (self._arg(y, f) < 1).astype(float)

    def cvxpy_sum(self, y, f_expr):
        return cp.sum_squares(cp.pos(1 - cp.multiply(y, f_expr)))

    def conjugate(self, y, u):
        v = _as_float(u) * _as_float(y)
        ok = v <= 1e-12
        return _outside(ok, v + 0.25 * v**2)

    def intercept_only(self, y):
        pos, neg = self._class_counts(y)
        total = pos + neg
        return float((pos - neg) / total) if total else 0.0


_FACTORIES = {
    "squared": SquaredLoss,
    "absolute": AbsoluteLoss,
    "huber": HuberLoss,
    "quantile": QuantileLoss,
    "logistic": LogisticLoss,
    "hinge": HingeLoss,
    "squared_hinge": SquaredHingeLoss,
}
LOSS_NAMES: tuple[str, ...] = tuple(_FACTORIES)


def get_loss(name: str, **params) -> Loss:
    """Loss by name; `delta` for huber, `tau` for quantile."""
    if isinstance(name, Loss):
        return name
    key = str(name).strip().lower().replace("-", "_").replace(" ", "_")
    if key not in _FACTORIES:
        close = difflib.get_close_matches(key, LOSS_NAMES, n=1, cutoff=0.0)
        hint = f"; did you mean '{close[0]}'?" if close else ""
        raise ValueError(f"unknown loss '{name}': valid names are {', '.join(LOSS_NAMES)}{hint}")
    try:
        return _FACTORIES[key](**params)
    except TypeError as exc:
        raise ValueError(f"loss '{key}' got parameters it does not take: {sorted(params)}") from exc
