"""Which solver handles which problem: one table, read once per path for validation and routing.

Each row names a restricted-problem solver and the loss properties / penalty mixing it
needs. A forced solver is checked against its row; "auto" and "active_set" take the
first row that accepts the problem (and add active-set continuation for smooth losses).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from pipeline.losses import Loss


@dataclass(frozen=True)
class SolverRow:
    name: str
    accepts: Callable[[Loss, float], bool]   # (loss, alpha) -> can this solver fit it
    needs: str                               # what `accepts` asks, for the error message


# in preference order: the first row that accepts a problem is the automatic choice
SOLVER_TABLE: tuple[SolverRow, ...] = (
    SolverRow("osqp", lambda loss, alpha: loss.quadratic, "the squared loss only (Gram form)"),
    SolverRow("highs", lambda loss, alpha: loss.slopes is not None and alpha >= 1.0,
              "piecewise-linear losses (absolute, quantile, hinge) with alpha = 1 only (split LP)"),
    SolverRow("cvxpy", lambda loss, alpha: True, "any convex loss"),
)
# choices that pick a row themselves; they also try active-set continuation first
AUTOMATIC = ("auto", "active_set")
SOLVERS: tuple[str, ...] = AUTOMATIC + tuple(row.name for row in SOLVER_TABLE)


def route(loss: Loss, alpha: float, solver: str) -> str:
    """The restricted-problem solver for this loss and mixing; raises if a forced one cannot."""
    if solver not in SOLVERS:
        raise ValueError(f"unknown solver '{solver}': valid are {', '.join(SOLVERS)}")
    if solver in AUTOMATIC:
        return next(row.name for row in SOLVER_TABLE if row.accepts(loss, alpha))
    row = next(row for row in SOLVER_TABLE if row.name == solver)
    if not row.accepts(loss, alpha):
        raise ValueError(f"solver '{solver}' handles {row.needs}")
    return solver
