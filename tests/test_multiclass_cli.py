"""Four classes with a numeric class code, through the command line: `penduel init` writes a classification
config, `penduel run` fits both families with every classification loss, the report shows a confusion
matrix per family and says how a feature counts as selected, the store holds the runs and their models,
and `penduel predict` answers with the data's own class labels."""
from __future__ import annotations

import pathlib
import re

import numpy as np
import pandas as pd
import pytest
import yaml

from pipeline.losses import CLASSIFICATION, loss_names
from pipeline.stored_runs import open_store

from .conftest import penduel, scratch_dir

CODES = (1, 2, 3, 4)


def _four_classes(n=96, seed=0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    codes = np.resize(np.arange(len(CODES)), n)
    centres = np.array([[2.0, 0.0], [-2.0, 0.0], [0.0, 2.0], [0.0, -2.0]])
    X = rng.normal(size=(n, 4))
    X[:, :2] += centres[codes]
    frame = pd.DataFrame(X, columns=["a", "b", "c", "d"])
    frame["grade"] = np.asarray(CODES)[codes]
    return frame


def _init_then_run(losses, stability: dict) -> tuple[pathlib.Path, str, str]:
    cwd = scratch_dir("penduel-classes-")
    _four_classes().to_csv(cwd / "grades.csv", index=False)
    code, _, err = penduel(["init", "--data", "grades.csv", "--target", "grade"], cwd)
    assert code == 0, err
    text = (cwd / "penduel.yaml").read_text()
    config = yaml.safe_load(text)
    assert config["data"]["task"] == "classification"
    assert config["losses"] == ["logistic", "hinge"] and '4 classes ("1", "2", "3", "4")' in text
    # the starter as a user would shrink it: every classification loss, short paths
    config.update(losses=list(losses), stability=stability, selection={"cv_folds": 2})
    config["families"]["l1"]["path"] = config["families"]["l2"]["path"] = {"points": 4}
    (cwd / "penduel.yaml").write_text(yaml.safe_dump(config))
    code, out, err = penduel(["run", "penduel.yaml", "--quiet"], cwd)
    assert code == 0, err
    html = pathlib.Path(re.search(r"report: (\S+)", out).group(1)).read_text(encoding="utf-8")
    return cwd, out, html


def _check(cwd, out, html, losses):
    run_id = re.search(r"run id: (\S+)", out).group(1)
    assert html.count("Confusion matrix of the test rows") == 2 * len(losses)    # one per family and loss
    assert "a feature counts as selected when its weight is nonzero in any class" in html
    assert "4 classes fitted one versus the rest" in html
    assert "read the softmax of the class scores as probabilities" in html
    client = open_store(f"sqlite:///{cwd / 'mlflow.db'}")
    parent = client.get_run(run_id)
    children = client.search_runs([parent.info.experiment_id],
                                  filter_string=f"tags.mlflow.parentRunId = '{run_id}'")
    assert sorted((c.data.params["family"], c.data.params["loss"]) for c in children) == \
        sorted((f, loss) for f in ("l1", "l2") for loss in losses)
    for child in children:
        assert child.data.tags.get("penduel.model_check") == "reproduces the held-out predictions exactly", \
            child.data.tags.get("penduel.model_error")
        assert 0 <= child.data.metrics["test_balanced_accuracy"] <= 1
    new = _four_classes(n=8, seed=5)
    new.drop(columns="grade").to_csv(cwd / "new.csv", index=False)
    code, table, err = penduel(["predict", run_id, "--data", "new.csv", "--tracking-uri",
                                f"sqlite:///{cwd / 'mlflow.db'}"], cwd)
    assert code == 0, err
    predicted = pd.read_csv(pd.io.common.StringIO(table))
    for loss in losses:
        labels = predicted[f"l1.{loss}.label"]
        assert set(labels) <= set(CODES) and (labels == new["grade"]).mean() >= 0.5
        assert [f"l1.{loss}.decision_{c}" in predicted for c in CODES] == [True] * 4


def test_four_classes_init_run_report_store_and_predict():
    losses = ("hinge",)
    cwd, out, html = _init_then_run(losses, {"enabled": False})
    _check(cwd, out, html, losses)


@pytest.mark.slow
def test_four_classes_every_classification_loss_with_stability():
    losses = loss_names(CLASSIFICATION)
    assert set(losses) >= {"logistic", "hinge", "squared_hinge"}
    cwd, out, html = _init_then_run(losses, {"n_resamples": 4})
    _check(cwd, out, html, losses)
    # logistic: one softmax fit per family; the hinge losses one versus the rest
    assert "classes fitted multinomial (softmax)" in html and "has no multinomial fitter" not in html
