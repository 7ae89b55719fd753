"""The value every later stage receives: features, target, names, task, ground truth, hash."""
from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np

from ..matrices import to_parts


class DataError(ValueError):
    """A problem with the user's data: one paragraph, shown without a traceback."""


@dataclass(frozen=True)
class Truth:
    """Ground truth of a synthetic scenario, in the columns of X."""
    support: tuple[int, ...]
    coefficients: np.ndarray | None  # (p,) when the truth is linear in the columns
    intercept: float = 0.0


@dataclass(frozen=True)
class RowDesign:
    """Per-row design columns (taken out of the features): groups that stay together, an order that is
    never reversed, the rows of a fixed test set. Each is (n,) or None; `names` says which columns."""
    groups: np.ndarray | None = None     # (n,) integer group codes
    order: np.ndarray | None = None      # (n,) float sort keys
    holdout: np.ndarray | None = None    # (n,) bool, True for fixed test rows
    names: tuple[str, ...] = ()           # human description of each design column used

    def arrays(self):
        return [a for a in (self.groups, self.order, self.holdout) if a is not None]


@dataclass(frozen=True)
class InputColumn:
    """One raw input column as the loader encoded it: a number, or text one-hot encoded into one
    column per level after the first (the reference level)."""
    name: str
    levels: tuple[str, ...] | None = None     # None: numeric; else every level, reference first
    boolean: bool = False                      # a true/false column (encoded 1/0)


@dataclass(frozen=True)
class Dataset:
    X: np.ndarray                       # (n, p) float64, or a scipy CSC matrix (pipeline.matrices)
    y: np.ndarray                       # (n,) float64; two classes are −1/+1, K > 2 classes codes 0..K−1
    feature_names: tuple[str, ...]
    target_name: str
    task: str                           # "regression" | "classification"
    source: str                         # human description of where the rows came from
    class_labels: tuple[str, ...] | None = None   # original labels for −1 and +1 (or for codes 0..K−1)
    truth: Truth | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)  # what loading changed (dropped columns, encodings)
    design: RowDesign | None = None     # groups / order / fixed test rows named in the split section
    inputs: tuple[InputColumn, ...] = ()   # raw columns behind feature_names; empty: one numeric column each
    weights: np.ndarray | None = None   # (n,) positive row weights from the data.weights column; None: unweighted
    weights_name: str = ""              # that column's name

    @property
    def n_samples(self) -> int:
        return self.X.shape[0]

    @property
    def n_features(self) -> int:
        return self.X.shape[1]

    @property
    def n_classes(self) -> int:
        """Number of classes (0 for regression)."""
        return len(self.class_labels or ("-1", "+1")) if self.task == "classification" else 0

    def content_hash(self) -> str:
        h = hashlib.sha256()
        for part in to_parts("X", self.X).values():   # a sparse matrix: its stored entries and shape
            h.update(np.ascontiguousarray(part).tobytes())
        h.update(np.ascontiguousarray(self.y, dtype=np.float64).tobytes())
        h.update("\x1f".join(self.feature_names).encode())
        h.update(self.target_name.encode())
        if self.design is not None:
            for a in self.design.arrays():
                h.update(np.ascontiguousarray(a, dtype=np.float64).tobytes())
        if self.weights is not None:
            h.update(b"weights")
            h.update(np.ascontiguousarray(self.weights, dtype=np.float64).tobytes())
        return h.hexdigest()[:16]

    def summary(self) -> dict:
        y = self.y
        out = {
            "source": self.source,
            "rows": int(self.n_samples),
            "columns": int(self.n_features),
            "target": self.target_name,
            "task": self.task,
        }
        if self.task == "classification":
            labels = self.class_labels or ("-1", "+1")
            if len(labels) > 2:
                out["class_counts"] = {label: int((y == k).sum()) for k, label in enumerate(labels)}
            else:
                out["class_counts"] = {labels[0]: int((y < 0).sum()), labels[1]: int((y > 0).sum())}
        else:
            out.update(target_mean=float(y.mean()), target_sd=float(y.std(ddof=1)),
                       target_min=float(y.min()), target_max=float(y.max()))
        if self.truth is not None:
            out["true_support_size"] = len(self.truth.support)
        if self.weights is not None:
            w = self.weights
            out["row_weights"] = (f"column '{self.weights_name}': from {w.min():.4g} to {w.max():.4g}, "
                                  f"total {w.sum():.4g} over {w.size} rows")
        return out


def first_repeat(names) -> tuple[str, int, int] | None:
    """The first name given twice, with the positions (from 0) of its first and second use; None if none."""
    seen: dict[str, int] = {}
    for i, name in enumerate(names):
        if name in seen:
            return name, seen[name], i
        seen[name] = i
    return None
