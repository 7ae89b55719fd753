"""Everything a report shows, as one JSON-able dict.

The payload is built once from an ExperimentResult, stored with the run in the tracking store
(`report_data.json`) and rendered from there, so `penduel report RUN_ID` reproduces a report from
the store alone.
"""
from __future__ import annotations

import math

import numpy as np

from ..evaluate import coefficient_error, metric_function, paired_bootstrap_diff, support_recovery, verdict
from ..models.families import compared_pair, get_family
from ..seeds import generator

PAYLOAD_VERSION = 1
PRIMARY = {"regression": "rmse", "classification": "balanced_accuracy"}
N_BOOT = 1000
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


def _truth(result, r) -> dict | None:
    truth = result.dataset.truth
    if truth is None or r.coefficients is None:
        return None
    raw = {name: j for j, name in enumerate(result.dataset.feature_names)}
    selected = [raw[name] for name, c in zip(result.feature_names, r.coefficients) if c != 0 and name in raw]
    rec = support_recovery(selected, truth.support, result.dataset.n_features)
    out = {"true": len(truth.support), "selected": len(selected),
           **{k: _num(rec[k]) for k in ("precision", "recall", "f1")}, "coef_error": None}
    names = list(result.feature_names)
    if truth.coefficients is not None and names[:len(raw)] == list(result.dataset.feature_names):
        # Truth is linear in the original columns; compare on them (identity map first in the features).
        err = coefficient_error(r.coefficients[:len(raw)], truth.coefficients)
        out["coef_error"] = {k: _num(v) for k, v in err.items()}
    return out


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
    }
    if get_family(r.family).has_support and r.path.coef is not None:
        out["coef_path"] = _path_columns(r.path.coef, result.feature_names)
    if r.coefficients is not None:
        order = np.argsort(-np.abs(r.coefficients), kind="stable")[:15]
        out["top_features"] = [[str(result.feature_names[j]), float(r.coefficients[j])] for j in order
                               if r.coefficients[j] != 0]
        out["truth"] = _truth(result, r)
    return out


def _verdicts(result, primary) -> list[dict]:
    metric = metric_function(primary)
    rng = generator(result.spec.seed, "paired_difference")
    by_loss: dict[str, dict] = {}
    for r in result.results:
        by_loss.setdefault(r.loss_label, {})[r.family] = r
    out = []
    for label, d in by_loss.items():
        row = {"loss": label, "diff": None, "low": None, "high": None, "sentence": "Only one family was fitted."}
        first, second = compared_pair()
        if first.key in d and second.key in d:
            diff, lo, hi = paired_bootstrap_diff(result.y_test, d[first.key].test_pred, d[second.key].test_pred,
                                                 metric, n_boot=N_BOOT, level=0.9, rng=rng)
            row.update(diff=_num(diff), low=_num(lo), high=_num(hi),
                       sentence=verdict(first.title, second.title, diff, lo, hi, primary,
                                        metric.lower_is_better))
        out.append(row)
    return out


def build_payload(result) -> dict:
    from ..tracking import package_versions

    task = result.dataset.task
    primary = PRIMARY[task]
    spec = result.spec
    return {
        "payload_version": PAYLOAD_VERSION,
        "name": spec.name, "description": spec.description, "config": spec.resolved(),
        "config_hash": spec.config_hash(), "data_hash": result.data_hash, "seconds": result.seconds,
        "task": task, "primary": primary, "primary_lower_is_better": metric_function(primary).lower_is_better,
        "rule": spec.selection.rule, "n_folds": spec.selection.cv_folds, "n_boot": N_BOOT,
        "n_rows": result.dataset.n_samples, "n_train": len(result.train_rows), "n_test": len(result.test_rows),
        "dataset": result.dataset.summary(), "notes": list(result.notes),
        "feature_maps": [m.kind for m in spec.features.maps], "n_features_built": len(result.feature_names),
        "families": [_family(result, r) for r in result.results],
        "verdicts": _verdicts(result, primary),
        "fold_tests": _clean(result.comparisons),
        "stability": _clean(result.stability),
        "versions": package_versions(),
    }
