"""One object per loss, shared by the L1 and L2 families, and the table of loss kinds.

Every loss is a function of the decision value f for a fixed target y:
regression losses of the residual r = y - f, classification losses of the
margin m = y*f with y in {-1, +1}. Objective convention: (1/n) sum loss + lambda*penalty,
squared loss written 0.5*(y - f)**2.

`LOSSES` is the one table of loss kinds (name, task, title, parameters, factory); the
config's loss choices, parameters and tasks come from it. A new loss is one
`register_loss(...)` call (see tests/test_registries.py for a toy one).
"""
from __future__ import annotations

import difflib
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

REGRESSION = "regression"
CLASSIFICATION = "classification"
TASKS: tuple[str, ...] = (REGRESSION, CLASSIFICATION)


def as_float(a) -> np.ndarray:
    return np.asarray(a, dtype=float)


_as_float = as_float   # the lambda_max helpers at the end of this module use it


def outside_domain(mask: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Convex conjugates are +inf outside their domain."""
    return np.where(mask, values, np.inf)


def near_kink(arg, kink, y, f) -> np.ndarray:
    """Samples whose loss argument sits on a kink up to rounding of the fit."""
    scale = 1.0 + np.abs(as_float(y)) + np.abs(as_float(f))
    return np.abs(arg - kink) <= 1e-9 * scale


@dataclass(frozen=True)
class Loss:
    """Base: subclasses fill the per-sample formulas. Written for regression losses of the
    residual; margin losses (pipeline.losses_margin) override the argument and dual domain."""

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
    # sigmoid(f) is the fitted probability of the +1 class (a stored model then also gives probabilities)
    gives_probabilities: bool = field(init=False, default=False)
    # classification losses: how the loss goes beyond two classes, "multinomial" (one fit of all classes
    # together, softmax cross-entropy) or "one_versus_rest" (one binary fit per class against the others)
    multiclass: str = field(init=False, default="")
    # per-row factors c_i = n w_i / sum(w) of a weighted loss (pipeline.losses_weighted); None: unweighted
    row_factors: np.ndarray | None = field(init=False, default=None, compare=False, repr=False)

    def value(self, y, f) -> np.ndarray:
        raise NotImplementedError

    def derivative(self, y, f) -> np.ndarray:
        raise NotImplementedError

    def cvxpy_sum(self, y, f_expr, weights=None):
        """cvxpy expression of sum_i w_i loss_i (w = 1 when None; see `weighted_sum`)."""
        # each loss imports cvxpy inside this method: only the cvxpy solver routes need it, and
        # `penduel validate` / `--help` must not pay its import
        raise NotImplementedError

    def conjugate(self, y, u) -> np.ndarray:
        raise NotImplementedError

    def intercept_only(self, y, weights=None) -> float:
        """argmin_b sum_i w_i loss(y_i, b) (w = 1 when None): with integer w the fit on rows repeated w_i times."""
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
        y = as_float(y)
        return np.full(y.shape, -np.inf), np.full(y.shape, np.inf)

    # the variable the loss is written in: the residual y - f here, the margin for margin losses
    def _arg(self, y, f):
        return as_float(y) - as_float(f)


def weighted_sum(terms, weights):
    """cvxpy: sum of the per-row expression `terms`, each row times its weight when weights are given."""
    import cvxpy as cp
    return cp.sum(terms) if weights is None else cp.sum(cp.multiply(np.asarray(weights, float), terms))


def root_weights(weights, expr):
    """cvxpy: sqrt(w) * expr (sum_squares of it is sum_i w_i expr_i^2); expr itself when unweighted."""
    import cvxpy as cp
    return expr if weights is None else cp.multiply(np.sqrt(np.asarray(weights, float)), expr)


def row_weights(weights, n: int) -> np.ndarray:
    return np.ones(n) if weights is None else as_float(weights)


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
        return np.ones_like(as_float(f))

    def cvxpy_sum(self, y, f_expr, weights=None):
        import cvxpy as cp
        return 0.5 * cp.sum_squares(root_weights(weights, y - f_expr))

    def conjugate(self, y, u):
        u = as_float(u)
        return u * as_float(y) + 0.5 * u**2

    def intercept_only(self, y, weights=None):
        return float(np.average(as_float(y), weights=weights))


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
        kink = near_kink(r, 0.0, y, f)
        above, below = self.slopes
        low = np.where(kink | (r > 0), -above, below)
        high = np.where(kink | (r < 0), below, -above)
        return low, high

    def second_derivative(self, y, f):
        return np.zeros_like(as_float(f))

    def dual_bounds(self, y):
        above, below = self.slopes
        shape = np.shape(y)
        return np.full(shape, -above), np.full(shape, below)

    def cvxpy_sum(self, y, f_expr, weights=None):
        import cvxpy as cp
        # written with abs and a linear term, not pos/maximum: see the cvxpy/HiGHS
        # bound-propagation defect guarded in tests/test_l1_solvers.py
        above, below = self.slopes
        r = y - f_expr
        return 0.5 * (above + below) * weighted_sum(cp.abs(r), weights) + 0.5 * (above - below) * weighted_sum(r, weights)

    def conjugate(self, y, u):
        u = as_float(u)
        above, below = self.slopes
        ok = (u >= -above - 1e-12) & (u <= below + 1e-12)
        return outside_domain(ok, u * as_float(y))

    def intercept_only(self, y, weights=None):
        above, below = self.slopes
        return float(np.quantile(as_float(y), above / (above + below), method="inverted_cdf", weights=weights))


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

    def cvxpy_sum(self, y, f_expr, weights=None):
        import cvxpy as cp
        # cvxpy's huber(x, M) is x^2 inside, 2M|x| - M^2 outside: twice ours
        return 0.5 * weighted_sum(cp.huber(y - f_expr, self.delta), weights)

    def conjugate(self, y, u):
        u = as_float(u)
        ok = np.abs(u) <= self.delta + 1e-12
        return outside_domain(ok, u * as_float(y) + 0.5 * u**2)

    def intercept_only(self, y, weights=None):
        y = as_float(y)
        w = row_weights(weights, y.shape[0])
        lo, hi = float(np.min(y)), float(np.max(y))
        if hi - lo == 0:
            return lo
        from scipy.optimize import minimize_scalar   # loaded by a fit, not by reading a config

        res = minimize_scalar(lambda b: float(w @ self.value(y, b)), bounds=(lo, hi),
                              method="bounded", options={"xatol": 1e-12 * max(1.0, hi - lo)})
        b = float(res.x)
        # exact finish: sum w clip(y - b, -delta, delta) = 0 is linear in b once the
        # set of samples inside the quadratic zone is fixed
        for _ in range(50):
            r = y - b
            inside = np.abs(r) <= self.delta
            if not inside.any():
                break
            outside = (w[~inside] @ np.sign(r[~inside])) * self.delta
            new = float((w[inside] @ y[inside] + outside) / w[inside].sum())
            if new == b:
                break
            b = new
        return b


# ---------------------------------------------------------------- the table
@dataclass(frozen=True)
class LossParam:
    """One numeric setting of a loss kind; the config checks gt < value < lt."""

    name: str
    default: float
    description: str
    gt: float | None = None
    lt: float | None = None


@dataclass(frozen=True)
class LossKind:
    name: str
    task: str                          # REGRESSION or CLASSIFICATION
    title: str                         # short human name for reports
    factory: Callable[..., Loss]       # called with the parameters below as keywords
    params: tuple[LossParam, ...] = ()
    # the held-out metric that judges this loss first, then the ones shown beside it (names in
    # pipeline.evaluate.METRICS); empty: the task's default decision metric
    judged_by: tuple[str, ...] = ()
    judged_why: str = ""               # why that metric is the loss's own scale, one clause

    @property
    def param_names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.params)


LOSSES: dict[str, LossKind] = {}


def register_loss(name: str, task: str, title: str, factory: Callable[..., Loss],
                  params: tuple[LossParam, ...] = (), judged_by: tuple[str, ...] = (),
                  judged_why: str = "") -> LossKind:
    """Add a loss kind. Register before `pipeline.config` is imported: its choices are read once.

    Worker processes (backends other than local) know only the entries of the modules they
    import: a built-in entry belongs in this module's table.
    """
    if not name.isidentifier() or name != name.lower():
        raise ValueError(f"a loss name is a lower-case identifier, got {name!r}")
    if task not in TASKS:
        raise ValueError(f"loss task must be one of {TASKS}, got {task!r}")
    known = all_loss_params()
    for p in params:
        if p.name in known and known[p.name] != p:
            raise ValueError(f"loss parameter {p.name!r} is already declared differently: {known[p.name]}")
    kind = LossKind(name, task, title, factory, tuple(params), tuple(judged_by), judged_why)
    LOSSES[name] = kind
    return kind


def loss_names(task: str | None = None) -> tuple[str, ...]:
    """Registered loss names (of one task when given), in registration order."""
    return tuple(n for n, k in LOSSES.items() if task is None or k.task == task)


def all_loss_params() -> dict[str, LossParam]:
    """Every parameter any loss kind takes, by name (a shared name means one shared setting)."""
    return {p.name: p for kind in LOSSES.values() for p in kind.params}


register_loss("squared", REGRESSION, "Squared error", SquaredLoss, judged_by=("rmse", "mse"),
              judged_why="the squared loss fits the conditional mean, whose error RMSE measures in the target's unit")
register_loss("absolute", REGRESSION, "Absolute error", AbsoluteLoss, judged_by=("mae",),
              judged_why="the absolute loss fits the conditional median, whose error is the mean absolute error")
register_loss("huber", REGRESSION, "Huber", HuberLoss, (
    LossParam("delta", 1.0, "Huber threshold (on standardised target).", gt=0.0),), judged_by=("huber", "mae", "rmse"),
    judged_why="the Huber loss is the quantity this fit minimises, large residuals counted linearly")
register_loss("quantile", REGRESSION, "Quantile (pinball)", QuantileLoss, (
    LossParam("tau", 0.5, "Quantile level.", gt=0.0, lt=1.0),), judged_by=("pinball",),
    judged_why="a quantile fit is judged by the pinball loss at its own level τ; RMSE would judge it as a mean")

from . import losses_margin  # noqa: E402,F401  (registers the margin losses; it imports Loss from here)


def __getattr__(name: str):
    if name == "LOSS_NAMES":   # every registered loss name, read when asked
        return loss_names()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def get_loss(name: str, **params) -> Loss:
    """Loss by name, with the parameters its kind takes (e.g. `delta` for huber, `tau` for quantile)."""
    if isinstance(name, Loss):
        return name
    key = str(name).strip().lower().replace("-", "_").replace(" ", "_")
    if key not in LOSSES:
        names = loss_names()
        close = difflib.get_close_matches(key, names, n=1, cutoff=0.0)
        hint = f"; did you mean '{close[0]}'?" if close else ""
        raise ValueError(f"unknown loss '{name}': valid names are {', '.join(names)}{hint}")
    try:
        return LOSSES[key].factory(**params)
    except TypeError as exc:
        raise ValueError(f"loss '{key}' got parameters it does not take: {sorted(params)}") from exc
