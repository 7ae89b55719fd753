"""Shared helpers and the session's executed store.

`store` (session scope) runs two tiny executions once into one SQLite store on tmpfs; every test that only
reads a store (end to end, compare, report, tracking server, browser) reuses it. Tests that must write
(concurrency, resume, determinism, failures) make their own runs. Tests drive the command line and read the
store with the mlflow client, not pipeline internals, so they do not depend on the module layout.
"""
from __future__ import annotations

import atexit
import contextlib
import io
import json
import os
import pathlib
import re
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.error
import urllib.request

import pytest
import yaml

ROOT = pathlib.Path(__file__).resolve().parents[1]
CONFIGS = pathlib.Path(__file__).resolve().parent / "configs"


def run_cli(args, cwd, timeout=300):
    """Run the installed command as a user would, in `cwd`."""
    env = dict(os.environ, PYTHONWARNINGS="ignore")
    return subprocess.run([sys.executable, "-m", "pipeline.cli", *map(str, args)], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout)


@pytest.fixture
def cli():
    return run_cli


def scratch_dir(prefix: str) -> pathlib.Path:
    """A folder on tmpfs when there is one: an mlflow SQLite store on disk pays for every fsync."""
    base = "/dev/shm" if os.path.isdir("/dev/shm") and os.access("/dev/shm", os.W_OK) else None
    path = pathlib.Path(tempfile.mkdtemp(prefix=prefix, dir=base))
    atexit.register(shutil.rmtree, path, True)
    return path


def run_demo_copy(prefix: str = "penduel-demo-") -> tuple[pathlib.Path, dict, int, str, str]:
    """configs/demo.yaml run from a copy in a scratch folder, its store, reports and cache beside the copy
    (the shipped file points them at the checkout): (folder, config, exit code, stdout, stderr)."""
    import yaml

    cwd = scratch_dir(prefix)
    config = yaml.safe_load((ROOT / "configs" / "demo.yaml").read_text())
    for key in ("tracking", "report", "cache"):
        config.pop(key, None)
    (cwd / "demo.yaml").write_text(yaml.safe_dump(config))
    code, out, err = penduel(["run", "demo.yaml", "--quiet"], cwd)
    return cwd, config, code, out, err


def penduel(args, cwd) -> tuple[int, str, str]:
    """The command line in this process (imports are paid once per test session). mlflow keeps one
    store per URI string in a process, so a run gets its folder's store by absolute path."""
    from pipeline.cli import main

    args = [str(a) for a in args]
    if args[0] == "run" and "--tracking-uri" not in args:
        db = pathlib.Path(cwd).resolve() / "mlflow.db"
        if not db.exists():      # a new store starts as a copy of one made once (see empty_store)
            shutil.copyfile(empty_store(), db)
        args += ["--tracking-uri", f"sqlite:///{db}"]
    out, err = io.StringIO(), io.StringIO()
    old = os.getcwd()
    os.chdir(cwd)
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            code = main(args)
    finally:
        os.chdir(old)
    return code, out.getvalue(), err.getvalue()


_EMPTY_STORE: list = []


def empty_store() -> pathlib.Path:
    """A new, empty SQLite store made once per session by penduel's own creation (pipeline.store.ensure_store:
    every schema migration, about 1.5 s). In-process runs in a fresh folder start from a copy of it; store
    creation itself, repair and interrupted creation are tested where a test makes its own store."""
    if not _EMPTY_STORE:
        from pipeline.store import ensure_store

        path = scratch_dir("penduel-empty-store-") / "mlflow.db"
        ensure_store(f"sqlite:///{path}")
        _EMPTY_STORE.append(path)
    return _EMPTY_STORE[0]


def without_written_time(html: str) -> str:
    return re.sub(r"<dt>Written</dt><dd>[^<]*</dd>", "", html)


def children_of(client, run_id: str) -> list:
    parent = client.get_run(run_id)
    return client.search_runs([parent.info.experiment_id], filter_string=f"tags.mlflow.parentRunId = '{run_id}'")


def stored_payload(client, run_id: str, into: pathlib.Path) -> dict:
    """The execution's report_data.json as stored in the tracking store (read with the mlflow client)."""
    return json.loads(pathlib.Path(client.download_artifacts(run_id, "report_data.json", str(into)))
                      .read_text(encoding="utf-8"))


# ------------------------------------------------------------------ the session's executed store
def store_configs() -> dict[str, dict]:
    """E1: tests/configs/tiny.yaml with 10 resamples and nested CV; E2: the same data with 4 folds, the
    one-SE rule and a Huber loss (no nested CV)."""
    base = yaml.safe_load((CONFIGS / "tiny.yaml").read_text())
    base["stability"] = {"n_resamples": 10}
    first = dict(base, selection=dict(base["selection"], nested=True))
    second = dict(base, losses=["squared", "huber"], selection={"cv_folds": 4, "rule": "one_standard_error"})
    return {"first.yaml": first, "second.yaml": second}


_WANTS_SERVER = False


def pytest_collection_modifyitems(session, config, items):
    # The tracking server takes many seconds to start: when a collected test needs it, the store fixture
    # starts it in the background as soon as the store exists, and it comes up while other tests run.
    global _WANTS_SERVER
    _WANTS_SERVER = any("tracking_server" in getattr(item, "fixturenames", ()) for item in items)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class _Server:
    def __init__(self, uri: str, cwd: pathlib.Path):
        self.port = free_port()
        self.base = f"http://127.0.0.1:{self.port}"
        self.log = cwd / "server.log"        # a file, not a pipe: an unread pipe could fill and stall it
        with open(self.log, "wb") as out:
            self.proc = subprocess.Popen([sys.executable, "-m", "pipeline.cli", "ui", "--tracking-uri", uri,
                                          "--port", str(self.port)], cwd=cwd, stdout=out,
                                         stderr=subprocess.STDOUT, start_new_session=True)

    def wait_until_up(self, timeout: float = 120) -> str:
        deadline = time.monotonic() + timeout
        while True:
            try:
                with urllib.request.urlopen(f"{self.base}/health", timeout=5) as r:
                    if r.status == 200:
                        return self.base
            except (urllib.error.URLError, ConnectionError, TimeoutError):
                pass
            if self.proc.poll() is not None or time.monotonic() > deadline:
                self.stop()
                raise AssertionError(f"tracking server did not come up: {self.log.read_text()[-2000:]}")
            time.sleep(0.3)

    def stop(self) -> None:
        if self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGTERM)      # the server's workers share its process group
            try:
                self.proc.wait(timeout=2)     # a graceful stop takes the server ~5 s; nothing is left to save
            except subprocess.TimeoutExpired:
                os.killpg(self.proc.pid, signal.SIGKILL)
                self.proc.wait()


@pytest.fixture(scope="session")
def store():
    """Two executions in one store (see store_configs):
    {"cwd", "uri", "runs": [{run_id, report, html, stdout, stderr}, ...], "server"}."""
    cwd = scratch_dir("penduel-store-")
    runs = []
    for name, config in store_configs().items():
        (cwd / name).write_text(yaml.safe_dump(config))
        code, out, err = penduel(["run", name, "--quiet"], cwd)
        assert code == 0, err
        report = pathlib.Path(re.search(r"report: (\S+)", out).group(1))
        runs.append({"run_id": re.search(r"run id: ([0-9a-f]{32})", out).group(1), "report": report,
                     "html": report.read_text(encoding="utf-8"), "stdout": out, "stderr": err})
    found = {"cwd": cwd, "uri": f"sqlite:///{cwd / 'mlflow.db'}", "runs": runs, "server": None}
    if _WANTS_SERVER:
        found["server"] = _Server(found["uri"], cwd)
    try:
        yield found
    finally:
        if found["server"] is not None:
            found["server"].stop()


@pytest.fixture(scope="session")
def tracking_server(store):
    """One `penduel ui` server on the session store for every module that needs one; yields its base URL."""
    if store["server"] is None:          # started on demand when collection did not see it coming
        store["server"] = _Server(store["uri"], store["cwd"])
    return store["server"].wait_until_up()
