"""No finished work is lost: the task cache, interrupted runs and their resumption."""
from __future__ import annotations

import os
import re
import shutil
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from mlflow.tracking import MlflowClient

import pipeline.runner as runner
from pipeline.cache import TaskCache, decode, encode, task_keys
from pipeline.config import load_config
from pipeline.fitting import FitOutcome
from pipeline.runner import run_experiment

from .conftest import CONFIGS
from .test_determinism import differing, result_numbers, spec_with


def _outcome(seed=0, coef=True) -> FitOutcome:
    rng = np.random.default_rng(seed)
    return FitOutcome(
        task_id="squared/l1/fold0", split="fold0", family="l1", loss_label="squared",
        eval_loss=rng.standard_normal(4), eval_pred=rng.standard_normal((4, 7)),
        coef=rng.standard_normal((4, 3)) if coef else None, intercept=rng.standard_normal(4),
        n_nonzero=np.array([0, 1, 2, 3]), effective_df=np.array([0.0, 1.0, 2.0, np.nan]),
        certificate=None, certificate_kind="duality_gap", converged=np.array([True, True, False, True]),
        status=("optimal", "optimal", "error: SolverError: x", "optimal"), solver="CLARABEL",
        fit_seconds=0.1234567891234, feature_names=("a", "b=<x>", "c"))


def _same(a: FitOutcome, b: FitOutcome) -> bool:
    for name in FitOutcome.__dataclass_fields__:
        x, y = getattr(a, name), getattr(b, name)
        if isinstance(x, np.ndarray):
            if not (isinstance(y, np.ndarray) and x.dtype == y.dtype and x.tobytes() == y.tobytes()):
                return False
        elif x != y or type(x) is not type(y):
            return False
    return True


@settings(max_examples=30, deadline=None, derandomize=True)
@given(seed=st.integers(0, 2**32 - 1), coef=st.booleans())
def test_encoding_round_trips_bit_for_bit(seed, coef):
    value = _outcome(seed, coef)
    assert _same(decode(FitOutcome, encode(value)), value)


def test_cache_files_load_without_pickle(tmp_path):
    cache = TaskCache(tmp_path, FitOutcome)
    cache.put("ab" * 32, _outcome())
    (path,) = tmp_path.rglob("*.npz")
    with np.load(path, allow_pickle=False) as data:   # raises if any entry needed pickle
        assert all(data[k].dtype != object for k in data.files)
    assert _same(cache.get("ab" * 32), _outcome())
    assert cache.get("cd" * 32) is None


def test_object_arrays_are_refused(tmp_path):
    bad = _outcome()
    object.__setattr__(bad, "eval_loss", np.array([object()], dtype=object))
    with pytest.raises(TypeError, match="without pickle"):
        TaskCache(tmp_path, FitOutcome).put("ab" * 32, bad)


def test_torn_or_foreign_entry_is_dropped_and_refitted(tmp_path):
    cache = TaskCache(tmp_path, FitOutcome)
    path = cache.path("ef" * 32)
    path.parent.mkdir(parents=True)
    path.write_bytes(b"PK\x03\x04 not really a zip")
    assert cache.get("ef" * 32) is None and not path.exists()


def _planned_tasks(spec, base, monkeypatch) -> list:
    """The tasks run_experiment plans for spec (seen through the cache hook)."""
    seen, real = [], runner.run_cached

    def spy(run, fn, tasks, keys, cache, **options):
        seen.extend(tasks)
        return real(run, fn, tasks, keys, cache, **options)

    monkeypatch.setattr(runner, "run_cached", spy)
    run_experiment(spec, base, progress=False)
    monkeypatch.setattr(runner, "run_cached", real)
    return seen


def test_key_depends_on_what_decides_the_fit(tmp_path, monkeypatch):
    spec, base = spec_with(CONFIGS / "tiny-classification.yaml", tmp_path)
    tasks = _planned_tasks(spec, base, monkeypatch)
    keys = task_keys(spec, "hash0", tasks)
    assert len(set(keys)) == len(tasks)
    assert task_keys(spec, "hash0", tasks) == keys
    assert task_keys(spec, "hash1", tasks) != keys                      # other data
    other = spec.model_copy(update={"families": spec.families.model_copy(update={
        "l1": spec.families.l1.model_copy(update={"tol": 1e-6})})})
    changed = [a != b for a, b in zip(keys, task_keys(other, "hash0", tasks))]
    assert changed == [t.family == "l1" for t in tasks]                  # only the L1 tasks
    moved = spec.model_copy(update={"execution": spec.execution.model_copy(update={"backend": "processes"}),
                                    "report": spec.report.model_copy(update={"directory": "elsewhere"})})
    assert task_keys(moved, "hash0", tasks) == keys                     # where it runs does not matter


def test_interrupted_run_resumes_with_equal_results(tmp_path, monkeypatch):
    spec, base = spec_with(CONFIGS / "tiny-classification.yaml", tmp_path)
    reference = run_experiment(spec, base, progress=False)           # uninterrupted, cache off
    cached = spec.model_copy(update={"cache": spec.cache.model_copy(update={"enabled": True})})
    real_fit, calls = runner.run_fit, []

    def interrupted_after_five(task, shared):
        if len(calls) == 5:
            raise KeyboardInterrupt
        calls.append(task.task_id)
        return real_fit(task, shared)

    monkeypatch.setattr(runner, "run_fit", interrupted_after_five)
    with pytest.raises(KeyboardInterrupt):
        run_experiment(cached, base, progress=False)
    monkeypatch.setattr(runner, "run_fit", real_fit)
    resumed = run_experiment(cached, base, progress=False)
    # 24 planned tasks, plus the refits of any grid widened because CV chose its end (the same in every run)
    total = reference.tasks_total
    assert total >= 24 and resumed.tasks_reused == 5 and resumed.tasks_total == total
    assert any(f"reused 5 of {total}" in n for n in resumed.notes)
    assert differing(result_numbers(reference), result_numbers(resumed)) == []
    again = run_experiment(cached, base, progress=False)
    assert again.tasks_reused == total
    assert differing(result_numbers(reference), result_numbers(again)) == []


# ---------------------------------------------------------------- the real command, killed
def _start(config, cwd, store):
    env = dict(os.environ, PYTHONWARNINGS="ignore")
    return subprocess.Popen([sys.executable, "-m", "pipeline.cli", "run", str(config), "--quiet",
                             "--tracking-uri", store], cwd=cwd, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True,
                            # a shell's background job ignores SIGINT; the child must not inherit that
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))


def _kill_after_entries(proc, cache_dir, n_entries, sig, timeout=600):
    deadline = time.time() + timeout
    while time.time() < deadline:
        if proc.poll() is not None:
            raise AssertionError(f"run ended before it could be interrupted:\n{proc.stderr.read()}")
        if len(list(cache_dir.rglob("*.npz"))) >= n_entries:
            os.killpg(proc.pid, sig)     # the whole group: workers die too
            proc.wait(timeout=120)
            return len(list(cache_dir.rglob("*.npz")))
        time.sleep(0.05)
    raise AssertionError("no cache entries appeared in time")


def _test_metrics(client, run_id):
    parent = client.get_run(run_id)
    children = client.search_runs([parent.info.experiment_id],
                                  filter_string=f"tags.mlflow.parentRunId = '{run_id}'")
    return {(c.data.params["family"], c.data.tags["penduel.loss"]):
            {k: v for k, v in c.data.metrics.items() if not k.endswith("seconds")} for c in children}


@pytest.mark.slow
@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGINT])
def test_killed_command_resumes_and_matches_uninterrupted(tmp_path, sig):
    store = f"sqlite:///{tmp_path / 'store.db'}"
    fresh, work = tmp_path / "fresh", tmp_path / "work"
    for folder in (fresh, work):    # the cache and reports live in the config file's folder: one copy each
        folder.mkdir()
        shutil.copy(CONFIGS / "resume.yaml", folder)
    config = "resume.yaml"
    done = subprocess.run([sys.executable, "-m", "pipeline.cli", "run", str(config), "--quiet", "--tracking-uri",
                           f"sqlite:///{tmp_path / 'fresh.db'}"], cwd=fresh, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr

    reference_id = re.search(r"run id: ([0-9a-f]{32})", done.stdout).group(1)

    proc = _start(config, work, store)
    finished_before = _kill_after_entries(proc, work / ".penduel-cache", 6, sig)
    client = MlflowClient(tracking_uri=store)
    (killed,) = client.search_runs([e.experiment_id for e in client.search_experiments()],
                                   filter_string="tags.`penduel.kind` = 'execution'")
    if sig == signal.SIGINT:
        assert killed.info.status == "KILLED"      # marked by the interrupted process itself
    rerun = subprocess.run([sys.executable, "-m", "pipeline.cli", "run", str(config), "--quiet",
                            "--tracking-uri", store], cwd=work, capture_output=True, text=True)
    assert rerun.returncode == 0, rerun.stderr
    reused = int(re.search(r"reused (\d+) of (\d+) finished fit task", rerun.stdout).group(1))
    assert reused >= finished_before >= 6
    assert client.get_run(killed.info.run_id).info.status == "KILLED"   # never left RUNNING
    rerun_id = re.search(r"run id: ([0-9a-f]{32})", rerun.stdout).group(1)
    reference = _test_metrics(MlflowClient(tracking_uri=f"sqlite:///{tmp_path / 'fresh.db'}"), reference_id)
    assert _test_metrics(client, rerun_id) == reference



def test_mostly_zero_arrays_are_stored_packed_and_read_back_bit_for_bit(tmp_path):
    # a resample's (L, p) weights are mostly exact zeros: the entry keeps their positions and values only
    from .test_execution import _mostly_zero_outcome

    value = _mostly_zero_outcome()
    arrays = encode(value)
    assert "coef" not in arrays and "coef__positions" in arrays and "coef__values" in arrays
    assert _same(decode(FitOutcome, arrays), value)
    cache = TaskCache(tmp_path, FitOutcome)
    cache.put("ab" * 32, value)
    (path,) = tmp_path.rglob("*.npz")
    assert path.stat().st_size < 0.3 * value.coef.nbytes
    assert _same(cache.get("ab" * 32), value)


def test_packed_entry_whose_positions_do_not_fit_is_dropped(tmp_path):
    import json

    from pipeline.cache import content_digest

    from .test_execution import _mostly_zero_outcome

    cache = TaskCache(tmp_path, FitOutcome)
    arrays = encode(_mostly_zero_outcome())
    arrays["coef__positions"] = arrays["coef__positions"] + 10**6    # outside the (6, 500) array
    arrays["__check__"] = np.frombuffer(json.dumps({"key": "cd" * 32, "digest": content_digest(arrays)}).encode(),
                                        dtype=np.uint8)
    path = cache.path("cd" * 32)
    path.parent.mkdir(parents=True)
    with open(path, "wb") as fh:
        np.savez(fh, **arrays)
    assert cache.get("cd" * 32) is None and not path.exists() and "do not fit" in cache.drop_note()[0]
