"""Stored models: every fit run's chosen model loads in a fresh process with mlflow and reproduces the
experiment's held-out predictions bit for bit; `penduel predict` applies them to new rows side by side
and refuses bad rows (exit 2); registration; the experiment-kind tag; starter configs share one
experiment per data file."""
from __future__ import annotations

import json
import pathlib
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import yaml

from .conftest import ROOT, penduel, run_cli, scratch_dir

# A fresh Python process: load every child run's model of one execution with mlflow.pyfunc.load_model
# (and mlflow.sklearn.load_model), predict the held-out rows and compare with the stored predictions.csv.
FRESH = r"""
import json, sys
import mlflow, numpy as np, pandas as pd
from mlflow.tracking import MlflowClient
uri, run_id, rows_file, out_dir = sys.argv[1:5]
mlflow.set_tracking_uri(uri)
client = MlflowClient(uri)
parent = client.get_run(run_id)
rows = pd.read_parquet(rows_file)
found = []
for child in client.search_runs([parent.info.experiment_id], f"tags.mlflow.parentRunId = '{run_id}'"):
    stored = pd.read_csv(client.download_artifacts(child.info.run_id, "predictions.csv", out_dir),
                         float_precision="round_trip")
    model = mlflow.pyfunc.load_model(f"runs:/{child.info.run_id}/model")
    got = model.predict(rows.iloc[stored["row"].to_numpy()].reset_index(drop=True))
    column = "decision" if "decision" in stored else "y_pred"
    ours = got["decision" if "decision" in got else "prediction"].to_numpy()
    sk = mlflow.sklearn.load_model(f"runs:/{child.info.run_id}/model")
    sk_values = sk.decision_function(rows.iloc[stored["row"].to_numpy()].reset_index(drop=True))
    found.append({"fit": child.data.tags["penduel.family"] + "/" + child.data.tags["penduel.loss"],
                  "exact": bool(np.array_equal(ours, stored[column].to_numpy())),
                  "sklearn_exact": bool(np.array_equal(sk_values, stored[column].to_numpy())),
                  "labels": bool("label" not in got or (got["label"].astype(str) == stored["y_pred"].astype(str)).all()),
                  "n": len(stored)})
print(json.dumps(found))
"""


def fresh_process_check(uri: str, run_id: str, rows: pd.DataFrame, cwd: pathlib.Path) -> list[dict]:
    rows_file = cwd / f"rows-{run_id}.parquet"
    rows.to_parquet(rows_file)
    done = subprocess.run([sys.executable, "-c", FRESH, uri, run_id, str(rows_file), str(cwd)], cwd=cwd,
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-3000:]
    return json.loads(done.stdout.strip().splitlines()[-1])


def scenario_rows(config: dict, cwd: pathlib.Path) -> pd.DataFrame:
    """The raw input columns of a scenario's rows, rebuilt from its config (the data are generated)."""
    from pipeline.config import parse_config
    from pipeline.data import load_dataset
    from pipeline.packaged import input_frame

    spec = parse_config(config, "test config")
    ds = load_dataset(spec.data, cwd, spec.task)
    return input_frame(ds, np.arange(ds.n_samples))


def test_every_stored_model_reproduces_the_held_out_predictions_in_a_fresh_process(store):
    from .conftest import store_configs

    rows = scenario_rows(store_configs()["second.yaml"], store["cwd"])
    found = fresh_process_check(store["uri"], store["runs"][1]["run_id"], rows, store["cwd"])
    assert sorted(f["fit"].split("/")[0] for f in found) == ["l1", "l1", "l2", "l2"]   # squared and huber
    assert all(f["exact"] and f["sklearn_exact"] and f["n"] > 0 for f in found), found


# ---------------------------------------------------------------- a CSV with text columns, two classes
def lots_frame(n: int = 90, seed: int = 4) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    site = rng.choice(["north", "south", "west"], size=n)
    x1, x2 = rng.normal(size=n).round(3), rng.normal(size=n).round(3)
    score = 1.2 * x1 - 0.8 * x2 + np.where(site == "south", 0.9, 0.0) + rng.normal(scale=0.7, size=n)
    return pd.DataFrame({"x1": x1, "site": site, "x2": x2, "organic": rng.random(n) < 0.5,
                         "grade": np.where(score > 0, "high", "low")})


@pytest.fixture(scope="module")
def lots():
    cwd = scratch_dir("penduel-models-")
    frame = lots_frame()
    frame.to_csv(cwd / "lots.csv", index=False)
    config = {"name": "lots-grade", "seed": 7, "data": {"kind": "csv", "path": "lots.csv", "target": "grade"},
              "losses": ["logistic", "hinge"], "families": {"l1": {"path": {"points": 6, "smallest_share": 0.05}},
                                                           "l2": {"path": {"points": 6}}},
              "selection": {"cv_folds": 3}, "stability": {"enabled": False},
              "tracking": {"register_as": "lots"}}
    (cwd / "lots.yaml").write_text(yaml.safe_dump(config))
    code, out, err = penduel(["run", "lots.yaml", "--quiet"], cwd)
    assert code == 0, err
    run_id = out.split("run id: ")[1].split()[0]
    return {"cwd": cwd, "uri": f"sqlite:///{cwd / 'mlflow.db'}", "run_id": run_id, "frame": frame}


def raw_lines(cwd: pathlib.Path, rows, name: str, drop: str | None = None, edit=None) -> pathlib.Path:
    """Rows of lots.csv copied as text (the same bytes the training read), optionally without a column
    or with one cell edited."""
    frame = pd.read_csv(cwd / "lots.csv", dtype=str, keep_default_na=False)
    part = frame.iloc[list(rows)].drop(columns=[c for c in (drop, "grade") if c])
    if edit:
        part.iloc[0, part.columns.get_loc(edit[0])] = edit[1]
    path = cwd / name
    part.to_csv(path, index=False)
    return path


def test_csv_models_reproduce_held_out_predictions_with_labels_in_a_fresh_process(lots):
    from pipeline.data.loaders import read_table

    rows = read_table(lots["cwd"] / "lots.csv", "csv").drop(columns=["grade"])   # parsed as training parsed it
    found = fresh_process_check(lots["uri"], lots["run_id"], rows, lots["cwd"])
    assert sorted(f["fit"] for f in found) == ["l1/hinge", "l1/logistic", "l2/hinge", "l2/logistic"]
    assert all(f["exact"] and f["sklearn_exact"] and f["labels"] for f in found), found


def test_predict_writes_both_families_side_by_side_with_run_id_and_model_version(lots):
    from mlflow.tracking import MlflowClient

    client = MlflowClient(lots["uri"])
    children = client.search_runs([client.get_run(lots["run_id"]).info.experiment_id],
                                  f"tags.mlflow.parentRunId = '{lots['run_id']}'")
    stored = {c.data.tags["penduel.family"] + "." + c.data.tags["penduel.loss"]:
              pd.read_csv(client.download_artifacts(c.info.run_id, "predictions.csv", str(lots["cwd"])),
                          float_precision="round_trip") for c in children}
    test_rows = stored["l1.logistic"]["row"].to_numpy()
    new = raw_lines(lots["cwd"], test_rows, "new.csv")
    code, out, err = penduel(["predict", lots["run_id"], "--data", new, "--output", "out.csv",
                              "--tracking-uri", lots["uri"]], lots["cwd"])
    assert code == 0, err
    got = pd.read_csv(lots["cwd"] / "out.csv", float_precision="round_trip")
    assert (got["run_id"] == lots["run_id"]).all() and list(got["row"]) == list(range(len(test_rows)))
    for key, frame in stored.items():
        assert np.array_equal(got[f"{key}.decision"].to_numpy(), frame["decision"].to_numpy()), key
        assert (got[f"{key}.label"].astype(str) == frame["y_pred"].astype(str)).all()
        assert set(got[f"{key}.model"]) == {f"lots-{key.replace('.', '-')} v1"}
    # probabilities only where the loss gives them: logistic, P(second class) = sigmoid(decision)
    assert {c for c in got.columns if c.endswith(".probability")} == {"l1.logistic.probability",
                                                                      "l2.logistic.probability"}
    p = got["l2.logistic.probability"].to_numpy()
    assert np.allclose(p, 1 / (1 + np.exp(-got["l2.logistic.decision"].to_numpy())), rtol=1e-12)
    # a child run id selects that model only; --family narrows an execution to one family
    code, out, err = penduel(["predict", children[0].info.run_id, "--data", new, "--tracking-uri", lots["uri"]],
                             lots["cwd"])
    assert code == 0, err and out.count(".decision") == 1
    code, out, err = penduel(["predict", "--experiment", "lots-grade", "--family", "l2", "--data", new,
                              "--tracking-uri", lots["uri"]], lots["cwd"])
    assert code == 0 and "l1." not in out.splitlines()[0] and "l2.hinge.decision" in out, err


@pytest.mark.parametrize("case, needle", [     # two in the fast suite, all in make test-all (~5 s each)
    ("missing", "'x2', which are missing"),
    ("unseen", "'east' at data row 1, a value not seen"),
    pytest.param("type", "was numeric in the training data, but data row 1 holds 'heavy'", marks=pytest.mark.slow),
    pytest.param("run", "is not in the tracking store", marks=pytest.mark.slow),
    pytest.param("suffix", "should end in", marks=pytest.mark.slow),
])
def test_predict_refuses_bad_rows_with_exit_2(lots, case, needle):
    cwd = lots["cwd"]
    data = {"missing": lambda: raw_lines(cwd, range(5), "m.csv", drop="x2"),
            "unseen": lambda: raw_lines(cwd, range(5), "u.csv", edit=("site", "east")),
            "type": lambda: raw_lines(cwd, range(5), "t.csv", edit=("x1", "heavy")),
            "run": lambda: raw_lines(cwd, range(5), "r.csv"),
            "suffix": lambda: cwd / "lots.yaml"}[case]()
    run_id = "0" * 32 if case == "run" else lots["run_id"]
    code, _, err = penduel(["predict", run_id, "--data", data, "--tracking-uri", lots["uri"]], cwd)
    assert code == 2, err
    assert needle in " ".join(err.split()) and "Traceback" not in err, err


def test_unseen_level_as_reference_when_asked(lots):
    new = raw_lines(lots["cwd"], range(4), "u2.csv", edit=("site", "east"))
    code, out, err = penduel(["predict", lots["run_id"], "--data", new, "--unseen", "reference",
                              "--tracking-uri", lots["uri"]], lots["cwd"])
    assert code == 0, err
    # 'east' is encoded like the reference level 'north': the same decision as the row with 'north'
    same = raw_lines(lots["cwd"], range(4), "u3.csv", edit=("site", "north"))
    code2, out2, _ = penduel(["predict", lots["run_id"], "--data", same, "--tracking-uri", lots["uri"]], lots["cwd"])
    assert code2 == 0 and out == out2


def test_registered_versions_sklearn_flavour_and_experiment_kind(lots):
    import mlflow
    from mlflow.tracking import MlflowClient

    client = MlflowClient(lots["uri"])
    versions = client.search_model_versions("name = 'lots-l2-logistic'")
    assert [str(v.version) for v in versions] == ["1"] and versions[0].tags["penduel.family"] == "l2"
    exp = client.get_experiment_by_name("lots-grade")
    assert exp.tags["mlflow.experimentKind"] == "custom_model_development"   # mlflow's UI tag values
    mlflow.set_tracking_uri(lots["uri"])
    rows = lots["frame"].drop(columns=["grade"]).head(6)
    by_loss = {}
    for child in client.search_runs([exp.experiment_id], f"tags.mlflow.parentRunId = '{lots['run_id']}'"):
        by_loss[child.data.tags["penduel.loss"] + "/" + child.data.tags["penduel.family"]] = \
            mlflow.sklearn.load_model(f"runs:/{child.info.run_id}/model")
    logistic, hinge = by_loss["logistic/l1"], by_loss["hinge/l1"]
    proba = logistic.predict_proba(rows)
    assert proba.shape == (6, 2) and np.allclose(proba.sum(axis=1), 1.0)
    assert list(logistic.classes_) == ["high", "low"]
    assert (logistic.predict(rows) == np.where(proba[:, 1] > 0.5, "low", "high")).all()
    with pytest.raises(AttributeError, match="no probabilities"):
        hinge.predict_proba(rows)


def test_starter_configs_for_one_data_file_share_one_tracking_experiment(lots):
    cwd = lots["cwd"]
    for name in ("first-try.yaml", "second-try.yaml"):
        done = run_cli(["init", "--data", "lots.csv", "--target", "grade", "--output", name], cwd)
        assert done.returncode == 0, done.stderr
    names = {yaml.safe_load((cwd / n).read_text())["tracking"]["experiment_name"]
             for n in ("first-try.yaml", "second-try.yaml")}
    assert names == {"lots"}


def test_readme_warns_that_loading_a_model_runs_code():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    assert "penduel predict" in text and "trusted" in text


@pytest.mark.slow
def test_served_model_answers_like_penduel_predict(lots):
    """`mlflow models serve` (local environment, no new one built) on a free loopback port; a real HTTP
    request with text, numeric and true/false columns; the answer equals `penduel predict` exactly."""
    import os
    import signal
    import time
    import urllib.error
    import urllib.request

    from mlflow.tracking import MlflowClient

    from pipeline.data.loaders import read_table

    from .conftest import free_port

    cwd = lots["cwd"]
    client = MlflowClient(lots["uri"])
    child = next(c for c in client.search_runs([client.get_run(lots["run_id"]).info.experiment_id],
                                               f"tags.mlflow.parentRunId = '{lots['run_id']}'")
                 if c.data.tags["penduel.family"] == "l2" and c.data.tags["penduel.loss"] == "logistic")
    new = raw_lines(cwd, range(10, 30), "serve.csv")
    code, out, err = penduel(["predict", lots["run_id"], "--data", new, "--family", "l2", "--loss", "logistic",
                              "--output", "served-ours.csv", "--tracking-uri", lots["uri"]], cwd)
    assert code == 0, err
    ours = pd.read_csv(cwd / "served-ours.csv", float_precision="round_trip")
    rows = read_table(new, "csv")      # the file as penduel read it
    port = free_port()
    log = cwd / "serve.log"
    with open(log, "wb") as fh:
        proc = subprocess.Popen([sys.executable, "-m", "mlflow", "models", "serve", "-m",
                                 f"runs:/{child.info.run_id}/model", "--env-manager", "local", "-h", "127.0.0.1",
                                 "-p", str(port)], cwd=cwd, stdout=fh, stderr=subprocess.STDOUT,
                                env=dict(os.environ, MLFLOW_TRACKING_URI=lots["uri"],   # it starts uvicorn by name
                                         PATH=os.pathsep.join([str(pathlib.Path(sys.executable).parent),
                                                               os.environ.get("PATH", "")])),
                                start_new_session=True)
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 240
        while True:
            try:
                with urllib.request.urlopen(f"{base}/ping", timeout=5) as r:
                    if r.status == 200:
                        break
            except (urllib.error.URLError, ConnectionError, TimeoutError):
                pass
            assert proc.poll() is None and time.monotonic() < deadline, log.read_text()[-3000:]
            time.sleep(0.5)
        body = {"dataframe_split": json.loads(rows.to_json(orient="split", index=False, double_precision=15))}
        body["dataframe_split"]["data"] = rows.astype(object).values.tolist()   # exact floats, real bools
        req = urllib.request.Request(f"{base}/invocations", data=json.dumps(body).encode(),
                                     headers={"Content-Type": "application/json"})
        with urllib.request.urlopen(req, timeout=60) as r:
            answer = pd.DataFrame(json.load(r)["predictions"])
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGTERM)      # the server's workers share its process group
            try:
                proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)
                proc.wait()
    assert len(answer) == len(ours) == 20
    assert np.array_equal(answer["decision"].to_numpy(float), ours["l2.logistic.decision"].to_numpy())
    assert np.array_equal(answer["probability"].to_numpy(float), ours["l2.logistic.probability"].to_numpy())
    assert list(answer["label"]) == list(ours["l2.logistic.label"])
