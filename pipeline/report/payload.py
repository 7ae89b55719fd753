"""Everything a report shows, as one JSON-able dict.

The payload is built once from an ExperimentResult, stored with the run in the tracking store
(`report_data.json`) and rendered from there, so `penduel report RUN_ID` reproduces a report from
the store alone.
"""
from __future__ import annotations

import math

import numpy as np

from ..evaluate import INTERVAL_SOURCES, N_BOOT
from ..evaluate.classes import PROBABILITY_SENTENCE, confusion
from ..models.families import get_family
from ..models.multiclass import SELECTED_SENTENCE, selection_weights

PAYLOAD_VERSION = 2     # 2: differences are the sparse family's advantage; per-loss decision metrics
PATH_COLUMNS = 300          # coefficient-path columns kept for the plot (in order of entry)


def _num(x):
    """JSON-safe number: NaN and infinities become None."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _clean(obj):
    """Recursively JSON-safe: arrays to lists, NaN/inf to None."""
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _clean(obj.tolist())
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return _num(obj)
    return obj


def _nums(a) -> list:
    return [_num(v) for v in np.asarray(a, dtype=float).ravel()]


def _path_columns(coef: np.ndarray, names) -> dict:
    nonzero = np.abs(coef) > 0
    ever = np.flatnonzero(nonzero.any(0))
    first = nonzero[:, ever].argmax(0)
    keep = ever[np.argsort(first, kind="stable")][:PATH_COLUMNS]
    return {"names": [str(names[j]) for j in keep], "values": [_nums(coef[:, j]) for j in keep]}


def _family(result, r) -> dict:
    out = {
        "family": r.family, "title": r.title, "loss_label": r.loss_label, "loss_name": r.loss_name,
        "loss_params": r.loss_params, "lambdas": _nums(r.lambdas), "cv_mean": _nums(r.cv_mean),
        "cv_se": _nums(r.cv_se), "path_df": _nums(r.path.effective_df), "chosen_index": r.chosen_index,
        "lambda_chosen": r.lambda_chosen, "metrics": {k: _num(v) for k, v in r.metrics.items()},
        "intervals": {k: [_num(lo), _num(hi)] for k, (lo, hi) in r.intervals.items()},
        "n_nonzero": r.n_nonzero, "effective_df": r.effective_df, "fit_seconds": r.fit_seconds,
        "cv_seconds": r.cv_seconds, "converged": [bool(c) for c in r.path.converged],
        "status": list(r.path.status), "solver": r.path.solver,
        "certificate": None if r.path.certificate is None else _nums(r.path.certificate),
        "certificate_kind": r.path.certificate_kind, "n_features": len(result.feature_names),
        "coef_path": None, "top_features": [], "truth": None, "selected_by": r.selected_by,
        "nested": _clean(r.nested), "df_kind": r.path.df_kind,
        "cv_chosen": _num(r.cv_mean[r.chosen_index]), "cv_chosen_se": _num(r.cv_se[r.chosen_index]),
        "grid_end": r.grid_end, "grid_widened": list(r.grid_widened),   # grid_end: "largest" / "smallest"
    }
    # with K > 2 classes the weights of a feature are read as their norm across the classes
    if get_family(r.family).has_support and r.path.coef is not None:
        out["coef_path"] = _path_columns(selection_weights(r.path.coef), result.feature_names)
    if r.coefficients is not None:
        weights = selection_weights(r.coefficients, path=False)
        order = np.argsort(-np.abs(weights), kind="stable")[:15]
        out["top_features"] = [[str(result.feature_names[j]), float(weights[j])] for j in order
                               if weights[j] != 0]
        out["truth"] = _clean(result.evaluation.truth.get((r.loss_label, r.family)))
    if np.ndim(r.test_pred) == 2:   # K > 2 classes: the confusion matrix of the test rows
        out["confusion"] = confusion(result.y_test, r.test_pred, r.test_pred.shape[1]).tolist()
        out["multiclass"] = r.path.multiclass
    return out


def build_payload(result) -> dict:
    from ..tracking import package_versions

    task = result.dataset.task
    evaluation = result.evaluation
    spec = result.spec
    return {
        "payload_version": PAYLOAD_VERSION,
        "name": spec.name, "description": spec.description, "config": spec.resolved(),
        "config_hash": spec.config_hash(), "data_hash": result.data_hash,
        "seconds": None,   # the wall time, start to report written: filled in when the report is written
        "fit_seconds_total": result.fit_seconds_total, "tasks_reused": result.tasks_reused,
        "tasks_total": result.tasks_total, "level": evaluation.level,
        "unit": getattr(spec.data, "unit", None), "interval_sources": dict(INTERVAL_SOURCES),
        "decisions": {label: _clean(vars(d)) for label, d in evaluation.decisions.items()},
        "verdict_override": spec.verdict.metric,
        "task": task, "primary": evaluation.primary, "primary_lower_is_better": evaluation.primary_lower_is_better,
        "rule": spec.selection.rule, "n_folds": spec.selection.cv_folds, "n_boot": N_BOOT,
        "n_rows": result.dataset.n_samples, "n_train": len(result.train_rows), "n_test": len(result.test_rows),
        "dataset": result.dataset.summary(), "notes": list(result.notes),
        "class_labels": list(result.dataset.class_labels or ()),
        "several_classes": f"{SELECTED_SENTENCE} {PROBABILITY_SENTENCE}" if result.dataset.n_classes > 2 else "",
        "design": getattr(result, "design", ""),
        "weighting": getattr(result, "weighting", ""),
        "feature_maps": [m.kind for m in spec.features.maps], "n_features_built": len(result.feature_names),
        "families": [_family(result, r) for r in result.results],
        "verdicts": _clean(list(evaluation.verdicts)),
        "fold_tests": _clean(evaluation.fold_tests),
        "stability": _clean(result.stability),
        "versions": package_versions(),
    }


def upgrade_payload(p: dict) -> dict:
    """Report data stored by an older penduel (version 1) in today's form: one decision metric for every
    loss (the task's), the raw L1 − L2 differences turned into the sparse family's advantage."""
    if p.get("payload_version", 1) >= PAYLOAD_VERSION:
        return p
    p = dict(p)
    lower, primary = p.get("primary_lower_is_better", True), p["primary"]
    why = "the task's default decision metric (report data written by an older penduel)"
    p["decisions"] = {v["loss"]: {"metric": primary, "title": primary.replace("_", " "), "lower_is_better": lower,
                                  "unit": "", "beside": [], "why": why} for v in p["verdicts"]}
    flip = (lambda v: {**v, "diff": -v["diff"], "low": -v["high"], "high": -v["low"]}) if lower else (lambda v: v)
    p["verdicts"] = [flip(v) if v.get("diff") is not None else v for v in p["verdicts"]]
    p["fold_tests"] = {k: {**t, "mean": -t["mean"], "low": -t["high"], "high": -t["low"]}
                       for k, t in (p.get("fold_tests") or {}).items()}
    p.update(level=0.9, interval_sources=dict(INTERVAL_SOURCES), payload_version=PAYLOAD_VERSION)
    return p
