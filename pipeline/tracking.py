"""Everything that talks to mlflow: one parent run per execution, one child per (family, loss)."""
from __future__ import annotations

import contextlib
import logging
import os
import pathlib
import platform
import random
import subprocess
import tempfile
import time
from importlib import metadata

import numpy as np
import pandas as pd
import psutil
import yaml

try:
    import fcntl
except ImportError:  # Windows has no fcntl: no cross-process lock there
    fcntl = None

for _name in ("alembic", "mlflow", "mlflow.store", "sqlalchemy"):
    logging.getLogger(_name).setLevel(logging.WARNING)
os.environ.setdefault("MLFLOW_ENABLE_ARTIFACTS_PROGRESS_BAR", "false")

import mlflow  # noqa: E402
from mlflow.entities import Metric, Param, RunTag  # noqa: E402
from mlflow.tracking import MlflowClient  # noqa: E402

from .losses_weighted import weights_label  # noqa: E402
from .models.families import get_family  # noqa: E402
from .store import artifact_location, ensure_store, spreadsheet_safe  # noqa: E402

EXPERIMENT_KIND = ("mlflow.experimentKind", "custom_model_development")   # mlflow's tag for model training

PACKAGES = ("penduel", "numpy", "scipy", "scikit-learn", "cvxpy", "mlflow", "pandas")


def package_versions() -> dict[str, str]:
    out = {}
    for name in PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def git_commit() -> str | None:
    try:
        done = subprocess.run(["git", "rev-parse", "HEAD"], capture_output=True, text=True, timeout=5)
    except (OSError, subprocess.SubprocessError):
        return None
    return done.stdout.strip() if done.returncode == 0 else None


def machine_summary() -> str:
    return f"{platform.system()} {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}"


def _finite(x) -> bool:
    return x is not None and np.isfinite(x)


def predictions_frame(result, r) -> pd.DataFrame:
    """Held-out rows; `row` is the row's position in the input data. Classification labels are
    mapped back to the data's own labels, with the decision value beside them."""
    if np.ndim(r.test_pred) == 2:   # K > 2 classes: codes 0..K−1, the predicted class is the argmax
        labels = np.asarray(result.dataset.class_labels, dtype=object)
        frame = pd.DataFrame({"row": result.test_rows, "y_true": labels[result.y_test.astype(int)],
                              "y_pred": labels[np.argmax(r.test_pred, axis=1)]})
        for k, label in enumerate(labels):
            frame[f"decision_{label}"] = r.test_pred[:, k]
        return frame
    if result.dataset.task == "classification":
        neg, pos = result.dataset.class_labels or ("-1", "+1")
        to_label = np.vectorize(lambda v: pos if v > 0 else neg)
        return pd.DataFrame({"row": result.test_rows, "y_true": to_label(result.y_test),
                             "y_pred": to_label(r.test_pred), "decision": r.test_pred})
    return pd.DataFrame({"row": result.test_rows, "y_true": result.y_test, "y_pred": r.test_pred})


# ---------------------------------------------------------------- several processes, one SQLite store
@contextlib.contextmanager
def store_lock(uri: str):
    """Serialise schema and experiment creation between processes sharing one SQLite file
    (two first-time migrations at once corrupt the store)."""
    if not uri.startswith("sqlite:///") or fcntl is None:
        yield
        return
    lock = pathlib.Path(uri[len("sqlite:///"):] + ".lock")
    lock.parent.mkdir(parents=True, exist_ok=True)
    with open(lock, "a") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(fh, fcntl.LOCK_UN)


class LockRetrying:
    """An MlflowClient whose calls retry with growing waits while another process holds the
    SQLite write lock ("database is locked"); the failed transaction was rolled back, so a retry is safe."""

    def __init__(self, client, attempts: int = 10, first_wait: float = 0.05):
        self._client, self._attempts, self._first_wait = client, attempts, first_wait

    def __getattr__(self, name):
        attr = getattr(self._client, name)
        if not callable(attr):
            return attr

        def call(*args, **kwargs):
            wait = self._first_wait
            for attempt in range(self._attempts):
                try:
                    return attr(*args, **kwargs)
                except Exception as exc:
                    if "database is locked" not in str(exc) or attempt == self._attempts - 1:
                        raise
                    time.sleep(wait * (1.0 + random.random()))
                    wait = min(2 * wait, 5.0)
        return call


def process_tags() -> dict[str, str]:
    me = psutil.Process()
    return {"penduel.host": platform.node(), "penduel.pid": str(me.pid), "penduel.pid_started": repr(me.create_time())}


def _process_gone(tags) -> bool:
    try:
        return abs(psutil.Process(int(tags["penduel.pid"])).create_time() - float(tags["penduel.pid_started"])) > 1e-3
    except (psutil.NoSuchProcess, KeyError, ValueError):
        return True


def mark_abandoned_runs(client, experiment_id: str, config_hash: str) -> list[str]:
    """RUNNING parent runs of this config whose process on this host no longer exists (it was killed
    with no chance to close its run, e.g. SIGKILL) are marked KILLED, with their children."""
    found = client.search_runs([experiment_id], filter_string=(
        f"tags.`penduel.kind` = 'execution' and tags.`penduel.config_hash` = '{config_hash}' "
        f"and attributes.status = 'RUNNING'"))
    marked = []
    for run in found:
        if run.data.tags.get("penduel.host") != platform.node() or not _process_gone(run.data.tags):
            continue
        children = client.search_runs([experiment_id], filter_string=(
            f"tags.mlflow.parentRunId = '{run.info.run_id}' and attributes.status = 'RUNNING'"))
        for r in [*children, run]:
            client.set_tag(r.info.run_id, "penduel.error", "the process ended without closing this run; "
                                                           "marked KILLED by a later run of the same config")
            client.set_terminated(r.info.run_id, "KILLED")
        marked.append(run.info.run_id)
    return marked


class ExecutionLog:
    """Context manager around one execution. The parent run ends FINISHED, FAILED or KILLED
    according to what happened inside the block."""

    def __init__(self, spec, uri: str | None = None):
        self.spec = spec
        self.uri = uri or spec.tracking.uri
        with store_lock(self.uri):   # a new store's schema is made under a temporary name, then renamed
            ensure_store(self.uri)
            self.client = LockRetrying(MlflowClient(tracking_uri=self.uri))
        self.experiment_name = spec.tracking.experiment_name or spec.name
        self.run_id: str | None = None
        self.child_ids: dict[tuple[str, str], str] = {}

    def __enter__(self) -> "ExecutionLog":
        with store_lock(self.uri):
            exp = self.client.get_experiment_by_name(self.experiment_name)
            exp_id = exp.experiment_id if exp else self.client.create_experiment(
                self.experiment_name, artifact_location=artifact_location(self.uri))
            if not exp or exp.tags.get(EXPERIMENT_KIND[0]) != EXPERIMENT_KIND[1]:   # the UI opens on the runs table
                self.client.set_experiment_tag(exp_id, *EXPERIMENT_KIND)
        self.abandoned_runs = mark_abandoned_runs(self.client, exp_id, self.spec.config_hash())
        self.experiment_id = exp_id
        tags = {"penduel.config_hash": self.spec.config_hash(), "penduel.kind": "execution",
                "penduel.machine": machine_summary(), "mlflow.runName": f"{self.spec.name}", **process_tags()}
        commit = git_commit()
        if commit:
            tags["penduel.git_commit"] = commit
        tags.update({f"penduel.version.{k}": v for k, v in package_versions().items()})
        run = self.client.create_run(exp_id, tags=tags, run_name=self.spec.name)
        self.run_id = run.info.run_id
        self._log_yaml(self.run_id, self.spec.resolved(), "config.yaml")
        return self

    def __exit__(self, exc_type, exc, tb) -> bool:
        if self.run_id is None:
            return False
        if exc_type is None:
            status = "FINISHED"
        elif issubclass(exc_type, KeyboardInterrupt):
            status = "KILLED"
        else:
            status = "FAILED"
            self.client.set_tag(self.run_id, "penduel.error", f"{exc_type.__name__}: {exc}"[:4000])
        for child in self.child_ids.values():
            self.client.set_terminated(child, status)
        self.client.set_terminated(self.run_id, status)
        return False

    # ------------------------------------------------------------ writing
    # Few store transactions: each run's params, tags and metrics go in one log_batch, and its files
    # are written to one folder and sent with one log_artifacts call.
    def _log_yaml(self, run_id, data, name):
        self._log_files(run_id, {name: data})

    def _log_files(self, run_id, files: dict) -> None:
        """name → DataFrame (written as CSV) or YAML-able data, all logged to the run together."""
        with tempfile.TemporaryDirectory() as tmp:
            for name, content in files.items():
                path = os.path.join(tmp, name)
                if isinstance(content, pd.DataFrame):
                    spreadsheet_safe(content).to_csv(path, index=False)
                else:
                    with open(path, "w", encoding="utf-8") as fh:
                        yaml.safe_dump(content, fh, sort_keys=False, allow_unicode=True)
            self.client.log_artifacts(run_id, tmp)

    def log_results(self, result) -> None:
        ds = result.dataset
        self.client.log_batch(self.run_id, params=[
            Param("data_source", ds.source[:500]), Param("n_rows", str(ds.n_samples)),
            Param("n_columns", str(ds.n_features)), Param("n_features_built", str(len(result.feature_names))),
            Param("n_train", str(len(result.train_rows))), Param("n_test", str(len(result.test_rows))),
            Param("seed", str(result.spec.seed)), Param("cv_folds", str(result.spec.selection.cv_folds)),
            Param("selection_rule", result.spec.selection.rule),
            Param("weighted_metrics", str(result.spec.verdict.weighted_metrics))],
            tags=[RunTag("penduel.data_hash", result.data_hash)])
        if getattr(result, "solver_output", ()):   # solver banners and warnings, kept off the terminal
            self.client.log_text(self.run_id, "\n\n".join(result.solver_output), "solver_output.txt")
        from .serving import ModelWriter   # scikit-learn and mlflow's model format: loaded once fitting is done

        with tempfile.TemporaryDirectory() as tmp:   # the stored models' shared mlflow-written folders
            writer = ModelWriter(pathlib.Path(tmp))
            for r in result.results:
                self._log_child(result, r, writer)

    def _log_child(self, result, r, writer) -> None:
        c = self.client
        name = f"{r.family}-{r.loss_label}"
        tags = {"mlflow.parentRunId": self.run_id, "penduel.kind": "fit", "penduel.shared_artifacts":
                f"config.yaml, index.html and report_data.json are stored once, on the parent run {self.run_id}", "penduel.family": r.family,
                "penduel.loss": r.loss_label, "penduel.config_hash": result.spec.config_hash(),
                "penduel.data_hash": result.data_hash}
        run = c.create_run(self.experiment_id, tags=tags, run_name=name)
        rid = run.info.run_id
        self.child_ids[(r.family, r.loss_label)] = rid
        params = [Param("family", r.family), Param("loss", r.loss_name),
                  Param("lambda_chosen", repr(r.lambda_chosen)), Param("path_points", str(len(r.lambdas))),
                  Param("lambda_largest", repr(float(r.lambdas[0]))),
                  Param("lambda_smallest", repr(float(r.lambdas[-1]))),
                  Param("solver", r.path.solver)]
        params += [Param(f"loss_{k}", repr(v)) for k, v in r.loss_params.items()]
        decision = (getattr(result.evaluation, "decisions", None) or {}).get(r.loss_label)
        if decision is not None:   # the held-out metric that judged this loss
            params.append(Param("decision_metric", decision.metric))
        family = get_family(r.family)
        section = getattr(result.spec.families, family.key)
        params += [Param(name, str(getattr(section, name))) for name in family.tracked_settings]
        params.append(Param("row_weights", weights_label(getattr(result.spec.data, "weights", None),
                                                         section.class_weight)))
        ts = 0
        metrics = []
        for step, lam in enumerate(r.lambdas):
            metrics += [Metric("cv_error", float(r.cv_mean[step]), ts, step),
                        Metric("cv_error_se", float(r.cv_se[step]), ts, step),
                        Metric("lambda", float(lam), ts, step),
                        Metric("path_df", float(r.path.effective_df[step]), ts, step)]
            if r.path.certificate is not None and _finite(r.path.certificate[step]):
                metrics.append(Metric("certificate", float(r.path.certificate[step]), ts, step))
        for key, value in r.metrics.items():
            if _finite(value):
                metrics.append(Metric(f"test_{key}", float(value), ts, 0))
            low, high = r.intervals.get(key, (None, None))
            if _finite(low) and _finite(high):
                metrics += [Metric(f"test_{key}_low", float(low), ts, 0), Metric(f"test_{key}_high", float(high), ts, 0)]
        if r.n_nonzero is not None:
            metrics.append(Metric("n_nonzero", float(r.n_nonzero), ts, 0))
        metrics += [Metric("effective_df", float(r.effective_df), ts, 0),
                    Metric("fit_seconds", float(r.fit_seconds), ts, 0),
                    Metric("cv_seconds", float(r.cv_seconds), ts, 0),
                    Metric("n_not_converged", float((~r.path.converged).sum()), ts, 0)]
        stability_metrics, files = self._stability(result, r)
        metrics += stability_metrics
        if r.coefficients is not None and np.ndim(r.coefficients) == 2:   # one column per class
            files["coefficients.csv"] = pd.DataFrame(
                {"feature": list(result.feature_names),
                 **{f"coefficient_{label}": r.coefficients[:, k] for k, label in enumerate(result.dataset.class_labels)}})
        elif r.coefficients is not None:
            files["coefficients.csv"] = pd.DataFrame({"feature": list(result.feature_names),
                                                      "coefficient": r.coefficients})
        files["predictions.csv"] = predictions_frame(result, r)
        cv = pd.DataFrame(r.cv_errors.T, columns=[f"fold{k}" for k in range(r.cv_errors.shape[0])])
        cv.insert(0, "lambda", r.lambdas)
        cv["mean"], cv["se"], cv["path_df"] = r.cv_mean, r.cv_se, r.path.effective_df
        cv["status"] = list(r.path.status)
        files["cv_table.csv"] = cv
        self._log_files(rid, files)
        model_tags = writer.log(c, rid, result, r, result.spec.tracking.register_as)
        tags = [RunTag(k, v) for k, v in model_tags.items()]
        for start in range(0, max(len(metrics), 1), 900):   # mlflow caps a batch at 1000 entries
            c.log_batch(rid, metrics=metrics[start:start + 900], params=params if start == 0 else [],
                        tags=tags if start == 0 else [])

    @staticmethod
    def _stability(result, r) -> tuple[list, dict]:
        """Metrics of the stability summary at the chosen λ and the selection probabilities along the
        path (sparse family), when the resampling stage ran for this loss."""
        summary = getattr(result, "stability", {}).get(r.loss_label)
        if not summary:
            return [], {}
        metrics, files = [], {}
        row = summary.get("families", {}).get(r.family)
        if row:
            names = {"stability": "stability_index", "lower": "stability_index_low",
                     "upper": "stability_index_high", "mean_set_size": "stability_mean_set_size",
                     "sign_agreement": "stability_sign_agreement",
                     "prediction_instability": "prediction_instability"}
            metrics = [Metric(name, float(row[key]), 0, 0) for key, name in names.items() if _finite(row.get(key))]
        probs = getattr(result, "selection_paths", {}).get((r.loss_label, r.family))   # (L, p), from the stage
        if probs is not None:
            columns = {"feature": list(result.feature_names), "at_chosen_lambda": probs[r.chosen_index]}
            columns.update({f"lambda_{step}={float(lam):.6g}": probs[step] for step, lam in enumerate(r.lambdas)})
            files["selection_probabilities.csv"] = pd.DataFrame(columns)
        return metrics, files

    def log_wall_time(self, seconds: float, result) -> None:
        """The one wall time (start to report written) as `seconds`; with the fit time the results cost
        originally (`fit_seconds_total`, cached fits included) and how many fits the cache supplied."""
        self.client.log_batch(self.run_id, metrics=[
            Metric("seconds", float(seconds), 0, 0), Metric("fit_seconds_total", float(result.fit_seconds_total), 0, 0),
            Metric("tasks_reused", float(result.tasks_reused), 0, 0), Metric("tasks_total", float(result.tasks_total), 0, 0)])

    def log_report(self, path) -> None:
        """The HTML report and its data (report_data.json) go to the parent run once, so the report can be
        rendered again from the store alone; children point to it (tag penduel.shared_artifacts)."""
        self.client.log_artifact(self.run_id, str(path))
        data = pathlib.Path(path).parent / "report_data.json"
        if data.is_file():
            self.client.log_artifact(self.run_id, str(data))
        self.client.set_tag(self.run_id, "penduel.report", str(path))
