"""Team store: an execution logged to a real PostgreSQL server on loopback, read back from it.

The server is PENDUEL_TEST_POSTGRES_URI when set (.ci/run starts one), otherwise a throwaway cluster
this module starts with Debian's `postgresql` binaries and stops afterwards.
"""
from __future__ import annotations

import glob
import os
import pathlib
import re
import shutil
import subprocess

import pytest

from pipeline.stored_runs import open_store

from .conftest import CONFIGS, free_port, penduel, scratch_dir, without_written_time

pytest.importorskip("psycopg", reason="psycopg (psycopg[binary]) is not installed; postgresql:// stores need it")


def _pg_bin() -> pathlib.Path | None:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"))
    path = found[-1] if found else shutil.which("initdb")
    return pathlib.Path(path).parent if path else None


def _as_server_user(cmd: list[str]) -> list[str]:
    """PostgreSQL refuses to run as root: run it as the `postgres` account the package creates."""
    return ["runuser", "-u", "postgres", "--", *cmd] if os.geteuid() == 0 else cmd


@pytest.fixture(scope="module")
def postgres_uri():
    if os.environ.get("PENDUEL_TEST_POSTGRES_URI"):
        yield os.environ["PENDUEL_TEST_POSTGRES_URI"]
        return
    bin_dir = _pg_bin()
    if bin_dir is None:
        pytest.skip("PostgreSQL is not installed (Debian: apt-get install -y postgresql; .ci/run does this)")
    data = scratch_dir("penduel-pg-")
    if os.geteuid() == 0:
        shutil.chown(data, "postgres")
    port = free_port()
    subprocess.run(_as_server_user([str(bin_dir / "initdb"), "-D", str(data), "-U", "penduel", "--auth=trust",
                                    "-E", "UTF8"]), check=True, capture_output=True, timeout=120)
    opts = f"-c listen_addresses=127.0.0.1 -p {port} -k {data} -c fsync=off"
    subprocess.run(_as_server_user([str(bin_dir / "pg_ctl"), "-D", str(data), "-o", opts, "-l",
                                    str(data / "server.log"), "-w", "start"]), check=True, capture_output=True,
                   timeout=120)
    try:
        yield f"postgresql://penduel@127.0.0.1:{port}/postgres"
    finally:
        subprocess.run(_as_server_user([str(bin_dir / "pg_ctl"), "-D", str(data), "-m", "fast", "-w", "stop"]),
                       capture_output=True, timeout=120)


def test_execution_logged_to_postgres_reads_back(postgres_uri):
    cwd = scratch_dir("penduel-pg-run-")
    (cwd / "tiny.yaml").write_text((CONFIGS / "tiny.yaml").read_text() + "stability: {n_resamples: 4}\n"
                                   "tracking: {experiment_name: team-store-check}\n")
    code, out, err = penduel(["run", "tiny.yaml", "--quiet", "--tracking-uri", postgres_uri], cwd)
    assert code == 0, err
    run_id = re.search(r"run id: ([0-9a-f]{32})", out).group(1)
    original = pathlib.Path(re.search(r"report: (\S+)", out).group(1)).read_text(encoding="utf-8")

    client = open_store(postgres_uri)
    assert client.get_run(run_id).info.status == "FINISHED"
    exp = client.get_experiment_by_name("team-store-check")
    children = client.search_runs([exp.experiment_id], filter_string=f"tags.mlflow.parentRunId = '{run_id}'")
    assert sorted(c.data.params["family"] for c in children) == ["l1", "l2"]
    for child in children:
        assert child.data.metrics["test_rmse"] > 0
        n_grid = int(child.data.params["path_points"])   # 8, or more where the grid was widened
        assert n_grid >= 8 and len(client.get_metric_history(child.info.run_id, "cv_error")) == n_grid

    shutil.rmtree(cwd / "reports")
    code, out, err = penduel(["report", "--latest", "--experiment", "team-store-check", "--tracking-uri",
                              postgres_uri], cwd)
    assert code == 0, err
    again = pathlib.Path(re.search(r"report: (\S+)", out).group(1)).read_text(encoding="utf-8")
    assert without_written_time(again) == without_written_time(original)
