"""One fit task: build features on a split's training rows, fit one family's λ path, predict.

Tasks are plain picklable values so any execution backend can run them, and a task's
result depends only on the task and the shared data (never on the worker or order).
"""
from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from .features import FeatureBuilder
from .losses import get_loss


@dataclass(frozen=True)
class Shared:
    """Everything every task reads; sent to each worker once."""
    X: np.ndarray
    y: np.ndarray
    task: str                      # regression | classification
    feature_maps: tuple
    feature_seed: int
    input_names: tuple[str, ...]
    l1_options: dict
    l2_kernel: str
    l2_kernel_params: tuple = ()      # sorted (name, value) pairs


@dataclass(frozen=True)
class FitTask:
    split: str                     # "fold0", "fold1", ... or "final"
    family: str                    # "l1" | "l2"
    loss_name: str
    loss_params: tuple             # sorted (key, value) pairs
    loss_label: str
    train_idx: np.ndarray
    eval_idx: np.ndarray
    lambdas: np.ndarray

    @property
    def task_id(self) -> str:
        return f"{self.loss_label}/{self.family}/{self.split}"


@dataclass(frozen=True)
class FitOutcome:
    task_id: str
    split: str
    family: str
    loss_label: str
    eval_loss: np.ndarray          # (L,) mean held-out loss on the fitting scale
    eval_pred: np.ndarray          # (L, m) predictions on eval rows, original target scale (decision values)
    coef: np.ndarray | None        # (L, p_features) on the feature-output scale; None for non-linear kernels
    intercept: np.ndarray          # (L,) matching coef
    n_nonzero: np.ndarray | None   # (L,) L1 only
    effective_df: np.ndarray       # (L,)
    certificate: np.ndarray | None
    certificate_kind: str
    converged: np.ndarray
    status: tuple[str, ...]
    solver: str
    fit_seconds: float
    feature_names: tuple[str, ...]
    loo_error: np.ndarray | None = None   # (L,) L2 squared loss only, fitting scale
    gcv: np.ndarray | None = None
    df_kind: str = ""                      # what effective_df counts


def build_features(shared: Shared, train_idx):
    builder = FeatureBuilder(shared.feature_maps, seed=shared.feature_seed, input_names=shared.input_names)
    return builder.fit(shared.X[train_idx])


def target_scaling(shared: Shared, y_train: np.ndarray) -> tuple[float, float]:
    """Regression targets are centred and scaled on the training rows (λ and Huber δ then read
    in standard-deviation units); classification targets stay ±1."""
    if shared.task == "classification":
        return 0.0, 1.0
    sd = float(y_train.std())
    return float(y_train.mean()), sd if sd > 0 else 1.0


def run_fit(task: FitTask, shared: Shared) -> FitOutcome:
    loss = get_loss(task.loss_name, **dict(task.loss_params))
    builder = build_features(shared, task.train_idx)
    Z_tr = builder.transform(shared.X[task.train_idx])
    Z_ev = builder.transform(shared.X[task.eval_idx])
    y_tr, y_ev = shared.y[task.train_idx], shared.y[task.eval_idx]
    center, scale = target_scaling(shared, y_tr)
    t_tr, t_ev = (y_tr - center) / scale, (y_ev - center) / scale
    start = time.perf_counter()
    if task.family == "l1":
        from .models.l1 import degrees_of_freedom, fit_l1_path, predict_path
        path = fit_l1_path(Z_tr, t_tr, loss, task.lambdas, **shared.l1_options)
        f_ev = predict_path(path, Z_ev)
        coef, intercept = path.coef, path.intercept
        nnz = path.n_nonzero
        df = path.n_nonzero.astype(float) if shared.l1_options.get("alpha", 1.0) == 1.0 else \
            degrees_of_freedom(path, Z_tr)
        cert, cert_kind, solver = path.certificate, path.certificate_kind, path.solver
        converged, status = path.converged, path.status
        loo, gcv = None, None
        df_kind = "number of nonzero coefficients" if shared.l1_options.get("alpha", 1.0) == 1.0 else \
            "elastic-net trace on the support (squared loss; nonzero count as upper bound otherwise)"
    else:
        from .kernels import gram
        from .models.l2 import fit_l2_path, predict_path, primal_weights
        kp = dict(shared.l2_kernel_params)
        K = gram(Z_tr, kernel=shared.l2_kernel, **kp)
        path = fit_l2_path(K, t_tr, loss, task.lambdas)
        f_ev = predict_path(path, gram(Z_ev, Z_tr, kernel=shared.l2_kernel, **kp))
        if shared.l2_kernel == "linear":
            coef = primal_weights(path, Z_tr)
        else:
            coef = None
        intercept = path.intercept
        nnz, df = None, path.effective_df
        cert, cert_kind, solver = None, "", "representer"
        converged, status = path.converged, path.status
        loo, gcv = path.loo_error, path.gcv
        df_kind = getattr(path, "df_kind", "trace of the hat matrix")
    seconds = time.perf_counter() - start
    eval_loss = np.array([loss.value(t_ev, f).mean() for f in f_ev])
    if coef is not None:
        coef, intercept = builder.to_output_scale(coef * scale, intercept * scale + center)
    return FitOutcome(
        task_id=task.task_id, split=task.split, family=task.family, loss_label=task.loss_label,
        eval_loss=eval_loss, eval_pred=center + scale * f_ev, coef=coef, intercept=np.asarray(intercept),
        n_nonzero=nnz, effective_df=np.asarray(df, float), certificate=cert, certificate_kind=cert_kind,
        converged=np.asarray(converged), status=tuple(status), solver=solver, fit_seconds=seconds,
        feature_names=tuple(builder.get_feature_names_out()), loo_error=loo, gcv=gcv, df_kind=df_kind)
