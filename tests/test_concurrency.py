"""Several executions share one SQLite tracking store; runs of dead processes are closed."""
from __future__ import annotations

import os
import subprocess
import sys

import pytest
from mlflow.tracking import MlflowClient

from pipeline.config import load_config
from pipeline.tracking import ExecutionLog, LockRetrying, mark_abandoned_runs

from .conftest import CONFIGS, scratch_dir


class _Flaky:
    def __init__(self, failures, message):
        self.failures, self.message, self.calls = failures, message, 0

    def log_metric(self, *args):
        self.calls += 1
        if self.calls <= self.failures:
            raise RuntimeError(self.message)
        return args


def test_locked_store_calls_are_retried():
    flaky = _Flaky(3, "(sqlite3.OperationalError) database is locked")
    assert LockRetrying(flaky, first_wait=0.001).log_metric("r", "m", 1.0) == ("r", "m", 1.0)
    assert flaky.calls == 4


def test_other_errors_and_endless_locks_are_not_hidden():
    flaky = _Flaky(1, "no such run")
    with pytest.raises(RuntimeError, match="no such run"):
        LockRetrying(flaky, first_wait=0.001).log_metric("r")
    assert flaky.calls == 1
    stuck = _Flaky(100, "database is locked")
    with pytest.raises(RuntimeError, match="locked"):
        LockRetrying(stuck, attempts=3, first_wait=0.001).log_metric("r")
    assert stuck.calls == 3


def _dead_pid() -> int:
    done = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    return int(done.stdout)


def test_abandoned_running_runs_are_marked_killed_live_ones_kept(monkeypatch):
    spec, _ = load_config(CONFIGS / "tiny.yaml")
    folder = scratch_dir("penduel-abandoned-")
    monkeypatch.chdir(folder)             # the store's artifacts (./mlruns) land here, not in the checkout
    uri = f"sqlite:///{folder / 'store.db'}"
    with ExecutionLog(spec, uri) as live:
        client = MlflowClient(tracking_uri=uri)
        # A run left RUNNING by a process that no longer exists (as after SIGKILL), with one child.
        tags = {**client.get_run(live.run_id).data.tags, "penduel.pid": str(_dead_pid())}
        tags = {k: v for k, v in tags.items() if not k.startswith("mlflow.")}
        dead = client.create_run(live.experiment_id, tags=tags).info.run_id
        child = client.create_run(live.experiment_id, tags={"mlflow.parentRunId": dead}).info.run_id
        other = client.create_run(live.experiment_id, tags={**tags, "penduel.config_hash": "0" * 16}).info.run_id
        assert mark_abandoned_runs(client, live.experiment_id, spec.config_hash()) == [dead]
        assert client.get_run(dead).info.status == "KILLED"
        assert client.get_run(child).info.status == "KILLED"
        assert client.get_run(other).info.status == "RUNNING"        # another config: not ours to judge
        assert client.get_run(live.run_id).info.status == "RUNNING"  # this process is alive
    assert client.get_run(live.run_id).info.status == "FINISHED"


@pytest.mark.slow   # ~18 s; make test-all (test_four_concurrent_executions is slow too)
@pytest.mark.parametrize("n_runs", [2])
def test_concurrent_executions_share_one_new_store(n_runs):
    tmp_path = scratch_dir("penduel-concurrent-")       # tmpfs: the store's fsyncs do not decide the time
    store = tmp_path / "shared.db"
    # tiny.yaml with 4 resamples: the stability logging stays, fewer fits keep the writers' phases close.
    config = tmp_path / "tiny.yaml"
    config.write_text((CONFIGS / "tiny.yaml").read_text() + "stability: {n_resamples: 4}\n")
    env = dict(os.environ, PYTHONWARNINGS="ignore")
    procs = []
    for i in range(n_runs):
        cwd = tmp_path / f"w{i}"
        cwd.mkdir()
        procs.append(subprocess.Popen([sys.executable, "-m", "pipeline.cli", "run", str(config),
                                       "--quiet", "--tracking-uri", f"sqlite:///{store}"], cwd=cwd, env=env,
                                      stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True))
    outputs = [p.communicate(timeout=600) for p in procs]
    for p, (out, err) in zip(procs, outputs):
        assert p.returncode == 0, err
    client = MlflowClient(tracking_uri=f"sqlite:///{store}")
    (exp,) = [e for e in client.search_experiments() if e.name == "tiny-bands"]
    parents = client.search_runs([exp.experiment_id], filter_string="tags.`penduel.kind` = 'execution'")
    assert len(parents) == n_runs and {r.info.status for r in parents} == {"FINISHED"}
    for parent in parents:
        children = client.search_runs([exp.experiment_id],
                                      filter_string=f"tags.mlflow.parentRunId = '{parent.info.run_id}'")
        assert sorted(c.data.params["family"] for c in children) == ["l1", "l2"]
        assert all(c.info.status == "FINISHED" and "test_rmse" in c.data.metrics for c in children)
    printed = {out.split("run id: ")[1].strip() for out, _ in outputs}
    assert printed == {r.info.run_id for r in parents}


@pytest.mark.slow
def test_four_concurrent_executions():
    test_concurrent_executions_share_one_new_store(4)
