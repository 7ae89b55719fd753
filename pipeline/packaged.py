"""A chosen model packaged for use on new rows: raw input columns → the training encoding → the
FeatureBuilder (standardise → maps → standardise) → the family's prediction at the chosen λ.

The package is plain arrays and one JSON document (`export_state`), so it can be rebuilt
without pickled penduel objects: the encoded training rows (the FeatureBuilder is fitted on
them again — deterministic, as in the fit task), the λ path's intercepts and either weights per
feature or, for the representer form, the basis rows and dual coefficients with the kernel.
`PackagedModel` rebuilds the whole pipeline from them; `PenduelPythonModel` is its mlflow
python-function wrapper. Predictions run with one BLAS thread, as every fit task does, so a
stored model reproduces the experiment's held-out predictions bit for bit.
"""
from __future__ import annotations

import json
import pathlib
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.special import expit, softmax
from sklearn.base import BaseEstimator
from threadpoolctl import threadpool_limits

from .data import InputColumn
from .data.loaders import encode_rows
from .matrices import as_features, dense, from_parts, to_parts

FORMAT = 1
STATE_ARRAYS = "arrays.npz"
STATE_META = "model.json"


@dataclass(frozen=True)
class StoredPath:
    """A fitted λ path as stored arrays: f_λ(z) = intercept[λ] + coef[λ]·z, or, in representer form,
    intercept[λ] + Σⱼ dual_coef[λ, j] k(basis_j, z)."""
    lambdas: np.ndarray
    intercept: np.ndarray
    coef: np.ndarray | None = None
    dual_coef: np.ndarray | None = None
    basis: np.ndarray | None = None


# ---------------------------------------------------------------- from an experiment to arrays
def input_frame(dataset, rows) -> pd.DataFrame:
    """The rows of `dataset` as raw input columns (one-hot columns decoded back to their text level)."""
    X = dense(dataset.X[np.asarray(rows)])
    if not dataset.inputs:   # every feature is a numeric input column: one block, not a Series per column
        return pd.DataFrame(X, columns=list(dataset.feature_names))
    index = {name: j for j, name in enumerate(dataset.feature_names)}
    inputs = dataset.inputs or tuple(InputColumn(name) for name in dataset.feature_names)
    out = {}
    for c in inputs:
        if c.levels is None:
            if c.name in index:
                out[c.name] = X[:, index[c.name]] == 1.0 if c.boolean else X[:, index[c.name]]
            continue
        used = [(level, index[f"{c.name}={level}"]) for level in c.levels[1:] if f"{c.name}={level}" in index]
        if used:
            values = np.full(len(X), c.levels[0], dtype=object)
            for level, j in used:
                values[X[:, j] == 1.0] = level
            out[c.name] = values
    return pd.DataFrame(out)


def export_state(result, r) -> tuple[dict[str, np.ndarray], dict]:
    """Arrays and metadata of one (family, loss) result at its chosen λ, from the path the final-fit task
    kept as it fitted it (FitOutcome.stored_*): nothing is fitted again."""
    from .fitting import target_scaling
    from .losses import get_loss
    from .models.families import get_family
    from .models.multiclass import for_classes
    from .runner import shared_inputs

    spec, ds = result.spec, result.dataset
    family = for_classes(get_family(r.family), ds.n_classes)
    loss = get_loss(r.loss_name, **r.loss_params)
    rows = result.train_rows
    final = r.path
    if final.stored_intercept is None:
        raise ValueError("the final fit kept no path to store (FitOutcome.stored_* are empty)")
    center, scale = target_scaling(shared_inputs(spec, ds, len(rows)), ds.y[rows])
    arrays = {**to_parts("X_train", ds.X[rows]), "lambdas": final.stored_lambdas,   # sparse: its parts
              "intercept": final.stored_intercept}
    meta = {"format": FORMAT, "family": family.key, "family_title": family.title, "loss": r.loss_name,
            "loss_label": r.loss_label, "loss_params": dict(r.loss_params), "chosen_index": int(r.chosen_index),
            "lambda_chosen": float(r.lambda_chosen), "center": center, "scale": scale, "task": ds.task,
            "class_labels": list(ds.class_labels) if ds.class_labels else None,
            # probabilities from K > 2 classes only where they were fitted together (softmax)
            "probabilities": bool(loss.gives_probabilities) and final.multiclass in ("", "multinomial"),
            "feature_names": list(ds.feature_names),
            "target": ds.target_name,
            "inputs": [{"name": c.name, "levels": None if c.levels is None else list(c.levels),
                        "boolean": c.boolean} for c in ds.inputs],
            "maps": [m.model_dump(mode="json") for m in spec.features.maps], "seed": int(spec.seed)}
    if final.stored_basis is not None:
        arrays.update(**to_parts("basis", final.stored_basis), dual_coef=final.stored_weights)
        meta.update(kernel=final.stored_kernel["kernel"], kernel_params=dict(final.stored_kernel["params"]))
    else:
        arrays["coef"] = final.stored_weights
    return arrays, meta


# ---------------------------------------------------------------- the packaged pipeline
class PackagedModel(BaseEstimator):
    """Raw rows (a DataFrame of the training data's input columns) → predictions at the chosen λ.

    Scikit-learn style: `predict` gives values (regression) or class labels, `decision_function` the
    decision value f(x) on the target's scale, `predict_proba` class probabilities where the loss gives
    them (logistic), `predict_table` all of them as one DataFrame (the python-function output)."""

    def __init__(self, arrays: dict | None = None, meta: dict | None = None):
        self.arrays = arrays
        self.meta = meta

    def fit(self, X=None, y=None):
        """Rebuild the fitted pipeline from the stored arrays (no data is needed or read)."""
        from .config import FeaturesSpec
        from .features import FeatureBuilder

        a, m = self.arrays, self.meta
        if m.get("format") != FORMAT:
            raise ValueError(f"stored model format {m.get('format')!r}; this penduel reads format {FORMAT}")
        maps = FeaturesSpec(maps=m["maps"]).maps
        with threadpool_limits(limits=1):
            self.builder_ = FeatureBuilder(maps, seed=m["seed"], input_names=tuple(m["feature_names"])) \
                .fit(from_parts("X_train", a))
        self.path_ = StoredPath(lambdas=a["lambdas"], intercept=a["intercept"], coef=a.get("coef"),
                                dual_coef=a.get("dual_coef"), basis=from_parts("basis", a))
        self.inputs_ = tuple(InputColumn(c["name"], None if c["levels"] is None else tuple(c["levels"]),
                                         c["boolean"]) for c in m["inputs"])
        if m["class_labels"]:
            self.classes_ = np.asarray(m["class_labels"], dtype=object)
        return self

    def __repr__(self) -> str:
        m = self.meta or {}
        return f"PackagedModel({m.get('family')}, {m.get('loss_label')}, λ = {m.get('lambda_chosen')})"

    @classmethod
    def from_state(cls, arrays: dict, meta: dict) -> "PackagedModel":
        return cls(arrays, meta).fit()

    @property
    def input_columns(self) -> list[str]:
        return [c.name for c in self.inputs_] if self.inputs_ else list(self.meta["feature_names"])

    def encode(self, frame, source: str = "input rows", unseen: str = "refuse") -> np.ndarray:
        """The checked training encoding of raw rows (missing columns, wrong types, unseen levels refused)."""
        if not isinstance(frame, pd.DataFrame):
            frame = pd.DataFrame(frame, columns=self.input_columns)
        return encode_rows(frame, self.inputs_, self.meta["feature_names"], source, unseen)

    def decision_encoded(self, X) -> np.ndarray:
        """f(x) on the target's scale for encoded rows X (the stage the experiment stored as predictions)."""
        from .kernels import gram
        from .models.ridge import predict_path as representer_predict
        from .models.sparse import predict_path as linear_predict

        m, p = self.meta, self.path_
        with threadpool_limits(limits=1):
            Z = self.builder_.transform(as_features(X))
            G = None if p.basis is None else gram(Z, p.basis, kernel=m["kernel"], **m["kernel_params"])

            def one(path):
                return representer_predict(path, G) if path.basis is not None else linear_predict(path, Z)
            if np.ndim(p.intercept) == 2:   # K > 2 classes: one path per class, scores (L, m, K)
                def part(a, k):   # contiguous, as each class's path was when the experiment predicted
                    return None if a is None else np.ascontiguousarray(a[..., k])
                f = np.stack([one(StoredPath(p.lambdas, part(p.intercept, k), part(p.coef, k), part(p.dual_coef, k),
                                             p.basis)) for k in range(p.intercept.shape[1])], axis=-1)
            else:
                f = one(p)
            return (m["center"] + m["scale"] * f)[m["chosen_index"]]

    def decision_function(self, frame) -> np.ndarray:
        return self.decision_encoded(self.encode(frame))

    def _labels(self, f) -> np.ndarray:
        if np.ndim(f) == 2:   # K > 2 classes: the class of the largest decision value
            return self.classes_[np.argmax(f, axis=1)].astype(object)
        return np.where(f > 0, self.classes_[1], self.classes_[0]).astype(object)

    def _probabilities(self, f) -> np.ndarray:
        if np.ndim(f) == 2:
            return softmax(f, axis=1)
        p = expit(f)
        return np.column_stack([1.0 - p, p])

    def predict(self, frame) -> np.ndarray:
        f = self.decision_function(frame)
        return self._labels(f) if self.meta["class_labels"] else f

    def predict_proba(self, frame) -> np.ndarray:
        if not self.meta["probabilities"]:
            raise AttributeError(f"a {self.meta['loss']}-loss model gives no probabilities (its decision values "
                                 f"are margins, not logits)")
        return self._probabilities(self.decision_function(frame))

    def table(self, f: np.ndarray) -> pd.DataFrame:
        """Decision values → the output table: `prediction` (regression), or `label`, `decision` and, for
        a loss that gives them, `probability` of the second class (classification)."""
        if not self.meta["class_labels"]:
            return pd.DataFrame({"prediction": f})
        if np.ndim(f) == 2:   # K > 2 classes: a decision value (and probability) per class
            out = pd.DataFrame({"label": self._labels(f)})
            probs = self._probabilities(f) if self.meta["probabilities"] else None
            for k, label in enumerate(self.classes_):
                out[f"decision_{label}"] = f[:, k]
                if probs is not None:
                    out[f"probability_{label}"] = probs[:, k]
            return out
        out = pd.DataFrame({"label": self._labels(f), "decision": f})
        if self.meta["probabilities"]:
            out["probability"] = expit(f)
        return out

    def predict_table(self, frame, unseen: str = "refuse") -> pd.DataFrame:
        return self.table(self.decision_encoded(self.encode(frame, unseen=unseen)))


# ---------------------------------------------------------------- files and the mlflow wrapper
def write_state(folder: pathlib.Path, arrays: dict, meta: dict) -> pathlib.Path:
    folder.mkdir(parents=True, exist_ok=True)
    np.savez(folder / STATE_ARRAYS, **arrays)
    (folder / STATE_META).write_text(json.dumps(meta, indent=1), encoding="utf-8")
    return folder


def read_state(folder) -> PackagedModel:
    folder = pathlib.Path(folder)
    with np.load(folder / STATE_ARRAYS, allow_pickle=False) as data:
        arrays = {k: data[k] for k in data.files}
    return PackagedModel.from_state(arrays, json.loads((folder / STATE_META).read_text(encoding="utf-8")))


try:
    from mlflow.pyfunc import PythonModel
except ImportError:   # mlflow is a dependency; this only keeps the module importable without it
    PythonModel = object


class PenduelPythonModel(PythonModel):
    """mlflow python-function flavour: the model is rebuilt from the stored arrays when loaded."""
    # the stored signature checks the input; mlflow's extra type-hint validation is not asked for
    _skip_type_hint_validation = True

    def load_context(self, context):
        self.model = read_state(context.artifacts["state"])

    def predict(self, context, model_input, params=None):
        return self.model.predict_table(model_input)


def check_reproduces(model: PackagedModel, result, r) -> float:
    """Largest difference between the packaged model's predictions of the held-out rows and the
    experiment's stored ones: 0.0 when it reproduces them bit for bit."""
    got = model.decision_encoded(result.dataset.X[result.test_rows])
    return float(np.max(np.abs(got - r.test_pred))) if not np.array_equal(got, r.test_pred) else 0.0
