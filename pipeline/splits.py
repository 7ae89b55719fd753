"""Which rows each fit sees: the test split, CV and nested-CV folds, stability resamples — one plan for
both families, respecting the data's design (groups stay together, time order is kept, a fixed test set
is never fitted)."""
from __future__ import annotations

import numpy as np

from . import seeds
from .config import ExperimentSpec
from .data import DataError, Dataset, RowDesign
from .selection import design_line, make_folds, nested_splits, test_split
from .stability import resample_splits
from .stability.schemes import order_blocks


def split_rows(spec: ExperimentSpec, dataset: Dataset):
    n = dataset.n_samples
    classify = dataset.task == "classification"
    d = dataset.design or RowDesign()
    try:
        tr, te = test_split(n, spec.split.test_fraction, seeds.int_seed(spec.seed, "split"), y=dataset.y,
                            stratify=classify, groups=d.groups, order=d.order, holdout=d.holdout, gap=spec.split.gap)
    except ValueError as exc:
        raise DataError(f"split: cannot form the test set from {n} rows ({exc}).") from None
    if len(tr) < spec.selection.cv_folds:
        raise DataError(f"selection.cv_folds: {spec.selection.cv_folds} folds need at least that many training "
                        f"rows, but only {len(tr)} remain after holding out {len(te)} test rows of {n}.")
    classes = np.unique(dataset.y) if classify else ()
    if classify and min(np.sum(dataset.y[tr] == c) for c in classes) < spec.selection.cv_folds:
        raise DataError(f"selection.cv_folds: the {'smaller' if len(classes) == 2 else 'smallest'} class has fewer training rows than the "
                        f"{spec.selection.cv_folds} folds; use fewer folds or more data.")
    return tr, te


def plan_splits(spec: ExperimentSpec, dataset: Dataset, train_rows, test_rows) -> list[tuple]:
    """(name, fit rows, evaluation rows) for every split any task uses; both families share them all."""
    classify = dataset.task == "classification"
    K = spec.selection.cv_folds
    design = row_design(spec, dataset, train_rows)
    try:
        folds = make_folds(len(train_rows), K, seeds.generator(spec.seed, "folds"), y=dataset.y[train_rows],
                           stratify=classify, repeats=spec.selection.repeats, **design)
        splits = [(f"fold{k}", train_rows[tr], train_rows[va]) for k, (tr, va) in enumerate(folds)]
        splits.append(("final", train_rows, test_rows))
        if spec.selection.nested:
            splits += nested_splits(train_rows, dataset.y[train_rows], K, seeds.generator(spec.seed, "nested"),
                                    classify, **design)
    except ValueError as exc:
        raise DataError(f"selection.cv_folds: cannot form {K} CV folds of the {len(train_rows)} training rows "
                        f"({exc}).") from None
    return splits


def row_design(spec: ExperimentSpec, dataset: Dataset, rows) -> dict:
    """The groups / order / gap of `rows` that folds respect (empty for rows split at random)."""
    d = dataset.design or RowDesign()
    return dict(groups=None if d.groups is None else d.groups[rows],
                order=None if d.order is None else d.order[rows], gap=spec.split.gap)


def plan_resamples(spec: ExperimentSpec, dataset: Dataset, train_rows, test_rows) -> list[tuple]:
    """Stability resamples of the training rows: whole groups, or contiguous blocks of time, when the
    design has them."""
    units = row_design(spec, dataset, train_rows)
    units = units["groups"] if units["order"] is None else order_blocks(units["order"])
    try:
        return resample_splits(spec, train_rows, test_rows, dataset.y[train_rows], dataset.task, groups=units)
    except ValueError as exc:
        raise DataError(f"stability.scheme: cannot draw {spec.stability.scheme} resamples of the training rows "
                        f"({exc}).") from None


def describe_design(spec: ExperimentSpec, dataset: Dataset, train_rows, test_rows, splits) -> str:
    d = dataset.design or RowDesign()
    folds = [(tr, va) for name, tr, va in splits if name.startswith("fold")]
    return design_line(d.names, len(train_rows), len(test_rows), folds, gap=spec.split.gap,
                       forward=d.order is not None, grouped=d.groups is not None)
