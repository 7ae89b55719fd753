"""`penduel compare`: executions side by side from the tracking store, and their config differences."""
from __future__ import annotations

import html as htmllib
import re
import shutil
from types import SimpleNamespace

from hypothesis import given
from hypothesis import strategies as st

from pipeline.compare import MISSING, config_differences, flatten, loss_tables
from pipeline.stored_runs import open_store

from .conftest import penduel

# ------------------------------------------------------------------ config differences (pure)
leaves = st.one_of(st.integers(-3, 3), st.booleans(), st.none(), st.text(max_size=3), st.floats(allow_nan=False))
configs = st.recursive(leaves, lambda inner: st.one_of(
    st.lists(inner, max_size=3), st.dictionaries(st.text("abc", min_size=1, max_size=2), inner, max_size=3)),
    max_leaves=12).filter(lambda c: isinstance(c, dict))


def test_flatten_names_nested_settings_and_list_items():
    flat = flatten({"selection": {"cv_folds": 3}, "losses": [{"name": "squared"}, {"name": "huber", "delta": 1.5}]})
    assert flat == {"selection.cv_folds": "3", "losses[0].name": '"squared"', "losses[1].name": '"huber"',
                    "losses[1].delta": "1.5"}


def test_differences_list_only_changed_settings_with_every_value():
    a = {"seed": 1, "selection": {"cv_folds": 3, "rule": "least_error"}, "losses": [{"name": "squared"}]}
    b = {"seed": 1, "selection": {"cv_folds": 4, "rule": "least_error"}, "losses": [{"name": "squared"}, {"name": "huber"}]}
    assert config_differences([a, b]) == [
        {"setting": "losses[1].name", "values": [MISSING, '"huber"']},
        {"setting": "selection.cv_folds", "values": ["3", "4"]}]


@given(configs)
def test_a_config_never_differs_from_itself(c):
    assert config_differences([c, c]) == []


@given(configs, configs)
def test_differences_are_exactly_the_unequal_flat_settings(a, b):
    fa, fb = flatten(a), flatten(b)
    rows = config_differences([a, b])
    assert {r["setting"] for r in rows} == {k for k in set(fa) | set(fb) if fa.get(k, MISSING) != fb.get(k, MISSING)}
    # Order of the executions only reverses the values.
    assert config_differences([b, a]) == [{"setting": r["setting"], "values": r["values"][::-1]} for r in rows]


def test_stored_verdict_winner_follows_the_interval_and_the_direction():
    from pipeline.compare import stored_verdicts

    rows = [{"loss": "a", "sentence": "s", "low": 0.1, "high": 0.3}, {"loss": "b", "sentence": "s", "low": -0.2,
            "high": 0.1}, {"loss": "c", "sentence": "s", "low": None, "high": None}]
    # diff = L1 − L2 > 0 everywhere in the interval: L1's error is higher, so L2 wins when lower is better.
    assert {k: v["winner"] for k, v in stored_verdicts({"primary_lower_is_better": True, "verdicts": rows}).items()} \
        == {"a": "ridge-type (L2)", "b": "no clear winner", "c": "not compared"}
    assert stored_verdicts({"primary_lower_is_better": False, "verdicts": rows})["a"]["winner"] == "sparse (L1)"


def _fit(family, loss, value):
    return {"family": family, "loss": loss, "metrics": {"rmse": value, "balanced_accuracy": value},
            "intervals": {}, **{k: None for k in ("n_nonzero", "effective_df", "fit_seconds", "cv_seconds",
                                                "stability", "stability_low", "stability_high",
                                                "lambda_chosen")}, "status": "FINISHED"}


def test_rows_are_ranked_by_the_cv_estimate_never_by_the_test_figure():
    # the test figures favour E1's l2 (rmse 1.0), the CV estimates E2's l1: the ranking follows CV only
    executions = [{"status": "FINISHED", "task": "regression", "verdicts": {},
                   "fits": [_fit("l1", "squared", 2.0), _fit("l2", "squared", 1.0)],
                   "cv": {("squared", "l1"): (0.9, 0.1), ("squared", "l2"): (0.7, 0.1)}},
                  {"status": "FINISHED", "task": "regression", "verdicts": {}, "fits": [_fit("l1", "squared", 3.0)],
                   "cv": {("squared", "l1"): (0.5, 0.1)}},
                  {"status": "FAILED", "task": None, "verdicts": {}, "fits": [], "cv": {}}]
    (block,) = loss_tables(executions, "regression")
    assert [(r["rank"], r["execution"], r["family"]) for r in block["rows"]] == [(1, 1, "l1"), (2, 0, "l2"),
                                                                                 (3, 0, "l1")]
    assert "best" not in block["rows"][0] and block["winners"] == ["not fitted", "not fitted", "failed"]


# ------------------------------------------------------------------ from the store
def test_compare_last_two_shows_both_executions_and_their_config_difference(store):
    cwd = store["cwd"]
    shutil.rmtree(cwd / "reports", ignore_errors=True)         # compare reads the store, not local reports
    code, out, err = penduel(["compare", "--last", "2", "--tracking-uri", store["uri"]], cwd)
    assert code == 0, err
    first, second = (r["run_id"] for r in store["runs"])
    assert out.splitlines()[:2] == [f"E1: {second}  tiny-bands", f"E2: {first}  tiny-bands"]  # newest first
    page = htmllib.unescape(open(re.search(r"comparison: (\S+)", out).group(1), encoding="utf-8").read())
    assert first in page and second in page
    for setting, newest, oldest in [("selection.cv_folds", "4", "3"), ("selection.rule", '"one_standard_error"', '"least_error"'),
                                    ("losses[1].name", '"huber"', MISSING)]:
        row = re.search(rf"<code>{re.escape(setting)}</code></th>(.*?)</tr>", page, re.S).group(1)
        assert re.findall(r"<td><code>(.*?)</code></td>", row) == [newest, oldest]
    assert "Loss: huber" in page and "Loss: squared" in page
    winners = page.split('id="winners"', 1)[1].split("</table>", 1)[0]
    huber = re.search(r'<th scope="row">huber_delta1</th>(.*?)</tr>', winners, re.S).group(1)
    # cells: task, decision metric, then one per execution
    assert re.findall(r"<td>(.*?)</td>", huber)[:2] == ["regression", "mean Huber loss (threshold 2.38)"]
    assert re.findall(r"<td>(.*?)</td>", huber)[3] == "not fitted"        # E2 (the first run) had no Huber loss
    squared = re.findall(r"<td>(.*?)</td>", re.search(r'<th scope="row">squared</th>(.*?)</tr>', winners, re.S)
                         .group(1))
    assert squared[1] == "RMSE" and set(squared[2:4]) <= {"sparse (L1)", "ridge-type (L2)", "no clear winner"}
    assert "data hashes" not in page                              # same data: no warning
    # The numbers shown are the stored metrics of every child run.
    client = open_store(store["uri"])
    for rid in (first, second):
        parent = client.get_run(rid)
        for child in client.search_runs([parent.info.experiment_id],
                                        filter_string=f"tags.mlflow.parentRunId = '{rid}'"):
            metric = child.data.params["decision_metric"]      # each loss's own decision metric
            assert f"{child.data.metrics['test_' + metric]:.4g} [{child.data.metrics['test_' + metric + '_low']:.4g}, " \
                in page


def test_compare_selected_runs_keeps_their_order(store):
    first, second = (r["run_id"] for r in store["runs"])
    code, out, err = penduel(["compare", "--runs", first, second, "--tracking-uri", store["uri"]], store["cwd"])
    assert code == 0, err
    assert out.splitlines()[:2] == [f"E1: {first}  tiny-bands", f"E2: {second}  tiny-bands"]


def test_compare_mistakes_exit_2(store):
    client = open_store(store["uri"])
    parent = client.get_run(store["runs"][0]["run_id"])
    child = client.search_runs([parent.info.experiment_id],
                               filter_string=f"tags.mlflow.parentRunId = '{parent.info.run_id}'")[0]
    for args, needle in [(["--runs", child.info.run_id], "is a child run"),
                         (["--experiment", "nothing-here"], "no experiment named"),
                         (["--last", "0"], "--last must be 1 or more")]:
        code, _, err = penduel(["compare", *args, "--tracking-uri", store["uri"]], store["cwd"])
        assert code == 2 and needle in err and "Traceback" not in err, err


def test_fit_row_reads_intervals_from_low_and_high_metrics():
    from pipeline.compare import fit_row

    child = SimpleNamespace(info=SimpleNamespace(run_id="r", status="FINISHED"), data=SimpleNamespace(
        metrics={"test_rmse": 1.5, "test_rmse_low": 1.0, "test_rmse_high": 2.0, "n_nonzero": 3.0},
        params={"family": "l1", "loss": "squared", "lambda_chosen": "0.25"},
        tags={"penduel.family": "l1", "penduel.loss": "squared"}))
    row = fit_row(child)
    assert row["metrics"] == {"rmse": 1.5} and row["intervals"] == {"rmse": (1.0, 2.0)}
    assert row["lambda_chosen"] == 0.25 and row["n_nonzero"] == 3.0 and row["stability"] is None


def test_rendered_comparison_warns_on_different_data_and_escapes_names():
    from pipeline.compare import comparison_payload
    from pipeline.report.comparison import render_comparison

    def execution(run_id, data_hash, name):
        return {"run_id": run_id, "name": name, "experiment": name, "status": "FINISHED", "start_time": 0,
                "seconds": 1.0, "config_hash": "c", "data_hash": data_hash, "git_commit": None,
                "config": {"name": name}, "n_train": "30", "n_test": "10",
                "fits": [_fit("l1", "squared", 1.0), _fit("l2", "squared", 2.0)], "verdicts": {}}

    hostile = "<script>alert(1)</script>"
    page = render_comparison(comparison_payload([execution("a" * 32, "d1", hostile), execution("b" * 32, "d2", "x")]))
    assert "data hashes" in page and "<script" not in page and "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    same = render_comparison(comparison_payload([execution("a" * 32, "d1", "x"), execution("b" * 32, "d1", "x")]))
    assert "data hashes" not in same
