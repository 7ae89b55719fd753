"""`penduel run` on a tiny config: report and tracking store hold the same numbers.

The execution is the session's shared store (tests/conftest.py): E1 is tests/configs/tiny.yaml with 10
resamples and `selection.nested: true`; E2 has no nested CV.
"""
import math
import re

import pandas as pd
import pytest
from mlflow.tracking import MlflowClient

from .conftest import CONFIGS, children_of, scratch_dir, stored_payload


@pytest.fixture(scope="module")
def tiny_run(store):
    first = store["runs"][0]
    return store["cwd"], first["run_id"], first["html"], first


def test_terminal_ends_with_report_and_run_id(tiny_run):
    _, run_id, _, done = tiny_run
    last = done["stdout"].strip().splitlines()[-2:]
    assert last[0] == f"report: {done['report']}" and last[1] == f"run id: {run_id}"
    assert "Traceback" not in done["stderr"]


def test_store_holds_parent_and_children_with_report_numbers(tiny_run, store):
    cwd, run_id, html, _ = tiny_run
    client = MlflowClient(tracking_uri=store["uri"])
    parent = client.get_run(run_id)
    assert parent.info.status == "FINISHED"
    for tag in ("penduel.config_hash", "penduel.data_hash", "penduel.version.numpy", "penduel.version.cvxpy"):
        assert parent.data.tags.get(tag)
    children = children_of(client, run_id)
    assert sorted(c.data.params["family"] for c in children) == ["l1", "l2"]
    art_dir = scratch_dir("penduel-e2e-art-")
    for child in children:
        p, m = child.data.params, child.data.metrics
        assert p["loss"] == "squared" and float(p["lambda_chosen"]) > 0
        for key in ("test_rmse", "test_mse", "effective_df", "fit_seconds"):
            assert key in m
        # The report shows the same held-out RMSE and chosen λ (4 significant digits).
        assert f"{m['test_rmse']:.4g}" in html
        assert f"{float(p['lambda_chosen']):.4g}" in html
        history = client.get_metric_history(child.info.run_id, "cv_error")
        # one step per λ of the grid finally fitted (8, more where CV chose an end and the grid was widened)
        assert int(p["path_points"]) >= 8 and sorted(h.step for h in history) == list(range(int(p["path_points"])))
        arts = {a.path for a in client.list_artifacts(child.info.run_id)}
        assert {"coefficients.csv", "predictions.csv"} <= arts
        # one copy of each shared artifact, on the parent run; the child points to it
        assert not {"config.yaml", "index.html"} & arts
        assert run_id in child.data.tags["penduel.shared_artifacts"]
        if p["family"] == "l1":
            assert m["n_nonzero"] >= 1
            assert f">{int(m['n_nonzero'])}<" in html
        local = client.download_artifacts(child.info.run_id, "predictions.csv", str(art_dir))
        preds = pd.read_csv(local)
        assert list(preds.columns) == ["row", "y_true", "y_pred"] and len(preds) == 15
        coefs = pd.read_csv(client.download_artifacts(child.info.run_id, "coefficients.csv", str(art_dir)))
        assert list(coefs.columns) == ["feature", "coefficient"] and len(coefs) == 50


def test_report_is_self_contained_and_has_the_sections(tiny_run):
    _, _, html, _ = tiny_run
    assert "http://" not in html and "https://" not in html and "<script" not in html
    for text in ("Verdict per loss", "Both families side by side", "not a cause", "data:image/png;base64,",
                 "Sparse coefficient path"[:6]):
        assert text in html


def _summary_cells(html: str, loss: str, title: str) -> list[str]:
    """The cells of one row of the "Both families side by side" table."""
    table = html.split('id="summary"', 1)[1].split("</table>", 1)[0]
    row = re.search(rf'<th scope="row"[^>]*>{re.escape(loss)}</th><td>{re.escape(title)}</td>(.*?)</tr>', table, re.S)
    assert row, (loss, title)
    return [title, *re.findall(r"<td>(.*?)</td>", row.group(1), re.S)]


def test_nested_cv_estimate_in_the_store_and_the_report(store):
    """selection.nested: true gives, per family and loss, the outer-fold losses of the whole
    select-then-fit procedure, their mean and standard error, stored and shown in the report."""
    client = MlflowClient(tracking_uri=store["uri"])
    nested_run, plain_run = store["runs"]
    art_dir = scratch_dir("penduel-e2e-nested-")
    payload = stored_payload(client, nested_run["run_id"], art_dir)
    assert payload["families"] and {f["family"] for f in payload["families"]} == {"l1", "l2"}
    k = 3                                                   # outer folds = selection.cv_folds of tiny.yaml
    for f in payload["families"]:
        nested = f["nested"]
        outer = nested["outer"]
        assert len(outer) == k and all(math.isfinite(v) and v > 0 for v in outer)
        assert len(set(outer)) == k                          # k distinct outer folds, not one value repeated
        mean = sum(outer) / k
        se = math.sqrt(sum((v - mean) ** 2 for v in outer) / (k - 1)) / math.sqrt(k)
        assert nested["mean"] == pytest.approx(mean, rel=1e-12)
        assert nested["se"] == pytest.approx(se, rel=1e-12)
        # The report's summary row ends with "mean ± SE" (4 and 2 significant digits).
        cells = _summary_cells(nested_run["html"], f["loss_label"], f["title"])
        assert cells[-1] == f"{nested['mean']:.4g} ± {nested['se']:.2g}"
    # The two families are scored on the same outer folds but are different procedures.
    assert payload["families"][0]["nested"]["outer"] != payload["families"][1]["nested"]["outer"]
    # Without selection.nested the estimate is absent and the column shows a dash.
    plain = stored_payload(client, plain_run["run_id"], art_dir)
    assert len(plain["families"]) == 4 and all(f.get("nested") is None for f in plain["families"])
    for f in plain["families"]:
        assert _summary_cells(plain_run["html"], f["loss_label"], f["title"])[-1] == "—"


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
