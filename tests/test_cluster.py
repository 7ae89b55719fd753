"""A Dask cluster as a team runs it: `dask scheduler` and two `dask worker` programs, separate from penduel.

The same config run on the local backend and on that cluster (execution.backend: dask, its address)
gives the same numbers bit for bit: report_data.json holds every number of the report, written with
Python's shortest round-trip float text, so equal text is equal bits. Timings are left out.
"""
from __future__ import annotations

import json
import os
import pathlib
import signal
import socket
import subprocess
import sys
import time

import pytest
import yaml

from .conftest import CONFIGS, run_cli, scratch_dir

DASK = pathlib.Path(sys.executable).parent / "dask"


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def wait_for_port(port: int, procs, seconds: float = 90.0) -> None:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        for p in procs:
            assert p.poll() is None, f"{p.args} exited with {p.returncode}"
        with socket.socket() as s:
            if s.connect_ex(("127.0.0.1", port)) == 0:
                return
        time.sleep(0.2)
    raise AssertionError(f"nothing listens on port {port} after {seconds} s")


@pytest.fixture(scope="module")
def cluster():
    """tcp://127.0.0.1:PORT of a scheduler with two single-thread workers, all separate programs."""
    port = free_port()
    address = f"tcp://127.0.0.1:{port}"
    logs = scratch_dir("penduel-cluster-")
    env = dict(os.environ, PYTHONWARNINGS="ignore")

    def start(*args, log):
        return subprocess.Popen([str(DASK), *args], stdout=subprocess.DEVNULL, stderr=open(logs / log, "w"),
                                env=env, cwd=logs, start_new_session=True)

    procs = [start("scheduler", "--host", "127.0.0.1", "--port", str(port), "--no-dashboard", log="scheduler.log")]
    try:
        wait_for_port(port, procs)
        procs += [start("worker", address, "--nthreads", "1", "--no-dashboard", "--name", f"w{i}",
                        log=f"worker{i}.log") for i in range(2)]
        from distributed import Client

        with Client(address, timeout=60) as client:
            client.wait_for_workers(2, timeout=120)
            assert len(client.scheduler_info()["workers"]) == 2
        yield address
    finally:
        for p in reversed(procs):   # workers first, then the scheduler; each by its own process group
            if p.poll() is None:
                os.killpg(p.pid, signal.SIGTERM)
        for p in procs:
            try:
                p.wait(timeout=30)
            except subprocess.TimeoutExpired:
                os.killpg(p.pid, signal.SIGKILL)


def without_timings(obj):
    if isinstance(obj, dict):
        return {k: without_timings(v) for k, v in obj.items() if "seconds" not in k}
    if isinstance(obj, list):
        return [without_timings(v) for v in obj]
    return obj


def run_numbers(tmp: pathlib.Path, execution: dict) -> dict:
    config = yaml.safe_load((CONFIGS / "tiny.yaml").read_text())
    config.update(execution=execution, cache={"enabled": False}, stability={"n_resamples": 6})
    path = tmp / "experiment.yaml"
    path.write_text(yaml.safe_dump(config))
    done = run_cli(["run", path, "--quiet"], cwd=tmp)
    assert done.returncode == 0, done.stderr
    data = next((tmp / "reports").rglob("report_data.json"))
    payload = json.loads(data.read_text())
    payload.pop("config")         # the execution section differs on purpose,
    payload.pop("config_hash")    # and so does the hash of the config
    return without_timings(payload)


@pytest.mark.slow
def test_separate_scheduler_and_workers_give_the_local_numbers(cluster):
    local = run_numbers(scratch_dir("penduel-local-"), {"backend": "local"})
    remote = run_numbers(scratch_dir("penduel-remote-"),
                         {"backend": "dask", "scheduler_address": cluster, "n_jobs": 2})
    assert len(json.dumps(local)) > 5000             # a real payload: families, CV tables, stability
    assert remote["families"] and remote["stability"]
    assert json.dumps(remote, sort_keys=True) == json.dumps(local, sort_keys=True)


@pytest.mark.slow
def test_an_address_with_no_scheduler_is_a_user_mistake():
    tmp = scratch_dir("penduel-noscheduler-")
    config = yaml.safe_load((CONFIGS / "tiny.yaml").read_text())
    config.update(execution={"backend": "dask", "scheduler_address": f"tcp://127.0.0.1:{free_port()}"},
                  cache={"enabled": False})
    (tmp / "experiment.yaml").write_text(yaml.safe_dump(config))
    done = run_cli(["run", tmp / "experiment.yaml", "--quiet"], cwd=tmp)
    assert done.returncode == 2, done.stderr
    assert "execution.scheduler_address" in done.stderr and "Traceback" not in done.stderr
