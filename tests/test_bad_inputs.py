"""Every bad input gets one paragraph naming the culprit, what was found and what is allowed, exit 2.

Each case runs the command's own entry point, `pipeline.cli.main`, in this process (fast);
the slow variant runs the same cases as a user would, `python -m pipeline.cli` in a subprocess.
"""
from __future__ import annotations

import io
import pathlib
import re
from contextlib import redirect_stderr, redirect_stdout

import numpy as np
import pandas as pd
import pytest

from pipeline.cli import main
from pipeline.models.sparse import SOLVERS

SMALL = ("stability: {enabled: false}\nfamilies: {l1: {path: {points: 4}}, l2: {path: {points: 4}}}\n"
         "selection: {cv_folds: 3}\n")
SCENARIO = "data: {kind: scenario, name: spectral_bands, n_samples: 40, n_features: 8, n_informative: 2}\n"


def _frame(n=30, seed=0, **extra) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"a": rng.standard_normal(n), "b": rng.standard_normal(n), "y": rng.standard_normal(n)})
    for name, values in extra.items():
        frame[name] = values
    return frame


def _csv(frame: pd.DataFrame) -> str:
    return frame.to_csv(index=False)


def _with(frame, column, row, value):
    frame = frame.copy()
    frame[column] = frame[column].astype(object)
    frame.loc[row, column] = value
    return frame


def _file_config(path="data.csv", target="y", kind="csv", losses="[squared]"):
    return f"name: bad\ndata: {{kind: {kind}, path: {path}, target: {target}}}\nlosses: {losses}\n" + SMALL


# id: (files to write, config text, culprit texts the message must contain)
CASES = {
    "config file missing": ({}, None, ["not found", "nowhere.yaml"]),
    "yaml syntax error": ({}, "name: bad\ndata: {kind: scenario,\n  name: [spectral_bands\n", ["line 4, column 1"]),
    "data file missing": ({}, _file_config("absent.csv"), ["data.path", "absent.csv", "not found"]),
    "data path is a folder": ({"folder.csv/": ""}, _file_config("folder.csv"), ["data.path", "is a folder"]),
    "bytes that are not text": ({"data.csv": bytes(range(128, 256)) * 3}, _file_config(),
                                ["data.path", "cannot read", "codec"]),
    "empty file": ({"data.csv": ""}, _file_config(), ["data.path", "No columns"]),
    "header only": ({"data.csv": "a,b,y\n"}, _file_config(), ["holds no rows", "found 0 rows"]),
    "ragged CSV rows": ({"data.csv": "a,b,y\n1,2,3\n4,5,6,7,8\n"}, _file_config(),
                        ["data.path", "Expected 3 fields in line 3, saw 5", "well-formed CSV"]),
    "unclosed quote": ({"data.csv": 'a,b,y\n"1,2,3\n4,5,6\n'}, _file_config(), ["data.path", "EOF inside string"]),
    "parquet that is not parquet": ({"data.parquet": _csv(_frame())}, _file_config("data.parquet", kind="parquet"),
                                    ["data.path", "as PARQUET"]),
    "target column absent": ({"data.csv": _csv(_frame())}, _file_config(target="yy"),
                             ["data.target", "'yy'", "Did you mean 'y'?"]),
    "text column with too many levels": (
        {"data.csv": _csv(_frame(n=60, city=[f"town{i}" for i in range(60)]))}, _file_config(),
        ["column 'city'", "60 distinct values", "at most 50 levels"]),
    "NaN in a feature": ({"data.csv": _csv(_with(_frame(), "b", 7, np.nan))}, _file_config(),
                         ["feature column 'b'", "data row 7", "missing or infinite"]),
    "infinity in a feature": ({"data.csv": _csv(_with(_frame(), "a", 3, "-inf"))}, _file_config(),
                              ["feature column 'a'", "-inf at data row 3"]),
    "NaN in the target": ({"data.csv": _csv(_with(_frame(), "y", 5, np.nan))}, _file_config(),
                          ["column 'y'", "missing value", "data row 5"]),
    "infinity in the target": ({"data.csv": _csv(_with(_frame(), "y", 4, "inf"))}, _file_config(),
                               ["column 'y'", "inf at data row 4", "only finite"]),
    "values whose spread overflows": ({"data.csv": _csv(_with(_with(_frame(), "a", 0, 1e308), "a", 1, -1e308))},
                                      _file_config(), ["feature column 'a'", "1e+308", "rescale"]),
    "every feature constant": ({"data.csv": _csv(_frame(a=1.0, b=2.0))}, _file_config(),
                               ["every feature column", "constant"]),
    "constant target": ({"data.csv": _csv(_frame(y=5.0))}, _file_config(), ["column 'y'", "same value 5"]),
    "fewer rows than folds": ({"data.csv": _csv(_frame(n=3))}, _file_config(),
                              ["selection.cv_folds", "3 folds", "only 2 remain"]),
    "one class only": ({"data.csv": _csv(_frame(y="yes"))}, _file_config(losses="[logistic]"),
                       ["exactly two classes", "has 1 ('yes')"]),
    "three classes": ({"data.csv": _csv(_frame(y=["a", "b", "c"] * 10))}, _file_config(losses="[hinge]"),
                      ["exactly two classes", "has 3"]),
    "regression loss on string labels": ({"data.csv": _csv(_frame(y=["cat", "dog"] * 15))}, _file_config(),
                                         ["numeric target", "'cat' at data row 0", "classification loss"]),
    "zero lambda ratio": ({}, "name: bad\n" + SCENARIO + SMALL.replace("l1: {path: {points: 4}}", "l1: {path: {smallest_share: 0}}"),
                          ["families.l1.path.smallest_share", "value 0", "greater than 0"]),
    "negative lambda ratio": ({}, "name: bad\n" + SCENARIO + SMALL.replace("l1: {path: {points: 4}}",
                                                                            "l1: {path: {smallest_share: -0.1}}"),
                              ["families.l1.path.smallest_share", "-0.1", "greater than 0"]),
    "grid of one lambda": ({}, "name: bad\n" + SCENARIO + SMALL.replace("l2: {path: {points: 4}}", "l2: {path: {points: 1}}"),
                           ["families.l2.path.points", "value 1", "greater than or equal to 2"]),
    "unknown loss": ({}, "name: bad\n" + SCENARIO + "losses: [hubber]\n", ["losses[1].name", "'hubber'",
                                                                          "Did you mean 'huber'?"]),
    "unknown kernel": ({}, "name: bad\n" + SCENARIO + "families: {l2: {kernel: gausian}}\n",
                       ["families.l2.kernel", "'gausian'", "'rbf'"]),
    "unknown feature map": ({}, "name: bad\n" + SCENARIO + "features: {maps: [{kind: polynomal}]}\n",
                            ["features.maps[1]", "'polynomal'", "Did you mean 'polynomial'?"]),
    "unknown solver": ({}, "name: bad\n" + SCENARIO + "families: {l1: {solver: clarabell}}\n",
                       ["families.l1.solver", "'clarabell'", "'active_set'"]),
    "feature map over the memory budget": (
        {}, "name: bad\n" + SCENARIO + SMALL + "features: {memory_budget_mib: 16, maps: [{kind: random_fourier, "
                                               "n_components: 100000}]}\n",
        ["features.maps", "100,000 columns", "memory_budget_mib = 16", "representer route"]),
    "Gram matrix over the memory budget": (
        {}, "name: bad\ndata: {kind: scenario, name: dense_effects, n_samples: 1400, n_features: 3, n_informative: 2}\n" + SMALL
        + "features: {memory_budget_mib: 16}\n",
        ["families.l2", "Gram matrix of 1,050 training rows", "memory_budget_mib = 16"]),
    "scenario over the memory budget": (
        {}, "name: bad\ndata: {kind: scenario, name: dense_effects, n_samples: 100000, n_features: 100000}\n",
        ["100000 rows × 100000 columns", "memory_budget_mib = 2048"]),
    "scenario of the wrong kind": ({}, "name: bad\n" + SCENARIO + "losses: [logistic]\n",
                                   ["data.name", "regression problem", "classification losses"]),
}


def _write(folder: pathlib.Path, case: str) -> pathlib.Path:
    files, config, _ = CASES[case]
    for name, content in files.items():
        if name.endswith("/"):
            (folder / name).mkdir()
        elif isinstance(content, bytes):
            (folder / name).write_bytes(content)
        else:
            (folder / name).write_text(content, encoding="utf-8")
    path = folder / ("nowhere.yaml" if config is None else "experiment.yaml")
    if config is not None:
        path.write_text(config, encoding="utf-8")
    return path


def _in_process(args) -> tuple[int, str]:
    err, out = io.StringIO(), io.StringIO()
    with redirect_stderr(err), redirect_stdout(out):
        code = main([str(a) for a in args])
    return code, err.getvalue()


def _check(case: str, code: int, stderr: str) -> None:
    assert code == 2, stderr
    assert "Traceback" not in stderr
    messages = [block for block in re.split(r"\n(?=penduel: )", stderr.strip())
                if not block.startswith("penduel: running")]
    assert len(messages) == 1, stderr
    paragraph = messages[0]
    assert "\n\n" not in paragraph                       # one paragraph
    flat = " ".join(paragraph.split())
    for text in CASES[case][2]:
        assert " ".join(text.split()) in flat, f"{case}: {text!r} not in {flat!r}"


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    return f"sqlite:///{tmp_path_factory.mktemp('store') / 'bad.db'}"


@pytest.mark.parametrize("case", list(CASES))
def test_bad_input_gets_one_clear_paragraph(case, tmp_path, store, monkeypatch):
    monkeypatch.chdir(tmp_path)
    config = _write(tmp_path, case)
    code, stderr = _in_process(["run", config, "--quiet", "--tracking-uri", store])
    _check(case, code, stderr)


@pytest.mark.slow
@pytest.mark.parametrize("case", list(CASES))
def test_bad_input_through_the_installed_command(case, tmp_path, cli):
    config = _write(tmp_path, case)
    done = cli(["run", config, "--quiet", "--tracking-uri", f"sqlite:///{tmp_path / 'store.db'}"], tmp_path)
    _check(case, done.returncode, done.stderr)


def test_config_checks_run_without_data_in_validate(tmp_path):
    code, stderr = _in_process(["validate", _write(tmp_path, "unknown feature map")])
    _check("unknown feature map", code, stderr)


def test_config_solver_names_are_the_solvers_of_the_sparse_family():
    from pipeline.config import L1Spec
    assert L1Spec.model_fields["solver"].annotation.__args__ == SOLVERS


def test_categorical_encoded_and_constant_dropped_with_notes(tmp_path, store, monkeypatch):
    # The decisions: text columns of up to 50 levels are one-hot encoded, constant columns dropped,
    # each with a note on the terminal.
    monkeypatch.chdir(tmp_path)
    frame = _frame(n=40, soil=["clay", "sand", "loam", "clay"] * 10, batch=7.0)
    (tmp_path / "data.csv").write_text(_csv(frame), encoding="utf-8")
    (tmp_path / "experiment.yaml").write_text(_file_config(), encoding="utf-8")
    out = io.StringIO()
    with redirect_stdout(out), redirect_stderr(io.StringIO()):
        code = main(["run", "experiment.yaml", "--quiet", "--tracking-uri", store])
    assert code == 0
    text = out.getvalue()
    assert "note: text column 'soil' one-hot encoded into 2 column(s), reference level 'clay'" in text
    assert "note: dropped 1 constant column(s): batch" in text


def test_failed_solver_on_one_fit_is_recorded_and_the_run_goes_on(tmp_path, store, monkeypatch):
    import pipeline.models.sparse.path as l1
    from mlflow.tracking import MlflowClient
    monkeypatch.chdir(tmp_path)
    real_step = l1.PathFitter.step
    failing_lambda = {}

    def step(self, lam):
        failing_lambda.setdefault("lam", lam)   # λ_max, the first λ of every path, fails
        if lam >= failing_lambda["lam"]:
            raise RuntimeError("solver gave up (injected)")
        return real_step(self, lam)

    monkeypatch.setattr(l1.PathFitter, "step", step)
    (tmp_path / "data.csv").write_text(_csv(_frame(n=40)), encoding="utf-8")
    (tmp_path / "experiment.yaml").write_text(_file_config() + "cache: {enabled: false}\n", encoding="utf-8")
    out = io.StringIO()
    with redirect_stdout(out), redirect_stderr(io.StringIO()):
        code = main(["run", "experiment.yaml", "--quiet", "--tracking-uri", store])
    assert code == 0
    run_id = re.search(r"run id: ([0-9a-f]{32})", out.getvalue()).group(1)
    report = re.search(r"report: (\S+)", out.getvalue()).group(1)
    client = MlflowClient(tracking_uri=store)
    parent = client.get_run(run_id)
    (child,) = client.search_runs([parent.info.experiment_id], filter_string=(
        f"tags.mlflow.parentRunId = '{run_id}' and params.family = 'l1'"))
    assert child.data.metrics["n_not_converged"] >= 1
    table = pd.read_csv(client.download_artifacts(child.info.run_id, "cv_table.csv", str(tmp_path)))
    assert table["status"].str.contains("solver gave up (injected)", regex=False).any()
    assert "solver gave up (injected)" in pathlib.Path(report).read_text(encoding="utf-8")


# ---------------------------------------------------------------- hostile inputs
def test_yaml_tags_that_run_code_are_refused(tmp_path):
    marker = tmp_path / "pwned"
    config = tmp_path / "experiment.yaml"
    config.write_text(f"name: !!python/object/apply:os.system ['touch {marker}']\n", encoding="utf-8")
    code, stderr = _in_process(["validate", config])
    assert code == 2 and "Traceback" not in stderr and "line 1" in stderr
    assert not marker.exists()


class _Trap:
    """Unpickling this would create a file: proof that a cache file was unpickled."""
    def __init__(self, path):
        self.path = str(path)

    def __reduce__(self):
        return (pathlib.Path.touch, (pathlib.Path(self.path),))


def test_a_planted_pickle_in_the_cache_is_never_unpickled(tmp_path):
    from pipeline.cache import TaskCache
    from pipeline.fitting import FitOutcome
    marker = tmp_path / "unpickled"
    cache = TaskCache(tmp_path / "cache", FitOutcome)
    path = cache.path("ab" * 32)
    path.parent.mkdir(parents=True)
    np.savez(path, eval_loss=np.array([_Trap(marker)], dtype=object))   # np.savez pickles object arrays
    assert cache.get("ab" * 32) is None
    assert not marker.exists() and not path.exists()


def test_tracking_ui_binds_to_this_machine_unless_told(monkeypatch):
    import subprocess as sp
    calls = []
    monkeypatch.setattr(sp, "call", lambda cmd: calls.append(cmd) or 0)
    assert _in_process(["ui", "--tracking-uri", "sqlite:///x.db"])[0] == 0
    assert _in_process(["ui", "--tracking-uri", "sqlite:///x.db", "--host", "0.0.0.0"])[0] == 0
    hosts = [cmd[cmd.index("--host") + 1] for cmd in calls]
    assert hosts == ["127.0.0.1", "0.0.0.0"]


def test_report_escapes_user_strings(tmp_path, store, monkeypatch):
    monkeypatch.chdir(tmp_path)
    script = "<script>alert(1)</script>"
    frame = _frame(n=40).rename(columns={"a": f"a{script}", "y": "<b>y</b>"})
    frame["colour"] = ["<i>red</i>", "blue"] * 20
    (tmp_path / "data.csv").write_text(_csv(frame), encoding="utf-8")
    config = _file_config(target="'<b>y</b>'") + "description: '<img src=x onerror=alert(2)>'\n"
    (tmp_path / "experiment.yaml").write_text(config, encoding="utf-8")
    out = io.StringIO()
    with redirect_stdout(out), redirect_stderr(io.StringIO()):
        assert main(["run", "experiment.yaml", "--quiet", "--tracking-uri", store]) == 0
    html = pathlib.Path(re.search(r"report: (\S+)", out.getvalue()).group(1)).read_text(encoding="utf-8")
    for raw in (script, "<img src=x", "<b>y</b>", "<i>red</i>"):
        assert raw not in html
    assert "&lt;img src=x onerror=alert(2)&gt;" in html
    assert "&lt;b&gt;y&lt;/b&gt;" in html
