"""The self-contained HTML report of one execution."""
from __future__ import annotations

import datetime as dt
import pathlib
from importlib import resources

import jinja2
import numpy as np
import yaml

from ..evaluate import metric_function, paired_bootstrap_diff, support_recovery, verdict
from ..seeds import generator
from . import plots

PRIMARY = {"regression": "rmse", "classification": "balanced_accuracy"}
N_BOOT = 1000
RULE_TEXT = {"min": "least CV error", "one_se": "the one-standard-error rule"}


def _env() -> jinja2.Environment:
    loader = jinja2.FileSystemLoader(str(resources.files("pipeline.report") / "templates"))
    return jinja2.Environment(loader=loader, autoescape=True, undefined=jinja2.StrictUndefined)


def _g(x, digits=4) -> str:
    if x is None or (isinstance(x, float) and not np.isfinite(x)):
        return "—"
    return f"{x:.{digits}g}"


def _with_interval(r, name) -> str:
    lo, hi = r.intervals.get(name, (np.nan, np.nan))
    return f"{_g(r.metrics[name])} [{_g(lo)}, {_g(hi)}]"


def _verdicts(result, by_loss, primary) -> list[dict]:
    metric = metric_function(primary)
    rng = generator(result.spec.seed, "bootstrap")
    out = []
    for label, fams in by_loss.items():
        d = {f.family: f for f in fams}
        row = {"loss": label, "l1": _with_interval(d["l1"], primary) if "l1" in d else "not fitted",
               "l2": _with_interval(d["l2"], primary) if "l2" in d else "not fitted"}
        if "l1" in d and "l2" in d:
            diff, lo, hi = paired_bootstrap_diff(result.y_test, d["l1"].test_pred, d["l2"].test_pred, metric,
                                                 n_boot=N_BOOT, level=0.9, rng=rng)
            row["diff"] = f"{_g(diff)} [{_g(lo)}, {_g(hi)}]"
            row["sentence"] = verdict("sparse (L1)", "ridge-type (L2)", diff, lo, hi, primary,
                                      metric.lower_is_better)
        else:
            row["diff"], row["sentence"] = "—", "Only one family was fitted."
        out.append(row)
    return out


def _truth(result, r):
    truth = result.dataset.truth
    if truth is None or r.coefficients is None:
        return None
    raw = {name: j for j, name in enumerate(result.dataset.feature_names)}
    selected = [raw[name] for name, c in zip(result.feature_names, r.coefficients) if c != 0 and name in raw]
    rec = support_recovery(selected, truth.support, result.dataset.n_features)
    return {"true": len(truth.support), "selected": len(selected), "precision": _g(rec["precision"], 3),
            "recall": _g(rec["recall"], 3), "f1": _g(rec["f1"], 3)}


def _problems(r) -> str:
    bad = [f"λ={lam:.3g}: {status}" for lam, ok, status in zip(r.lambdas, r.path.converged, r.path.status) if not ok]
    return "; ".join(bad[:8]) + (f" (and {len(bad) - 8} more)" if len(bad) > 8 else "")


def render(result, run_id: str) -> str:
    task = result.dataset.task
    primary = PRIMARY[task]
    by_loss: dict[str, list] = {}
    for r in result.results:
        by_loss.setdefault(r.loss_label, []).append(r)
    summary, blocks = [], []
    for label, fams in by_loss.items():
        for r in fams:
            summary.append({"loss": label, "family": r.title, "lam": _g(r.lambda_chosen),
                            "primary": _with_interval(r, primary),
                            "nnz": r.n_nonzero if r.n_nonzero is not None else f"all {len(result.feature_names)}",
                            "df": _g(r.effective_df, 3), "fit": f"{r.fit_seconds:.2f}", "cv": f"{r.cv_seconds:.2f}",
                            "ok": f"{int(r.path.converged.sum())} of {len(r.lambdas)}"})
        l1 = next((r for r in fams if r.family == "l1"), None)
        names = sorted({k for r in fams for k in r.metrics})
        top = []
        if l1 is not None and l1.coefficients is not None:
            order = np.argsort(-np.abs(l1.coefficients))[:15]
            top = [(result.feature_names[j], _g(float(l1.coefficients[j]))) for j in order if l1.coefficients[j] != 0]
        blocks.append({
            "loss": label, "families": [r.title for r in fams],
            "metric_rows": [{"name": m, "cells": [_with_interval(r, m) if m in r.metrics else "—" for r in fams]}
                            for m in names],
            "cv_plot": plots.cv_curves(fams, label), "df_plot": plots.error_vs_df(fams, label),
            "path_plot": plots.coefficient_path(l1, result.feature_names) if l1 is not None and l1.path.coef is not None
            else None,
            "top_features": top, "truth": _truth(result, l1) if l1 is not None else None,
            "problems": "; ".join(p for p in (_problems(r) for r in fams) if p)})
    ds = result.dataset.summary()
    data_rows = [(k.replace("_", " "), v if not isinstance(v, float) else _g(v)) for k, v in ds.items()]
    data_rows += [("features built", f"{len(result.feature_names)} (maps: "
                   f"{', '.join(m.kind for m in result.spec.features.maps)})"),
                  ("training rows", len(result.train_rows)), ("test rows", len(result.test_rows))]
    from ..tracking import package_versions
    versions = package_versions()
    css = (resources.files("pipeline.report") / "templates" / "report.css").read_text(encoding="utf-8")
    return _env().get_template("execution.html").render(
        name=result.spec.name, description=result.spec.description, run_id=run_id,
        written=dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        config_hash=result.spec.config_hash(), data_hash=result.data_hash, seconds=result.seconds,
        n_test=len(result.test_rows), n_rows=result.dataset.n_samples, n_boot=N_BOOT,
        primary_label=primary.replace("_", " ") + ("" if metric_function(primary).lower_is_better else
                                                   " (higher is better)"),
        rule_text=RULE_TEXT[result.spec.selection.rule], verdicts=_verdicts(result, by_loss, primary),
        summary=summary, loss_blocks=blocks, n_folds=result.spec.selection.cv_folds, data_rows=data_rows,
        notes=list(result.notes), config_yaml=yaml.safe_dump(result.spec.resolved(), sort_keys=False,
                                                             allow_unicode=True),
        versions=", ".join(f"{k} {v}" for k, v in versions.items()), version=versions["penduel"], css=css)


def write_report(result, run_id: str, base_dir: pathlib.Path) -> pathlib.Path:
    out_dir = pathlib.Path(base_dir) / result.spec.report.directory / result.spec.name / run_id
    out_dir.mkdir(parents=True, exist_ok=True)
    path = out_dir / "index.html"
    path.write_text(render(result, run_id), encoding="utf-8")
    return path
