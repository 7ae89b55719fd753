"""What an execution leaves in the tracking store, and reports rendered again from the store alone.

The executions come from the session's `store` fixture (tests/conftest.py), shared with the end-to-end,
compare, tracking-server and browser tests, so the suite pays for them once.
"""
from __future__ import annotations

import pathlib
import re
import shutil

import pandas as pd
import pytest

from pipeline.stored_runs import open_store, read_payload

# Re-exported for modules that import the helpers from here.
from .conftest import penduel, scratch_dir, without_written_time  # noqa: F401

_without_written_time = without_written_time


def test_report_latest_reproduces_the_original_report_from_the_store_alone(store):
    cwd, last = store["cwd"], store["runs"][-1]
    shutil.rmtree(cwd / "reports", ignore_errors=True)  # nothing local is left to copy from
    code, out, err = penduel(["report", "--latest", "--tracking-uri", store["uri"]], cwd)
    assert code == 0, err
    assert f"run id: {last['run_id']}" in out
    again = pathlib.Path(re.search(r"report: (\S+)", out).group(1)).read_text(encoding="utf-8")
    # Every number, table and figure is the same; only the time of writing differs.
    assert _without_written_time(again) == _without_written_time(last["html"])
    code, out, _ = penduel(["report", store["runs"][0]["run_id"], "--tracking-uri", store["uri"]], cwd)
    assert code == 0 and _without_written_time(pathlib.Path(re.search(r"report: (\S+)", out).group(1))
                                               .read_text(encoding="utf-8")) == _without_written_time(
        store["runs"][0]["html"])


@pytest.mark.parametrize("args, needle", [
    (["report"], "either a RUN_ID or --latest"),
    (["report", "0" * 32], "is not in the tracking store"),
    (["report", "--latest", "--experiment", "no-such-experiment"], "no experiment named"),
])
def test_report_mistakes_exit_2_with_one_paragraph(store, args, needle):
    code, _, err = penduel([*args, "--tracking-uri", store["uri"]], store["cwd"])
    assert code == 2 and needle in err and "Traceback" not in err


def test_children_carry_artifacts_stepped_metrics_and_stability(store):
    client = open_store(store["uri"])
    parent = client.get_run(store["runs"][0]["run_id"])
    assert parent.info.status == "FINISHED"
    for tag in ("penduel.config_hash", "penduel.data_hash", "penduel.machine", "penduel.version.mlflow"):
        assert parent.data.tags.get(tag)
    assert {a.path for a in client.list_artifacts(parent.info.run_id)} >= {"config.yaml", "report_data.json",
                                                                           "index.html"}
    payload = read_payload(client, parent.info.run_id)
    children = client.search_runs([parent.info.experiment_id],
                                  filter_string=f"tags.mlflow.parentRunId = '{parent.info.run_id}'")
    by_family = {c.data.params["family"]: c for c in children}
    assert sorted(by_family) == ["l1", "l2"]
    for child in children:
        rid = child.info.run_id
        assert child.info.status == "FINISHED"
        assert {"cv_table.csv", "coefficients.csv"} <= {a.path for a in client.list_artifacts(rid)}
        n_grid = int(child.data.params["path_points"])   # 8, more where CV chose an end and the grid was widened
        assert n_grid >= 8 and [h.step for h in sorted(client.get_metric_history(rid, "cv_error"),
                                                       key=lambda h: h.step)] == list(range(n_grid))
        m = child.data.metrics
        assert m["stability_index_low"] <= m["stability_index"] <= m["stability_index_high"]
    l1 = by_family["l1"]
    probs = pd.read_csv(client.download_artifacts(l1.info.run_id, "selection_probabilities.csv",
                                                  str(scratch_dir("penduel-art-"))))
    assert len(probs) == int(parent.data.params["n_features_built"])
    values = probs.drop(columns=["feature"]).to_numpy()
    assert ((values >= 0) & (values <= 1)).all()
    # 10 resamples: every probability is a count out of 10.
    assert abs(values * 10 - (values * 10).round()).max() < 1e-9
    chosen = int(payload["families"][0]["chosen_index"]) if payload["families"][0]["family"] == "l1" else \
        int(payload["families"][1]["chosen_index"])
    assert (probs["at_chosen_lambda"] == probs.iloc[:, 2 + chosen]).all()
    # The same frequencies as the stability stage's own summary (computed there from the resampled fits).
    freq = payload["stability"]["squared"]["frequency"]
    lookup = dict(zip(probs["feature"], probs["at_chosen_lambda"]))
    assert [round(lookup[n], 12) for n in freq["names"]] == [round(v, 12) for v in freq["l1"]]


def test_a_user_mistake_opens_no_tracking_run(tmp_path):
    # refused before any fit and before a tracking run is opened, so no FAILED run is left behind
    cwd = scratch_dir("penduel-fail-")
    pd.DataFrame({"a": [1.0, 2.0, 3.0, 4.0], "b": [0.0, 1.0, 0.0, 1.0]}).to_csv(cwd / "t.csv", index=False)
    (cwd / "bad.yaml").write_text("name: broken\ndata: {kind: csv, path: t.csv, target: nope}\n")
    code, _, err = penduel(["run", "bad.yaml", "--quiet"], cwd)
    assert code == 2 and "data.target" in err
    client = open_store(f"sqlite:///{cwd / 'mlflow.db'}")
    assert client.get_experiment_by_name("broken") is None
