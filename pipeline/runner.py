"""One experiment from spec to report. Only this module knows the order of stages."""
from __future__ import annotations

import pathlib
import time
from dataclasses import dataclass, field

import numpy as np
from sklearn.model_selection import train_test_split

from . import preflight, seeds
from .config import ExperimentSpec
from .data import DataError, Dataset, load_dataset
from .evaluate import Evaluation, evaluate_results, test_metrics
from .cache import cache_for, run_cached, task_keys
from .execution import run_tasks
from .features import output_width
from .fitting import FitOutcome, FitTask, Shared, build_features, run_fit, target_scaling
from .losses import get_loss
from .models.families import FAMILIES, get_family
from .selection import choose_lambda_index, cv_summary, make_folds, nested_estimate, nested_splits
from .stability import resample_splits, stability_losses, stability_stage


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
    selected_by: str = ""
    nested: dict | None = None       # nested-CV estimate of the select-then-fit procedure
    resamples: tuple = ()            # FitOutcome per resample (stability stage)

    @property
    def title(self) -> str:
        return get_family(self.family).title


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
    tasks_reused: int = 0          # fit tasks taken from the cache instead of refitted
    tasks_total: int = 0
    evaluation: Evaluation | None = None              # fold tests, paired verdicts, ground-truth scores
    stability: dict = field(default_factory=dict)     # loss label -> resampling summary
    selection_paths: dict = field(default_factory=dict)  # (loss label, family) -> (L, p) selection probabilities
    solver_output: tuple[str, ...] = ()   # what fits printed or warned (solver banners), kept out of the terminal


def check_feature_budget(spec: ExperimentSpec, dataset: Dataset, n_train: int) -> int:
    width = sum(output_width(m, dataset.n_features, n_train) for m in spec.features.maps)
    mib = n_train * width * 8 * 3 / 2**20   # Z, its raw copy and the scaler's work space
    if mib > spec.features.memory_budget_mib:
        raise DataError(
            f"features.maps: the explicit feature matrix would have {width:,} columns for {n_train} training "
            f"rows, about {mib:,.0f} MiB, over features.memory_budget_mib = {spec.features.memory_budget_mib}. "
            f"Use fewer features (lower degree or n_components) or the representer route (families.l2.kernel) "
            f"instead of an explicit map, or raise the budget.")
    for fam in enabled_families(spec):
        gram_mib = fam.gram_mib(n_train)
        if gram_mib > spec.features.memory_budget_mib:
            raise DataError(
                f"families.{fam.key}: the Gram matrix of {n_train:,} training rows would take about "
                f"{gram_mib:,.0f} MiB, over features.memory_budget_mib = {spec.features.memory_budget_mib}. "
                f"Use fewer rows, disable families.{fam.key} (the sparse family needs no Gram matrix) or "
                f"raise the budget.")
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


def family_grids(spec, shared, train_rows, losses) -> list[dict]:
    """λ grid of every enabled family for each loss, from the features and targets of the training rows.
    A family whose grid does not read the loss gets one grid for all losses."""
    builder = build_features(shared, train_rows)
    Z = builder.transform(shared.X[train_rows])
    center, scale = target_scaling(shared, shared.y[train_rows])
    t = (shared.y[train_rows] - center) / scale
    shared_grid = {}
    out = []
    for loss in losses:
        grids = {}
        for f in enabled_families(spec):
            if f.key not in shared_grid:
                grids[f.key] = f.grid(Z, t, loss, shared.family_options[f.key])
                if not f.grid_reads_loss:
                    shared_grid[f.key] = grids[f.key]
            else:
                grids[f.key] = shared_grid[f.key]
        out.append(grids)
    return out


def enabled_families(spec) -> list:
    return [f for f in FAMILIES if getattr(spec.families, f.key).enabled]


def plan_splits(spec: ExperimentSpec, dataset: Dataset, train_rows, test_rows) -> list[tuple]:
    """(name, fit rows, evaluation rows) for every split any task uses; both families share them all."""
    classify = dataset.task == "classification"
    K = spec.selection.cv_folds
    folds = make_folds(len(train_rows), K, seeds.generator(spec.seed, "folds"), y=dataset.y[train_rows],
                       stratify=classify, repeats=spec.selection.repeats)
    splits = [(f"fold{k}", train_rows[tr], train_rows[va]) for k, (tr, va) in enumerate(folds)]
    splits.append(("final", train_rows, test_rows))
    if spec.selection.nested:
        splits += nested_splits(train_rows, dataset.y[train_rows], K, seeds.generator(spec.seed, "nested"), classify)
    return splits


def plan_tasks(spec: ExperimentSpec, shared: Shared, train_rows, test_rows, splits, resamples) -> list[FitTask]:
    tasks = []
    resampled = stability_losses(spec)
    losses = [get_loss(ls.name, **ls.params()) for ls in spec.losses]
    for loss_spec, grids in zip(spec.losses, family_grids(spec, shared, train_rows, losses)):
        these = splits + (resamples if loss_spec.label in resampled else [])
        for family, grid in grids.items():
            common = dict(family=family, loss_name=loss_spec.name, loss_params=tuple(sorted(loss_spec.params().items())),
                          loss_label=loss_spec.label, lambdas=grid)
            tasks += [FitTask(split=name, train_idx=tr, eval_idx=ev, **common) for name, tr, ev in these]
    return tasks


def _choose(spec, cv_errors, final) -> tuple[int, str]:
    crit = spec.selection.l2_criterion
    # only a path with exact leave-one-out values (ridge-type, squared loss) can use loo / gcv
    if crit != "cv" and final.loo_error is not None:
        values = final.loo_error if crit == "loo" else final.gcv
        return int(np.nanargmin(values)), crit
    return choose_lambda_index(cv_errors, spec.selection.rule), f"{spec.selection.cv_folds}-fold CV, {spec.selection.rule}"


def assemble(spec, shared, tasks, outcomes, test_rows, rng) -> list[FamilyResult]:
    by_key: dict[tuple, dict[str, tuple[FitTask, FitOutcome]]] = {}
    for t, o in zip(tasks, outcomes):
        by_key.setdefault((t.loss_label, t.family), {})[t.split] = (t, o)
    results = []
    y_test = shared.y[test_rows]
    n_cv = spec.selection.cv_folds * spec.selection.repeats
    for (label, family), splits in by_key.items():
        folds = [splits[f"fold{k}"][1] for k in range(n_cv)]
        final_task, final = splits["final"]
        cv_errors = np.vstack([o.eval_loss for o in folds])
        cv_mean, cv_se = cv_summary(cv_errors)
        idx, how = _choose(spec, cv_errors, final)
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
            intercept=float(final.intercept[idx]), selected_by=how,
            nested=nested_estimate({k: o.eval_loss for k, (_, o) in splits.items()}, spec.selection.cv_folds,
                                   spec.selection.rule) if spec.selection.nested else None,
            resamples=tuple(o for k, (_, o) in sorted(splits.items()) if k.startswith("resample"))))
    return results


@dataclass(frozen=True)
class Inputs:
    """Everything checked before any fit: `penduel validate` stops here, `penduel run` goes on from here."""
    spec: ExperimentSpec
    dataset: Dataset
    train_rows: np.ndarray
    test_rows: np.ndarray
    splits: list
    resamples: list
    notes: tuple = ()


def prepare(spec: ExperimentSpec, base_dir: pathlib.Path) -> Inputs:
    dataset = load_dataset(spec.data, base_dir, spec.task)
    train_rows, test_rows = split_rows(spec, dataset)
    dataset, notes = preflight.check_split(spec, dataset, train_rows, test_rows)
    preflight.check_resamples(spec, len(train_rows))
    splits = plan_splits(spec, dataset, train_rows, test_rows)
    resamples = resample_splits(spec, train_rows, test_rows, dataset.y[train_rows], dataset.task) \
        if stability_losses(spec) else []
    spec, clipped = preflight.clip_centres(spec, min(len(tr) for _, tr, _ in splits + list(resamples)))
    check_feature_budget(spec, dataset, len(train_rows))
    return Inputs(spec, dataset, train_rows, test_rows, splits, resamples, notes + clipped)


def run_experiment(spec: ExperimentSpec, base_dir: pathlib.Path, progress: bool = True,
                   inputs: Inputs | None = None) -> ExperimentResult:
    start = time.perf_counter()
    inputs = inputs or prepare(spec, base_dir)
    spec, dataset, train_rows, test_rows = inputs.spec, inputs.dataset, inputs.train_rows, inputs.test_rows
    splits, resamples = inputs.splits, inputs.resamples
    shared = Shared(X=dataset.X, y=dataset.y, task=dataset.task, feature_maps=spec.features.maps,
                    feature_seed=spec.seed, input_names=dataset.feature_names,
                    family_options={f.key: f.options(getattr(spec.families, f.key),
                                                     seeds.int_seed(spec.seed, "landmarks"))
                                    for f in FAMILIES})
    tasks = plan_tasks(spec, shared, train_rows, test_rows, splits, resamples)
    data_hash = dataset.content_hash()
    cache, output = cache_for(spec, FitOutcome, base_dir), []
    outcomes, reused = run_cached(run_tasks, run_fit, tasks, task_keys(spec, data_hash, tasks),
                                  cache, backend=spec.execution.backend,
                                  n_jobs=spec.execution.n_jobs, progress="fits" if progress else None,
                                  scheduler_address=spec.execution.scheduler_address, shared=shared, log=output)
    notes = dataset.notes + inputs.notes + (cache.drop_note() if cache else ()) + ((f"reused {reused} of {len(tasks)} finished fit task(s) from the cache "
                              f"'{spec.cache.directory}' (refits avoided)",) if reused else ())
    notes += tuple(dict.fromkeys(f"{get_family(o.family).title}: {o.note}" for o in outcomes
                                 if o.note and o.split == "final"))   # e.g. the low-rank route was taken
    results = assemble(spec, shared, tasks, outcomes, test_rows, seeds.generator(spec.seed, "test_intervals"))
    feature_names = next(o.feature_names for t, o in zip(tasks, outcomes) if t.split == "final")
    fold0 = splits[0]
    evaluation = evaluate_results(results, task=dataset.task, y_test=dataset.y[test_rows],
                                  fold_sizes=(len(fold0[1]), len(fold0[2])), dataset=dataset,
                                  feature_names=feature_names, seed=spec.seed)
    stability = stability_stage(spec, results, feature_names,
                                lambda: build_features(shared, train_rows).transform(shared.X[train_rows]))
    return ExperimentResult(spec=spec, dataset=dataset, data_hash=data_hash, train_rows=train_rows,
                            test_rows=test_rows, y_test=dataset.y[test_rows], feature_names=feature_names,
                            results=tuple(results), seconds=time.perf_counter() - start,
                            notes=notes, tasks_reused=reused, tasks_total=len(tasks),
                            evaluation=evaluation, stability=stability.summaries,
                            selection_paths=stability.selection_paths, solver_output=tuple(output))
