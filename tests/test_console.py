"""The `penduel` command's way out (`cli.console`): its exit status is the verb's, and the exit handlers run
before it leaves (worker processes stopped, temporary folders removed, output flushed), though it skips the
interpreter's teardown of the loaded libraries."""
from __future__ import annotations

import os
import pathlib
import subprocess
import sys
import uuid

import psutil

from tests.conftest import scratch_dir

TINY_PROCESSES = ("name: tiny-console\nseed: 1\ndata: {kind: scenario, name: spectral_bands, n_samples: 60, "
                  "n_features: 8, n_informative: 2}\nstability: {n_resamples: 4}\nlosses: [squared]\n"
                  "families: {l1: {path: {points: 5}}, l2: {path: {points: 5}}}\nselection: {cv_folds: 3}\n"
                  "execution: {backend: processes, n_jobs: 2}\n")


def _command(args, cwd, env=None):
    return subprocess.run([sys.executable, "-m", "pipeline.cli", *args], cwd=cwd, capture_output=True, text=True,
                          timeout=300, env=env)


def test_exit_status_is_the_verbs_own(tmp_path):
    assert _command(["--help"], tmp_path).returncode == 0
    usage = _command(["run"], tmp_path)               # argparse: a required argument is missing
    assert usage.returncode == 2 and "usage:" in usage.stderr
    (tmp_path / "broken.yaml").write_text("name: x\nlosses: [no-such-loss]\n", encoding="utf-8")
    refused = _command(["validate", "broken.yaml"], tmp_path)
    assert refused.returncode == 2 and "Traceback" not in refused.stderr


def _processes_marked(mark: str) -> list[psutil.Process]:
    found = []
    for proc in psutil.process_iter():
        try:
            if proc.environ().get("PENDUEL_TEST_MARK") == mark:
                found.append(proc)
        except (psutil.NoSuchProcess, psutil.AccessDenied, psutil.ZombieProcess):
            continue
    return found


def test_a_run_on_worker_processes_ends_with_everything_stopped_and_said():
    cwd = scratch_dir("penduel-console-")
    (cwd / "experiment.yaml").write_text(TINY_PROCESSES, encoding="utf-8")
    mark = uuid.uuid4().hex     # inherited by every process the run starts
    proc = subprocess.Popen([sys.executable, "-m", "pipeline.cli", "run", "experiment.yaml", "--quiet"], cwd=cwd,
                            env=dict(os.environ, PENDUEL_TEST_MARK=mark), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    out, err = proc.communicate(timeout=300)   # until every process holding the pipes has closed them
    assert proc.returncode == 0, err
    lines = out.splitlines()
    assert lines[-2].startswith("report: ") and lines[-1].startswith("run id: ")   # flushed before leaving
    assert pathlib.Path(lines[-2].removeprefix("report: ")).is_file()
    # the worker pool was stopped by the exit handlers, not left to notice later that its parent had gone;
    # the resource tracker found nothing leaked (it would warn on the inherited stderr)
    assert _processes_marked(mark) == []
    assert "leaked" not in err and "Traceback" not in err, err
    shm = pathlib.Path("/dev/shm")
    if shm.is_dir():   # joblib's temporary folders, named after the process that made them, were removed
        assert not list(shm.glob(f"joblib_memmapping_folder_{proc.pid}_*"))
