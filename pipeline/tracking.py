"""Everything that talks to mlflow: one parent run per execution, one child per (family, loss)."""
from __future__ import annotations

import logging
import os
import pathlib
import platform
import subprocess
import tempfile
from importlib import metadata

import numpy as np
import pandas as pd
import yaml

for _name in ("alembic", "mlflow", "mlflow.store", "sqlalchemy"):
    logging.getLogger(_name).setLevel(logging.WARNING)
os.environ.setdefault("MLFLOW_ENABLE_ARTIFACTS_PROGRESS_BAR", "false")

import mlflow  # noqa: E402
from mlflow.entities import Metric, Param, RunTag  # noqa: E402
from mlflow.tracking import MlflowClient  # noqa: E402

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
    if result.dataset.task == "classification":
        neg, pos = result.dataset.class_labels or ("-1", "+1")
        to_label = np.vectorize(lambda v: pos if v > 0 else neg)
        return pd.DataFrame({"row": result.test_rows, "y_true": to_label(result.y_test),
                             "y_pred": to_label(r.test_pred), "decision": r.test_pred})
    return pd.DataFrame({"row": result.test_rows, "y_true": result.y_test, "y_pred": r.test_pred})


class ExecutionLog:
    """Context manager around one execution. The parent run ends FINISHED, FAILED or KILLED
    according to what happened inside the block."""

    def __init__(self, spec, uri: str | None = None):
        self.spec = spec
        self.uri = uri or spec.tracking.uri
        self.client = MlflowClient(tracking_uri=self.uri)
        self.experiment_name = spec.tracking.experiment_name or spec.name
        self.run_id: str | None = None
        self.child_ids: dict[tuple[str, str], str] = {}

    def __enter__(self) -> "ExecutionLog":
        exp = self.client.get_experiment_by_name(self.experiment_name)
        exp_id = exp.experiment_id if exp else self.client.create_experiment(self.experiment_name)
        self.experiment_id = exp_id
        tags = {"penduel.config_hash": self.spec.config_hash(), "penduel.kind": "execution",
                "penduel.machine": machine_summary(), "mlflow.runName": f"{self.spec.name}"}
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
    def _log_yaml(self, run_id, data, name):
        with tempfile.TemporaryDirectory() as tmp:
            path = os.path.join(tmp, name)
            with open(path, "w", encoding="utf-8") as fh:
                yaml.safe_dump(data, fh, sort_keys=False, allow_unicode=True)
            self.client.log_artifact(run_id, path)

    def _log_frame(self, run_id, frame: pd.DataFrame, name):
        with tempfile.TemporaryDirectory() as tmp:
            path = os.path.join(tmp, name)
            frame.to_csv(path, index=False)
            self.client.log_artifact(run_id, path)

    def log_results(self, result) -> None:
        c = self.client
        ds = result.dataset
        c.log_batch(self.run_id, params=[
            Param("data_source", ds.source[:500]), Param("n_rows", str(ds.n_samples)),
            Param("n_columns", str(ds.n_features)), Param("n_features_built", str(len(result.feature_names))),
            Param("n_train", str(len(result.train_rows))), Param("n_test", str(len(result.test_rows))),
            Param("seed", str(result.spec.seed)), Param("cv_folds", str(result.spec.selection.cv_folds)),
            Param("selection_rule", result.spec.selection.rule)],
            tags=[RunTag("penduel.data_hash", result.data_hash)])
        c.log_metric(self.run_id, "seconds", result.seconds)
        for r in result.results:
            self._log_child(result, r)

    def _log_child(self, result, r) -> None:
        c = self.client
        name = f"{r.family}-{r.loss_label}"
        tags = {"mlflow.parentRunId": self.run_id, "penduel.kind": "fit", "penduel.family": r.family,
                "penduel.loss": r.loss_label, "penduel.config_hash": result.spec.config_hash(),
                "penduel.data_hash": result.data_hash}
        run = c.create_run(self.experiment_id, tags=tags, run_name=name)
        rid = run.info.run_id
        self.child_ids[(r.family, r.loss_label)] = rid
        params = [Param("family", r.family), Param("loss", r.loss_name),
                  Param("lambda_chosen", repr(r.lambda_chosen)), Param("n_lambdas", str(len(r.lambdas))),
                  Param("lambda_max", repr(float(r.lambdas[0]))), Param("lambda_min", repr(float(r.lambdas[-1]))),
                  Param("solver", r.path.solver)]
        params += [Param(f"loss_{k}", repr(v)) for k, v in r.loss_params.items()]
        if r.family == "l2":
            params.append(Param("kernel", result.spec.families.l2.kernel))
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
        for start in range(0, len(metrics), 900):   # mlflow caps a batch at 1000 entries
            c.log_batch(rid, metrics=metrics[start:start + 900], params=params if start == 0 else [])
        self._log_yaml(rid, result.spec.resolved(), "config.yaml")
        if r.coefficients is not None:
            self._log_frame(rid, pd.DataFrame({"feature": list(result.feature_names),
                                               "coefficient": r.coefficients}), "coefficients.csv")
        self._log_frame(rid, predictions_frame(result, r), "predictions.csv")
        cv = pd.DataFrame(r.cv_errors.T, columns=[f"fold{k}" for k in range(r.cv_errors.shape[0])])
        cv.insert(0, "lambda", r.lambdas)
        cv["mean"], cv["se"], cv["path_df"] = r.cv_mean, r.cv_se, r.path.effective_df
        cv["status"] = list(r.path.status)
        self._log_frame(rid, cv, "cv_table.csv")

    def log_report(self, path) -> None:
        """The HTML report goes to every run; its data (report_data.json) to the parent, so the report
        can be rendered again from the store alone."""
        for rid in [self.run_id, *self.child_ids.values()]:
            self.client.log_artifact(rid, str(path))
        data = pathlib.Path(path).parent / "report_data.json"
        if data.is_file():
            self.client.log_artifact(self.run_id, str(data))
        self.client.set_tag(self.run_id, "penduel.report", str(path))
