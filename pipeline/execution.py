"""Where tasks run: in this process, in joblib (loky) worker processes, or on a Dask cluster.

Every backend returns the results in task order, and each task runs with one BLAS
thread, so a result is bit-identical whichever backend or worker computed it.
"""
from __future__ import annotations

import contextlib
import logging
import sys
import traceback
from dataclasses import dataclass
from typing import Any, Callable, Iterator, Sequence

import numpy as np
import scipy.linalg  # noqa: F401  load SciPy's BLAS now so the per-task thread limit covers it
from threadpoolctl import ThreadpoolController
from tqdm import tqdm

class TaskFailed(RuntimeError):
    """A task raised; the message names the task and carries the worker's traceback."""

    def __init__(self, index: int, task_repr: str, detail: str):
        super().__init__(index, task_repr, detail)
        self.index = index
        self.task_repr = task_repr
        self.detail = detail

    def __str__(self) -> str:
        return f"task {self.index} ({self.task_repr}) failed:\n{self.detail}"


def _short_repr(task: Any, limit: int = 200) -> str:
    text = repr(task)
    return text if len(text) <= limit else text[: limit - 3] + "..."


_THREADPOOLS: list = []   # one controller per process: building one scans the loaded libraries (~6 ms)


def _call(fn: Callable, index: int, task: Any, shared: Any, use_shared: bool) -> tuple[int, Any]:
    # One BLAS thread everywhere: thread count can change floating-point summation order.
    if not _THREADPOOLS:
        _THREADPOOLS.append(ThreadpoolController())
    try:
        with _THREADPOOLS[0].limit(limits=1):
            result = fn(task, shared) if use_shared else fn(task)
    except Exception as exc:
        raise TaskFailed(index, _short_repr(task), traceback.format_exc()) from exc
    return index, result


def task_seeds(root: np.random.SeedSequence, n: int) -> list[np.random.SeedSequence]:
    """n independent child seeds of root (``root.spawn(n)``), made before any task is dispatched.

    Like ``SeedSequence.spawn`` this advances root, so later calls give fresh children that never
    collide with earlier ones; task i always gets child i, whatever worker runs it.
    """
    if n < 0:
        raise ValueError(f"n must be >= 0, got {n}")
    return root.spawn(n)


@contextlib.contextmanager
def local_dask_cluster(n_workers: int = 1) -> Iterator[str]:
    """A Dask LocalCluster kept open across several `run_tasks` calls; yields its scheduler address."""
    from distributed import LocalCluster

    cluster = LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                           dashboard_address=None, silence_logs=logging.ERROR)
    try:
        yield cluster.scheduler_address
    finally:
        cluster.close()


def _run_local(fn, tasks, shared, use_shared, n_jobs, address) -> Iterator[tuple[int, Any]]:
    for i, task in enumerate(tasks):
        yield _call(fn, i, task, shared, use_shared)


def _run_processes(fn, tasks, shared, use_shared, n_jobs, address) -> Iterator[tuple[int, Any]]:
    from joblib import Parallel, delayed, parallel_config

    # loky keeps its worker pool alive between calls, so repeated stages pay start-up once;
    # one thread per worker from start-up on also covers libraries a task loads late.
    with parallel_config(backend="loky", inner_max_num_threads=1):
        parallel = Parallel(n_jobs=n_jobs, return_as="generator_unordered")
        yield from parallel(delayed(_call)(fn, i, t, shared, use_shared) for i, t in enumerate(tasks))


CONNECT_SECONDS = 20      # how long to wait for a given scheduler and its first worker


def _worker_versions() -> dict[str, str]:
    """Run on each worker: the versions a fit's bits depend on (penduel itself and the numerics)."""
    from importlib import metadata

    return {name: metadata.version(name) for name in ("penduel", "numpy", "scipy", "scikit-learn")}


def connect_to_cluster(address: str):
    """A Client of the running Dask cluster at `address` (execution.scheduler_address), checked to have
    workers that run the same penduel and numerical libraries as this process; else ConfigError."""
    from distributed import Client

    from .config import ConfigError

    where = f"execution.scheduler_address: '{address}'"
    try:
        client = Client(address, set_as_default=False, timeout=CONNECT_SECONDS)
    except (OSError, TimeoutError, ValueError) as exc:
        raise ConfigError(f"{where}: no Dask scheduler answered there within {CONNECT_SECONDS} s ({exc}). Give "
                          f"the address a running `dask scheduler` prints (tcp://HOST:PORT), or leave it "
                          f"out to start a local cluster of execution.n_jobs workers.") from None
    try:
        client.wait_for_workers(1, timeout=CONNECT_SECONDS)
        found = client.run(_worker_versions)
    except (OSError, TimeoutError) as exc:
        client.close()
        raise ConfigError(f"{where}: the scheduler has no worker ({exc}); start at least one with "
                          f"`dask worker {address}`.") from None
    except Exception as exc:   # a worker cannot unpickle pipeline.execution: penduel is not installed there
        client.close()
        raise ConfigError(f"{where}: a worker could not run penduel ({type(exc).__name__}: {exc}). Every worker "
                          f"needs the same penduel version installed in its Python environment.") from None
    here = _worker_versions()
    wrong = {w: v for w, v in found.items() if v != here}
    if wrong:
        client.close()
        worker, versions = next(iter(wrong.items()))
        raise ConfigError(f"{where}: worker {worker} runs {versions}, but this process runs {here}; results "
                          f"are bit-identical only with the same versions, so install them on every worker.")
    return client


def _run_dask(fn, tasks, shared, use_shared, n_jobs, address) -> Iterator[tuple[int, Any]]:
    from distributed import Client, as_completed

    with contextlib.ExitStack() as stack:
        if address is None:
            client = stack.enter_context(Client(stack.enter_context(local_dask_cluster(n_jobs)),
                                                set_as_default=False))
        else:
            client = stack.enter_context(connect_to_cluster(address))
        # Shared data goes to every worker once instead of once per task; wrapped in a list so
        # a tuple or dict is scattered whole, not element by element.
        shared_ref = client.scatter([shared], broadcast=True)[0] if use_shared else None
        futures = [client.submit(_call, fn, i, t, shared_ref, use_shared, pure=False)
                   for i, t in enumerate(tasks)]
        try:
            for future in as_completed(futures, loop=client.loop):
                yield future.result()
        finally:
            client.cancel(futures)


@dataclass(frozen=True)
class Backend:
    name: str
    description: str      # where the fits run, for the config reference
    # (fn, tasks, shared, use_shared, n_jobs, scheduler address) → (index, result) pairs in any order
    run: Callable[..., Iterator[tuple[int, Any]]]


BACKENDS: dict[str, Backend] = {b.name: b for b in (
    Backend("local", "this process", _run_local),
    Backend("processes", "worker processes", _run_processes),
    Backend("dask", "a Dask cluster", _run_dask),
)}


def run_tasks(fn: Callable, tasks: Sequence, *, backend: str = "local", n_jobs: int = 1,
              progress: str | None = None, scheduler_address: str | None = None,
              shared: Any = None) -> list:
    """fn(task) for every task (or fn(task, shared) when `shared` is given), results in task order.

    backend: "local" (loop in this process), "processes" (joblib loky, n_jobs workers) or
    "dask" (distributed Client to scheduler_address, or a LocalCluster with n_jobs workers
    started and closed here when the address is None). fn and tasks must be picklable (a
    module-level fn). `shared` is sent to each worker once (large arrays are memory-mapped
    by joblib); fn must not modify it. A tqdm bar on stderr counts finished tasks when
    progress is a description. A failing task raises TaskFailed naming the task.
    """
    if backend not in BACKENDS:
        raise ValueError(f"backend must be one of {tuple(BACKENDS)}, got {backend!r}")
    if int(n_jobs) < 1:
        raise ValueError(f"n_jobs must be >= 1, got {n_jobs}")
    tasks = list(tasks)
    use_shared = shared is not None
    results: list = [None] * len(tasks)
    with tqdm(total=len(tasks), desc=progress, file=sys.stderr, disable=progress is None) as bar:
        if not tasks:
            return results
        stream = BACKENDS[backend].run(fn, tasks, shared, use_shared, int(n_jobs), scheduler_address)
        for index, result in stream:
            results[index] = result
            bar.update(1)
    return results
