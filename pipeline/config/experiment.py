"""The whole experiment file: every section with its default, and the rules across sections."""
from __future__ import annotations

import hashlib
import json
from typing import Any

from pydantic import Field, field_validator, model_validator

from ..losses import TASKS, loss_names
from ..settings import Settings
from .loss_spec import LossSpec
from .sections import (CacheSpec, ExecutionSpec, FamiliesSpec, FeaturesSpec, ReportSpec, SelectionSpec, SplitSpec,
                       StabilitySpec, TrackingSpec, VerdictSpec)
from .sources import DataSource


def _check_solver(spec) -> None:
    """A forced sparse solver must handle every listed loss (asked of the solver table, as the fit would)."""
    from ..losses import get_loss
    from ..models.sparse.routing import route

    l1 = spec.families.l1
    if not l1.enabled:
        return
    for loss in spec.losses:
        try:
            route(get_loss(loss.name, **loss.params()), l1.l1_share, l1.solver)
        except ValueError as exc:
            raise ValueError(f"families.l1.solver: {exc}, but losses lists '{loss.label}'; use solver: auto, "
                             f"or a solver that handles every listed loss") from None


def _check_weights(spec) -> None:
    """Row weights and class balance: where they apply."""
    column = getattr(spec.data, "weights", None)
    for fam in ("l1", "l2"):
        section = getattr(spec.families, fam)
        if section.class_weight != "none" and spec.task != "classification":
            raise ValueError(f"families.{fam}.class_weight is '{section.class_weight}', but the losses are "
                             f"{spec.task} losses, which have no classes to balance; remove it, or give row "
                             f"weights as a column with data.weights")
    if spec.verdict.weighted_metrics and column is None:
        raise ValueError("verdict.weighted_metrics is true but data.weights names no column; name the column of "
                         "row weights in data.weights, or set verdict.weighted_metrics to false")


def _check_stability(spec) -> None:
    st = spec.stability
    if not st.enabled:
        return
    labels = [loss.label for loss in spec.losses]
    unknown = [w for w in st.losses or () if w not in labels]
    if unknown:
        raise ValueError(f"stability.losses: {', '.join(map(repr, unknown))} not among the experiment's losses "
                         f"({', '.join(labels)}); use the labels of the losses listed")
    if st.scheme == "subsample" and st.fraction >= 1.0:
        raise ValueError("stability.fraction: 1.0 draws every training row in every subsample, so every "
                         "resample is the same fit and stability is 1 by construction; use a fraction below 1 "
                         "(0.5 is the usual choice) or scheme: bootstrap")


class ExperimentSpec(Settings):
    name: str = Field(description="Experiment name, used for the tracking experiment and report folder.",
                      min_length=1, max_length=120, pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")
    description: str = Field("", description="Free text shown in the report.")
    seed: int = Field(0, ge=0, description="Root of every random choice.")
    data: DataSource = Field(description="Where the rows come from: a file, a bundled open dataset or a "
                                         "synthetic scenario (chosen by data.kind).")
    split: SplitSpec = SplitSpec()
    features: FeaturesSpec = FeaturesSpec()
    losses: tuple[LossSpec, ...] = Field((LossSpec(name="squared"),), description="Losses to compare on.")
    families: FamiliesSpec = FamiliesSpec()
    selection: SelectionSpec = SelectionSpec()
    tracking: TrackingSpec = TrackingSpec()
    report: ReportSpec = ReportSpec()
    execution: ExecutionSpec = ExecutionSpec()
    stability: StabilitySpec = StabilitySpec()
    cache: CacheSpec = CacheSpec()
    verdict: VerdictSpec = VerdictSpec()

    @field_validator("losses", mode="before")
    @classmethod
    def _loss_strings(cls, v):
        if isinstance(v, (list, tuple)):
            return [{"name": x} if isinstance(x, str) else x for x in v]
        return v

    @field_validator("losses")
    @classmethod
    def _losses_not_empty(cls, v):
        if len(v) == 0:
            raise ValueError("at least one loss is needed")
        labels = [loss.label for loss in v]
        if len(set(labels)) != len(labels):
            raise ValueError(f"a loss is listed twice: {labels}")
        return v

    @model_validator(mode="after")
    def _consistent(self) -> "ExperimentSpec":
        if not (self.families.l1.enabled or self.families.l2.enabled):
            raise ValueError("both families are disabled; enable families.l1 or families.l2")
        if len({loss.task for loss in self.losses}) > 1:
            kinds = " with ".join(f"{t} losses ({', '.join(loss_names(t))})" for t in TASKS if loss_names(t))
            raise ValueError(f"losses mix {kinds}; list one kind")
        task = getattr(self.data, "task", "auto")
        if task != "auto" and task != self.task:
            raise ValueError(f"data.task is {task} but the losses listed are {self.task} losses; list "
                             f"{task} losses ({', '.join(loss_names(task))}) or change data.task")
        if self.data.kind not in ("csv", "parquet") and (self.split.columns or self.split.test_file):
            raise ValueError("split.groups, split.order, split.holdout and split.test_file name columns or files "
                             "of your own table; they need data.kind csv or parquet")
        if self.split.order is not None and self.selection.repeats > 1:
            raise ValueError("with split.order the forward-chaining folds are the same at every repeat; set "
                             "selection.repeats to 1")
        if self.verdict.metric is not None:
            from ..evaluate.metrics import METRICS
            if METRICS[self.verdict.metric].task != self.task:
                raise ValueError(f"verdict.metric is '{self.verdict.metric}', a {METRICS[self.verdict.metric].task} "
                                 f"metric, but the losses are {self.task} losses; allowed: "
                                 f"{', '.join(n for n in METRICS if METRICS[n].task == self.task)}")
        _check_solver(self)
        _check_weights(self)
        _check_stability(self)
        if self.data.kind == "scenario":   # checked before the rows are drawn
            mib = self.data.n_samples * self.data.n_features * 8 / 2**20
            if mib > self.features.memory_budget_mib:
                raise ValueError(f"data: a scenario of {self.data.n_samples} rows × {self.data.n_features} "
                                 f"columns needs about {mib:,.0f} MiB, over features.memory_budget_mib = "
                                 f"{self.features.memory_budget_mib}; use fewer rows or columns")
        return self

    @property
    def task(self) -> str:
        return self.losses[0].task

    def resolved(self) -> dict[str, Any]:
        return self.model_dump(mode="json")

    def config_hash(self) -> str:
        text = json.dumps(self.resolved(), sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]
