"""Known-truth checks of the verdict through `penduel run`, on data generated here (not the project's own
scenarios): each loss judged on its own scale, one sign convention (the sparse family's advantage), intervals
that do not collapse on a perfect test set, one wall time, and an honest comparison across executions."""
from __future__ import annotations

import json
import pathlib
import re

import numpy as np
import pandas as pd
import pytest
import yaml

from .conftest import penduel, scratch_dir

SMALL = {"families": {"l1": {"path": {"points": 12, "smallest_share": 0.01}}, "l2": {"path": {"points": 12}}},
         "selection": {"cv_folds": 3}, "stability": {"enabled": False}, "split": {"test_fraction": 0.4}}


def _linear_csv(path, coef, n, seed):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, coef.size))
    frame = pd.DataFrame(X, columns=[f"x{j}" for j in range(coef.size)])
    frame["y"] = X @ coef + rng.normal(size=n)
    frame.to_csv(path, index=False)


def _write(folder, name, data, losses, **extra):
    cfg = {"name": name, "seed": 1, "data": data, "losses": losses, **SMALL, **extra}
    path = pathlib.Path(folder) / f"{name}.yaml"
    path.write_text(yaml.safe_dump(cfg, allow_unicode=True), encoding="utf-8")
    return path


def _run(folder, config):
    code, out, err = penduel(["run", config], folder)   # not --quiet: the wall-time line is checked
    assert code == 0, err
    report = pathlib.Path(re.search(r"^report: (.+)$", out, re.M).group(1))
    data = json.loads((report.parent / "report_data.json").read_text(encoding="utf-8"))
    return {"out": out, "err": err, "html": report.read_text(encoding="utf-8"), "data": data,
            "run_id": re.search(r"^run id: (\w+)$", out, re.M).group(1)}


def _verdict(data, loss):
    return next(v for v in data["verdicts"] if v["loss"] == loss)


@pytest.fixture(scope="module")
def runs():
    folder = scratch_dir("penduel-verdict-")
    # sparse truth: 4 of 40 coefficients are 1.5, noise sd 1
    coef = np.zeros(40)
    coef[:4] = 1.5
    _linear_csv(folder / "sparse.csv", coef, 160, seed=0)
    # dense small effects: every one of 40 coefficients ±0.25 (random signs), noise sd 1
    _linear_csv(folder / "dense.csv", 0.25 * np.random.default_rng(9).choice([-1.0, 1.0], 40), 160, seed=1)
    # two classes 8 standard deviations apart on the first column: a perfectly classified test set
    rng = np.random.default_rng(3)
    y = np.repeat([0, 1], 30)
    X = rng.normal(size=(60, 5))
    X[:, 0] += 8.0 * y
    frame = pd.DataFrame(X, columns=[f"x{j}" for j in range(5)])
    frame["label"] = np.where(y == 1, "yes", "no")
    frame.to_csv(folder / "classes.csv", index=False)
    # smooth nonlinear truth in 3 columns: y = sin(2 x0) + cos(2 x1) + x2², noise sd 0.2
    X = rng.uniform(-1.5, 1.5, size=(160, 3))
    smooth = pd.DataFrame(X, columns=["x0", "x1", "x2"])
    smooth["y"] = np.sin(2 * X[:, 0]) + np.cos(2 * X[:, 1]) + X[:, 2] ** 2 + rng.normal(0, 0.2, 160)
    smooth.to_csv(folder / "smooth.csv", index=False)
    sparse = _write(folder, "sparse-truth", {"kind": "csv", "path": "sparse.csv", "target": "y", "unit": "kg"},
                    ["squared", {"name": "quantile", "tau": 0.9}])
    out = {"folder": folder, "sparse": _run(folder, sparse)}
    out["dense"] = _run(folder, _write(folder, "dense-truth", {"kind": "csv", "path": "dense.csv", "target": "y"},
                                       ["squared"]))
    out["classes"] = _run(folder, _write(folder, "separated", {"kind": "csv", "path": "classes.csv",
                                                               "target": "label"}, ["hinge"]))
    smooth_cfg = _write(folder, "smooth-truth", {"kind": "csv", "path": "smooth.csv", "target": "y"}, ["squared"])
    cfg = yaml.safe_load(smooth_cfg.read_text(encoding="utf-8"))
    cfg["families"]["l2"]["kernel"] = "rbf"
    smooth_cfg.write_text(yaml.safe_dump(cfg), encoding="utf-8")
    out["smooth"] = _run(folder, smooth_cfg)
    out["rerun"] = _run(folder, sparse)          # every fit comes from the cache
    return out


def test_sparse_truth_is_won_by_the_sparse_family_on_rmse_with_its_unit(runs):
    data = runs["sparse"]["data"]
    v = _verdict(data, "squared")
    assert data["decisions"]["squared"]["metric"] == "rmse" and data["decisions"]["squared"]["unit"] == "kg"
    assert v["low"] > 0 and v["diff"] > 0       # positive = sparse better, interval excludes 0
    assert v["sentence"].startswith("On RMSE, sparse (L1) is better than ridge-type (L2) by ")
    html = runs["sparse"]["html"]
    assert "RMSE (kg)" in html and "MSE ((kg)²)" in html
    assert "<strong>squared.</strong> Judged on RMSE (kg), because the squared loss fits the conditional mean" in html
    assert "Sparse (L1) predicted better on the 64 held-out rows (sparse (L1) " in html


def test_quantile_loss_is_decided_on_the_pinball_loss_at_its_level(runs):
    data = runs["sparse"]["data"]
    d = data["decisions"]["quantile_tau0.9"]
    assert d["metric"] == "pinball" and d["title"] == "pinball loss at τ = 0.9" and "RMSE would judge" in d["why"]
    v = _verdict(data, "quantile_tau0.9")
    assert v["metric"] == "pinball" and v["sentence"].startswith("On pinball loss at τ = 0.9,")
    sparse = next(f for f in data["families"] if f["loss_label"] == "quantile_tau0.9" and f["family"] == "l1")
    # the pinball loss at τ = 0.9 by hand from the stored predictions' metric (scikit-learn's mean_pinball_loss)
    assert sparse["metrics"]["pinball"] > 0 and "pinball" in sparse["intervals"]


def test_dense_small_effects_do_not_make_the_sparse_family_win(runs):
    v = _verdict(runs["dense"]["data"], "squared")
    assert not v["low"] > 0, v["sentence"]


def test_smooth_nonlinear_truth_with_an_rbf_kernel_is_won_by_the_ridge_type_family(runs):
    v = _verdict(runs["smooth"]["data"], "squared")
    assert v["high"] < 0, v["sentence"]          # negative sparse advantage: the ridge-type family is better
    assert v["sentence"].startswith("On RMSE, ridge-type (L2) is better than sparse (L1) by ")


def test_a_perfect_test_set_gets_an_interval_that_is_not_zero_width(runs):
    data = runs["classes"]["data"]
    assert data["decisions"]["hinge"]["metric"] == "balanced_accuracy"
    assert data["decisions"]["hinge"]["beside"] == ["misclassification"]
    for f in data["families"]:
        assert f["metrics"]["balanced_accuracy"] == 1.0 and f["metrics"]["accuracy"] == 1.0
        for name in ("balanced_accuracy", "accuracy", "misclassification", "roc_auc"):
            low, high = f["intervals"][name]
            assert high - low > 0.02, (name, low, high)
    v = _verdict(data, "hinge")
    assert v["diff"] == 0 and v["low"] < 0 < v["high"] and v["interval_method"] == "mover_wilson"
    assert "Wilson score interval (Wilson 1927)" in runs["classes"]["html"]


def test_one_level_stated_once_and_one_wall_time(runs):
    html, out = runs["sparse"]["html"], runs["sparse"]["out"]
    assert html.count("every interval in this report is a 90% interval") == 1
    assert "90 %" not in html and "95 %" not in html
    wall = float(re.search(r"^wall time ([\d.]+) s \(start to report written\)$", out, re.M).group(1))
    assert f"{wall:.1f} s (start of the run to this report written)" in html
    assert runs["sparse"]["data"]["seconds"] == pytest.approx(wall, abs=0.05)
    assert "finished in" not in out
    from pipeline.stored_runs import open_store   # the same number in the tracking store

    stored = open_store(f"sqlite:///{runs['folder'] / 'mlflow.db'}").get_run(runs["sparse"]["run_id"]).data.metrics
    assert stored["seconds"] == pytest.approx(wall, abs=0.05) and stored["tasks_reused"] == 0


def test_a_cached_rerun_shows_its_own_time_and_the_original_fit_time(runs):
    out, html = runs["rerun"]["out"], runs["rerun"]["html"]
    line = re.search(r"^wall time ([\d.]+) s \(start to report written\); (\d+) of (\d+) fits reused from the cache, "
                     r"which originally took ([\d.]+) s of fitting$", out, re.M)
    assert line and line.group(2) == line.group(3)
    assert "fits were reused from the cache — the fits behind these results originally took" in html
    assert runs["rerun"]["data"]["fit_seconds_total"] == pytest.approx(runs["sparse"]["data"]["fit_seconds_total"])


def test_verdict_metric_override_and_a_metric_of_the_wrong_task(runs, tmp_path):
    folder = runs["folder"]
    cfg = _write(folder, "override", {"kind": "csv", "path": "dense.csv", "target": "y"}, ["squared"],
                 verdict={"metric": "mae"})
    data = _run(folder, cfg)["data"]
    assert data["decisions"]["squared"]["metric"] == "mae" and "verdict.metric" in data["decisions"]["squared"]["why"]
    bad = _write(folder, "bad-override", {"kind": "csv", "path": "dense.csv", "target": "y"}, ["squared"],
                 verdict={"metric": "roc_auc"})
    code, _, err = penduel(["run", bad], folder)
    assert code == 2 and "verdict.metric" in err and "Traceback" not in err


def test_comparison_ranks_by_cv_keeps_tasks_apart_and_lists_failures(runs, monkeypatch):
    import pipeline.runner as runner

    folder = runs["folder"]
    mistake = _write(folder, "mistake", {"kind": "csv", "path": "dense.csv", "target": "no_such_column"}, ["squared"])
    code, _, _ = penduel(["run", mistake], folder)
    assert code == 2                 # a user mistake is refused before any tracking run is opened
    broken = _write(folder, "broken", {"kind": "csv", "path": "dense.csv", "target": "y"}, ["squared"],
                    cache={"enabled": False})

    def failing_fit(task, shared):   # a failure after the run opened: the execution ends FAILED
        raise RuntimeError("injected failure")
    monkeypatch.setattr(runner, "run_fit", failing_fit)
    code, _, _ = penduel(["run", broken], folder)
    monkeypatch.undo()
    assert code == 1
    uri = f"sqlite:///{folder / 'mlflow.db'}"
    code, out, err = penduel(["compare", "--last", "8", "--tracking-uri", uri], folder)
    assert code == 0, err
    page = pathlib.Path(re.search(r"^comparison: (.+)$", out, re.M).group(1)).read_text(encoding="utf-8")
    payload = json.loads(pathlib.Path(re.search(r"^comparison: (.+)$", out, re.M).group(1))
                         .with_suffix(".json").read_text(encoding="utf-8"))
    assert "★" not in page and "best estimate" not in page.lower() and "★" not in json.dumps(payload)
    assert "Rank by CV" in page and "optimistic" in page
    assert payload["tasks"] == ["regression", "classification"]
    for block in payload["losses"]:
        assert len({r["metric"] for r in block["rows"]}) >= 1 and block["task"] in payload["tasks"]
        ranks = [r["rank"] for r in block["rows"] if r["rank"] is not None]
        cvs = [r["cv"] for r in block["rows"] if r["rank"] is not None]
        assert ranks == list(range(1, len(ranks) + 1)) and cvs == sorted(cvs)
    hinge = next(b for b in payload["losses"] if b["loss"] == "hinge")
    assert all(r["metric"] == "balanced_accuracy" for r in hinge["rows"])
    statuses = {e["name"]: e["status"] for e in payload["executions"]}
    assert statuses["broken"] == "FAILED" and "<strong>failed</strong>" in page and "mistake" not in statuses
