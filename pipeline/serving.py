"""Stored models in the tracking store: each (family, loss) child run's chosen model saved in mlflow's
model format (python-function flavour plus the scikit-learn flavour), optionally registered; and
`penduel predict`, which loads them back and applies them to new rows side by side.

Loading a model unpickles code: load models only from tracking stores you trust.
"""
from __future__ import annotations

import datetime as dt
import logging
import pathlib
import shutil
import tempfile
import uuid
import warnings
from importlib import metadata

import numpy as np
import pandas as pd

from .data import DataError
from .packaged import PackagedModel, PenduelPythonModel, export_state, write_state

MODEL_DIR = "model"                 # the artifact folder of the model in each child run
SKLEARN_FILE = "model.pkl"
MLMODEL = "MLmodel"
# Past this many input columns a stored model carries no mlflow signature or input example: mlflow writes
# both column by column (JSON, YAML) and checks the example against the schema, which at 200 000 columns
# costs several hundred MiB and minutes. The model still refuses rows missing a training column itself.
SIGNATURE_MAX_COLUMNS = 2000
REQUIREMENTS = ("penduel", "mlflow", "numpy", "scipy", "scikit-learn", "pandas", "cloudpickle")


def requirements() -> list[str]:
    """The model's Python requirements, pinned to this environment (mlflow would otherwise infer them by
    loading the model in a subprocess). penduel itself must be installed where the model is loaded."""
    out = []
    for name in REQUIREMENTS:
        try:
            out.append(f"{name}=={metadata.version(name)}")
        except metadata.PackageNotFoundError:
            out.append(name)
    return out


class ModelWriter:
    """Writes the stored models of one execution as mlflow model folders: the python-function flavour
    rebuilt from the arrays, plus the scikit-learn flavour (the same pipeline as one estimator), with an input
    signature and an input example.

    The models of one execution share their input columns, example rows, code and requirements, so mlflow's
    own save (environment files, example files, the checks of the example against the signature, the MLmodel
    file) runs once per distinct signature; each further model with that signature is the saved folder with
    its own state, its own pickled estimator and its own MLmodel identity (uuid, creation time, size)."""

    def __init__(self, workdir: pathlib.Path):
        self.workdir = pathlib.Path(workdir)
        self.templates: dict[tuple, pathlib.Path] = {}
        self._read: dict[pathlib.Path, object] = {}

    def save(self, folder: pathlib.Path, arrays: dict, meta: dict, input_example: pd.DataFrame,
             encoded_example: np.ndarray) -> PackagedModel:
        """`encoded_example` is `input_example` as the training encoding (the rows' feature matrix)."""
        import cloudpickle

        model = PackagedModel.from_state(arrays, meta)
        wide = input_example.shape[1] > SIGNATURE_MAX_COLUMNS
        output = model.table(model.decision_encoded(encoded_example))
        key = (wide, tuple(input_example.columns), tuple((c, str(output[c].dtype)) for c in output.columns))
        template = self.templates.get(key)
        if template is None:
            self._save_with_mlflow(folder, arrays, meta, None if wide else input_example, output)
            template = self.workdir / f"template-{len(self.templates)}"
            shutil.copytree(folder, template)
            self.templates[key] = template
        else:
            self._save_from_template(template, folder, arrays, meta)
        with open(folder / SKLEARN_FILE, "wb") as fh:
            cloudpickle.dump(model, fh)
        return model

    @staticmethod
    def _save_with_mlflow(folder, arrays, meta, input_example, output) -> None:
        import mlflow
        import sklearn
        from mlflow.models import Model, infer_signature

        state = write_state(folder.parent / (folder.name + "-state"), arrays, meta)
        signature = None if input_example is None else infer_signature(input_example, output)
        # the scikit-learn flavour is declared up front, so mlflow writes the MLmodel file once with both
        mlmodel = Model()
        mlmodel.add_flavor("sklearn", pickled_model=SKLEARN_FILE, sklearn_version=sklearn.__version__,
                           serialization_format="cloudpickle", code=None)
        quiet = logging.getLogger("mlflow")
        level, quiet.level = quiet.level, logging.ERROR   # mlflow's notes on pickling: the README says it once
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", UserWarning)
                mlflow.pyfunc.save_model(str(folder), python_model=PenduelPythonModel(),
                                         artifacts={"state": str(state)}, signature=signature,
                                         input_example=input_example, pip_requirements=requirements(),
                                         mlflow_model=mlmodel)
        finally:
            quiet.setLevel(level)

    def _save_from_template(self, template, folder, arrays, meta) -> None:
        from mlflow.utils.file_utils import get_total_file_size

        mlmodel = self._mlmodel(template)
        state = mlmodel.flavors["python_function"]["artifacts"]["state"]
        shutil.copytree(template, folder, ignore=lambda where, names: (
            {MLMODEL, SKLEARN_FILE} if pathlib.Path(where) == template else
            set(names) if pathlib.Path(where) == template / state["path"] else set()))
        write_state(folder / state["path"], arrays, meta)
        state["uri"] = str(folder.parent / (folder.name + "-state"))   # where mlflow would have read it from
        mlmodel.model_uuid = uuid.uuid4().hex
        mlmodel.utc_time_created = str(dt.datetime.now(dt.timezone.utc).replace(tzinfo=None))
        mlmodel.model_size_bytes = get_total_file_size(folder)   # as mlflow measures it: before MLmodel
        mlmodel.save(str(folder / MLMODEL))

    def _mlmodel(self, template):
        """The template's MLmodel, read once (every field this writer changes is set again for each model)."""
        from mlflow.models import Model

        if template not in self._read:
            self._read[template] = Model.load(str(template / MLMODEL))
        return self._read[template]

    def log(self, client, run_id: str, result, r, register_as: str | None = None) -> dict:
        """Package one child run's chosen model into the run's `model` artifact folder; register it as
        `<register_as>-<family>-<loss label>` when asked. Returns tags describing what was stored (the caller
        writes them to the run with its other tags)."""
        try:
            return _store_model(client, run_id, result, r, self, register_as)
        except Exception as exc:   # a model that cannot be stored is recorded; the execution's results stand
            return {"penduel.model_error": f"{type(exc).__name__}: {exc}"[:4000]}


def _store_model(client, run_id: str, result, r, writer: ModelWriter, register_as: str | None) -> dict:
    from .packaged import check_reproduces, input_frame

    arrays, meta = export_state(result, r)
    meta["run_id"] = run_id
    example = input_frame(result.dataset, result.train_rows[:5])
    with tempfile.TemporaryDirectory() as tmp:
        folder = pathlib.Path(tmp) / MODEL_DIR
        model = writer.save(folder, arrays, meta, example, result.dataset.X[result.train_rows[:5]])
        gap = check_reproduces(model, result, r)
        client.log_artifacts(run_id, str(folder), MODEL_DIR)
    tags = {"penduel.model": f"runs:/{run_id}/{MODEL_DIR}",
            **({"penduel.model_signature": f"none stored: {example.shape[1]} input columns (more than "
                                           f"{SIGNATURE_MAX_COLUMNS}); the model checks its columns itself"}
               if example.shape[1] > SIGNATURE_MAX_COLUMNS else {}),
            "penduel.model_check": "reproduces the held-out predictions exactly" if gap == 0 else
            f"differs from the held-out predictions by up to {gap:.3g}"}
    if register_as:
        name = f"{register_as}-{r.family}-{r.loss_label}"
        try:
            client.get_registered_model(name)
        except Exception:   # mlflow raises its own not-found error type
            client.create_registered_model(name)
        version = client.create_model_version(name, f"runs:/{run_id}/{MODEL_DIR}", run_id=run_id,
                                              tags={"penduel.family": r.family, "penduel.loss": r.loss_label})
        tags["penduel.registered"] = f"{name} v{version.version}"
    return tags


# ---------------------------------------------------------------- penduel predict
def stored_models(client, run_id: str) -> tuple[str, list]:
    """The execution of `run_id` (an execution or one of its child runs) and its child runs that hold a
    model, in the order they were logged."""
    from .stored_runs import StoreError, child_runs

    try:
        run = client.get_run(run_id)
    except Exception:   # mlflow raises its own exception type for an unknown id
        raise StoreError(f"run id '{run_id}' is not in the tracking store.") from None
    tags = run.data.tags
    if tags.get("penduel.kind") == "fit":
        parent = client.get_run(tags["mlflow.parentRunId"])
        chosen = [run]
    elif tags.get("penduel.kind") == "execution":
        parent, chosen = run, child_runs(client, run)
    else:
        raise StoreError(f"run id '{run_id}' is not a penduel run (neither an execution nor one of its fits).")
    chosen = sorted((c for c in chosen if "penduel.model" in c.data.tags), key=lambda c: c.info.start_time)
    if not chosen:
        raise StoreError(f"run {parent.info.run_id} stores no models; it was run before penduel stored them. "
                         f"Run its config again with `penduel run` to store them.")
    return parent.info.run_id, chosen


def load_packaged(client, child) -> PackagedModel:
    """A child run's model loaded through mlflow's python-function loader, unwrapped to the pipeline."""
    import mlflow

    with tempfile.TemporaryDirectory() as tmp:
        path = client.download_artifacts(child.info.run_id, MODEL_DIR, tmp)
        return mlflow.pyfunc.load_model(path).unwrap_python_model().model


def predict_side_by_side(client, run_id: str, frame: pd.DataFrame, source: str, unseen: str = "refuse",
                         families=None, losses=None) -> tuple[pd.DataFrame, list[dict]]:
    """Every stored model of the execution applied to `frame`: one row per input row, the columns of each
    model prefixed `<family>.<loss label>.`, with the execution's run id and each model's version."""
    execution, children = stored_models(client, run_id)
    out = pd.DataFrame({"row": np.arange(len(frame)), "run_id": execution})
    used = []
    for child in children:
        family, loss = child.data.tags["penduel.family"], child.data.tags["penduel.loss"]
        if (families and family not in families) or (losses and loss not in losses):
            continue
        model = load_packaged(client, child)
        table = model.table(model.decision_encoded(model.encode(frame, source, unseen)))
        version = child.data.tags.get("penduel.registered", child.data.tags["penduel.model"])
        prefix = f"{family}.{loss}."
        for col in table.columns:
            out[prefix + col] = table[col].to_numpy()
        out[prefix + "model"] = version
        used.append({"family": family, "loss": loss, "run_id": child.info.run_id, "model": version})
    if not used:
        raise DataError(f"--family/--loss: no stored model of run {execution} matches; it holds "
                        f"{', '.join(c.data.tags['penduel.family'] + '/' + c.data.tags['penduel.loss'] for c in children)}.")
    return out, used
