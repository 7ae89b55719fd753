"""data.task: declared, or inferred with care (auto); `init` writes the choice (four codes run
as four classes: tests/test_multiclass_cli.py)."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import yaml

from pipeline.data.task import infer_task

from .conftest import penduel, scratch_dir

SMALL = ("stability: {enabled: false}\nfamilies: {l1: {path: {points: 4}}, l2: {path: {points: 4}}}\n"
         "selection: {cv_folds: 3}\n")


def _frame(n=80, codes=(1, 2, 3, 4), seed=0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame(rng.normal(size=(n, 3)), columns=["a", "b", "c"])
    frame["grade"] = np.resize(np.array(codes), n)
    return frame


@pytest.mark.parametrize("values, task", [
    (["red", "blue"] * 10, "classification"),                # text
    ([True, False] * 10, "classification"),                  # boolean
    ([0, 1] * 10, "classification"),                         # two values
    ([1, 2, 3, 4] * 5, "classification"),                    # four integer codes, 5 rows each
    ([1, 2, 3, 4] * 4 + [1, 2, 3], "regression"),            # the code 4 has only 4 rows
    (list(range(11)) * 5, "regression"),                     # eleven codes: more than 10
    ([1.5, 2.0, 3.0, 4.0] * 5, "regression"),                # not integers
    (list(np.linspace(0, 1, 20)), "regression"),
])
def test_auto_rule(values, task):
    assert infer_task(pd.Series(values, name="t"))[0] == task


def test_numeric_codes_with_regression_losses_are_refused_with_the_override(tmp_path):
    _frame().to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "c.yaml").write_text("name: codes\ndata: {kind: csv, path: d.csv, target: grade}\n"
                                     "losses: [squared]\n" + SMALL)
    code, _, err = penduel(["run", "c.yaml", "--quiet"], tmp_path)
    assert code == 2 and "Traceback" not in err
    err = " ".join(err.split())
    for needle in ("data.task", "4 integer codes", "classification", "data.task: regression"):
        assert needle in err


def test_declared_regression_runs_the_codes_as_a_quantity(tmp_path):
    _frame().to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "c.yaml").write_text("name: codes\ndata: {kind: csv, path: d.csv, target: grade, task: regression}\n"
                                     "losses: [squared]\n" + SMALL)
    code, out, err = penduel(["run", "c.yaml", "--quiet"], tmp_path)
    assert code == 0, err
    assert "report: " in out


def test_declared_task_must_match_the_losses(tmp_path):
    _frame(codes=(0, 1)).to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "c.yaml").write_text("name: codes\ndata: {kind: csv, path: d.csv, target: grade, "
                                     "task: classification}\nlosses: [squared]\n" + SMALL)
    code, _, err = penduel(["validate", "c.yaml"], tmp_path)
    assert code == 2 and "data.task is classification" in err and "logistic" in err


def test_binary_codes_run_as_classification_with_a_note(tmp_path):
    _frame(codes=(0, 1)).to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "c.yaml").write_text("name: codes\ndata: {kind: csv, path: d.csv, target: grade}\n"
                                     "losses: [logistic]\n" + SMALL)
    code, out, err = penduel(["run", "c.yaml", "--quiet"], tmp_path)
    assert code == 0, err
    assert "note: data.task auto: column 'grade' holds two distinct values" in out
    assert "data.task: regression" in out


@pytest.mark.parametrize("target, task", [("grade", "classification"), ("a", "regression")])
def test_init_writes_the_task_explicitly(target, task):
    cwd = scratch_dir("penduel-task-")
    _frame(codes=("x", "y")).to_csv(cwd / "d.csv", index=False)
    code, _, err = penduel(["init", "--data", "d.csv", "--target", target], cwd)
    assert code == 0, err
    assert yaml.safe_load((cwd / "penduel.yaml").read_text())["data"]["task"] == task
