"""One experiment from spec to report. Only this module knows the order of stages."""
from __future__ import annotations

import pathlib
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
from sklearn.model_selection import train_test_split

from . import seeds
from .config import ExperimentSpec
from .data import DataError, Dataset, load_dataset
from .evaluate import (bootstrap_metrics, classification_metrics, corrected_resampled_ttest, loss_metric,
                       metric_function, regression_metrics)
from .cache import cache_for, run_cached, task_keys
from .execution import run_tasks
from .features import output_width
from .fitting import FitOutcome, FitTask, Shared, build_features, run_fit, target_scaling
from .losses import get_loss, lambda_max
from .selection import choose_lambda_index, cv_summary, make_folds
from .stability_stage import resample_splits, stability_losses, summarise_families

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
    selected_by: str = ""
    nested: dict | None = None       # nested-CV estimate of the select-then-fit procedure
    resamples: tuple = ()            # FitOutcome per resample (stability stage)

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
    tasks_reused: int = 0          # fit tasks taken from the cache instead of refitted
    tasks_total: int = 0
    comparisons: dict = field(default_factory=dict)   # loss label -> corrected t-test across CV folds
    stability: dict = field(default_factory=dict)     # loss label -> resampling summary


def check_feature_budget(spec: ExperimentSpec, dataset: Dataset, n_train: int) -> int:
    width = sum(output_width(m, dataset.n_features, n_train) for m in spec.features.maps)
    mib = n_train * width * 8 * 3 / 2**20   # Z, its raw copy and the scaler's work space
    if mib > spec.features.memory_budget_mib:
        raise DataError(
            f"features.maps: the explicit feature matrix would have {width:,} columns for {n_train} training "
            f"rows, about {mib:,.0f} MiB, over features.memory_budget_mib = {spec.features.memory_budget_mib}. "
            f"Use fewer features (lower degree or n_components) or the representer route (families.l2.kernel) "
            f"instead of an explicit map, or raise the budget.")
    gram_mib = n_train ** 2 * 8 * 3 / 2**20   # K, its eigenvectors and one work copy
    if spec.families.l2.enabled and gram_mib > spec.features.memory_budget_mib:
        raise DataError(
            f"families.l2: the Gram matrix of {n_train:,} training rows would take about {gram_mib:,.0f} MiB, "
            f"over features.memory_budget_mib = {spec.features.memory_budget_mib}. Use fewer rows, disable "
            f"families.l2 (the sparse family needs no Gram matrix) or raise the budget.")
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
    lam = lambda_max(Z, (shared.y[train_rows] - center) / scale, loss, alpha=spec.families.l1.alpha)
    l1 = spec.families.l1
    return lambda_grid(lam, l1.n_lambdas, l1.lambda_ratio)


def _l2_grid(spec, shared, train_rows):
    from .kernels import gram
    from .models.l2 import l2_lambda_grid
    builder = build_features(shared, train_rows)
    Z = builder.transform(shared.X[train_rows])
    K = gram(Z, kernel=spec.families.l2.kernel, **spec.families.l2.kernel_params())
    return l2_lambda_grid(K, spec.families.l2.n_lambdas)


def plan_splits(spec: ExperimentSpec, dataset: Dataset, train_rows, test_rows) -> list[tuple]:
    """(name, fit rows, evaluation rows) for every split any task uses; both families share them all."""
    classify = dataset.task == "classification"
    K = spec.selection.cv_folds
    folds = make_folds(len(train_rows), K, seeds.generator(spec.seed, "folds"), y=dataset.y[train_rows],
                       stratify=classify, repeats=spec.selection.repeats)
    splits = [(f"fold{k}", train_rows[tr], train_rows[va]) for k, (tr, va) in enumerate(folds)]
    splits.append(("final", train_rows, test_rows))
    if spec.selection.nested:
        rng = seeds.generator(spec.seed, "nested")
        for o, (otr, ote) in enumerate(make_folds(len(train_rows), K, rng, y=dataset.y[train_rows],
                                                  stratify=classify)):
            outer_train = train_rows[otr]
            inner = make_folds(len(outer_train), K, rng, y=dataset.y[outer_train], stratify=classify)
            splits += [(f"outer{o}.fold{k}", outer_train[tr], outer_train[va]) for k, (tr, va) in enumerate(inner)]
            splits.append((f"outer{o}.final", outer_train, train_rows[ote]))
    return splits


def plan_tasks(spec: ExperimentSpec, shared: Shared, train_rows, test_rows, splits, resamples) -> list[FitTask]:
    tasks = []
    l2_grid = _l2_grid(spec, shared, train_rows) if spec.families.l2.enabled else None
    resampled = stability_losses(spec)
    for loss_spec in spec.losses:
        loss = get_loss(loss_spec.name, **loss_spec.params())
        grids = {}
        if spec.families.l1.enabled:
            grids["l1"] = _l1_grid(spec, shared, train_rows, loss)
        if spec.families.l2.enabled:
            grids["l2"] = l2_grid
        these = splits + (resamples if loss_spec.label in resampled else [])
        for family, grid in grids.items():
            common = dict(family=family, loss_name=loss_spec.name, loss_params=tuple(sorted(loss_spec.params().items())),
                          loss_label=loss_spec.label, lambdas=grid)
            tasks += [FitTask(split=name, train_idx=tr, eval_idx=ev, **common) for name, tr, ev in these]
    return tasks


def test_metrics(task: str, y, pred, loss, rng) -> tuple[dict, dict]:
    """Held-out metrics at the chosen λ, each with a seeded 90 % bootstrap interval, all from the
    same resampled rows. Classification adds the loss's own mean held-out value."""
    tau = getattr(loss, "tau", 0.5)
    metrics = regression_metrics(y, pred, tau=tau) if task == "regression" else classification_metrics(y, pred)
    wanted = [metric_function(name, tau=tau) for name in metrics]
    if task == "classification":  # regression losses are read on the fitting scale, see FitOutcome.eval_loss
        wanted.append(loss_metric(loss))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # resamples where a metric is undefined are dropped
        boot = bootstrap_metrics(y, pred, wanted, n_boot=1000, level=0.9, rng=rng)
    intervals = {}
    for m in wanted:
        key = "own_loss" if m.name not in metrics else m.name
        est, lo, hi = boot[m.name]
        metrics[key] = float(est)
        intervals[key] = (float(lo), float(hi))
    return metrics, intervals


def _choose(spec, family, loss_name, cv_errors, final) -> tuple[int, str]:
    crit = spec.selection.l2_criterion
    if family == "l2" and loss_name == "squared" and crit != "cv" and final.loo_error is not None:
        values = final.loo_error if crit == "loo" else final.gcv
        return int(np.nanargmin(values)), crit
    return choose_lambda_index(cv_errors, spec.selection.rule), f"{spec.selection.cv_folds}-fold CV, {spec.selection.rule}"


def _nested_estimate(spec, by_split: dict) -> dict | None:
    """Outer-fold held-out loss of the whole procedure (inner CV picks λ, refit on the outer fold)."""
    values = []
    for o in range(spec.selection.cv_folds):
        inner = [by_split[f"outer{o}.fold{k}"].eval_loss for k in range(spec.selection.cv_folds)]
        idx = choose_lambda_index(np.vstack(inner), spec.selection.rule)
        values.append(float(by_split[f"outer{o}.final"].eval_loss[idx]))
    v = np.array(values)
    return {"mean": float(v.mean()), "se": float(v.std(ddof=1) / np.sqrt(len(v))), "outer": values}


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
        idx, how = _choose(spec, family, final_task.loss_name, cv_errors, final)
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
            nested=_nested_estimate(spec, {k: o for k, (_, o) in splits.items()}) if spec.selection.nested else None,
            resamples=tuple(o for k, (_, o) in sorted(splits.items()) if k.startswith("resample"))))
    return results


def compare_on_folds(spec, results, fold_sizes) -> dict:
    """Per loss: corrected resampled t-test (Nadeau & Bengio 2003) of the two families' CV losses at
    their chosen λ, fold by fold on identical folds."""
    out = {}
    by_loss: dict[str, dict] = {}
    for r in results:
        by_loss.setdefault(r.loss_label, {})[r.family] = r
    n_tr, n_te = fold_sizes
    for label, d in by_loss.items():
        if "l1" in d and "l2" in d:
            diffs = d["l1"].cv_errors[:, d["l1"].chosen_index] - d["l2"].cv_errors[:, d["l2"].chosen_index]
            try:
                out[label] = corrected_resampled_ttest(diffs, n_tr, n_te, level=0.9)
            except ValueError:
                continue
    return out


def stability_summaries(spec, results, feature_names, shared, train_rows) -> dict:
    out = {}
    Z_train = None
    by_loss: dict[str, dict] = {}
    for r in results:
        if r.resamples:
            by_loss.setdefault(r.loss_label, {})[r.family] = r
    for label, d in by_loss.items():
        if Z_train is None:
            Z_train = build_features(shared, train_rows).transform(shared.X[train_rows])
        out[label] = summarise_families(spec, {f: list(r.resamples) for f, r in d.items()},
                                        {f: r.lambdas for f, r in d.items()},
                                        {f: r.chosen_index for f, r in d.items()}, feature_names, Z_train)
    return out


def run_experiment(spec: ExperimentSpec, base_dir: pathlib.Path, progress: bool = True) -> ExperimentResult:
    start = time.perf_counter()
    dataset = load_dataset(spec.data, base_dir, spec.task)
    train_rows, test_rows = split_rows(spec, dataset)
    check_feature_budget(spec, dataset, len(train_rows))
    shared = Shared(X=dataset.X, y=dataset.y, task=dataset.task, feature_maps=spec.features.maps,
                    feature_seed=spec.seed, input_names=dataset.feature_names,
                    l1_options={"tol": spec.families.l1.tol, "solver": spec.families.l1.solver,
                                "alpha": spec.families.l1.alpha},
                    l2_kernel=spec.families.l2.kernel,
                    l2_kernel_params=tuple(sorted(spec.families.l2.kernel_params().items())))
    splits = plan_splits(spec, dataset, train_rows, test_rows)
    resamples = resample_splits(spec, train_rows, test_rows, dataset.y[train_rows], dataset.task) \
        if stability_losses(spec) else []
    tasks = plan_tasks(spec, shared, train_rows, test_rows, splits, resamples)
    data_hash = dataset.content_hash()
    outcomes, reused = run_cached(run_tasks, run_fit, tasks, task_keys(spec, data_hash, tasks),
                                  cache_for(spec, FitOutcome), backend=spec.execution.backend,
                                  n_jobs=spec.execution.n_jobs, progress="fits" if progress else None,
                                  scheduler_address=spec.execution.scheduler_address, shared=shared)
    notes = dataset.notes + ((f"reused {reused} of {len(tasks)} finished fit task(s) from the cache "
                              f"'{spec.cache.directory}' (refits avoided)",) if reused else ())
    results = assemble(spec, shared, tasks, outcomes, test_rows, seeds.generator(spec.seed, "test_intervals"))
    feature_names = next(o.feature_names for o in outcomes)
    fold0 = splits[0]
    comparisons = compare_on_folds(spec, results, (len(fold0[1]), len(fold0[2])))
    stability = stability_summaries(spec, results, feature_names, shared, train_rows)
    return ExperimentResult(spec=spec, dataset=dataset, data_hash=data_hash, train_rows=train_rows,
                            test_rows=test_rows, y_test=dataset.y[test_rows], feature_names=feature_names,
                            results=tuple(results), seconds=time.perf_counter() - start,
                            notes=notes, tasks_reused=reused, tasks_total=len(tasks),
                            comparisons=comparisons, stability=stability)
