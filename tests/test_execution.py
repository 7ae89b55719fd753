"""Task execution: order, seeding, errors, progress, and bit-identical results across backends."""
from __future__ import annotations

import time

import numpy as np
import pytest

from pipeline.execution import TaskFailed, local_dask_cluster, run_tasks, task_seeds


def _square(x):
    return x * x


def _slow_first(task):
    index, delay = task
    time.sleep(delay)
    return index


def _fail_on_three(x):
    if x == 3:
        raise ValueError("three is not allowed")
    return x


def _with_shared(task, shared):
    return float(shared[task].sum())


def _shared_kind(task, shared):
    return type(shared).__name__, shared[1]


def _subsample_lasso(seed):
    """A small resampling fit: draw a half-subsample from the task seed, fit a lasso path."""
    from sklearn.linear_model import lasso_path  # imported here so pool start-up stays light

    rng = np.random.default_rng(seed)
    data = np.random.default_rng(0)
    X = data.standard_normal((60, 25))
    y = X[:, :3] @ np.array([2.0, -1.5, 1.0]) + data.standard_normal(60)
    rows = np.sort(rng.choice(60, size=30, replace=False))
    Xs = X[rows] - X[rows].mean(axis=0)
    ys = y[rows] - y[rows].mean()
    noise = rng.standard_normal()  # a draw after the subsample: the whole stream must match
    _, coefs, _ = lasso_path(Xs, ys, alphas=8, eps=1e-2)
    return coefs, noise


def test_local_returns_in_task_order():
    assert run_tasks(_square, [3, 1, 2]) == [9, 1, 4]


def test_empty_task_list():
    assert run_tasks(_square, [], backend="processes", n_jobs=2) == []


def test_processes_keep_task_order_when_later_tasks_finish_first():
    tasks = [(0, 0.4), (1, 0.0), (2, 0.0), (3, 0.0)]
    assert run_tasks(_slow_first, tasks, backend="processes", n_jobs=2) == [0, 1, 2, 3]


@pytest.mark.parametrize("backend", ["local", "processes"])
def test_failure_names_the_task(backend):
    with pytest.raises(TaskFailed) as info:
        run_tasks(_fail_on_three, [1, 2, 3, 4], backend=backend, n_jobs=2)
    assert info.value.index == 2
    assert "task 2 (3)" in str(info.value)
    assert "three is not allowed" in str(info.value)


def test_unknown_backend_is_refused():
    with pytest.raises(ValueError, match="backend"):
        run_tasks(_square, [1], backend="threads")


@pytest.mark.parametrize("backend", ["local", "processes"])
def test_shared_data_reaches_every_task(backend):
    shared = np.arange(12.0).reshape(4, 3)
    assert run_tasks(_with_shared, [0, 3], backend=backend, n_jobs=2, shared=shared) == [3.0, 30.0]


@pytest.mark.parametrize("backend", ["local", "processes"])
def test_progress_bar_counts_tasks(capsys, backend):
    run_tasks(_square, list(range(5)), backend=backend, n_jobs=2, progress="fits")
    err = capsys.readouterr().err
    assert "fits" in err and "5/5" in err


def test_no_progress_bar_without_a_description(capsys):
    run_tasks(_square, list(range(5)))
    assert capsys.readouterr().err == ""


def test_task_seeds_are_reproducible_and_distinct():
    a = task_seeds(np.random.SeedSequence(42), 4)
    b = task_seeds(np.random.SeedSequence(42), 4)
    draws_a = [np.random.default_rng(s).integers(1 << 62) for s in a]
    draws_b = [np.random.default_rng(s).integers(1 << 62) for s in b]
    assert draws_a == draws_b
    assert len(set(draws_a)) == 4


def test_task_seeds_advance_the_root():
    root = np.random.SeedSequence(7)
    first = task_seeds(root, 2)
    second = task_seeds(root, 2)
    assert {s.spawn_key for s in first}.isdisjoint({s.spawn_key for s in second})


def _assert_bit_identical(reference, other):
    assert len(reference) == len(other)
    for (coef_a, noise_a), (coef_b, noise_b) in zip(reference, other):
        assert noise_a == noise_b
        assert coef_a.tobytes() == coef_b.tobytes()


@pytest.mark.slow   # ~7 s starting a Dask cluster; make test-all (test_cluster.py runs a real one)
def test_local_processes_and_dask_give_identical_results(capsys):
    seeds = task_seeds(np.random.SeedSequence(2024), 6)
    local = run_tasks(_subsample_lasso, seeds)
    processes = run_tasks(_subsample_lasso, seeds, backend="processes", n_jobs=2)
    dask_fresh = run_tasks(_subsample_lasso, seeds, backend="dask", n_jobs=2, progress="dask fits")
    err = capsys.readouterr().err
    assert "dask fits" in err and "6/6" in err
    _assert_bit_identical(local, processes)
    _assert_bit_identical(local, dask_fresh)
    # the task results must actually differ between seeds, or the comparison proves little
    assert not np.array_equal(local[0][0], local[1][0])


def test_dask_with_given_address_and_failure():
    with local_dask_cluster(1) as address:
        assert run_tasks(_square, [2, 5], backend="dask", scheduler_address=address) == [4, 25]
        shared = np.ones((3, 2))
        assert run_tasks(_with_shared, [1], backend="dask", scheduler_address=address,
                         shared=shared) == [2.0]
        assert run_tasks(_shared_kind, [0], backend="dask", scheduler_address=address,
                         shared=(shared, 7)) == [("tuple", 7)]
        with pytest.raises(TaskFailed, match="task 2"):
            run_tasks(_fail_on_three, [1, 2, 3], backend="dask", scheduler_address=address)


def _allocator_kept(task):
    from pipeline import execution

    return bool(execution._MALLOC_SET)


def test_worker_processes_keep_freed_memory_and_this_process_is_left_alone():
    # worker processes set the allocator to keep freed arrays for the next task (execution.keep_freed_memory);
    # the dispatching process (backend local) keeps its own allocator settings
    assert run_tasks(_allocator_kept, [0, 1], backend="processes", n_jobs=2) == [True, True]
    assert run_tasks(_allocator_kept, [0], backend="local") == [False]
