"""Reading executions back from the tracking store (report, compare, predict)."""
from __future__ import annotations

import pathlib
import tempfile

import yaml
from mlflow.tracking import MlflowClient

from .store import ensure_store
from .tracking import LockRetrying, store_lock

# ---------------------------------------------------------------- reading the store back
EXECUTION_FILTER = "tags.`penduel.kind` = 'execution'"


class StoreError(Exception):
    """The tracking store does not hold what was asked for (a user mistake: exit 2)."""


def open_store(uri: str):
    with store_lock(uri):   # a new SQLite store gets its schema here
        ensure_store(uri)
        return LockRetrying(MlflowClient(tracking_uri=uri))


def _experiment_ids(client: MlflowClient, experiment: str | None) -> list[str]:
    if experiment is None:
        return [e.experiment_id for e in client.search_experiments()]
    exp = client.get_experiment_by_name(experiment)
    if exp is None:
        known = sorted(e.name for e in client.search_experiments())
        raise StoreError(f"--experiment: no experiment named '{experiment}' in the tracking store; "
                         f"it holds {known or 'no experiments'}.")
    return [exp.experiment_id]


def execution_runs(client: MlflowClient, experiment: str | None = None, run_ids=(), last: int | None = None,
                   finished_only: bool = True) -> list:
    """Parent runs: the given ids in the given order, or the newest `last` executions (all when
    `last` is None) of one experiment or of the whole store, newest first."""
    if run_ids:
        runs = []
        for rid in run_ids:
            try:
                run = client.get_run(rid)
            except Exception:   # mlflow raises its own exception type for an unknown id
                raise StoreError(f"run id '{rid}' is not in the tracking store.") from None
            if run.data.tags.get("penduel.kind") != "execution":
                parent = run.data.tags.get("mlflow.parentRunId")
                hint = f" (it is a child run; its execution is {parent})" if parent else ""
                raise StoreError(f"run id '{rid}' is not a penduel execution{hint}.")
            runs.append(run)
        return runs
    ids = _experiment_ids(client, experiment)
    if not ids:
        return []
    filt = EXECUTION_FILTER + (" and attributes.status = 'FINISHED'" if finished_only else "")
    runs = client.search_runs(ids, filter_string=filt, order_by=["attributes.start_time DESC"],
                              max_results=last or 1000)
    return list(runs)


def child_runs(client: MlflowClient, parent) -> list:
    return list(client.search_runs([parent.info.experiment_id],
                                   filter_string=f"tags.mlflow.parentRunId = '{parent.info.run_id}'"))


def latest_execution(client: MlflowClient, experiment: str | None = None):
    runs = execution_runs(client, experiment, last=1)
    if not runs:
        where = f"experiment '{experiment}'" if experiment else "the tracking store"
        raise StoreError(f"--latest: {where} holds no finished penduel execution yet; run one with "
                         f"`penduel run CONFIG` first.")
    return runs[0]


def read_artifact(client: MlflowClient, run_id: str, name: str) -> str:
    """Text of one artifact of a run, downloaded from the store (local or remote) to a temporary folder."""
    with tempfile.TemporaryDirectory() as tmp:
        try:
            path = client.download_artifacts(run_id, name, tmp)
        except Exception as exc:   # missing artifact: mlflow's error type depends on the store
            raise StoreError(f"run {run_id} has no artifact '{name}' in the tracking store ({exc}).") from None
        return pathlib.Path(path).read_text(encoding="utf-8")


def read_payload(client: MlflowClient, run_id: str) -> dict:
    import json

    return json.loads(read_artifact(client, run_id, "report_data.json"))


def read_config(client: MlflowClient, run_id: str) -> dict:
    return yaml.safe_load(read_artifact(client, run_id, "config.yaml"))
