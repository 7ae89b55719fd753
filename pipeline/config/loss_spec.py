"""The `losses` section: choices, parameters and tasks all come from pipeline.losses.LOSSES."""
from __future__ import annotations

from typing import Literal

from pydantic import Field, create_model

from ..losses import CLASSIFICATION, LOSSES, REGRESSION, TASKS, LossKind, all_loss_params, loss_names
from ..settings import Settings

LOSS_CHOICES: tuple[str, ...] = loss_names()
REGRESSION_LOSSES: tuple[str, ...] = loss_names(REGRESSION)
CLASSIFICATION_LOSSES: tuple[str, ...] = loss_names(CLASSIFICATION)


def losses_by_task(joiner: str) -> str:
    """'squared, absolute (regression)<joiner>logistic, hinge (classification)' from the table."""
    return joiner.join(f"{', '.join(loss_names(t))} ({t})" for t in TASKS if loss_names(t))


class LossSpecBase(Settings):
    """Methods of LossSpec; its fields are made from the table below."""

    @property
    def kind(self) -> LossKind:
        return LOSSES[self.name]

    @property
    def task(self) -> str:
        return self.kind.task

    def params(self) -> dict[str, float]:
        """The parameters this loss takes, e.g. {'delta': 1.0} for huber."""
        return {name: getattr(self, name) for name in self.kind.param_names}

    @property
    def label(self) -> str:
        p = self.params()
        return self.name + "".join(f"_{k}{v:g}" for k, v in p.items())


def _loss_fields() -> dict:
    fields = {"name": (Literal[LOSS_CHOICES], Field(
        description=f"{losses_by_task('; ')}. A plain string in the list stands for {{name: ...}}."))}
    for p in all_loss_params().values():
        fields[p.name] = (float, Field(p.default, gt=p.gt, lt=p.lt, description=p.description))
    return fields


LossSpec = create_model("LossSpec", __base__=LossSpecBase, __module__=__name__, **_loss_fields())
