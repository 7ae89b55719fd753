"""Where tasks run: in this process, in joblib (loky) worker processes, or on a Dask cluster.

Every backend returns the results in task order, and each task runs with one BLAS
thread, so a result is bit-identical whichever backend or worker computed it.
"""
from __future__ import annotations

import contextlib
import io
import logging
import os
import pickle
import sys
import tempfile
import traceback
import warnings
from dataclasses import dataclass
from typing import Any, Callable, Iterator, Sequence

import numpy as np
import scipy.linalg  # noqa: F401  load SciPy's BLAS now so the per-task thread limit covers it
from threadpoolctl import ThreadpoolController
from tqdm import tqdm

from .processes import start_loky_worker, watch_parent


class TaskFailed(RuntimeError):
    """A task raised (or its worker died); the message names the task and carries the worker's traceback."""

    def __init__(self, index: int, task_repr: str, detail: str):
        super().__init__(index, task_repr, detail)
        self.index = index
        self.task_repr = task_repr
        self.detail = detail

    def __str__(self) -> str:
        return f"task {self.index} ({self.task_repr}) failed:\n{self.detail}"

    def paragraph(self) -> str:
        """One paragraph for the terminal: the task, the last line of what went wrong, what is kept."""
        lines = [ln.strip() for ln in self.detail.strip().splitlines() if ln.strip()]
        last = lines[-1] if lines else "no detail"
        return (f"fit task {self.index + 1} ({self.task_repr}) failed twice, on its first attempt and on one retry: "
                f"{last[:400]}. Finished fits are kept in the cache, so a rerun continues from them; the tracking "
                f"run is marked FAILED with this message.")


def _short_repr(task: Any, limit: int = 200) -> str:
    text = str(getattr(task, "task_id", "") or "") or repr(task)
    return text if len(text) <= limit else text[: limit - 3] + "..."


_THREADPOOLS: list = []   # one controller per process: building one scans the loaded libraries (~6 ms)
@contextlib.contextmanager
def captured_output(sink: list):
    """Solver banners and library warnings during a task: written to a temporary file instead of the terminal
    (file descriptor 1, so C libraries are caught too), then appended to `sink` as text."""
    sys.stdout.flush()
    printed = io.StringIO()
    with tempfile.TemporaryFile(mode="w+b") as tmp, warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        saved = os.dup(1)
        os.dup2(tmp.fileno(), 1)
        try:
            with contextlib.redirect_stdout(printed):
                yield
        finally:
            os.dup2(saved, 1)
            os.close(saved)
            tmp.seek(0)
            text = (tmp.read().decode("utf-8", "replace") + printed.getvalue()).strip()
        lines = [text] if text else []
        lines += [f"{w.category.__name__}: {w.message}" for w in caught
                  if not issubclass(w.category, (FutureWarning, DeprecationWarning))]
        if lines:
            sink.append("\n".join(dict.fromkeys(lines)))


@dataclass(frozen=True)
class SharedFile:
    """The shared data of one `run_tasks` call written once to a file that worker processes read (arrays
    memory-mapped) and keep: a task then carries this small handle instead of the data. Pickling the data
    with every task made the dispatching process hash and copy the whole design matrix once per task.

    The file is a pickle (protocol 5) of everything but the arrays' contents, then each array's bytes
    at an aligned offset; a worker maps the file and the arrays are read-only views of it (the same bits).
    Written with the C pickler: joblib's pure-Python one took ~45 ms for 400 × 4 000 floats and 4 000
    column names, time taken from the workers on two cores."""
    path: str

    @classmethod
    def write(cls, shared: Any, folder: str) -> "SharedFile":
        import uuid

        buffers: list = []
        head = pickle.dumps(shared, protocol=5, buffer_callback=buffers.append)
        spans, offset = [], 0
        for b in buffers:
            offset = -(-offset // SHARED_ALIGN) * SHARED_ALIGN
            spans.append((offset, b.raw().nbytes))
            offset += b.raw().nbytes
        index = pickle.dumps((head, spans), protocol=5)
        start = -(-(8 + len(index)) // SHARED_ALIGN) * SHARED_ALIGN
        path = os.path.join(folder, f"shared-{uuid.uuid4().hex}.bin")   # never the name of an earlier run's file
        with open(path, "wb") as fh:
            fh.write(len(index).to_bytes(8, "little") + index)
            for b, (off, _) in zip(buffers, spans):
                fh.seek(start + off)
                fh.write(b.raw())
            fh.truncate(start + offset)
        return cls(path)

    def load(self) -> Any:
        if self.path not in _LOADED:
            import mmap

            _LOADED.clear()           # one run's data at a time per worker
            with open(self.path, "rb") as fh:
                size = int.from_bytes(fh.read(8), "little")
                head, spans = pickle.loads(fh.read(size))
                mapped = mmap.mmap(fh.fileno(), 0, access=mmap.ACCESS_READ) if spans else None
            start = -(-(8 + size) // SHARED_ALIGN) * SHARED_ALIGN
            view = memoryview(mapped) if mapped is not None else None
            _LOADED[self.path] = pickle.loads(head, buffers=[view[start + o:start + o + n] for o, n in spans])
        return _LOADED[self.path]


SHARED_ALIGN = 64      # byte alignment of each array in a SharedFile
_LOADED: dict = {}
_MALLOC_SET: list = []
MALLOC_KEEP_BYTES = 256 << 20    # freed heap a worker keeps for its next task instead of giving it back
MALLOC_MMAP_BYTES = 32 << 20     # blocks below this come from the heap (glibc's largest allowed threshold)


def keep_freed_memory() -> None:
    """In a worker process (glibc only): keep freed memory for the next task. By default glibc hands each
    freed multi-megabyte array back to the system and the next task's array of the same size is faulted
    in and zeroed again, page by page; measured on the stability benchmark (100 resample fits, n = 400,
    p = 4 000, two workers) that was 0.5 s of kernel time per 100 tasks against 0.02 s with this setting.
    Only the allocator's thresholds change, never a number a task computes."""
    if _MALLOC_SET:
        return
    _MALLOC_SET.append(True)
    try:
        import ctypes

        libc = ctypes.CDLL("libc.so.6")
        libc.mallopt(-1, MALLOC_KEEP_BYTES)    # M_TRIM_THRESHOLD
        libc.mallopt(-3, MALLOC_MMAP_BYTES)    # M_MMAP_THRESHOLD
    except (OSError, AttributeError):          # not glibc: the allocator's defaults stay
        pass


def _call(fn: Callable, index: int, task: Any, shared: Any, use_shared: bool,
          parent_pid: int | None = None, in_worker: bool = False) -> tuple[int, Any, str]:
    # One BLAS thread everywhere: thread count can change floating-point summation order.
    if parent_pid is not None:
        watch_parent(parent_pid)
    if parent_pid is not None or in_worker:
        keep_freed_memory()
    if isinstance(shared, SharedFile):
        shared = shared.load()
    output: list = []
    try:
        if not _THREADPOOLS:
            _THREADPOOLS.append(ThreadpoolController())
        with _THREADPOOLS[0].limit(limits=1), captured_output(output):
            result = fn(task, shared) if use_shared else fn(task)
    except Exception as exc:
        raise TaskFailed(index, _short_repr(task), traceback.format_exc()) from exc
    return index, result, "\n".join(output)


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
    for i, task in tasks:
        yield _call(fn, i, task, shared, use_shared)


def _run_processes(fn, tasks, shared, use_shared, n_jobs, address) -> Iterator[tuple[int, Any]]:
    from joblib import Parallel, delayed, parallel_config

    # loky keeps its worker pool alive between calls, so repeated stages pay start-up once;
    # one thread per worker from start-up on also covers libraries a task loads late.
    # each worker watches this process from its start, so a kill -9 of the run ends idle workers too
    with contextlib.ExitStack() as stack:
        if use_shared:   # the data goes to a file once; each worker reads it once (see SharedFile)
            folder = stack.enter_context(tempfile.TemporaryDirectory(
                prefix="penduel-shared-", dir="/dev/shm" if os.access("/dev/shm", os.W_OK) else None))
            shared = SharedFile.write(shared, folder)
        stack.enter_context(parallel_config(backend="loky", inner_max_num_threads=1, initializer=start_loky_worker,
                                            initargs=(os.getpid(),)))
        parallel = Parallel(n_jobs=n_jobs, return_as="generator_unordered")
        yield from parallel(delayed(_call)(fn, i, t, shared, use_shared, os.getpid()) for i, t in tasks)


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
        futures = [client.submit(_call, fn, i, t, shared_ref, use_shared, None, True, pure=False)
                   for i, t in tasks]
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
              shared: Any = None, log: list | None = None,
              on_result: Callable[[int, Any], None] | None = None) -> list:
    """fn(task) for every task (or fn(task, shared) when `shared` is given), results in task order.

    backend: "local" (loop in this process), "processes" (joblib loky, n_jobs workers) or
    "dask" (distributed Client to scheduler_address, or a LocalCluster with n_jobs workers
    started and closed here when the address is None). fn and tasks must be picklable (a
    module-level fn). `shared` is sent to each worker once (processes: written once to a
    file whose arrays each worker memory-maps, see SharedFile; Dask: scattered); fn must not modify it. A tqdm bar on stderr counts finished tasks when
    progress is a description. A failing task, or a worker that dies, gets one retry of the unfinished
    tasks; a second failure raises TaskFailed naming the task. What tasks print (solver banners) and the
    warnings they raise are captured; with `log`, each task's capture is appended to it as text.
    `on_result(i, result)` is called in this process as task i's result arrives (e.g. to store it at once).
    """
    if backend not in BACKENDS:
        raise ValueError(f"backend must be one of {tuple(BACKENDS)}, got {backend!r}")
    if int(n_jobs) < 1:
        raise ValueError(f"n_jobs must be >= 1, got {n_jobs}")
    tasks = list(tasks)
    use_shared = shared is not None
    results: list = [None] * len(tasks)
    done = [False] * len(tasks)
    with tqdm(total=len(tasks), desc=progress, file=sys.stderr, disable=progress is None) as bar:
        for attempt in (1, 2):     # a failed task or a dead worker: the unfinished tasks are tried once more
            todo = [(i, tasks[i]) for i in range(len(tasks)) if not done[i]]
            if not todo:
                break
            try:
                stream = BACKENDS[backend].run(fn, todo, shared, use_shared, int(n_jobs), scheduler_address)
                for index, result, output in stream:
                    results[index], done[index] = result, True
                    if on_result is not None:
                        on_result(index, result)
                    if output and log is not None:
                        log.append(f"task {index + 1} ({_short_repr(tasks[index])}):\n{output}")
                    bar.update(1)
            except Exception as exc:
                if attempt == 2:
                    if isinstance(exc, TaskFailed):
                        raise
                    first = todo[0][0] if not all(done) else 0
                    first = next((i for i in range(len(tasks)) if not done[i]), first)
                    raise TaskFailed(first, _short_repr(tasks[first]),
                                     f"a worker process stopped ({type(exc).__name__}: {exc})") from exc
    return results
