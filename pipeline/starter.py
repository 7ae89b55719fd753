"""`penduel init`: a commented starter config for the user's own table, checked before it is written."""
from __future__ import annotations

import json
import os
import pathlib
import re

import numpy as np
import pandas as pd
import yaml

from .config import ConfigError, parse_config
from .data import DataError
from .data.loaders import read_table, frame_to_dataset
from .data.task import infer_task
from .losses import CLASSIFICATION, LOSSES, REGRESSION

KINDS = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}
# The losses a starter config runs, per task; the comment beside them lists the other registered ones.
STARTER_LOSSES = {REGRESSION: ("squared", "huber", "absolute"), CLASSIFICATION: ("logistic", "hinge")}


def other_losses(task: str) -> str:
    """The registered losses of `task` a starter config leaves out, each with the parameters to set."""
    rest = [kind for kind in LOSSES.values() if kind.task == task and kind.name not in STARTER_LOSSES[task]]
    return ", ".join(kind.name + (f" (set {', '.join(kind.param_names)})" if kind.params else "") for kind in rest)


def guess_task(target: pd.Series) -> str:
    """The task `data.task: auto` would infer (pipeline.data.task.infer_task)."""
    return infer_task(target)[0]


def experiment_name(path: pathlib.Path) -> str:
    name = re.sub(r"[^A-Za-z0-9_.-]+", "-", path.stem).strip("-.") or "my-data"
    return name if name[0].isalnum() else f"x{name}"[:120]


def cv_folds(y, task: str, n_train: int) -> int:
    """Five folds unless the training rows (or the smaller class) are too few for them."""
    smallest = n_train if task == "regression" else int(min(np.unique(y, return_counts=True)[1]) * 0.75)
    return max(2, min(5, smallest // 2))


def _comment(text: str) -> str:
    return " ".join(text.split()).replace("#", "")


def _q(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)   # a JSON string is a valid YAML scalar


def starter_text(data: pathlib.Path, target: str, config_dir: pathlib.Path) -> str:
    kind = KINDS.get(data.suffix.lower())
    if kind is None:
        raise DataError(f"--data: '{data}' should end in .csv or .parquet (found '{data.suffix or 'no suffix'}').")
    frame = read_table(data, kind)
    frame.columns = [str(c) for c in frame.columns]
    if target not in frame.columns:
        frame_to_dataset(frame, target, "regression", str(data))     # raises with a "did you mean" hint
    task, reason = infer_task(frame[target])
    ds = frame_to_dataset(frame, target, task, str(data))
    n_train = ds.n_samples - max(1, round(0.25 * ds.n_samples))
    folds = cv_folds(ds.y, task, n_train)
    rel = os.path.relpath(data.resolve(), config_dir.resolve())
    losses = f"losses: [{', '.join(STARTER_LOSSES[task])}]   # also: {other_losses(task)}, or fewer to run faster\n"
    if ds.class_labels is not None and len(ds.class_labels) > 2:
        from .losses import get_loss
        from .models.multiclass import STRATEGY_TEXT
        ways = ", ".join(f"{name} {STRATEGY_TEXT[get_loss(name).multiclass]}" for name in STARTER_LOSSES[task])
        losses += f"# {len(ds.class_labels)} classes ({', '.join(map(_q, ds.class_labels))}); declared fits: {ways}\n"
    elif ds.class_labels is not None:
        losses += f"# classes: {_q(ds.class_labels[0])} is coded -1, {_q(ds.class_labels[1])} is +1\n"
    text = (
        f"# Starter experiment for {_q(data.name)}: {ds.n_samples} rows, {ds.n_features} feature column(s) after\n"
        f"# encoding, target {target!r} ({task}). Written by `penduel init`; it runs as is:\n"
        f"#   penduel run <this file>\n"
        f"# `penduel validate <this file>` prints every setting with its default filled in.\n"
        f"name: {_q(experiment_name(data))}\n"
        f"description: {_q(f'Sparse against ridge-type models for {target} in {data.name}.')}\n"
        f"seed: 0                      # change it to see how much the numbers move with the split\n"
        f"data:\n"
        f"  kind: {kind}\n"
        f"  path: {_q(rel)}   # relative to this file's folder\n"
        f"  target: {_q(target)}\n"
        f"  task: {task}   # {_comment(reason)}; say regression or classification to decide otherwise\n"
        f"split:\n"
        f"  test_fraction: 0.25        # rows held out, never used for fitting or choosing λ\n"
        f"  # groups: COLUMN           # rows sharing a value (replicates, visits of one patient) stay together\n"
        f"  # order: COLUMN            # times: test on the last rows, CV trains on the past (gap: rows between)\n"
        f"  # holdout: COLUMN          # or test_file: PATH — a fixed test set instead of a random one\n"
        f"features:\n"
        f"  maps:\n"
        f"    - kind: identity         # the columns themselves; add polynomial or random_fourier maps\n"
        f"{losses}"
        f"families:\n"
        f"  l1:                        # sparse family\n"
        f"    path: {{points: 30, smallest_share: 0.01}}   # 30 λ values from λ_max down to 1 % of it\n"
        f"    l1_share: 1.0            # the lasso; below 1 mixes in an L2 part (elastic net)\n"
        f"  l2:                        # ridge-type family in representer form\n"
        f"    kernel: linear\n"
        f"    path: {{points: 30}}\n"
        f"selection:\n"
        f"  cv_folds: {folds}                # K-fold CV on the training rows, identical for both families\n"
        f"  rule: least_error          # or one_standard_error: the simplest model within one standard error\n"
        f"stability:\n"
        f"  n_resamples: 20            # refits on subsamples to measure selection stability; more is steadier\n"
        f"tracking:                    # relative paths here are relative to this file's folder\n"
        f"  uri: sqlite:///mlflow.db   # or postgresql://user@host/db, or http://host:port of a tracking server\n"
        f"  experiment_name: {_q(experiment_name(data))}   # named after the data file: every config for it shares\n"
        f"                             # one tracking experiment, its runs side by side; name another to separate\n"
    )
    parse_config(yaml.safe_load(text), "starter config")     # never write a config that would not load
    return text


def write_starter(data: str | pathlib.Path, target: str, output: str | pathlib.Path, force: bool = False) -> pathlib.Path:
    data, output = pathlib.Path(data), pathlib.Path(output)
    if output.exists() and not force:
        raise ConfigError(f"--output: '{output}' already exists; choose another name or pass --force to "
                          f"overwrite it.")
    text = starter_text(data, target, output.parent if str(output.parent) else pathlib.Path("."))
    output.parent.mkdir(parents=True, exist_ok=True)
    output.write_text(text, encoding="utf-8")
    return output
