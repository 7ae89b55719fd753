"""One experiment from spec to report. Only this module knows the order of stages."""
from __future__ import annotations

import pathlib
import time
from dataclasses import dataclass, field

import numpy as np

from . import preflight, seeds
from .config import ExperimentSpec
from .data import DataError, Dataset, load_dataset
from .evaluate import Evaluation, decisions_for, evaluate_results, test_metrics
from .cache import cache_for, run_cached, task_keys
from .execution import run_tasks
from .features import output_width
from .fitting import FitOutcome, FitTask, Shared, build_features, fit_loss, run_fit, target_scaling
from .losses import get_loss
from .losses_weighted import describe_weighting
from .models.families import FAMILIES, get_family
from .models.multiclass import for_classes
from .selection import L2_CRITERIA, choose_lambda_index, cv_summary, nested_estimate
from .splits import describe_design, plan_resamples, plan_splits, split_rows
from .stability import resample_grids, stability_losses, stability_stage, with_resamples


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
    test_pred: np.ndarray          # (m,) at the chosen λ; (m, K) decision values for K > 2 classes
    metrics: dict                  # test_* metrics
    intervals: dict                # metric -> (low, high)
    n_nonzero: int | None
    effective_df: float
    fit_seconds: float             # path fit on the whole training set
    cv_seconds: float              # all fold fits together
    coefficients: np.ndarray | None  # (p_features,) at the chosen λ, on the feature-output scale
    intercept: float                 # (K,) array for K > 2 classes
    selected_by: str = ""
    nested: dict | None = None       # nested-CV estimate of the select-then-fit procedure
    resamples: tuple = ()            # FitOutcome per resample (stability stage; stability.resample_grid: its λ)
    grid_end: str | None = None      # "largest" / "smallest": the chosen λ still sits at that end of the
    #                                  grid after widening it, so the result is not comparable at this setting
    grid_widened: tuple = (0, 0)     # rounds the grid was widened at its (largest, smallest) end

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
    fit_seconds_total: float = 0.0  # every fit task's own fit time, cached ones included (what the results cost)
    evaluation: Evaluation | None = None              # fold tests, paired verdicts, ground-truth scores
    stability: dict = field(default_factory=dict)     # loss label -> resampling summary
    selection_paths: dict = field(default_factory=dict)  # (loss label, family) -> (L, p) selection probabilities
    design: str = ""                                  # one line: how test rows and CV folds were formed
    solver_output: tuple[str, ...] = ()   # what fits printed or warned (solver banners), kept out of the terminal
    weighting: str = ""                   # which row weights the fits (and metrics) used; "" when none


def check_feature_budget(spec: ExperimentSpec, dataset: Dataset, n_train: int) -> int:
    width = sum(output_width(m, dataset.n_features, n_train) for m in spec.features.maps)
    mib = preflight.feature_mib(dataset.X, n_train, width)   # Z, its raw copy and the scaler's work space
    if mib > spec.features.memory_budget_mib:
        raise DataError(
            f"features.maps: the explicit feature matrix would have {width:,} columns for {n_train} training "
            f"rows, about {mib:,.0f} MiB, over features.memory_budget_mib = {spec.features.memory_budget_mib}. "
            f"Use fewer features (lower degree or n_components) or the representer route (families.l2.kernel) "
            f"instead of an explicit map, or raise the budget.")
    for fam in enabled_families(spec):
        options = fam.options(getattr(spec.families, fam.key))
        gram_mib = fam.gram_mib(n_train, options)
        if gram_mib > spec.features.memory_budget_mib:
            hint = fam.memory_hint(n_train, options)
            raise DataError(
                f"families.{fam.key}: the Gram matrix of {n_train:,} training rows would take about "
                f"{gram_mib:,.0f} MiB, over features.memory_budget_mib = {spec.features.memory_budget_mib}. "
                + (f"{hint}, " if hint else "Use fewer rows, ") +
                f"disable families.{fam.key} (the sparse family needs no Gram matrix) or raise the budget.")
    return width


# Rounds by which a grid whose chosen λ sits at an end is widened there and refitted.
GRID_WIDENINGS = 2
END_NAMES = ("largest", "smallest")


def training_problem(shared, train_rows):
    """The training rows' features and scaled targets, on which every family fixes its λ grid."""
    Z = build_features(shared, train_rows).transform(shared.X[train_rows])
    center, scale = target_scaling(shared, shared.y[train_rows])
    return Z, (shared.y[train_rows] - center) / scale


def family_grids(spec, shared, train_rows, losses) -> list[dict]:
    """λ grid of every enabled family for each loss, from the features and targets of the training rows.
    A family whose grid does not read the loss gets one grid for all losses."""
    Z, t = training_problem(shared, train_rows)
    shared_grid = {}
    out = []
    for loss in losses:
        grids = {}
        for f in enabled_families(spec):
            if f.key not in shared_grid:
                grids[f.key] = for_classes(f, shared.n_classes).grid(Z, t, fit_loss(shared, f.key, loss, train_rows),
                                                                     shared.family_options[f.key])
                if not f.grid_reads_loss:
                    shared_grid[f.key] = grids[f.key]
            else:
                grids[f.key] = shared_grid[f.key]
        out.append(grids)
    return out


def enabled_families(spec) -> list:
    return [f for f in FAMILIES if getattr(spec.families, f.key).enabled]


def plan_tasks(spec: ExperimentSpec, grids: dict, splits, selection_only: bool = False) -> list[FitTask]:
    """One task per split for every (loss label, family) in `grids` (its λ grid). Resample tasks are
    read for selection only: support and signs certified, not 1e-12 gaps."""
    tasks = []
    specs = {ls.label: ls for ls in spec.losses}
    for (label, family), grid in grids.items():
        ls = specs[label]
        common = dict(family=family, loss_name=ls.name, loss_params=tuple(sorted(ls.params().items())),
                      loss_label=label, lambdas=grid, selection_only=selection_only)
        tasks += [FitTask(split=name, train_idx=tr, eval_idx=ev, **common) for name, tr, ev in splits]
    return tasks


def grid_end(spec, family, cv_errors, final, n_rows: int) -> tuple[str | None, bool]:
    """(the end of the grid the chosen λ sits at, or None when interior or at a closed end; whether
    widening there could move it). A smallest λ whose fit is already as complex as the family gets on
    these rows (a saturated support) is a closed end, like λ_max: the family's least-penalised model was
    chosen, which is a fair result to compare, not a grid too short."""
    idx, _ = _choose(spec, cv_errors, final, n_rows)
    L = len(final.eval_loss)
    fam = get_family(family)
    end = "largest" if idx == 0 else "smallest" if idx == L - 1 else None
    if L < 2 or end is None or end in fam.closed_ends:
        return None, False
    n_features = len(final.feature_names)
    last_nnz = None if final.n_nonzero is None else int(final.n_nonzero[-1])
    if end == "smallest" and fam.saturated(last_nnz, n_rows, n_features):
        return None, False
    return end, True


def fit_with_widening(spec, shared, train_rows, splits, run) -> tuple[list, list, dict, dict]:
    """Fit every (loss, family) on its grid; where cross-validation picks an end that can move, widen
    the grid there and refit through the same fit tasks (cached, any backend), up to GRID_WIDENINGS
    rounds. Returns the tasks, their outcomes, the final grids and the widening rounds per pair."""
    losses = [get_loss(ls.name, **ls.params()) for ls in spec.losses]
    grids = {(ls.label, fam): g for ls, by_fam in zip(spec.losses, family_grids(spec, shared, train_rows, losses))
             for fam, g in by_fam.items()}
    loss_of = {ls.label: loss for ls, loss in zip(spec.losses, losses)}
    widened = {key: [0, 0] for key in grids}
    done: dict[tuple, tuple[list, list]] = {}
    pending, problem = dict(grids), None
    n_cv = spec.selection.cv_folds * spec.selection.repeats
    for round_ in range(GRID_WIDENINGS + 1):
        tasks = plan_tasks(spec, pending, splits)
        outcomes = run(tasks)
        by_pair: dict[tuple, tuple[list, list]] = {}
        for t, o in zip(tasks, outcomes):
            pair = by_pair.setdefault((t.loss_label, t.family), ([], []))
            pair[0].append(t)
            pair[1].append(o)
        done.update(by_pair)
        pending = {}
        for key, (ts, os_) in by_pair.items():
            split = {t.split: o for t, o in zip(ts, os_)}
            cv = np.vstack([split[f"fold{k}"].eval_loss for k in range(n_cv)])
            end, movable = grid_end(spec, key[1], cv, split["final"], len(train_rows))
            if end is None or not movable or round_ == GRID_WIDENINGS:
                continue
            widened[key][END_NAMES.index(end)] += 1
            if problem is None:
                problem = training_problem(shared, train_rows)
            fam = for_classes(get_family(key[1]), shared.n_classes)
            pending[key] = fam.grid(*problem, fit_loss(shared, key[1], loss_of[key[0]], train_rows),
                                    shared.family_options[key[1]], widen=tuple(widened[key]))
            grids[key] = pending[key]
        if not pending:
            break
    tasks = [t for ts, _ in done.values() for t in ts]
    outcomes = [o for _, os_ in done.values() for o in os_]
    return tasks, outcomes, grids, {k: tuple(v) for k, v in widened.items()}


def _choose(spec, cv_errors, final, n_rows: int) -> tuple[int, str]:
    crit = L2_CRITERIA[spec.selection.l2_criterion]
    # only a path with exact leave-one-out values (ridge-type, squared loss) can use loo / gcv
    if crit.values is not None and final.loo_error is not None:
        return int(np.nanargmin(crit.values(final, n_rows))), f"{crit.name} ({crit.description})"
    return choose_lambda_index(cv_errors, spec.selection.rule), f"{spec.selection.cv_folds}-fold CV, {spec.selection.rule}"


def metric_weights(spec, shared, test_rows):
    """The test rows' weights when the held-out metrics are weighted (verdict.weighted_metrics), else None."""
    return shared.weights[test_rows] if spec.verdict.weighted_metrics and shared.weights is not None else None


def assemble(spec, shared, tasks, outcomes, test_rows, rng, decisions=None, scale=1.0, widened=None,
             n_rows=0) -> list[FamilyResult]:
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
        idx, how = _choose(spec, cv_errors, final, len(final_task.train_idx))
        end, _ = grid_end(spec, family, cv_errors, final, n_rows)
        loss = get_loss(final_task.loss_name, **dict(final_task.loss_params))
        pred = final.eval_pred[idx]
        metrics, intervals = test_metrics(shared.task, y_test, pred, loss, rng, level=spec.report.level,
                                          decision=(decisions or {}).get(label), scale=scale,
                                          strategy=final.multiclass, weights=metric_weights(spec, shared, test_rows))
        results.append(FamilyResult(
            family=family, loss_label=label, loss_name=final_task.loss_name,
            loss_params=dict(final_task.loss_params), lambdas=final_task.lambdas, cv_errors=cv_errors,
            cv_mean=cv_mean, cv_se=cv_se, chosen_index=int(idx), lambda_chosen=float(final_task.lambdas[idx]),
            path=final, test_pred=pred, metrics=metrics, intervals=intervals,
            n_nonzero=None if final.n_nonzero is None else int(final.n_nonzero[idx]),
            effective_df=float(final.effective_df[idx]), fit_seconds=final.fit_seconds,
            cv_seconds=float(sum(o.fit_seconds for o in folds)),
            coefficients=None if final.coef is None else final.coef[idx],
            intercept=final.intercept[idx] if np.ndim(final.intercept) > 1 else float(final.intercept[idx]),
            selected_by=how,
            nested=nested_estimate({k: o.eval_loss for k, (_, o) in splits.items()}, spec.selection.cv_folds,
                                   spec.selection.rule) if spec.selection.nested else None,
            grid_end=end, grid_widened=(widened or {}).get((label, family), (0, 0))))
    return results


def route_notes(shared: Shared, train_rows, tasks) -> tuple[str, ...]:
    """For a family that took an approximate route: how far it is from the exact one (Family.route_check)."""
    def training():
        center, scale = target_scaling(shared, shared.y[train_rows])
        return build_features(shared, train_rows).transform(shared.X[train_rows]), \
            (shared.y[train_rows] - center) / scale
    grids = {t.family: t.lambdas for t in tasks if t.split == "final"}
    checks = {k: get_family(k).route_check(len(train_rows), training, grid, shared.family_options[k])
              for k, grid in grids.items()}
    return tuple(f"{get_family(k).title}: {text}" for k, text in checks.items() if text)


def grid_notes(results) -> tuple[str, ...]:
    """Plain words on every grid that was widened, and on every choice still at an end."""
    notes = []
    for r in results:
        rounds = sum(r.grid_widened)
        where = " and ".join(f"{name}-λ end {n} time(s)" for name, n in zip(END_NAMES, r.grid_widened) if n)
        df = f"effective df {r.effective_df:.3g}"
        if r.grid_end:
            notes.append(f"{r.title}, loss {r.loss_label}: cross-validation chose the {r.grid_end} λ of its grid "
                         f"({df})" + (f" even after widening the grid at its {where}" if rounds else
                                       ", and a wider grid cannot reach further (the fit is already as complex "
                                       "as the family gets on these rows)")
                         + ": its result is not comparable at this setting, and no winner is declared from it.")
        elif rounds:
            notes.append(f"{r.title}, loss {r.loss_label}: cross-validation first chose an end of the λ grid; "
                         f"the grid was widened at its {where} and refitted, and the chosen λ ({df}) is now "
                         f"inside it.")
    return tuple(notes)


def shared_inputs(spec: ExperimentSpec, dataset: Dataset, n_train: int) -> Shared:
    """What every fit task reads; also how a stored model refits its final path (pipeline.packaged).
    Each family's route is fixed once from the number of training rows."""
    return Shared(X=dataset.X, y=dataset.y, task=dataset.task, feature_maps=spec.features.maps,
                  feature_seed=spec.seed, input_names=dataset.feature_names,
                  family_options={f.key: {**f.for_training_rows(f.options(getattr(spec.families, f.key),
                                                                          seeds.int_seed(spec.seed, "landmarks")),
                                                                n_train),
                                          "class_weight": getattr(spec.families, f.key).class_weight}
                                  for f in FAMILIES},
                  n_classes=dataset.n_classes, weights=dataset.weights)


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
    dataset = load_dataset(spec.data, base_dir, spec.task, spec.split)
    train_rows, test_rows = split_rows(spec, dataset)
    dataset, notes = preflight.check_split(spec, dataset, train_rows, test_rows)
    dataset, densified = preflight.sparse_or_dense(spec, dataset, len(train_rows), enabled_families(spec))
    preflight.check_resamples(spec, len(train_rows))
    splits = plan_splits(spec, dataset, train_rows, test_rows)
    resamples = plan_resamples(spec, dataset, train_rows, test_rows) if stability_losses(spec) else []
    spec, clipped = preflight.clip_centres(spec, min(len(tr) for _, tr, _ in splits + list(resamples)))
    check_feature_budget(spec, dataset, len(train_rows))
    return Inputs(spec, dataset, train_rows, test_rows, splits, resamples, notes + densified + clipped)


def run_experiment(spec: ExperimentSpec, base_dir: pathlib.Path, progress: bool = True,
                   inputs: Inputs | None = None) -> ExperimentResult:
    start = time.perf_counter()
    inputs = inputs or prepare(spec, base_dir)
    spec, dataset, train_rows, test_rows = inputs.spec, inputs.dataset, inputs.train_rows, inputs.test_rows
    splits = inputs.splits
    shared = shared_inputs(spec, dataset, len(train_rows))
    data_hash = dataset.content_hash()
    cache, output = cache_for(spec, FitOutcome, base_dir), []
    reused_total, n_tasks = 0, 0

    def run(tasks):
        nonlocal reused_total, n_tasks
        if not tasks:
            return []
        outcomes, reused = run_cached(run_tasks, run_fit, tasks, task_keys(spec, data_hash, tasks),
                                      cache, backend=spec.execution.backend,
                                      n_jobs=spec.execution.n_jobs, progress="fits" if progress else None,
                                      scheduler_address=spec.execution.scheduler_address, shared=shared, log=output)
        reused_total, n_tasks = reused_total + reused, n_tasks + len(tasks)
        return outcomes

    tasks, outcomes, _, widened = fit_with_widening(spec, shared, train_rows, splits, run)
    scale = target_scaling(shared, dataset.y[train_rows])[1]   # Huber δ in the target's unit
    decisions = decisions_for(spec, dataset.task, scale)
    results = assemble(spec, shared, tasks, outcomes, test_rows, seeds.generator(spec.seed, "test_intervals"),
                       decisions, scale, widened, len(train_rows))
    # resamples once each grid and its chosen λ are settled, at the λ values the stability stage reads
    more = plan_tasks(spec, resample_grids(results, stability_losses(spec)), inputs.resamples, selection_only=True)
    more_outcomes = run(more)
    results, outcomes = with_resamples(results, more, more_outcomes), outcomes + more_outcomes
    reused = reused_total
    notes = dataset.notes + inputs.notes + (cache.drop_note() if cache else ()) + (
        (f"reused {reused} of {n_tasks} finished fit task(s) from the cache '{spec.cache.directory}' "
         f"(refits avoided)",) if reused else ())
    notes += tuple(dict.fromkeys(f"{get_family(o.family).title}, loss {o.loss_label}: {o.note}"
                                 for o in outcomes if o.note and o.split == "final"))   # e.g. the low-rank route
    notes += route_notes(shared, train_rows, tasks)
    notes += grid_notes(results)
    feature_names = next(o.feature_names for t, o in zip(tasks, outcomes) if t.split == "final")
    fold0 = splits[0]
    evaluation = evaluate_results(results, task=dataset.task, y_test=dataset.y[test_rows],
                                  fold_sizes=(len(fold0[1]), len(fold0[2])), dataset=dataset,
                                  feature_names=feature_names, seed=spec.seed, level=spec.report.level,
                                  decisions=decisions, scales={label: scale for label in decisions},
                                  weights=metric_weights(spec, shared, test_rows))
    stability = stability_stage(spec, results, feature_names,
                                lambda: build_features(shared, train_rows).transform(shared.X[train_rows]))
    return ExperimentResult(spec=spec, dataset=dataset, data_hash=data_hash, train_rows=train_rows,
                            test_rows=test_rows, y_test=dataset.y[test_rows], feature_names=feature_names,
                            results=tuple(results), seconds=time.perf_counter() - start,
                            notes=notes, tasks_reused=reused, tasks_total=n_tasks,
                            fit_seconds_total=float(sum(o.fit_seconds for o in outcomes)),
                            evaluation=evaluation, stability=stability.summaries,
                            design=describe_design(spec, dataset, train_rows, test_rows, splits),
                            selection_paths=stability.selection_paths, solver_output=tuple(output),
                            weighting=describe_weighting(getattr(spec.data, "weights", None),
                                                         {f.title: getattr(spec.families, f.key).class_weight
                                                          for f in enabled_families(spec)},
                                                         spec.verdict.weighted_metrics))
