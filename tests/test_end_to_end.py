"""`penduel run` on a tiny config: report and tracking store hold the same numbers."""
import re

import pandas as pd
import pytest
from mlflow.tracking import MlflowClient

from .conftest import CONFIGS


@pytest.fixture(scope="module")
def tiny_run(tmp_path_factory):
    from .conftest import run_cli
    cwd = tmp_path_factory.mktemp("e2e")
    done = run_cli(["run", CONFIGS / "tiny.yaml", "--quiet"], cwd)
    assert done.returncode == 0, done.stderr
    run_id = re.search(r"run id: ([0-9a-f]{32})", done.stdout).group(1)
    report = re.search(r"report: (\S+)", done.stdout).group(1)
    return cwd, run_id, report, done


def test_terminal_ends_with_report_and_run_id(tiny_run):
    _, run_id, report, done = tiny_run
    last = done.stdout.strip().splitlines()[-2:]
    assert last[0].startswith("report: ") and last[1] == f"run id: {run_id}"
    assert "Traceback" not in done.stderr


def test_store_holds_parent_and_children_with_report_numbers(tiny_run):
    cwd, run_id, report, _ = tiny_run
    client = MlflowClient(tracking_uri=f"sqlite:///{cwd / 'mlflow.db'}")
    parent = client.get_run(run_id)
    assert parent.info.status == "FINISHED"
    for tag in ("penduel.config_hash", "penduel.data_hash", "penduel.version.numpy", "penduel.version.cvxpy"):
        assert parent.data.tags.get(tag)
    children = client.search_runs([parent.info.experiment_id],
                                  filter_string=f"tags.mlflow.parentRunId = '{run_id}'")
    assert sorted(c.data.params["family"] for c in children) == ["l1", "l2"]
    html = open(report, encoding="utf-8").read()
    for child in children:
        p, m = child.data.params, child.data.metrics
        assert p["loss"] == "squared" and float(p["lambda_chosen"]) > 0
        for key in ("test_rmse", "test_mse", "effective_df", "fit_seconds"):
            assert key in m
        # The report shows the same held-out RMSE and chosen λ (4 significant digits).
        assert f"{m['test_rmse']:.4g}" in html
        assert f"{float(p['lambda_chosen']):.4g}" in html
        history = client.get_metric_history(child.info.run_id, "cv_error")
        assert sorted(h.step for h in history) == list(range(8))
        arts = {a.path for a in client.list_artifacts(child.info.run_id)}
        assert {"config.yaml", "coefficients.csv", "predictions.csv", "index.html"} <= arts
        if p["family"] == "l1":
            assert m["n_nonzero"] >= 1
            assert f">{int(m['n_nonzero'])}<" in html
        local = client.download_artifacts(child.info.run_id, "predictions.csv", str(cwd))
        preds = pd.read_csv(local)
        assert list(preds.columns) == ["row", "y_true", "y_pred"] and len(preds) == 15
        coefs = pd.read_csv(client.download_artifacts(child.info.run_id, "coefficients.csv", str(cwd)))
        assert list(coefs.columns) == ["feature", "coefficient"] and len(coefs) == 50


def test_report_is_self_contained_and_has_the_sections(tiny_run):
    _, _, report, _ = tiny_run
    html = open(report, encoding="utf-8").read()
    assert "http://" not in html and "https://" not in html and "<script" not in html
    for text in ("Verdict per loss", "Both families side by side", "not a cause", "data:image/png;base64,",
                 "Sparse coefficient path"[:6]):
        assert text in html


def test_validate_prints_resolved_config(cli):
    done = cli(["validate", CONFIGS / "tiny.yaml"], CONFIGS)
    assert done.returncode == 0
    assert "cv_folds: 3" in done.stdout and "memory_budget_mib" in done.stdout


def test_validate_broken_config_exits_2_without_traceback(cli, tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text("name: x\ndata: {kind: scenario, name: spectral_bands}\nlosses: [squard]\n")
    done = cli(["validate", bad], tmp_path)
    assert done.returncode == 2
    assert "Traceback" not in done.stderr
    assert "losses[1].name" in done.stderr and "'squard'" in done.stderr and "squared" in done.stderr
