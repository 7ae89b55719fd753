"""`penduel ui`: the tracking server on a free loopback port, queried through its REST API."""
from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.parse
import urllib.request

import pytest

from .test_tracking_store import store  # noqa: F401  (shared two-execution store)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _get(base, path, **query):
    with urllib.request.urlopen(f"{base}{path}?{urllib.parse.urlencode(query)}", timeout=30) as r:
        return json.load(r)


def _post(base, path, body):
    req = urllib.request.Request(f"{base}{path}", data=json.dumps(body).encode(),
                                 headers={"Content-Type": "application/json"})
    with urllib.request.urlopen(req, timeout=30) as r:
        return json.load(r)


@pytest.fixture(scope="module")
def server(store):  # noqa: F811
    port = free_port()
    proc = subprocess.Popen([sys.executable, "-m", "pipeline.cli", "ui", "--tracking-uri", store["uri"],
                             "--port", str(port)], cwd=store["cwd"], stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT, start_new_session=True)
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 120
    try:
        while True:
            try:
                with urllib.request.urlopen(f"{base}/health", timeout=5) as r:
                    if r.status == 200:
                        break
            except (urllib.error.URLError, ConnectionError, TimeoutError):
                pass
            if proc.poll() is not None or time.monotonic() > deadline:
                raise AssertionError(f"tracking server did not come up: {proc.stdout.read().decode()[-2000:]}")
            time.sleep(0.5)
        yield base
    finally:
        os.killpg(proc.pid, signal.SIGTERM)      # the server's workers share its process group
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
        proc.stdout.close()


def test_rest_api_lists_parent_and_child_runs_with_metrics(server, store):  # noqa: F811
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
        assert sorted(h["step"] for h in history) == list(range(8))
    arts = _get(server, "/api/2.0/mlflow/artifacts/list", run_id=first)["files"]
    assert {"config.yaml", "report_data.json"} <= {a["path"] for a in arts}


def test_ui_binds_loopback_by_default_and_takes_a_port():
    from pipeline.cli import build_parser

    args = build_parser().parse_args(["ui", "--port", "5055"])
    assert args.host == "127.0.0.1" and args.port == 5055


def test_report_and_compare_through_the_tracking_server(server, store):  # noqa: F811
    from .test_tracking_store import _without_written_time, penduel

    code, out, err = penduel(["compare", "--last", "2", "--tracking-uri", server], store["cwd"])
    assert code == 0, err
    assert {line.split()[1] for line in out.splitlines()[:2]} == {r["run_id"] for r in store["runs"]}
    first = store["runs"][0]
    code, out, err = penduel(["report", first["run_id"], "--tracking-uri", server], store["cwd"])
    assert code == 0, err
    again = open(out.split("report: ", 1)[1].split()[0], encoding="utf-8").read()
    assert _without_written_time(again) == _without_written_time(first["html"])
