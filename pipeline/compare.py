"""Executions side by side, read from the tracking store alone (never from local report files).

For each loss and family: the CV estimate (the ranking: chosen without test rows), the held-out decision
metric with its interval beside it, sparsity, stability, time; and the settings in which the executions'
resolved configs differ. Regression and classification executions get separate tables; failed ones are
listed as failed.
"""
from __future__ import annotations

import json
import math

from .evaluate import PRIMARY, advantage_winner, winner
from .models.families import compared_pair
from .stored_runs import StoreError, child_runs, execution_runs, read_config, read_payload

MISSING = "(not set)"


def flatten(config, prefix: str = "") -> dict[str, str]:
    """Dotted setting → canonical JSON text of its value; list items are indexed (losses[1].name)."""
    out: dict[str, str] = {}
    if isinstance(config, dict) and config:
        for key, value in config.items():
            out.update(flatten(value, f"{prefix}.{key}" if prefix else str(key)))
    elif isinstance(config, list) and config:
        for i, value in enumerate(config):
            out.update(flatten(value, f"{prefix}[{i}]"))
    else:
        out[prefix] = json.dumps(config, sort_keys=True, ensure_ascii=False)
    return out


def config_differences(configs: list[dict]) -> list[dict]:
    """Settings whose values are not the same in every config, one value per config (MISSING where a
    config lacks the setting), in setting order."""
    flat = [flatten(c) for c in configs]
    keys = sorted(set().union(*flat)) if flat else []
    rows = []
    for key in keys:
        values = [f.get(key, MISSING) for f in flat]
        if len(set(values)) > 1:
            rows.append({"setting": key, "values": values})
    return rows


def _num(x):
    return x if x is not None and math.isfinite(x) else None


def fit_row(child) -> dict:
    """One (family, loss) child run as plain numbers; absent metrics are None."""
    m, p, t = child.data.metrics, child.data.params, child.data.tags
    return {
        "family": t.get("penduel.family", p.get("family")), "loss": t.get("penduel.loss", p.get("loss")),
        "run_id": child.info.run_id, "status": child.info.status,
        "lambda_chosen": _num(float(p["lambda_chosen"])) if "lambda_chosen" in p else None,
        "metrics": {k[5:]: v for k, v in m.items() if k.startswith("test_") and not k.endswith(("_low", "_high"))},
        "intervals": {k[5:-4]: (m.get(k), m.get(k[:-4] + "_high")) for k in m if k.startswith("test_")
                      and k.endswith("_low")},
        "n_nonzero": m.get("n_nonzero"), "effective_df": m.get("effective_df"),
        "fit_seconds": m.get("fit_seconds"), "cv_seconds": m.get("cv_seconds"),
        "stability": m.get("stability_index"), "stability_low": m.get("stability_index_low"),
        "stability_high": m.get("stability_index_high"),
        "prediction_instability": m.get("prediction_instability"),
    }


def stored_verdicts(payload: dict) -> dict:
    """Loss label → the execution's own paired verdict: its sentence, which family won, the metric that
    decided. Report data of version 2 on store the sparse family's advantage (positive = sparse better);
    older data stored the raw L1 − L2 difference."""
    lower = payload.get("primary_lower_is_better", True)
    decisions = payload.get("decisions") or {}
    out = {}
    for v in payload.get("verdicts", []):
        if v.get("low") is None or v.get("high") is None:
            won = "not compared"
        else:
            w = advantage_winner(v["low"], v["high"]) if payload.get("payload_version", 1) >= 2 else \
                winner(v["low"], v["high"], lower)
            won = "no clear winner" if w is None else compared_pair()[w].title
        d = decisions.get(v["loss"], {})
        out[v["loss"]] = {"sentence": v["sentence"], "winner": won, "metric": d.get("metric", payload.get("primary")),
                          "metric_title": d.get("title", payload.get("primary")), "unit": d.get("unit", "")}
    return out


def cv_estimates(payload: dict) -> dict:
    """(loss label, family) → (CV estimate at the chosen λ, its standard error) from the report data."""
    return {(f["loss_label"], f["family"]): (f.get("cv_chosen"), f.get("cv_chosen_se"))
            for f in payload.get("families", [])}


def gather(client, experiment: str | None = None, run_ids=(), last: int | None = None) -> list[dict]:
    """The chosen executions with their fits, configs and (when stored) verdicts and CV estimates; failed
    or interrupted executions are kept, marked by their status, with no fits."""
    parents = execution_runs(client, experiment, run_ids, last, finished_only=False)
    parents = [r for r in parents if r.info.status != "RUNNING" or run_ids]
    if not parents:
        where = f"experiment '{experiment}'" if experiment else "the tracking store"
        raise StoreError(f"{where} holds no finished penduel execution to compare; run one with "
                         f"`penduel run CONFIG` first.")
    executions = []
    for run in parents:
        tags = run.data.tags
        try:
            payload = read_payload(client, run.info.run_id)
        except StoreError:      # a failed or killed execution has no report data
            payload = {}
        finished = run.info.status == "FINISHED"
        executions.append({
            "run_id": run.info.run_id, "name": tags.get("mlflow.runName", ""),
            "experiment": client.get_experiment(run.info.experiment_id).name, "status": run.info.status,
            "error": tags.get("penduel.error"),
            "start_time": run.info.start_time, "seconds": run.data.metrics.get("seconds"),
            "fit_seconds_total": run.data.metrics.get("fit_seconds_total"),
            "tasks_reused": run.data.metrics.get("tasks_reused"), "tasks_total": run.data.metrics.get("tasks_total"),
            "config_hash": tags.get("penduel.config_hash"), "data_hash": tags.get("penduel.data_hash"),
            "git_commit": tags.get("penduel.git_commit"), "config": read_config(client, run.info.run_id),
            "n_train": run.data.params.get("n_train"), "n_test": run.data.params.get("n_test"),
            "task": payload.get("task"), "level": payload.get("level", 0.9),
            "fits": sorted((fit_row(c) for c in child_runs(client, run)), key=lambda f: (f["loss"], f["family"]))
            if finished else [],
            "verdicts": stored_verdicts(payload) if payload else {}, "cv": cv_estimates(payload)})
    return executions


def _task_of(e) -> str | None:
    if e.get("task"):
        return e["task"]
    names = {k for f in e["fits"] for k in f["metrics"]}
    return None if not names else "regression" if "rmse" in names else "classification"


def _decision(e, label, task) -> str:
    return e["verdicts"].get(label, {}).get("metric") or PRIMARY[task]


def loss_tables(executions: list[dict], task: str) -> list[dict]:
    """Per loss of one task: one row per (execution, family), ranked by the CV estimate at the chosen λ
    (rank 1 = least CV loss, chosen without the test rows); the held-out decision metric stands beside it.
    No row is picked on the test rows."""
    labels = sorted({f["loss"] for e in executions if _task_of(e) == task for f in e["fits"]})
    out = []
    for label in labels:
        rows = []
        for i, e in enumerate(executions):
            if _task_of(e) != task:
                continue
            metric = _decision(e, label, task)
            for f in e["fits"]:
                if f["loss"] != label:
                    continue
                low, high = f["intervals"].get(metric, (None, None))
                cv, cv_se = e.get("cv", {}).get((label, f["family"]), (None, None))
                rows.append({"execution": i, "family": f["family"], "metric": metric,
                             "metric_title": e["verdicts"].get(label, {}).get("metric_title", metric),
                             "value": f["metrics"].get(metric), "low": low, "high": high, "cv": cv, "cv_se": cv_se,
                             **{k: f[k] for k in ("n_nonzero", "effective_df", "fit_seconds", "cv_seconds",
                                                  "stability", "stability_low", "stability_high", "lambda_chosen",
                                                  "status")}})
        ranked = sorted((r for r in rows if r["cv"] is not None), key=lambda r: r["cv"])
        for r in rows:
            r["rank"] = ranked.index(r) + 1 if r in ranked else None
        rows.sort(key=lambda r: (r["rank"] is None, r["rank"] or 0))
        out.append({"loss": label, "task": task, "rows": rows,
                    "metrics": sorted({r["metric_title"] for r in rows}),
                    "verdicts": [(i, e["verdicts"][label]["sentence"]) for i, e in enumerate(executions)
                                 if label in e["verdicts"]],
                    "winners": [e["status"].lower() if e["status"] != "FINISHED" else
                                e["verdicts"].get(label, {}).get("winner", "not fitted") if _task_of(e) == task
                                else f"({_task_of(e)})" for e in executions]})
    return out


def comparison_payload(executions: list[dict]) -> dict:
    tasks = [t for t in ("regression", "classification") if any(_task_of(e) == t for e in executions)]
    return {"tasks": tasks,
            "executions": [{k: v for k, v in e.items() if k not in ("fits", "config", "cv")} for e in executions],
            "losses": [b for t in tasks for b in loss_tables(executions, t)],
            "level": max((e.get("level") or 0.9) for e in executions),
            "levels_differ": len({e.get("level") or 0.9 for e in executions if e["status"] == "FINISHED"}) > 1,
            "differences": config_differences([e["config"] for e in executions]),
            "same_data": len({e["data_hash"] for e in executions if e["status"] == "FINISHED"}) <= 1}
