"""Task execution: order, seeding, errors, progress, and bit-identical results across backends."""
from __future__ import annotations

import os
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


def _mostly_zero_outcome(dense_share: float = 0.02):
    """A FitOutcome whose (L, p) weights are mostly exact zeros, with the awkward entries kept: −0.0,
    NaN, a subnormal and the largest float."""
    from pipeline.fitting import FitOutcome

    rng = np.random.default_rng(5)
    coef = np.where(rng.random((6, 500)) < dense_share, rng.standard_normal((6, 500)), 0.0)
    coef[0, :4] = [-0.0, np.nan, 5e-324, np.finfo(float).max]
    return FitOutcome(task_id="squared/l1/resample3", split="resample3", family="l1", loss_label="squared",
                      eval_loss=rng.random(6), eval_pred=rng.standard_normal((6, 9)), coef=coef,
                      intercept=rng.standard_normal(6), n_nonzero=np.count_nonzero(coef, axis=1),
                      effective_df=np.ones(6), certificate=np.zeros(6), certificate_kind="kkt_violation",
                      converged=np.ones(6, bool), status=("optimal",) * 6, solver="active-set",
                      fit_seconds=0.5, feature_names=())


def _same_bits(a, b) -> bool:
    import dataclasses

    for f in dataclasses.fields(a):
        x, y = getattr(a, f.name), getattr(b, f.name)
        if isinstance(x, np.ndarray):
            if not (isinstance(y, np.ndarray) and x.dtype == y.dtype and x.shape == y.shape
                    and x.tobytes() == y.tobytes()):
                return False
        elif x != y or type(x) is not type(y):
            return False
    return True


def test_outcomes_travel_packed_and_arrive_bit_for_bit():
    # a worker's result is pickled on its way back: mostly-zero weights go as positions and values
    # (matrices.PackedZeros) and come back as the same dense array, bit for bit (−0.0 and NaN included)
    import pickle

    sparse = _mostly_zero_outcome()
    back = pickle.loads(pickle.dumps(sparse, protocol=5))
    assert _same_bits(sparse, back) and isinstance(back.coef, np.ndarray) and back.coef.flags.writeable
    assert len(pickle.dumps(sparse, protocol=5)) < 0.2 * sparse.coef.nbytes
    dense = _mostly_zero_outcome(dense_share=1.0)    # a dense path is sent as it is
    assert _same_bits(dense, pickle.loads(pickle.dumps(dense)))
    assert len(pickle.dumps(dense)) > dense.coef.nbytes


def test_packed_parts_that_do_not_fit_are_refused():
    from pipeline.matrices import PackedZeros

    with pytest.raises(ValueError, match="do not fit"):
        PackedZeros((2, 3), np.array([0, 6]), np.array([1.0, 2.0])).unpacked()
    with pytest.raises(ValueError, match="do not fit"):
        PackedZeros((2, 3), np.array([0, 1]), np.array([1.0])).unpacked()


def _outcome_through_processes(task):
    return _mostly_zero_outcome()


def test_outcomes_from_worker_processes_equal_local_ones():
    local = run_tasks(_outcome_through_processes, [0, 1], backend="local")
    processes = run_tasks(_outcome_through_processes, [0, 1], backend="processes", n_jobs=2)
    assert all(_same_bits(a, b) for a, b in zip(local, processes))


def test_shared_file_gives_workers_the_same_bits_read_only(tmp_path):
    # execution.SharedFile: a pickle of everything but the arrays' bytes, the arrays mapped from the file
    import scipy.sparse as sp

    from pipeline.execution import SharedFile

    rng = np.random.default_rng(2)
    X = rng.standard_normal((7, 5))
    value = {"X": X, "strided": X[:, ::2], "ints": np.arange(5, dtype=np.int32), "empty": np.zeros((0, 3)),
             "csc": sp.random(6, 4, density=0.4, format="csc", random_state=1), "names": ("a", "b=<x>"), "n": 3}
    loaded = SharedFile.write(value, str(tmp_path)).load()
    for key in ("X", "strided", "ints", "empty"):
        a, b = value[key], loaded[key]
        assert a.dtype == b.dtype and a.shape == b.shape and np.ascontiguousarray(a).tobytes() == \
            np.ascontiguousarray(b).tobytes(), key
    assert not loaded["X"].flags.writeable
    assert (loaded["csc"] != value["csc"]).nnz == 0 and loaded["names"] == value["names"] and loaded["n"] == 3


@pytest.mark.parametrize("backend", ["local", "processes"])
def test_each_result_reaches_this_process_as_it_arrives(backend):
    # the cache stores results through this hook, so workers (possibly remote) never write to the cache folder
    seen = []
    out = run_tasks(_square, [3, 1, 2], backend=backend, n_jobs=2,
                    on_result=lambda i, r: seen.append((i, r, os.getpid())))
    assert out == [9, 1, 4]
    assert sorted((i, r) for i, r, _ in seen) == [(0, 9), (1, 1), (2, 4)]
    assert {pid for _, _, pid in seen} == {os.getpid()}
