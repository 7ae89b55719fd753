"""Split designs shared by both families: groups kept together, time order respected, a fixed test set."""
from __future__ import annotations

from html import unescape

import numpy as np
import pandas as pd
import pytest

from pipeline.config import parse_config
from pipeline.data import load_dataset
from pipeline.runner import run_experiment
from pipeline.splits import plan_resamples, plan_splits, split_rows
from pipeline.selection import make_folds
from pipeline.stability import resample_indices
from pipeline.stability.schemes import order_blocks

from .conftest import penduel

SMALL = {"families": {"l1": {"path": {"points": 8}}, "l2": {"path": {"points": 8}}}, "selection": {"cv_folds": 4}}


def _replicates(n_groups=30, reps=4, p=40, seed=0) -> pd.DataFrame:
    """Data built to leak: each lot has its own random profile and its own random target; replicates of a
    lot are near copies. Nothing about a new lot is predictable, but a sibling in training gives it away."""
    rng = np.random.default_rng(seed)
    profile, level = rng.normal(size=(n_groups, p)), rng.normal(size=n_groups)
    lot = np.repeat(np.arange(n_groups), reps)
    frame = pd.DataFrame(profile[lot] + 0.05 * rng.normal(size=(len(lot), p)), columns=[f"x{j}" for j in range(p)])
    frame["y"] = level[lot] + 0.05 * rng.normal(size=len(lot))
    frame["lot"] = [f"lot{g}" for g in lot]
    frame["day"] = rng.permutation(len(lot))
    return frame


def _spec(tmp_path, split=None, **extra):
    return parse_config({"name": "design", "data": {"kind": "csv", "path": "d.csv", "target": "y"},
                         "split": split or {}, **SMALL, **extra})


def _setup(tmp_path, frame=None):
    (frame if frame is not None else _replicates()).to_csv(tmp_path / "d.csv", index=False)


def test_grouped_cv_error_is_higher_than_random_cv_error_on_leaking_replicates(tmp_path):
    _setup(tmp_path)
    errors = {}
    for name, split in (("random", {}), ("grouped", {"groups": "lot"})):
        result = run_experiment(_spec(tmp_path, split, stability={"enabled": False}), tmp_path, progress=False)
        errors[name] = {r.family: r.cv_mean[r.chosen_index] for r in result.results}
    for family in errors["random"]:
        # random folds see a sibling of every validation row; grouped folds never do
        assert errors["grouped"][family] > 3 * errors["random"][family], errors


@pytest.mark.parametrize("scheme", ["subsample", "bootstrap", "complementary_pairs"])
def test_no_group_on_both_sides_of_the_test_split_any_fold_or_resample(tmp_path, scheme):
    _setup(tmp_path)
    spec = _spec(tmp_path, {"groups": "lot"}, stability={"scheme": scheme, "n_resamples": 6,
                                                         "fraction": 0.5}, selection={"cv_folds": 4, "nested": True})
    ds = load_dataset(spec.data, tmp_path, spec.task, spec.split)
    assert "lot" not in ds.feature_names and ds.n_features == 41     # x0..x39 and day
    lots = ds.design.groups
    train, test = split_rows(spec, ds)
    assert not set(lots[train]) & set(lots[test])
    for name, fit, ev in plan_splits(spec, ds, train, test):
        assert not set(lots[fit]) & set(lots[ev]), name
    for name, fit, _ in plan_resamples(spec, ds, train, test):
        inside = set(lots[fit])
        outside = set(lots[np.setdiff1d(train, fit)])
        assert not inside & outside, name          # a lot is drawn whole or not at all


def test_order_gives_forward_chaining_folds_with_a_gap_and_the_last_rows_as_test(tmp_path):
    _setup(tmp_path)
    spec = _spec(tmp_path, {"order": "day", "gap": 3})
    ds = load_dataset(spec.data, tmp_path, spec.task, spec.split)
    day = ds.design.order
    train, test = split_rows(spec, ds)
    assert day[train].max() < day[test].min()
    assert len(train) + len(test) + 3 == ds.n_samples             # the gap rows are used by neither
    splits = plan_splits(spec, ds, train, test)
    folds = [(fit, ev) for name, fit, ev in splits if name.startswith("fold")]
    assert len(folds) == 4
    for fit, ev in folds:
        before = np.sum((day[train] > day[fit].max()) & (day[train] < day[ev].min()))
        assert day[fit].max() < day[ev].min() and before == 3        # the past only, 3 rows left out between
    for (fit_a, _), (fit_b, _) in zip(folds, folds[1:]):
        assert set(fit_a) < set(fit_b)                                 # training grows forward


def test_block_resamples_keep_contiguous_blocks():
    order = np.random.default_rng(1).permutation(125)
    blocks = order_blocks(order)
    assert np.all(np.diff(blocks[np.argsort(order)]) >= 0) and len(np.unique(blocks)) == 25   # 125^(1/3) = 5
    for rows in resample_indices(125, "bootstrap", 5, rng=0, groups=blocks):
        counts = np.bincount(rows, minlength=125)
        for b in range(25):
            assert len(set(counts[blocks == b])) == 1            # a block is drawn whole, as often as drawn


def test_grouped_folds_keep_class_balance_where_possible():
    rng = np.random.default_rng(0)
    groups = np.repeat(np.arange(60), 3)
    y = np.where(np.repeat(rng.random(60) < 0.3, 3), 1.0, -1.0)
    for tr, va in make_folds(180, 5, rng, y=y, stratify=True, groups=groups):
        assert not set(groups[tr]) & set(groups[va])
        assert abs(np.mean(y[va] > 0) - np.mean(y > 0)) < 0.1


def test_fixed_test_rows_from_a_column_and_from_a_file_are_never_fitted(tmp_path):
    frame = _replicates()
    frame["role"] = np.where(np.arange(len(frame)) % 5 == 0, "test", "train")
    _setup(tmp_path, frame)
    spec = _spec(tmp_path, {"holdout": "role"})
    ds = load_dataset(spec.data, tmp_path, spec.task, spec.split)
    train, test = split_rows(spec, ds)
    np.testing.assert_array_equal(test, np.flatnonzero(frame["role"] == "test"))
    for _, fit, _ in plan_splits(spec, ds, train, test):
        assert not set(fit) & set(test)
    frame[frame.role == "train"].drop(columns="role").to_csv(tmp_path / "d.csv", index=False)
    frame[frame.role == "test"].drop(columns="role").to_csv(tmp_path / "external.csv", index=False)
    spec = _spec(tmp_path, {"test_file": "external.csv"})
    ds = load_dataset(spec.data, tmp_path, spec.task, spec.split)
    train, test = split_rows(spec, ds)
    assert len(test) == 24 and set(test) == set(range(96, 120))


@pytest.mark.parametrize("split, needle", [
    ({"groups": "lot"}, "Design: groups from column 'lot'. Test set:"),
    ({"order": "day", "gap": 2}, "4 forward-chaining folds of"),
    ({"holdout": "role"}, "fixed test rows marked in column 'role'"),
])
def test_each_design_runs_from_the_cli_and_the_report_states_it(tmp_path, split, needle):
    frame = _replicates(n_groups=20, p=5)
    frame["role"] = np.where(np.arange(len(frame)) % 4 == 0, "yes", "no")
    _setup(tmp_path, frame)
    text = "\n".join(f"  {k}: {v}" for k, v in split.items())
    (tmp_path / "c.yaml").write_text("name: design\ndata: {kind: csv, path: d.csv, target: y}\nsplit:\n" + text +
                                     "\nfamilies: {l1: {path: {points: 5}}, l2: {path: {points: 5}}}\nselection: {cv_folds: 4}\n"
                                     "stability: {n_resamples: 4}\n")
    code, out, err = penduel(["run", "c.yaml", "--quiet"], tmp_path)
    assert code == 0, err
    report = out.split("report: ")[1].split()[0]
    html = unescape(open(report, encoding="utf-8").read())
    assert needle in html and "validation rows" in html


@pytest.mark.parametrize("split, needle", [
    ({"groups": "plate"}, "split.groups: column 'plate' is not in"),
    ({"holdout": "x0"}, "split.holdout: column 'x0'"),
    ({"groups": "lot", "order": "day"}, "not supported"),
    ({"gap": 2}, "needs split.order"),
    ({"test_file": "nowhere.csv"}, "split.test_file"),
])
def test_design_mistakes_exit_2_naming_the_setting(tmp_path, split, needle):
    _setup(tmp_path)
    text = "\n".join(f"  {k}: {v}" for k, v in split.items())
    (tmp_path / "c.yaml").write_text("name: design\ndata: {kind: csv, path: d.csv, target: y}\nsplit:\n" + text +
                                     "\nstability: {enabled: false}\n")
    code, _, err = penduel(["run", "c.yaml", "--quiet"], tmp_path)
    assert code == 2 and needle in " ".join(err.split()) and "Traceback" not in err, err
