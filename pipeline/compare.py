"""Executions side by side, read from the tracking store alone (never from local report files).

For each loss and family: held-out error with its interval, sparsity, stability, time; and the
settings in which the executions' resolved configs differ.
"""
from __future__ import annotations

import json
import math

from .evaluate import METRICS, PRIMARY, winner
from .models.families import compared_pair
from .tracking import StoreError, child_runs, execution_runs, read_config, read_payload

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
    """Loss label → the execution's own paired L1 − L2 verdict: its sentence and which family won."""
    lower = payload.get("primary_lower_is_better", True)
    out = {}
    for v in payload.get("verdicts", []):
        if v.get("low") is None or v.get("high") is None:
            won = "not compared"
        else:
            w = winner(v["low"], v["high"], lower)
            won = "no clear winner" if w is None else compared_pair()[w].title
        out[v["loss"]] = {"sentence": v["sentence"], "winner": won}
    return out


def gather(client, experiment: str | None = None, run_ids=(), last: int | None = None) -> list[dict]:
    """The chosen executions with their fits, configs and (when stored) verdict sentences."""
    parents = execution_runs(client, experiment, run_ids, last)
    if not parents:
        where = f"experiment '{experiment}'" if experiment else "the tracking store"
        raise StoreError(f"{where} holds no finished penduel execution to compare; run one with "
                         f"`penduel run CONFIG` first.")
    executions = []
    for run in parents:
        tags = run.data.tags
        try:
            verdicts = stored_verdicts(read_payload(client, run.info.run_id))
        except StoreError:      # a failed or killed execution has no report data
            verdicts = {}
        executions.append({
            "run_id": run.info.run_id, "name": tags.get("mlflow.runName", ""),
            "experiment": client.get_experiment(run.info.experiment_id).name, "status": run.info.status,
            "start_time": run.info.start_time, "seconds": run.data.metrics.get("seconds"),
            "config_hash": tags.get("penduel.config_hash"), "data_hash": tags.get("penduel.data_hash"),
            "git_commit": tags.get("penduel.git_commit"), "config": read_config(client, run.info.run_id),
            "n_train": run.data.params.get("n_train"), "n_test": run.data.params.get("n_test"),
            "fits": sorted((fit_row(c) for c in child_runs(client, run)), key=lambda f: (f["loss"], f["family"])),
            "verdicts": verdicts})
    return executions


def _task(executions) -> str:
    names = {k for e in executions for f in e["fits"] for k in f["metrics"]}
    return "regression" if "rmse" in names else "classification"


def loss_tables(executions: list[dict], primary: str) -> list[dict]:
    """Per loss: one row per (execution, family) and the best primary estimate among them."""
    higher = METRICS[primary].higher_is_better
    labels = sorted({f["loss"] for e in executions for f in e["fits"]})
    out = []
    for label in labels:
        rows = []
        for i, e in enumerate(executions):
            for f in e["fits"]:
                if f["loss"] != label:
                    continue
                low, high = f["intervals"].get(primary, (None, None))
                rows.append({"execution": i, "family": f["family"], "value": f["metrics"].get(primary),
                             "low": low, "high": high, **{k: f[k] for k in (
                                 "n_nonzero", "effective_df", "fit_seconds", "cv_seconds", "stability",
                                 "stability_low", "stability_high", "lambda_chosen", "status")}})
        scored = [r for r in rows if r["value"] is not None]
        best = (max if higher else min)(scored, key=lambda r: r["value"]) if scored else None
        for r in rows:
            r["best"] = r is best
        out.append({"loss": label, "rows": rows,
                    "verdicts": [(i, e["verdicts"][label]["sentence"]) for i, e in enumerate(executions)
                                 if label in e["verdicts"]],
                    "winners": [e["verdicts"].get(label, {}).get("winner", "not fitted") for e in executions]})
    return out


def comparison_payload(executions: list[dict]) -> dict:
    task = _task(executions)
    primary = PRIMARY[task]
    return {"task": task, "primary": primary, "higher_is_better": METRICS[primary].higher_is_better,
            "executions": [{k: v for k, v in e.items() if k not in ("fits", "config")} for e in executions],
            "losses": loss_tables(executions, primary),
            "differences": config_differences([e["config"] for e in executions]),
            "same_data": len({e["data_hash"] for e in executions}) == 1}
