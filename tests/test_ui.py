"""`penduel ui`: the tracking server on a free loopback port, queried through its REST API."""
from __future__ import annotations

import json
import urllib.parse
import urllib.request

import pytest

from .conftest import penduel, without_written_time


def _get(base, path, **query):
    with urllib.request.urlopen(f"{base}{path}?{urllib.parse.urlencode(query)}", timeout=30) as r:
        return json.load(r)


def _post(base, path, body):
    req = urllib.request.Request(f"{base}{path}", data=json.dumps(body).encode(),
                                 headers={"Content-Type": "application/json"})
    with urllib.request.urlopen(req, timeout=30) as r:
        return json.load(r)


@pytest.fixture(scope="module")
def server(tracking_server):
    """The session's `penduel ui` server on the shared store (tests/conftest.py)."""
    return tracking_server


def test_rest_api_lists_parent_and_child_runs_with_metrics(server, store):
    exp = _get(server, "/api/2.0/mlflow/experiments/get-by-name", experiment_name="tiny-bands")["experiment"]
    runs = _post(server, "/api/2.0/mlflow/runs/search", {"experiment_ids": [exp["experiment_id"]],
                                                          "max_results": 100})["runs"]
    tags = {r["info"]["run_id"]: {t["key"]: t["value"] for t in r["data"].get("tags", [])} for r in runs}
    parents = {rid for rid, t in tags.items() if t.get("penduel.kind") == "execution"}
    assert parents == {r["run_id"] for r in store["runs"]}
    first = store["runs"][0]["run_id"]
    children = [r for r in runs if tags[r["info"]["run_id"]].get("mlflow.parentRunId") == first]
    assert sorted(tags[c["info"]["run_id"]]["penduel.family"] for c in children) == ["l1", "l2"]
    for child in children:
        metrics = {m["key"]: m["value"] for m in child["data"]["metrics"]}
        assert metrics["test_rmse_low"] <= metrics["test_rmse"] <= metrics["test_rmse_high"]
        history = _get(server, "/api/2.0/mlflow/metrics/get-history", run_id=child["info"]["run_id"],
                       metric_key="cv_error")["metrics"]
        n_grid = int({p["key"]: p["value"] for p in child["data"]["params"]}["path_points"])   # 8, or widened
        assert n_grid >= 8 and sorted(h["step"] for h in history) == list(range(n_grid))
    arts = _get(server, "/api/2.0/mlflow/artifacts/list", run_id=first)["files"]
    assert {"config.yaml", "report_data.json"} <= {a["path"] for a in arts}


def test_ui_binds_loopback_by_default_and_takes_a_port():
    from pipeline.cli import build_parser

    args = build_parser().parse_args(["ui", "--port", "5055"])
    assert args.host == "127.0.0.1" and args.port == 5055


def test_report_and_compare_through_the_tracking_server(server, store):
    code, out, err = penduel(["compare", "--last", "2", "--tracking-uri", server], store["cwd"])
    assert code == 0, err
    assert {line.split()[1] for line in out.splitlines()[:2]} == {r["run_id"] for r in store["runs"]}
    first = store["runs"][0]
    code, out, err = penduel(["report", first["run_id"], "--tracking-uri", server], store["cwd"])
    assert code == 0, err
    again = open(out.split("report: ", 1)[1].split()[0], encoding="utf-8").read()
    assert without_written_time(again) == without_written_time(first["html"])
