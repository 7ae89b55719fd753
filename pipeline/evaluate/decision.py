"""Which metric decides between the families for each loss, and the sentences around the decision.

Each loss is judged on its own scale: the loss table (`pipeline.losses.LOSSES`, field `judged_by`)
names the decision metric first and the metrics shown beside it; `verdict.metric` in the config
overrides it for every loss. A loss kind that names none is judged by its task's default
(`metrics.PRIMARY`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from .comparisons import advantage_winner
from .metrics import PRIMARY, bound_metric, unit_text


@dataclass(frozen=True)
class Decision:
    metric: str                  # name in METRICS
    title: str                   # how sentences name it (pinball at its τ, Huber at its threshold)
    lower_is_better: bool
    unit: str                    # the metric's unit from the target's ('' when unit-free or unnamed)
    beside: tuple[str, ...]      # metrics shown beside it
    why: str                     # one clause: why this metric decided

    @property
    def names(self) -> tuple[str, ...]:
        return (self.metric, *self.beside)


def decide(loss_name: str, task: str, override: str | None = None, unit: str | None = None, *,
           loss=None, scale: float = 1.0) -> Decision:
    """The decision metric of a loss (by its kind's `judged_by`, or the config's override)."""
    from ..losses import LOSSES

    kind = LOSSES[loss_name]
    judged = kind.judged_by or (PRIMARY[task],)
    if override:
        name, beside = override, tuple(n for n in judged if n != override)
        why = f"the config names it (verdict.metric: {override}) instead of {judged[0]}"
    else:
        name, beside = judged[0], judged[1:]
        why = kind.judged_why or f"the default decision metric for {task}"
    m = bound_metric(name, loss, scale)
    return Decision(metric=name, title=m.label, lower_is_better=m.lower_is_better, unit=unit_text(m, unit),
                    beside=beside, why=why)


def reconcile(low, high, fold_test: dict | None, name_a: str, name_b: str) -> str | None:
    """One sentence when the held-out interval and the fold test disagree on who is better, saying
    which to trust and why; None when they agree or either is missing."""
    if not fold_test or low is None or high is None or not (math.isfinite(low) and math.isfinite(high)):
        return None
    names = (name_a, name_b)
    test_win = advantage_winner(low, high)
    fold_win = advantage_winner(fold_test["low"], fold_test["high"])
    if test_win == fold_win:
        return None
    p = f"p = {fold_test['p_value']:.2g}"
    why = ("its rows took no part in fitting or in choosing λ, while the CV folds also chose each family's λ, "
           "so their errors are flattered by that choice")
    if fold_win is None:
        return (f"The fold test does not confirm that {names[test_win]} is better ({p}); trust the held-out "
                f"interval: {why}.")
    if test_win is None:
        return (f"The fold test favours {names[fold_win]} ({p}) but the held-out interval does not separate the "
                f"families; trust the held-out interval ({why}) — more test rows would be needed to decide.")
    return (f"The fold test points the other way, to {names[fold_win]} ({p}); trust the held-out interval: {why}.")


def decisions_for(spec, task: str, scale: float = 1.0) -> dict:
    """Loss label -> Decision for every loss of an experiment (override and unit from the config)."""
    from ..losses import get_loss

    return {ls.label: decide(ls.name, task, spec.verdict.metric, getattr(spec.data, "unit", None),
                             loss=get_loss(ls.name, **ls.params()), scale=scale) for ls in spec.losses}
