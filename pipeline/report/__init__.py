"""The self-contained HTML report of one execution, rendered from its payload."""
from __future__ import annotations

import datetime as dt
import json
import pathlib
from importlib import resources

import jinja2
import yaml

from . import plots
from .payload import build_payload

RULE_TEXT = {"min": "least CV error", "one_se": "the one-standard-error rule"}


def _env() -> jinja2.Environment:
    loader = jinja2.FileSystemLoader(str(resources.files("pipeline.report") / "templates"))
    return jinja2.Environment(loader=loader, autoescape=True, undefined=jinja2.StrictUndefined)


def _g(x, digits=4) -> str:
    return "—" if x is None else f"{x:.{digits}g}"


def _with_interval(f, name) -> str:
    lo, hi = f["intervals"].get(name, (None, None))
    return f"{_g(f['metrics'].get(name))} [{_g(lo)}, {_g(hi)}]"


def _problems(f) -> str:
    bad = [f"λ={lam:.3g}: {status}" for lam, ok, status in zip(f["lambdas"], f["converged"], f["status"]) if not ok]
    return "; ".join(bad[:8]) + (f" (and {len(bad) - 8} more)" if len(bad) > 8 else "")


def _loss_blocks(p) -> list[dict]:
    by_loss: dict[str, list] = {}
    for f in p["families"]:
        by_loss.setdefault(f["loss_label"], []).append(f)
    blocks = []
    for label, fams in by_loss.items():
        l1 = next((f for f in fams if f["family"] == "l1"), None)
        names = sorted({k for f in fams for k in f["metrics"]})
        blocks.append({
            "loss": label, "families": [f["title"] for f in fams],
            "metric_rows": [{"name": m, "cells": [_with_interval(f, m) if m in f["metrics"] else "—" for f in fams]}
                            for m in names],
            "cv_plot": plots.cv_curves(fams, label), "df_plot": plots.error_vs_df(fams, label),
            "path_plot": plots.coefficient_path(l1) if l1 and l1["coef_path"] and l1["coef_path"]["names"] else None,
            "top_features": [(n, _g(c)) for n, c in l1["top_features"]] if l1 else [],
            "truth": None if not (l1 and l1["truth"]) else {k: (_g(v, 3) if isinstance(v, float) or v is None else v)
                                                          for k, v in l1["truth"].items()},
            "problems": "; ".join(x for x in (_problems(f) for f in fams) if x)})
    return blocks


def render(p: dict, run_id: str) -> str:
    primary = p["primary"]
    summary = [{"loss": f["loss_label"], "family": f["title"], "lam": _g(f["lambda_chosen"]),
                "primary": _with_interval(f, primary),
                "nnz": f["n_nonzero"] if f["n_nonzero"] is not None else f"all {f['n_features']}",
                "df": _g(f["effective_df"], 3), "fit": f"{f['fit_seconds']:.2f}", "cv": f"{f['cv_seconds']:.2f}",
                "ok": f"{sum(f['converged'])} of {len(f['lambdas'])}"} for f in p["families"]]
    by_loss = {}
    for f in p["families"]:
        by_loss.setdefault(f["loss_label"], {})[f["family"]] = f
    verdicts = []
    for v in p["verdicts"]:
        fams = by_loss[v["loss"]]
        verdicts.append({"loss": v["loss"],
                         "l1": _with_interval(fams["l1"], primary) if "l1" in fams else "not fitted",
                         "l2": _with_interval(fams["l2"], primary) if "l2" in fams else "not fitted",
                         "diff": "—" if v["diff"] is None else f"{_g(v['diff'])} [{_g(v['low'])}, {_g(v['high'])}]",
                         "sentence": v["sentence"]})
    data_rows = [(k.replace("_", " "), _g(v) if isinstance(v, float) else v) for k, v in p["dataset"].items()]
    data_rows += [("features built", f"{p['n_features_built']} (maps: {', '.join(p['feature_maps'])})"),
                  ("training rows", p["n_train"]), ("test rows", p["n_test"])]
    css = (resources.files("pipeline.report") / "templates" / "report.css").read_text(encoding="utf-8")
    return _env().get_template("execution.html").render(
        name=p["name"], description=p["description"], run_id=run_id,
        written=dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        config_hash=p["config_hash"], data_hash=p["data_hash"], seconds=p["seconds"],
        n_test=p["n_test"], n_rows=p["n_rows"], n_boot=p["n_boot"],
        primary_label=primary.replace("_", " ") + ("" if p["primary_lower_is_better"] else " (higher is better)"),
        rule_text=RULE_TEXT[p["rule"]], verdicts=verdicts, summary=summary, loss_blocks=_loss_blocks(p),
        n_folds=p["n_folds"], data_rows=data_rows, notes=p["notes"],
        config_yaml=yaml.safe_dump(p["config"], sort_keys=False, allow_unicode=True),
        versions=", ".join(f"{k} {v}" for k, v in p["versions"].items()), version=p["versions"]["penduel"], css=css)


def report_path(base_dir: pathlib.Path, directory: str, name: str, run_id: str) -> pathlib.Path:
    return pathlib.Path(base_dir) / directory / name / run_id / "index.html"


def write_payload_report(payload: dict, run_id: str, base_dir: pathlib.Path) -> pathlib.Path:
    path = report_path(base_dir, payload["config"]["report"]["directory"], payload["name"], run_id)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(render(payload, run_id), encoding="utf-8")
    (path.parent / "report_data.json").write_text(json.dumps(payload, allow_nan=False), encoding="utf-8")
    return path


def write_report(result, run_id: str, base_dir: pathlib.Path) -> pathlib.Path:
    return write_payload_report(build_payload(result), run_id, base_dir)
