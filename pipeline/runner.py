"""One experiment from spec to report. Only this module knows the order of stages."""
from __future__ import annotations

import pathlib
import time
from dataclasses import dataclass, field

import numpy as np
from sklearn.model_selection import train_test_split

from . import seeds
from .config import ExperimentSpec
from .data import DataError, Dataset, load_dataset
from .evaluate import bootstrap_ci, classification_metrics, loss_metric, metric_function, regression_metrics
from .execution import run_tasks
from .features import output_width
from .fitting import FitOutcome, FitTask, Shared, build_features, run_fit, target_scaling
from .losses import get_loss, lambda_max
from .selection import choose_lambda_index, cv_summary, make_folds

PRIMARY_METRIC = {"regression": "rmse", "classification": "log_loss"}
FAMILY_TITLES = {"l1": "sparse (L1)", "l2": "ridge-type (L2)"}


@dataclass(frozen=True)
class FamilyResult:
    family: str
    loss_label: str
    loss_name: str
    loss_params: dict
    lambdas: np.ndarray
    cv_errors: np.ndarray          # (n_folds, L) held-out loss per fold and λ
    cv_mean: np.ndarray
    cv_se: np.ndarray
    chosen_index: int
    lambda_chosen: float
    path: FitOutcome               # the full-training-set path
    test_pred: np.ndarray          # (m,) at the chosen λ
    metrics: dict                  # test_* metrics
    intervals: dict                # metric -> (low, high)
    n_nonzero: int | None
    effective_df: float
    fit_seconds: float             # path fit on the whole training set
    cv_seconds: float              # all fold fits together
    coefficients: np.ndarray | None  # (p_features,) at the chosen λ, on the feature-output scale
    intercept: float

    @property
    def title(self) -> str:
        return FAMILY_TITLES[self.family]


@dataclass(frozen=True)
class ExperimentResult:
    spec: ExperimentSpec
    dataset: Dataset
    data_hash: str
    train_rows: np.ndarray
    test_rows: np.ndarray
    y_test: np.ndarray
    feature_names: tuple[str, ...]
    results: tuple[FamilyResult, ...]
    seconds: float
    notes: tuple[str, ...] = field(default_factory=tuple)


def check_feature_budget(spec: ExperimentSpec, dataset: Dataset, n_train: int) -> int:
    width = sum(output_width(m, dataset.n_features) for m in spec.features.maps)
    mib = n_train * width * 8 * 3 / 2**20   # Z, its raw copy and the scaler's work space
    if mib > spec.features.memory_budget_mib:
        raise DataError(
            f"features.maps: the explicit feature matrix would have {width:,} columns for {n_train} training "
            f"rows, about {mib:,.0f} MiB, over features.memory_budget_mib = {spec.features.memory_budget_mib}. "
            f"Use fewer features (lower degree or n_components) or the representer route (families.l2.kernel) "
            f"instead of an explicit map, or raise the budget.")
    return width


def split_rows(spec: ExperimentSpec, dataset: Dataset):
    n = dataset.n_samples
    stratify = dataset.y if dataset.task == "classification" else None
    rows = np.arange(n)
    n_test = max(1, int(round(spec.split.test_fraction * n)))
    try:
        tr, te = train_test_split(rows, test_size=n_test, random_state=seeds.int_seed(spec.seed, "split"),
                                  stratify=stratify)
    except ValueError as exc:
        raise DataError(f"split.test_fraction: cannot hold out {n_test} of {n} rows ({exc}).") from None
    if len(tr) < spec.selection.cv_folds:
        raise DataError(f"selection.cv_folds: {spec.selection.cv_folds} folds need at least that many training "
                        f"rows, but only {len(tr)} remain after holding out {len(te)} test rows of {n}.")
    if dataset.task == "classification" and np.min([np.sum(dataset.y[tr] > 0), np.sum(dataset.y[tr] < 0)]) < \
            spec.selection.cv_folds:
        raise DataError(f"selection.cv_folds: the smaller class has fewer training rows than the "
                        f"{spec.selection.cv_folds} folds; use fewer folds or more data.")
    return np.sort(tr), np.sort(te)


def _l1_grid(spec, shared, train_rows, loss):
    from .models.l1 import lambda_grid
    builder = build_features(shared, train_rows)
    Z = builder.transform(shared.X[train_rows])
    center, scale = target_scaling(shared, shared.y[train_rows])
    lam = lambda_max(Z, (shared.y[train_rows] - center) / scale, loss)
    l1 = spec.families.l1
    return lambda_grid(lam, l1.n_lambdas, l1.lambda_ratio)


def _l2_grid(spec, shared, train_rows):
    from .kernels import gram
    from .models.l2 import l2_lambda_grid
    builder = build_features(shared, train_rows)
    Z = builder.transform(shared.X[train_rows])
    return l2_lambda_grid(gram(Z, kernel=spec.families.l2.kernel), spec.families.l2.n_lambdas)


def plan_tasks(spec: ExperimentSpec, shared: Shared, train_rows, test_rows, folds) -> list[FitTask]:
    tasks = []
    l2_grid = _l2_grid(spec, shared, train_rows) if spec.families.l2.enabled else None
    for loss_spec in spec.losses:
        loss = get_loss(loss_spec.name, **loss_spec.params())
        grids = {}
        if spec.families.l1.enabled:
            grids["l1"] = _l1_grid(spec, shared, train_rows, loss)
        if spec.families.l2.enabled:
            grids["l2"] = l2_grid
        for family, grid in grids.items():
            common = dict(family=family, loss_name=loss_spec.name, loss_params=tuple(sorted(loss_spec.params().items())),
                          loss_label=loss_spec.label, lambdas=grid)
            for k, (tr, va) in enumerate(folds):
                tasks.append(FitTask(split=f"fold{k}", train_idx=train_rows[tr], eval_idx=train_rows[va], **common))
            tasks.append(FitTask(split="final", train_idx=train_rows, eval_idx=test_rows, **common))
    return tasks


def test_metrics(task: str, y, pred, loss, rng) -> tuple[dict, dict]:
    """Held-out metrics at the chosen λ, each with a seeded 90 % bootstrap interval."""
    tau = getattr(loss, "tau", 0.5)
    metrics = regression_metrics(y, pred, tau=tau) if task == "regression" else classification_metrics(y, pred)
    intervals = {}
    for name in metrics:
        try:
            _, lo, hi = bootstrap_ci(y, pred, metric_function(name, tau=tau), n_boot=1000, level=0.9, rng=rng)
        except ValueError:  # e.g. a resample with one class only for ROC AUC
            lo, hi = float("nan"), float("nan")
        intervals[name] = (float(lo), float(hi))
    if task == "classification":  # the loss's own objective; regression losses are read on the fitting scale
        own = loss_metric(loss)
        metrics["own_loss"], lo, hi = bootstrap_ci(y, pred, own, n_boot=1000, level=0.9, rng=rng)
        intervals["own_loss"] = (float(lo), float(hi))
    return metrics, intervals


def assemble(spec, shared, tasks, outcomes, test_rows, rng) -> list[FamilyResult]:
    by_key: dict[tuple, list[tuple[FitTask, FitOutcome]]] = {}
    for t, o in zip(tasks, outcomes):
        by_key.setdefault((t.loss_label, t.family), []).append((t, o))
    results = []
    y_test = shared.y[test_rows]
    for (label, family), pairs in by_key.items():
        folds = [o for t, o in pairs if t.split != "final"]
        final_task, final = next((t, o) for t, o in pairs if t.split == "final")
        cv_errors = np.vstack([o.eval_loss for o in folds])
        cv_mean, cv_se = cv_summary(cv_errors)
        idx = choose_lambda_index(cv_errors, spec.selection.rule)
        loss = get_loss(final_task.loss_name, **dict(final_task.loss_params))
        pred = final.eval_pred[idx]
        metrics, intervals = test_metrics(shared.task, y_test, pred, loss, rng)
        results.append(FamilyResult(
            family=family, loss_label=label, loss_name=final_task.loss_name,
            loss_params=dict(final_task.loss_params), lambdas=final_task.lambdas, cv_errors=cv_errors,
            cv_mean=cv_mean, cv_se=cv_se, chosen_index=int(idx), lambda_chosen=float(final_task.lambdas[idx]),
            path=final, test_pred=pred, metrics=metrics, intervals=intervals,
            n_nonzero=None if final.n_nonzero is None else int(final.n_nonzero[idx]),
            effective_df=float(final.effective_df[idx]), fit_seconds=final.fit_seconds,
            cv_seconds=float(sum(o.fit_seconds for o in folds)),
            coefficients=None if final.coef is None else final.coef[idx],
            intercept=float(final.intercept[idx])))
    return results


def run_experiment(spec: ExperimentSpec, base_dir: pathlib.Path, progress: bool = True) -> ExperimentResult:
    start = time.perf_counter()
    dataset = load_dataset(spec.data, base_dir, spec.task)
    train_rows, test_rows = split_rows(spec, dataset)
    check_feature_budget(spec, dataset, len(train_rows))
    shared = Shared(X=dataset.X, y=dataset.y, task=dataset.task, feature_maps=spec.features.maps,
                    feature_seed=seeds.int_seed(spec.seed, "features"), input_names=dataset.feature_names,
                    l1_options={"tol": spec.families.l1.tol, "solver": spec.families.l1.solver},
                    l2_kernel=spec.families.l2.kernel)
    folds = make_folds(len(train_rows), spec.selection.cv_folds, seeds.generator(spec.seed, "folds"),
                       y=dataset.y[train_rows], stratify=dataset.task == "classification")
    tasks = plan_tasks(spec, shared, train_rows, test_rows, folds)
    outcomes = run_tasks(run_fit, tasks, backend=spec.execution.backend, n_jobs=spec.execution.n_jobs,
                         progress="fits" if progress else None,
                         scheduler_address=spec.execution.scheduler_address, shared=shared)
    results = assemble(spec, shared, tasks, outcomes, test_rows, seeds.generator(spec.seed, "bootstrap"))
    feature_names = next(o.feature_names for o in outcomes)
    return ExperimentResult(spec=spec, dataset=dataset, data_hash=dataset.content_hash(), train_rows=train_rows,
                            test_rows=test_rows, y_test=dataset.y[test_rows], feature_names=feature_names,
                            results=tuple(results), seconds=time.perf_counter() - start,
                            notes=dataset.notes)
