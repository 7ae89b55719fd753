"""One fit task: build features on a split's training rows, fit one family's λ path, predict.

Tasks are plain picklable values so any execution backend can run them, and a task's
result depends only on the task and the shared data (never on the worker or order).
"""
from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass, field

import numpy as np

from .losses import get_loss
from .losses_weighted import class_balance, weighted
from .matrices import PackedZeros, is_sparse, pack_zeros
from .models.families import get_family
from .models.multiclass import ClassFits, for_classes, output_scale, path_losses


@dataclass(frozen=True)
class Shared:
    """Everything every task reads; sent to each worker once."""
    X: np.ndarray
    y: np.ndarray
    task: str                      # regression | classification
    feature_maps: tuple
    feature_seed: int
    input_names: tuple[str, ...]
    family_options: dict               # family key -> that family's options (Family.options)
    n_classes: int = 0                 # classification: number of classes (K > 2: targets are codes 0..K−1)
    weights: np.ndarray | None = None  # (n,) row weights of the data.weights column; None: unweighted


@dataclass(frozen=True)
class FitTask:
    split: str                     # "fold0", "fold1", ... or "final"
    family: str                    # a key of pipeline.models.families
    loss_name: str
    loss_params: tuple             # sorted (key, value) pairs
    loss_label: str
    train_idx: np.ndarray
    eval_idx: np.ndarray
    lambdas: np.ndarray
    selection_only: bool = False   # a resample fit read only for its support and signs (Family.fit_path option)

    @property
    def task_id(self) -> str:
        return f"{self.loss_label}/{self.family}/{self.split}"


def _unpickled_outcome(values: dict) -> "FitOutcome":
    return FitOutcome(**{k: v.unpacked() if isinstance(v, PackedZeros) else v for k, v in values.items()})


@dataclass(frozen=True)
class FitOutcome:
    task_id: str
    split: str
    family: str
    loss_label: str
    eval_loss: np.ndarray          # (L,) mean held-out loss on the fitting scale (weighted as the fit is)
    eval_pred: np.ndarray          # (L, m) predictions on eval rows, original target scale (decision values);
    #                                (L, m, K) for K > 2 classes
    coef: np.ndarray | None        # (L, p_features) on the feature-output scale; None without per-feature weights;
    #                                (L, p_features, K) for K > 2 classes
    intercept: np.ndarray          # (L,) matching coef; (L, K) for K > 2 classes
    n_nonzero: np.ndarray | None   # (L,) families with exact zeros only
    effective_df: np.ndarray       # (L,)
    certificate: np.ndarray | None
    certificate_kind: str
    converged: np.ndarray
    status: tuple[str, ...]
    solver: str
    fit_seconds: float
    feature_names: tuple[str, ...]       # the features' names on the final split; () on every other split
    loo_error: np.ndarray | None = None   # (L,) where the family has exact LOO (ridge, squared loss), fitting scale
    gcv: np.ndarray | None = None
    df_kind: str = ""                      # what effective_df counts
    note: str = ""                         # how the family fitted the path, when worth saying (low rank)
    multiclass: str = ""                   # K > 2 classes: how they were fitted (models.multiclass)
    # The final fit's path as a stored model needs it (pipeline.packaged), on the fitting scale, so it is
    # packaged without fitting the path again; None on every other split. Weights are per feature (L, p)
    # or, in representer form, dual coefficients (L, r) on the basis rows (r, d) with the kernel; K > 2
    # classes fitted one versus the rest add a last class axis.
    stored_lambdas: np.ndarray | None = None
    stored_intercept: np.ndarray | None = None
    stored_weights: np.ndarray | None = None
    stored_basis: np.ndarray | None = field(default=None, metadata={"per_lambda": False})
    stored_kernel: dict | None = None      # {"kernel": name, "params": {...}} in representer form

    def __reduce__(self):
        """Pickled (a worker's result on its way back, process or Dask backend) with its mostly-zero arrays
        packed: a sparse resample fit's (L, p) weights are ~1 MB dense at p = 4 000 and a few kB packed, and
        with two workers on two cores every second the dispatching process spends unpickling is taken from a
        worker. Unpickled to the same value, bit for bit (dense arrays again)."""
        return _unpickled_outcome, ({f.name: pack_zeros(getattr(self, f.name)) for f in dataclasses.fields(self)},)


def stored_path(fit) -> dict:
    """The fields of FitOutcome that keep a fitted path (a family's PathFit) for packaging."""
    per_class = fit.model.fits if isinstance(fit.model, ClassFits) else None
    basis = getattr(per_class[0].model if per_class else fit.model, "basis", None)
    path = dict(stored_lambdas=np.asarray(fit.lambdas, float), stored_intercept=np.asarray(fit.intercept, float))
    if basis is None:
        return dict(path, stored_weights=np.asarray(fit.coef, float))
    models = [f.model for f in per_class] if per_class else [fit.model]
    dual = [np.asarray(m.path.dual_coef, float) for m in models]
    return dict(path, stored_basis=basis if is_sparse(basis) else np.asarray(basis, float),
                stored_weights=np.stack(dual, axis=-1) if per_class else dual[0],
                stored_kernel={"kernel": models[0].kernel, "params": dict(models[0].kernel_params)})


def feature_builder(shared: Shared):
    from .features.builder import FeatureBuilder   # loads scikit-learn: only where a fit runs

    return FeatureBuilder(shared.feature_maps, seed=shared.feature_seed, input_names=shared.input_names)


def build_features(shared: Shared, train_idx):
    return feature_builder(shared).fit(shared.X[train_idx])


def target_scaling(shared: Shared, y_train: np.ndarray) -> tuple[float, float]:
    """Regression targets are centred and scaled on the training rows (λ and Huber δ then read
    in standard-deviation units); classification targets stay ±1."""
    if shared.task == "classification":
        return 0.0, 1.0
    sd = float(y_train.std())
    return float(y_train.mean()), sd if sd > 0 else 1.0


def training_weights(shared: Shared, family: str, rows) -> np.ndarray | None:
    """Row weights of one fit on `rows` (the weights follow the rows: a resample drawing a row twice
    draws its weight twice): the data.weights column, times the class balance of these rows when the
    family's class_weight is balanced. None: unweighted."""
    w = None if shared.weights is None else shared.weights[rows]
    if shared.family_options[family].get("class_weight", "none") == "balanced":
        w = class_balance(shared.y[rows], w)
    return w


def fit_loss(shared: Shared, family: str, loss, rows):
    """The loss a fit on `rows` minimises: `loss` with the fit's row weights (pipeline.losses_weighted)."""
    return weighted(loss, training_weights(shared, family, rows))


def run_fit(task: FitTask, shared: Shared) -> FitOutcome:
    loss = get_loss(task.loss_name, **dict(task.loss_params))
    builder = feature_builder(shared)
    Z_tr = builder.fit_transform(shared.X[task.train_idx])
    Z_ev = builder.transform(shared.X[task.eval_idx])
    y_tr, y_ev = shared.y[task.train_idx], shared.y[task.eval_idx]
    center, scale = target_scaling(shared, y_tr)
    t_tr, t_ev = (y_tr - center) / scale, (y_ev - center) / scale
    family = for_classes(get_family(task.family), shared.n_classes)
    start = time.perf_counter()
    options = shared.family_options[task.family]
    if task.selection_only:
        options = {**options, "selection_only": True}
    fit = family.fit_path(Z_tr, t_tr, fit_loss(shared, task.family, loss, task.train_idx), task.lambdas, options)
    f_ev = family.predict(fit, Z_ev)
    coef, intercept = fit.coef, fit.intercept
    seconds = time.perf_counter() - start
    # weighted as the fit is (the rows' weights and, for balanced classes, the balance of these rows), so
    # cross-validation chooses λ for the objective that was fitted
    w_ev = training_weights(shared, task.family, task.eval_idx)
    eval_loss = path_losses(loss, t_ev, f_ev, fit.multiclass, weights=w_ev)
    stored = stored_path(fit) if task.split == "final" else {}
    if coef is not None:
        coef, intercept = output_scale(builder, coef * scale, intercept * scale + center)
        if task.split.startswith("fold"):   # a CV fold is read for its held-out losses only: its (L, p)
            coef = None                      # weights are not kept (on wide data they dominate memory)
    return FitOutcome(
        task_id=task.task_id, split=task.split, family=task.family, loss_label=task.loss_label,
        eval_loss=eval_loss, eval_pred=center + scale * f_ev, coef=coef, intercept=np.asarray(intercept),
        n_nonzero=fit.n_nonzero, effective_df=np.asarray(fit.effective_df, float), certificate=fit.certificate,
        certificate_kind=fit.certificate_kind, converged=np.asarray(fit.converged), status=tuple(fit.status),
        solver=fit.solver, fit_seconds=seconds,
        # the runner reads the names from the final fit: every other split would send the same p names back
        feature_names=tuple(builder.get_feature_names_out()) if task.split == "final" else (),
        loo_error=fit.loo_error, gcv=fit.gcv, df_kind=fit.df_kind, note=fit.note, multiclass=fit.multiclass,
        **stored)
