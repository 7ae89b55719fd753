"""The self-contained HTML comparison of several executions, rendered from a comparison payload."""
from __future__ import annotations

import datetime as dt
import hashlib
import json
import pathlib
from importlib import resources

from ..models.families import title
from . import template_env, difference_label
from .comparison_plots import across_executions


def _g(x, digits: int = 4) -> str:
    return "—" if x is None else f"{x:.{digits}g}"


def _interval(value, low, high) -> str:
    return _g(value) if low is None or high is None else f"{_g(value)} [{_g(low)}, {_g(high)}]"


def _when(ms) -> str:
    return dt.datetime.fromtimestamp(ms / 1000, dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC") if ms else "—"


def _row(r, label) -> dict:
    secs = None if r["fit_seconds"] is None or r["cv_seconds"] is None else r["fit_seconds"] + r["cv_seconds"]
    cv = "—" if r["cv"] is None else f"{_g(r['cv'])} ± {_g(r['cv_se'], 2)}"
    return {"execution": label, "family": title(r["family"]), "rank": r["rank"] or "—", "cv": cv,
            "metric": r["metric_title"], "value": _interval(r["value"], r["low"], r["high"]),
            "nnz": "all" if r["n_nonzero"] is None else f"{r['n_nonzero']:.0f}", "df": _g(r["effective_df"], 3),
            "stability": _interval(r["stability"], r["stability_low"], r["stability_high"]),
            "seconds": _g(secs, 3), "lam": _g(r["lambda_chosen"]), "status": r["status"]}


def _time(e) -> str:
    """The wall time, and for a cached rerun the fit time its results cost originally."""
    text = _g(e.get("seconds"), 3)
    if e.get("tasks_reused"):
        text += (f" ({e['tasks_reused']:.0f} of {e['tasks_total']:.0f} fits from the cache; they took "
                 f"{_g(e.get('fit_seconds_total'), 3)} s originally)")
    return text


def render_comparison(p: dict) -> str:
    labels = [f"E{i + 1}" for i in range(len(p["executions"]))]
    executions = [{"label": lab, "run_id": e["run_id"], "name": e["name"], "experiment": e["experiment"],
                   "status": e["status"].lower(), "task": e.get("task") or "—", "error": e.get("error"),
                   "started": _when(e["start_time"]), "seconds": _time(e),
                   "config_hash": (e["config_hash"] or "—")[:12], "data_hash": (e["data_hash"] or "—")[:12],
                   "commit": (e["git_commit"] or "—")[:10], "split": f"{e['n_train']} / {e['n_test']}"}
                  for lab, e in zip(labels, p["executions"])]
    blocks = [{"loss": b["loss"], "task": b["task"], "rows": [_row(r, labels[r["execution"]]) for r in b["rows"]],
               "metrics": ", ".join(b["metrics"]),
               "plot": across_executions(b, labels, " / ".join(b["metrics"]) or "decision metric"),
               "verdicts": [(labels[i], s) for i, s in b["verdicts"]], "winners": b["winners"]} for b in p["losses"]]
    css = (resources.files("pipeline.report") / "templates" / "report.css").read_text(encoding="utf-8")
    return template_env().get_template("comparison.html").render(
        executions=executions, labels=labels, blocks=blocks, difference=difference_label(),
        differences=p["differences"], tasks=p["tasks"], level_pct=f"{p['level']:.0%}",
        levels_differ=p["levels_differ"], same_data=p["same_data"],
        written=dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"), css=css)


def comparison_path(base_dir: pathlib.Path, directory: str, run_ids: list[str]) -> pathlib.Path:
    """One file per set of executions: the same selection overwrites its earlier comparison."""
    key = hashlib.sha256(" ".join(run_ids).encode()).hexdigest()[:10]
    return pathlib.Path(base_dir) / directory / "compare" / f"{len(run_ids)}-executions-{key}.html"


def write_comparison(payload: dict, base_dir: pathlib.Path, directory: str = "reports") -> pathlib.Path:
    path = comparison_path(base_dir, directory, [e["run_id"] for e in payload["executions"]])
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(render_comparison(payload), encoding="utf-8")
    path.with_suffix(".json").write_text(json.dumps(payload, allow_nan=False), encoding="utf-8")
    return path
