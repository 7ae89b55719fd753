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
    return {"execution": label, "family": title(r["family"]),
            "value": _interval(r["value"], r["low"], r["high"]), "best": r["best"],
            "nnz": "all" if r["n_nonzero"] is None else f"{r['n_nonzero']:.0f}", "df": _g(r["effective_df"], 3),
            "stability": _interval(r["stability"], r["stability_low"], r["stability_high"]),
            "seconds": _g(secs, 3), "lam": _g(r["lambda_chosen"]), "status": r["status"]}


def render_comparison(p: dict) -> str:
    labels = [f"E{i + 1}" for i in range(len(p["executions"]))]
    executions = [{"label": lab, "run_id": e["run_id"], "name": e["name"], "experiment": e["experiment"],
                   "started": _when(e["start_time"]), "seconds": _g(e["seconds"], 3),
                   "config_hash": (e["config_hash"] or "—")[:12], "data_hash": (e["data_hash"] or "—")[:12],
                   "commit": (e["git_commit"] or "—")[:10], "split": f"{e['n_train']} / {e['n_test']}"}
                  for lab, e in zip(labels, p["executions"])]
    blocks = [{"loss": b["loss"], "rows": [_row(r, labels[r["execution"]]) for r in b["rows"]],
               "plot": across_executions(b, labels, p["primary"]),
               "verdicts": [(labels[i], s) for i, s in b["verdicts"]], "winners": b["winners"],
               "best": next(({"execution": labels[r["execution"]], "family": _row(r, "")["family"],
                              "value": _interval(r["value"], r["low"], r["high"])} for r in b["rows"] if r["best"]),
                            None)} for b in p["losses"]]
    css = (resources.files("pipeline.report") / "templates" / "report.css").read_text(encoding="utf-8")
    return template_env().get_template("comparison.html").render(
        executions=executions, labels=labels, blocks=blocks, difference=difference_label(),
        differences=p["differences"],
        primary=p["primary"].replace("_", " "), higher=p["higher_is_better"], same_data=p["same_data"],
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
