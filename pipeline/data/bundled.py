"""Open datasets shipped with scikit-learn: `BUNDLED` is their one table (name, description, task, loader)."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from .dataset import Dataset


@dataclass(frozen=True)
class BundledDataset:
    name: str
    description: str
    task: str
    load: Callable[[], Dataset]


BUNDLED: dict[str, BundledDataset] = {}


def register_bundled(entry: BundledDataset) -> BundledDataset:
    BUNDLED[entry.name] = entry
    return entry


def _diabetes() -> Dataset:
    from sklearn import datasets

    raw = datasets.load_diabetes(scaled=False)
    return Dataset(X=np.asarray(raw.data, float), y=np.asarray(raw.target, float),
                   feature_names=tuple(raw.feature_names), target_name="disease_progression",
                   task="regression",
                   source="diabetes (Efron, Hastie, Johnstone & Tibshirani 2004; scikit-learn load_diabetes)")


def _breast_cancer() -> Dataset:
    from sklearn import datasets

    raw = datasets.load_breast_cancer()
    # scikit-learn codes malignant as 0 and benign as 1.
    y = np.where(raw.target == 1, 1.0, -1.0)
    return Dataset(X=np.asarray(raw.data, float), y=y, feature_names=tuple(raw.feature_names),
                   target_name="diagnosis", task="classification",
                   source="Wisconsin diagnostic breast cancer (UCI; scikit-learn load_breast_cancer)",
                   class_labels=("malignant", "benign"))


register_bundled(BundledDataset("diabetes", "diabetes (Efron et al. 2004)", "regression", _diabetes))
register_bundled(BundledDataset("breast_cancer", "breast_cancer (Wisconsin diagnostic, UCI)", "classification",
                                _breast_cancer))
