"""What a store, a cache or a process can do to a run: forged stores, tampered cache entries, a store
killed during its first creation, worker failures and left-behind processes, names from data that a
plotting library or a spreadsheet would misread, and the shape of the terminal output."""
from __future__ import annotations

import json
import os
import pathlib
import re
import signal
import socket
import sqlite3
import subprocess
import sys
import time

import numpy as np
import pandas as pd
import psutil
import pytest
from mlflow.tracking import MlflowClient

from .conftest import free_port, penduel, run_cli

TINY = ("name: tiny-safety\nseed: 1\ndata: {kind: scenario, name: spectral_bands, n_samples: 48, n_features: 8, "
        "n_informative: 2}\nstability: {enabled: false}\nfamilies: {l1: {path: {points: 5}}, l2: {path: {points: 5}}}\n"
        "selection: {cv_folds: 3}\n")


def _table(stdout: str) -> list[str]:
    """The summary table without its timing column."""
    lines = [ln for ln in stdout.splitlines() if re.match(r"^(squared|absolute|huber|logistic)", ln)]
    return [ln.rsplit(None, 1)[0] for ln in lines]


# ---------------------------------------------------------------- paths from a store are never trusted
def test_a_forged_run_cannot_make_report_write_outside_the_reports_folder(store, tmp_path):
    from pipeline.stored_runs import read_payload
    payload = read_payload(MlflowClient(tracking_uri=store["uri"]), store["runs"][0]["run_id"])
    outside = tmp_path / "outside"
    payload["name"] = "../../../outside/evil"
    payload["config"]["report"]["directory"] = str(outside)
    forged_store = f"sqlite:///{tmp_path / 'team.db'}"
    client = MlflowClient(tracking_uri=forged_store)
    exp = client.create_experiment("team", artifact_location=str(tmp_path / "artifacts"))
    run = client.create_run(exp, tags={"penduel.kind": "execution"})
    (tmp_path / "report_data.json").write_text(json.dumps(payload), encoding="utf-8")
    client.log_artifact(run.info.run_id, str(tmp_path / "report_data.json"))
    client.set_terminated(run.info.run_id, "FINISHED")
    work = tmp_path / "colleague"
    work.mkdir()
    code, out, err = penduel(["report", "--latest", "--tracking-uri", forged_store], work)
    assert code == 0, err
    written = pathlib.Path(re.search(r"report: (\S+)", out).group(1)).resolve()
    assert written.is_relative_to((work / "reports").resolve())
    assert not outside.exists()
    assert ".." not in written.relative_to((work / "reports").resolve()).parts


# ---------------------------------------------------------------- the cache verifies what it reuses
def _entries(folder: pathlib.Path) -> list[pathlib.Path]:
    return sorted(p for p in (folder / ".penduel-cache").rglob("*.npz"))


def _rewrite(path: pathlib.Path, change) -> None:
    """Change an entry's arrays and re-seal its digest, so only the type or shape checks can catch it."""
    from pipeline.cache import content_digest
    with np.load(path, allow_pickle=False) as data:
        arrays = {k: data[k] for k in data.files}
    change(arrays)
    check = json.loads(bytes(arrays["__check__"]).decode())
    check["digest"] = content_digest(arrays)
    arrays["__check__"] = np.frombuffer(json.dumps(check).encode(), dtype=np.uint8)
    with open(path, "wb") as fh:
        np.savez(fh, **arrays)


def _edit_value(path):          # an edited number, digest left alone
    with np.load(path, allow_pickle=False) as data:
        arrays = {k: data[k] for k in data.files}
    arrays["eval_loss"] = arrays["eval_loss"] * 0.5
    with open(path, "wb") as fh:
        np.savez(fh, **arrays)


def _shorten(path):
    _rewrite(path, lambda a: a.update(eval_loss=a["eval_loss"][:-1]))


def _wrong_type(path):
    def change(a):
        meta = json.loads(bytes(a["__meta__"]).decode())
        meta["fit_seconds"] = {"plain": "fast"}
        a["__meta__"] = np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8)
    _rewrite(path, change)


def _folder(path):
    path.unlink()
    path.mkdir()


TAMPERING = {"edited value": _edit_value, "shortened array": _shorten, "wrong field type": _wrong_type,
             "entry replaced by a folder": _folder, "another entry copied over it": None}


# one kind of tampering in the fast suite, every kind in make test-all (~5 s each)
@pytest.mark.parametrize("how", [h if h == "edited value" else pytest.param(h, marks=pytest.mark.slow)
                                 for h in TAMPERING])
def test_a_tampered_cache_entry_is_dropped_refitted_and_noted(how, tmp_path):
    (tmp_path / "experiment.yaml").write_text(TINY, encoding="utf-8")
    code, first, err = penduel(["run", "experiment.yaml", "--quiet"], tmp_path)
    assert code == 0, err
    entries = _entries(tmp_path)
    assert len(entries) == 8                       # (3 folds + final) × 2 families
    if TAMPERING[how] is None:
        entries[0].write_bytes(entries[1].read_bytes())
    else:
        TAMPERING[how](entries[0])
    code, second, err = penduel(["run", "experiment.yaml", "--quiet"], tmp_path)
    assert code == 0, err
    assert "note: dropped 1 cache entry" in second and "failed verification" in second
    assert "reused 7 of 8 finished fit task(s)" in second
    assert _table(second) == _table(first)         # the refitted entry gives the original numbers
    code, third, err = penduel(["run", "experiment.yaml", "--quiet"], tmp_path)
    assert "reused 8 of 8" in third and "dropped" not in third


# ---------------------------------------------------------------- a store killed during its first creation
def test_a_creation_killed_midway_leaves_no_store_behind(tmp_path, monkeypatch):
    import pipeline.store as store_module

    def killed(path):            # the process dies after the schema was started under the temporary name
        tmp = path.with_name(f".{path.name}.creating-999999999")
        sqlite3.connect(tmp).execute("create table _alembic_tmp_latest_metrics (x)").connection.commit()
        raise KeyboardInterrupt
    monkeypatch.setattr(store_module, "_create", killed)
    db = tmp_path / "new.db"
    with pytest.raises(KeyboardInterrupt):
        store_module.ensure_store(f"sqlite:///{db}")
    assert not db.exists()
    monkeypatch.undo()
    (tmp_path / "experiment.yaml").write_text(TINY, encoding="utf-8")
    code, out, err = penduel(["run", "experiment.yaml", "--quiet", "--tracking-uri", f"sqlite:///{db}"], tmp_path)
    assert code == 0, err
    assert not list(tmp_path.glob(".new.db.creating-*"))     # the dead creation's leftover was removed


def test_a_half_made_store_without_runs_is_repaired(tmp_path):
    db = tmp_path / "mlflow.db"
    con = sqlite3.connect(db)       # what an older version left after a kill during its first migration
    con.execute("create table alembic_version (version_num varchar(32))")
    con.execute("create table _alembic_tmp_latest_metrics (x)")
    con.commit()
    con.close()
    (tmp_path / "experiment.yaml").write_text(TINY, encoding="utf-8")
    code, out, err = penduel(["run", "experiment.yaml", "--quiet"], tmp_path)
    assert code == 0, err
    assert "half-made" in err and list(tmp_path.glob("mlflow.db.broken-*"))


@pytest.mark.slow
@pytest.mark.parametrize("after", [0.5, 1.5, 3.0, 4.5])
def test_killing_the_first_run_at_any_moment_leaves_a_usable_store(after, tmp_path):
    (tmp_path / "experiment.yaml").write_text(TINY, encoding="utf-8")
    env = dict(os.environ, PYTHONWARNINGS="ignore")
    proc = subprocess.Popen([sys.executable, "-m", "pipeline.cli", "run", "experiment.yaml", "--quiet"],
                            cwd=tmp_path, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    time.sleep(after)
    proc.kill()
    proc.wait()
    done = run_cli(["run", "experiment.yaml", "--quiet"], tmp_path)
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr


# ---------------------------------------------------------------- clean processes
def _die_once(task, shared=None):
    marker = pathlib.Path(task[1]) / f"died-{task[0]}"
    if task[0] == 2 and not marker.exists():
        marker.touch()
        os._exit(3)                 # the worker process dies, as with an out-of-memory kill
    return task[0] * 10


def _always_die(task, shared=None):
    if task[0] == 2:
        os._exit(3)
    return task[0]


def test_a_dead_worker_is_retried_once():
    from pipeline.execution import run_tasks
    import tempfile
    with tempfile.TemporaryDirectory() as tmp:
        tasks = [(i, tmp) for i in range(4)]
        assert run_tasks(_die_once, tasks, backend="processes", n_jobs=2) == [0, 10, 20, 30]


def test_a_worker_dying_twice_is_reported_in_one_paragraph_naming_the_task():
    from pipeline.execution import TaskFailed, run_tasks
    with pytest.raises(TaskFailed) as info:
        run_tasks(_always_die, [(i,) for i in range(4)], backend="processes", n_jobs=2)
    text = info.value.paragraph()
    assert "failed twice" in text and "\n" not in text and "fit task" in text


def test_a_failing_fit_task_ends_the_run_with_one_paragraph(tmp_path, monkeypatch):
    import pipeline.runner as runner

    def broken(task, shared):
        raise RuntimeError("injected failure")
    monkeypatch.setattr(runner, "run_fit", broken)
    (tmp_path / "experiment.yaml").write_text(TINY + "cache: {enabled: false}\n", encoding="utf-8")
    code, out, err = penduel(["run", "experiment.yaml", "--quiet"], tmp_path)
    assert code == 1 and "Traceback" not in err
    assert re.search(r"fit task 1 \(\S+\) failed twice.*RuntimeError: injected failure", " ".join(err.split()))
    client = MlflowClient(tracking_uri=f"sqlite:///{tmp_path / 'mlflow.db'}")
    (run,) = client.search_runs([client.get_experiment_by_name("tiny-safety").experiment_id])
    assert run.info.status == "FAILED" and "injected failure" in run.data.tags["penduel.error"]


def _descendants(pid: int) -> list[psutil.Process]:
    try:
        return psutil.Process(pid).children(recursive=True)
    except psutil.NoSuchProcess:
        return []


def _all_gone(procs, timeout: float) -> bool:
    _, alive = psutil.wait_procs(procs, timeout=timeout)
    return not [p for p in alive if p.is_running() and p.status() != psutil.STATUS_ZOMBIE]


@pytest.mark.slow
def test_workers_end_when_their_run_is_killed(tmp_path):
    config = TINY.replace("n_samples: 48", "n_samples: 400").replace("stability: {enabled: false}",
                                                                     "stability: {n_resamples: 200}")
    (tmp_path / "experiment.yaml").write_text(config + "execution: {backend: processes, n_jobs: 2}\n")
    proc = subprocess.Popen([sys.executable, "-m", "pipeline.cli", "run", "experiment.yaml", "--quiet"],
                            cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    workers = []
    while time.monotonic() < deadline and len(workers) < 2:
        time.sleep(0.5)
        workers = _descendants(proc.pid)
    assert len(workers) >= 2, "the run never started its workers"
    proc.kill()                   # kill -9: the run has no chance to stop them itself
    proc.wait()
    assert _all_gone(workers, timeout=15)


@pytest.mark.slow
def test_ui_stops_its_whole_process_group_on_sigterm(store, tmp_path):
    port = free_port()
    log = open(tmp_path / "ui.log", "wb")
    proc = subprocess.Popen([sys.executable, "-m", "pipeline.cli", "ui", "--tracking-uri", store["uri"],
                             "--port", str(port)], cwd=tmp_path, stdout=log, stderr=subprocess.STDOUT)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        with socket.socket() as s:
            if s.connect_ex(("127.0.0.1", port)) == 0:
                break
        time.sleep(0.5)
    else:
        proc.kill()
        raise AssertionError((tmp_path / "ui.log").read_text()[-2000:])
    time.sleep(2)
    children = _descendants(proc.pid)
    assert children, "the server runs in child processes"
    proc.send_signal(signal.SIGTERM)
    assert proc.wait(timeout=30) == 143
    assert _all_gone(children, timeout=15)
    with socket.socket() as s:
        assert s.connect_ex(("127.0.0.1", port)) != 0        # the port is free again


# ---------------------------------------------------------------- output a user reads
def test_quiet_prints_only_notes_table_and_paths(tmp_path):
    frame = pd.DataFrame(np.random.default_rng(0).standard_normal((40, 3)), columns=["a", "b", "y"])
    frame.insert(0, "", range(40))                 # an unnamed row index saved with the data
    (tmp_path / "data.csv").write_text(frame.to_csv(index=False), encoding="utf-8")
    (tmp_path / "experiment.yaml").write_text(
        "name: quiet\ndata: {kind: csv, path: data.csv, target: y}\nstability: {enabled: false}\n"
        "families: {l1: {path: {points: 4}}, l2: {path: {points: 4}}}\nselection: {cv_folds: 3}\n", encoding="utf-8")
    code, out, err = penduel(["run", "experiment.yaml", "--quiet"], tmp_path)
    assert code == 0 and err.strip() == "", err
    lines = out.strip().splitlines()
    first_table = next(i for i, ln in enumerate(lines) if ln.startswith(("every interval", "loss ")))
    assert all(ln.startswith("note: ") for ln in lines[:first_table])
    assert any("unnamed first column" in ln and "row index" in ln for ln in lines[:first_table])
    assert lines[-2].startswith("report: ") and lines[-1].startswith("run id: ")
    table = lines[first_table:-2]
    # the summary table: its one stated level, header, rows and the verdict line per loss
    assert all(ln.startswith(("every interval", "loss ", "---", "squared", "verdict (squared)")) or not ln.strip()
               for ln in table), table


def test_version_and_sigterm_exit_status(tmp_path, monkeypatch):
    import pipeline.runner as runner
    from importlib import metadata
    done = run_cli(["--version"], tmp_path)
    assert done.returncode == 0 and done.stdout.strip() == f"penduel {metadata.version('penduel')}"

    def terminated(*args, **kwargs):
        os.kill(os.getpid(), signal.SIGTERM)
        time.sleep(5)
    monkeypatch.setattr(runner, "run_experiment", terminated)
    (tmp_path / "experiment.yaml").write_text(TINY, encoding="utf-8")
    code, out, err = penduel(["run", "experiment.yaml", "--quiet"], tmp_path)
    assert code == 143 and "KILLED" in err
    client = MlflowClient(tracking_uri=f"sqlite:///{tmp_path / 'mlflow.db'}")
    (run,) = client.search_runs([e.experiment_id for e in client.search_experiments()])
    assert run.info.status == "KILLED"


@pytest.mark.slow   # ~10 s; make test-all
def test_paths_are_relative_to_the_config_folder(tmp_path):
    project = tmp_path / "project"
    project.mkdir()
    (project / "experiment.yaml").write_text(TINY, encoding="utf-8")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    done = run_cli(["run", "../project/experiment.yaml", "--quiet"], elsewhere)
    assert done.returncode == 0, done.stderr
    assert (project / "mlflow.db").is_file() and (project / ".penduel-cache").is_dir()
    assert pathlib.Path(re.search(r"report: (\S+)", done.stdout).group(1)).is_relative_to(project / "reports")
    assert not list(elsewhere.iterdir())


# ---------------------------------------------------------------- names from data
LONG = "very_long_sensor_name_" + "x" * 228            # 250 characters
HOSTILE_NAMES = ["$\\undefinedmacro{x}$", LONG, "income_$_2020_$", "=HYPERLINK(\"http://x\")", "@sum", "-minus"]


def _names_run(folder: pathlib.Path) -> tuple[str, str]:
    rng = np.random.default_rng(4)
    X = rng.standard_normal((80, len(HOSTILE_NAMES)))
    frame = pd.DataFrame(X, columns=HOSTILE_NAMES)
    frame["y"] = 2 * X[:, 0] + 1.5 * X[:, 1] - X[:, 2] + X[:, 3] + 0.1 * rng.standard_normal(80)
    (folder / "data.csv").write_text(frame.to_csv(index=False), encoding="utf-8")
    (folder / "experiment.yaml").write_text(
        "name: names\ndata: {kind: csv, path: data.csv, target: y}\nstability: {n_resamples: 6}\n"
        "families: {l1: {path: {points: 6}}, l2: {path: {points: 6}}}\nselection: {cv_folds: 3}\n", encoding="utf-8")
    code, out, err = penduel(["run", "experiment.yaml", "--quiet"], folder)
    assert code == 0, err
    return out, re.search(r"run id: ([0-9a-f]{32})", out).group(1)


def test_names_from_data_never_break_figures_or_spreadsheets(tmp_path):
    import html as html_lib
    out, run_id = _names_run(tmp_path)
    report = pathlib.Path(re.search(r"report: (\S+)", out).group(1)).read_text(encoding="utf-8")
    for name in HOSTILE_NAMES[:3]:
        assert html_lib.escape(name) in report          # shown literally in the tables
    assert report.count("<img") >= 4                    # every figure was drawn
    client = MlflowClient(tracking_uri=f"sqlite:///{tmp_path / 'mlflow.db'}")
    child = next(c for c in client.search_runs([client.get_run(run_id).info.experiment_id],
                                               filter_string=f"tags.mlflow.parentRunId = '{run_id}'")
                 if c.data.params["family"] == "l1")
    text = pathlib.Path(client.download_artifacts(child.info.run_id, "coefficients.csv", str(tmp_path))).read_text()
    for name in ("=HYPERLINK", "@sum", "-minus"):
        assert f"'{name}" in text and not re.search(rf"^{re.escape(name)}", text, re.M)


def test_figure_labels_are_literal_and_short():
    import matplotlib.pyplot as plt
    from pipeline.report.plots import encode_png, plain_text
    label = plain_text("$\\undefinedmacro{x}$")
    assert label == "\\$\\undefinedmacro{x}\\$"
    fig, ax = plt.subplots()
    ax.plot([0, 1], [0, 1], label=label)
    ax.legend()
    ax.set_title(plain_text("income_$_2020_$"))
    assert encode_png(fig)                               # drawn: no math parsing of the name
    short = plain_text(LONG)
    assert len(short) == 40 and short.endswith("…")


@pytest.mark.slow
def test_report_with_hostile_names_renders_in_a_browser(tmp_path):
    from .test_browser import SCREENSHOTS, Page, chromium_binary
    if chromium_binary() is None:
        pytest.skip("chromium is not installed (Debian: apt-get install -y chromium)")
    out, _ = _names_run(tmp_path)
    report = pathlib.Path(re.search(r"report: (\S+)", out).group(1))
    SCREENSHOTS.mkdir(parents=True, exist_ok=True)
    with Page(chromium_binary()) as page:
        page.open(report.as_uri())
        width = page.evaluate("document.documentElement.scrollWidth")
        view = page.evaluate("window.innerWidth")
        page.screenshot(SCREENSHOTS / "hostile-names.png")
    assert width <= view + 2, f"a long name widened the page to {width} px (window {view} px)"


def test_polynomial_terms_keep_names_with_spaces_readable():
    from pipeline.features.basic import PolynomialTerms
    X = np.random.default_rng(0).standard_normal((10, 2))
    names = PolynomialTerms(2).fit(X).get_feature_names_out(["net income", "a"])
    assert names == ["(net income)^2", "(net income)×a", "a^2"]


def test_tracking_library_usage_reports_are_off_unless_the_user_chose(monkeypatch):
    from pipeline.cli import main

    monkeypatch.delenv("MLFLOW_DISABLE_TELEMETRY", raising=False)
    assert main(["scenarios"]) == 0
    assert os.environ["MLFLOW_DISABLE_TELEMETRY"] == "true"
    monkeypatch.setenv("MLFLOW_DISABLE_TELEMETRY", "false")     # the user's own setting stands
    assert main(["scenarios"]) == 0
    assert os.environ["MLFLOW_DISABLE_TELEMETRY"] == "false"
