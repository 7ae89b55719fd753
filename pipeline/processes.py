"""How penduel's processes end: SIGTERM handled as an interrupt, workers that watch the process that started
them, a quick exit once the work is done, and stopping a child's whole process group."""
from __future__ import annotations

import atexit
import contextlib
import logging
import os
import signal
import sys
import threading
import time


class Terminated(KeyboardInterrupt):
    """SIGTERM: handled like Ctrl-C (the run is marked KILLED) but exits with 128 + 15."""


def _raise_terminated(signum, frame):
    raise Terminated


@contextlib.contextmanager
def sigterm_as_interrupt():
    try:
        previous = signal.signal(signal.SIGTERM, _raise_terminated)
    except ValueError:   # not the main thread: signals cannot be handled here
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def leave_now(status: int) -> None:
    """End this process with `status` after flushing its logs and standard streams, without the interpreter's
    teardown of every loaded module (about a second once the tracking, plotting and solver libraries are
    loaded). Called last, once the process's work and its exit handlers are done."""
    logging.shutdown()
    for stream in (sys.stdout, sys.stderr):
        with contextlib.suppress(Exception):   # a closed pipe: nothing left to say
            stream.flush()
    os._exit(status)


_WATCHING: list = []


def watch_parent(parent_pid: int) -> None:
    """In a worker process: end when the process that dispatched the task is gone (e.g. killed with -9), so
    no worker outlives its run. Polls the parent id once a second on a daemon thread."""
    if _WATCHING or os.getpid() == parent_pid:
        return
    if os.getppid() != parent_pid:
        try:
            os.kill(parent_pid, 0)
        except ProcessLookupError:
            os._exit(1)     # the run was killed while this worker was starting
        except PermissionError:
            pass
        return              # not its direct child (a Dask nanny manages its own workers)
    _WATCHING.append(parent_pid)

    def watch():
        while os.getppid() == parent_pid:
            time.sleep(1.0)
        os._exit(1)

    threading.Thread(target=watch, name="penduel-parent-watch", daemon=True).start()


def start_loky_worker(parent_pid: int) -> None:
    """A joblib (loky) worker's initializer: watch the parent, and leave quickly when the pool stops it. A worker
    ends only when its pool stops it (or sits idle too long), after its last result was sent; tearing down
    its loaded libraries one object at a time would cost about half a second, which `penduel run` waits for
    at its own exit. The exit handlers registered after this one (by what the tasks loaded) still run first.
    The worker leaves with status 0: only a clean stop runs exit handlers (a crash or kill is a signal), and
    loky reads worker statuses only while tasks are running, never after it stopped the pool."""
    watch_parent(parent_pid)
    if not _LEAVING_QUICKLY:
        _LEAVING_QUICKLY.append(True)
        atexit.register(leave_now, 0)


_LEAVING_QUICKLY: list = []


def stop_group(proc, grace: float = 5.0) -> None:
    """SIGTERM to a child's whole process group, SIGKILL after `grace` seconds; waits for the child."""
    if proc.poll() is not None:
        return
    for sig, wait in ((signal.SIGTERM, grace), (signal.SIGKILL, None)):
        try:
            os.killpg(proc.pid, sig)
        except ProcessLookupError:
            return
        try:
            proc.wait(timeout=wait)
            break
        except Exception:   # subprocess.TimeoutExpired: escalate
            continue
    with contextlib.suppress(ProcessLookupError):
        os.killpg(proc.pid, signal.SIGKILL)   # anything the server left behind in its group
