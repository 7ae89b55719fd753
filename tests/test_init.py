"""`penduel init --data FILE --target COLUMN`: a commented starter config that runs as is."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import yaml

from pipeline.config import load_config
from pipeline.starter import cv_folds, experiment_name, guess_task

from .test_tracking_store import penduel, scratch_dir


def _table(n=40, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 5))
    frame = pd.DataFrame(X, columns=[f"x{j}" for j in range(5)])
    frame["site"] = rng.choice(["north", "south", "east"], size=n)
    frame["yield"] = 2 * X[:, 0] - X[:, 3] + rng.normal(scale=0.5, size=n)
    frame["grade"] = np.where(X[:, 1] + rng.normal(scale=0.5, size=n) > 0, "good", "poor")
    return frame


def test_starter_for_a_csv_runs_as_is():
    cwd = scratch_dir("penduel-init-")
    (cwd / "data").mkdir()
    _table().to_csv(cwd / "data" / "lots.csv", index=False)
    code, _, err = penduel(["init", "--data", "data/lots.csv", "--target", "yield", "--output",
                            "configs/lots.yaml"], cwd)
    assert code == 0, err
    text = (cwd / "configs" / "lots.yaml").read_text()
    assert text.count("#") >= 10                                  # commented
    spec, base = load_config(cwd / "configs" / "lots.yaml")
    assert spec.data.path == "../data/lots.csv" and spec.data.target == "yield" and spec.task == "regression"
    code, out, err = penduel(["run", "configs/lots.yaml", "--quiet"], cwd)
    assert code == 0, err
    assert "report: " in out and "huber" in out


def test_starter_for_parquet_classification_names_the_class_coding():
    cwd = scratch_dir("penduel-init-")
    _table(seed=1).drop(columns="yield").to_parquet(cwd / "lots.parquet")
    code, _, err = penduel(["init", "--data", "lots.parquet", "--target", "grade"], cwd)
    assert code == 0, err
    text = (cwd / "penduel.yaml").read_text()
    assert '# classes: "good" is coded -1, "poor" is +1' in text
    spec, _ = load_config(cwd / "penduel.yaml")
    assert spec.task == "classification" and [loss.name for loss in spec.losses] == ["logistic", "hinge"]
    assert yaml.safe_load(text)["data"]["kind"] == "parquet"


@pytest.mark.parametrize("args, needle", [
    (["--target", "yeild"], "Did you mean 'yield'"),
])
def test_init_mistakes_exit_2(args, needle):
    cwd = scratch_dir("penduel-init-")
    _table().to_csv(cwd / "t.csv", index=False)
    code, _, err = penduel(["init", "--data", "t.csv", *args], cwd)
    assert code == 2 and needle in err and "Traceback" not in err


def test_init_does_not_overwrite_without_force():
    cwd = scratch_dir("penduel-init-")
    _table().to_csv(cwd / "t.csv", index=False)
    (cwd / "penduel.yaml").write_text("# mine\n")
    code, _, err = penduel(["init", "--data", "t.csv", "--target", "yield"], cwd)
    assert code == 2 and "already exists" in err and (cwd / "penduel.yaml").read_text() == "# mine\n"
    assert penduel(["init", "--data", "t.csv", "--target", "yield", "--force"], cwd)[0] == 0


def test_markup_and_quotes_in_the_target_name_stay_one_yaml_string():
    cwd = scratch_dir("penduel-init-")
    frame = _table().rename(columns={"yield": 'a: "b" # <c>'})
    frame.to_csv(cwd / "t.csv", index=False)
    assert penduel(["init", "--data", "t.csv", "--target", 'a: "b" # <c>'], cwd)[0] == 0
    assert load_config(cwd / "penduel.yaml")[0].data.target == 'a: "b" # <c>'


def test_helpers():
    assert guess_task(pd.Series([1.0, 2.5, 3.0])) == "regression"
    assert guess_task(pd.Series(["a", "b", "a"])) == "classification"
    assert experiment_name(__import__("pathlib").Path("my data (v2).csv")) == "my-data-v2"
    assert cv_folds(np.ones(100), "regression", 75) == 5
    y = np.array([1.0] * 5 + [-1.0] * 30)       # ~3 of the smaller class in training
    assert cv_folds(y, "classification", 26) == 2
