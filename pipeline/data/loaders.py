"""Turn a data section of the config into a checked `Dataset`."""
from __future__ import annotations

import dataclasses
import difflib
import pathlib

import numpy as np
from .lazy import pd   # pandas loads when a table is read

from ..losses import CLASSIFICATION, loss_names
from .bundled import BUNDLED
from .dataset import DataError, Dataset, InputColumn, first_repeat
from .design import attach_test_file, take_design
from .scenarios import make_scenario
from .sparse_files import load_npz, sparse_if_mostly_zero
from .task import infer_task
from .weights import take_weights

MAX_CATEGORY_LEVELS = 50


def load_dataset(source, base_dir: pathlib.Path, task: str, split=None) -> Dataset:
    """`source` is a data section of an ExperimentSpec; `task` follows from the losses; `split` (the split
    section) names the design columns of a file source, which are taken out of the features."""
    if source.kind == "scenario":
        ds = make_scenario(source)
        if ds.task != task:
            raise DataError(f"data.name: scenario '{source.name}' is a {ds.task} problem but the losses "
                            f"listed are {task} losses; choose losses of the matching kind.")
        return ds
    if source.kind == "bundled":
        return _bundled(source.name, task)
    if source.kind == "npz":
        return load_npz(source, base_dir, task, _target)
    path = pathlib.Path(source.path)
    if not path.is_absolute():
        path = base_dir / path
    frame = read_table(path, source.kind)
    frame.columns = [str(c) for c in frame.columns]
    frame, holdout = attach_test_file(frame, split, base_dir, read_table, str(path))
    notes = []
    if getattr(source, "task", "auto") == "auto" and source.target in frame.columns:
        inferred, reason = infer_task(frame[source.target])
        if inferred != task and pd.api.types.is_numeric_dtype(frame[source.target]):
            raise DataError(
                f"data.task: with data.task auto, {reason}, so it reads as a {inferred} target, but the losses "
                f"listed are {task} losses. Set data.task: {task} in the config to treat it as {task}, or list "
                f"{inferred} losses ({', '.join(loss_names(inferred))}).")
        if inferred == CLASSIFICATION and inferred == task:
            notes.append(f"data.task auto: {reason}, so it is treated as class labels (classification); set "
                         f"data.task: regression to treat a numeric code as a quantity")
    frame, weights = take_weights(frame, getattr(source, "weights", None), source.target, str(path),
                                  split.columns if split is not None else ())
    frame, design = take_design(frame, split, source.target, str(path), holdout)
    ds = frame_to_dataset(frame, source.target, task, source=str(path))
    return sparse_if_mostly_zero(dataclasses.replace(ds, design=design, notes=tuple(notes) + ds.notes, weights=weights,
                                                     weights_name=getattr(source, "weights", None) or ""))


def read_table(path: pathlib.Path, kind: str) -> pd.DataFrame:
    if path.is_dir():
        raise DataError(f"data.path: '{path}' is a folder; give the path of a {kind.upper()} file.")
    if not path.is_file():
        raise DataError(f"data.path: file '{path}' not found. Give a path relative to the config file's "
                        f"folder or an absolute path.")
    try:
        if kind == "csv":
            frame = pd.read_csv(path)
        else:
            frame = pd.read_parquet(path)
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError, OSError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise DataError(f"data.path: cannot read '{path}' as {kind.upper()} ({first}). Check the file is a "
                        f"well-formed {kind.upper()} table with a header row.") from None
    except Exception as exc:  # pyarrow raises its own error types for garbled Parquet
        raise DataError(f"data.path: cannot read '{path}' as {kind.upper()} ({type(exc).__name__}: {exc}).") \
            from None
    if frame.shape[0] == 0 or frame.shape[1] == 0:
        raise DataError(f"data.path: '{path}' holds no rows or no columns (found {frame.shape[0]} rows, "
                        f"{frame.shape[1]} columns).")
    if kind == "csv":
        _check_header(path, frame)
    return frame


def _check_header(path: pathlib.Path, frame: pd.DataFrame) -> None:
    """pandas renames a repeated header name (`y` again becomes `y.1`) without a word: refuse it instead."""
    import csv

    try:
        with open(path, newline="", encoding="utf-8") as fh:
            header = next(csv.reader(fh), [])
    except (OSError, UnicodeDecodeError, csv.Error):
        return
    repeat = first_repeat(header)
    if repeat:
        name, first, second = repeat
        raise DataError(f"data.path: the header of '{path}' names column '{name}' twice (columns {first + 1} "
                        f"and {second + 1}); every column needs its own name. Rename or drop one of them.")


def frame_to_dataset(frame: pd.DataFrame, target: str, task: str, source: str) -> Dataset:
    frame = frame.set_axis([str(c) for c in frame.columns], axis=1)
    if target not in frame.columns:
        match = difflib.get_close_matches(target, frame.columns, n=1)
        hint = f" Did you mean '{match[0]}'?" if match else ""
        shown = ", ".join(repr(c) for c in frame.columns[:10]) + (" ..." if frame.shape[1] > 10 else "")
        raise DataError(f"data.target: column '{target}' is not in {source} (columns: {shown}).{hint}")
    _check_names(frame, source)
    # selecting the other columns, not frame.pop: deleting one column of a wide frame rebuilds every block
    y_raw = frame[target]
    frame = frame[[c for c in frame.columns if c != target]]
    if frame.shape[1] == 0:
        raise DataError(f"data.target: {source} has no column besides the target '{target}'.")
    notes: list[str] = []
    inputs: list[InputColumn] = []
    frame = _drop_row_index(frame, notes)
    _check_cells(frame, source)
    _check_target_copy(frame, y_raw, target, source)
    y, labels = _target(y_raw, target, task, source)
    X, names = _features(frame, source, notes, inputs)
    return Dataset(X=X, y=y, feature_names=tuple(names), target_name=target, task=task, source=source,
                   class_labels=labels, notes=tuple(notes), inputs=tuple(inputs))


def _check_names(frame: pd.DataFrame, source: str) -> None:
    counts = pd.Index(frame.columns).value_counts()
    if (counts > 1).any():
        name = str(counts.index[counts > 1][0])
        where = [i + 1 for i, c in enumerate(frame.columns) if c == name]
        raise DataError(f"data: {source} has {len(where)} columns named '{name}' (columns "
                        f"{', '.join(map(str, where))}); every column needs its own name.")


def _drop_row_index(frame: pd.DataFrame, notes: list[str]) -> pd.DataFrame:
    """An unnamed first column counting 0, 1, 2, ... (or 1, 2, 3, ...) is a row index written with the data,
    not a measurement: it is dropped with a note."""
    col = frame.columns[0]
    if not (col == "" or str(col).startswith("Unnamed: ")) or frame.shape[1] < 2:
        return frame
    values = pd.to_numeric(frame[col], errors="coerce").to_numpy(dtype=float)
    start = values[0] if len(values) else 0
    if start in (0, 1) and np.array_equal(values, np.arange(len(values)) + start):
        notes.append(f"dropped the unnamed first column '{col}': it counts the rows ({start:g}, {start + 1:g}, "
                     f"...), a row index saved with the data, not a feature")
        return frame.drop(columns=[col])
    return frame


def _check_cells(frame: pd.DataFrame, source: str) -> None:
    """Lists, mappings or arrays in a cell (nested Parquet columns) cannot be features."""
    for col, dtype in frame.dtypes.items():
        if dtype != object:
            continue
        nested = frame[col].map(lambda v: isinstance(v, (list, tuple, dict, set, np.ndarray))).to_numpy()
        if nested.any():
            row = int(np.flatnonzero(nested)[0])
            raise DataError(f"data: column '{col}' of {source} holds a {type(frame[col].iloc[row]).__name__} at "
                            f"data row {row + 1}, not a number or a text label; allowed are numeric, boolean and "
                            f"text columns. Flatten it into separate columns or drop it.")


def _check_target_copy(frame: pd.DataFrame, y_raw: pd.Series, target: str, source: str) -> None:
    """A feature column equal to the target would be selected as a perfect, meaningless predictor."""
    same = [col for col, dtype in frame.dtypes.items() if dtype == y_raw.dtype]
    if same and pd.api.types.is_numeric_dtype(y_raw.dtype):   # one array comparison narrows a wide table
        block, values = frame[same].to_numpy(), y_raw.to_numpy()
        equal = (block == values[:, None]) | (pd.isna(block) & pd.isna(values)[:, None])
        same = [col for col, hit in zip(same, equal.all(axis=0)) if hit]
    for col in same:
        if frame[col].equals(y_raw):
            raise DataError(f"data: column '{col}' of {source} is a copy of the target '{target}' (equal in every "
                            f"row); it would predict the target perfectly and meaninglessly. Drop it from the data.")


def class_text(label) -> str:
    """A class label as a spreadsheet shows it: 1 rather than 1.0, text quoted."""
    if isinstance(label, (float, np.floating)) and float(label).is_integer():
        return str(int(label))
    return repr(label) if isinstance(label, str) else str(label)


def _target(y_raw: pd.Series, target: str, task: str, source: str):
    missing = y_raw.isna().to_numpy()
    if missing.any():
        row = int(np.flatnonzero(missing)[0])
        raise DataError(f"data.target: column '{target}' has {int(missing.sum())} missing value(s) in "
                        f"{source}, first at data row {row + 1}; remove or fill those rows.")
    if task == "classification":
        values = y_raw.tolist()
        numeric = pd.api.types.is_numeric_dtype(y_raw) and not pd.api.types.is_bool_dtype(y_raw)
        classes = sorted(pd.unique(y_raw).tolist(), key=str)
        if len(classes) < 2:
            raise DataError(f"data.target: classification losses need at least two classes (exactly two classes "
                            f"for a yes/no fit, more for a multi-class one), but column '{target}' has "
                            f"{len(classes)} ({', '.join(class_text(c) for c in classes)}). Both classes of a "
                            f"yes/no target must be present.")
        if len(classes) == 2:
            y = np.where(y_raw.to_numpy() == classes[1], 1.0, -1.0)
            return y, (str(classes[0]), str(classes[1]))
        # more than two classes: codes 0..K−1 in the order of the labels (numbers by value, text as text)
        if numeric:
            classes = sorted(classes)
        code = {c: k for k, c in enumerate(classes)}
        y = np.array([code[v] for v in values], dtype=float)
        return y, tuple(class_text(c) if numeric else str(c) for c in classes)
    values = pd.to_numeric(y_raw, errors="coerce")
    bad = values.isna().to_numpy()
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raise DataError(f"data.target: regression losses need a numeric target, but column '{target}' has "
                        f"non-numeric value {y_raw.iloc[row]!r} at data row {row + 1}. Use a classification "
                        f"loss ({', '.join(loss_names(CLASSIFICATION))}) for labels.")
    y = values.to_numpy(dtype=float)
    if not np.isfinite(y).all():
        row = int(np.flatnonzero(~np.isfinite(y))[0])
        raise DataError(f"data.target: column '{target}' has value {y[row]} at data row {row + 1}; only finite "
                        f"numbers are allowed.")
    _check_spread(y[:, None], [target], source, "data.target: column")
    if np.ptp(y) == 0:
        raise DataError(f"data.target: column '{target}' has the same value {y[0]:g} in every row of {source}; "
                        f"there is nothing to predict.")
    return y, None


def _check_spread(X: np.ndarray, names, source: str, what: str) -> None:
    """Values so large that their variance overflows double precision break every later stage."""
    with np.errstate(over="ignore", invalid="ignore"):
        bad = ~np.isfinite(X.std(axis=0))
    if bad.any():
        j = int(np.flatnonzero(bad)[0])
        raise DataError(f"{what} '{names[j]}' of {source} has values as large as {np.abs(X[:, j]).max():.3g}, "
                        f"whose spread overflows double precision; rescale it (e.g. to other units) first.")


def _features(frame: pd.DataFrame, source: str, notes: list[str], inputs: list):
    numeric = [pd.api.types.is_bool_dtype(d) or pd.api.types.is_numeric_dtype(d) for d in frame.dtypes]
    # numeric and boolean columns converted as one block (column by column costs seconds on wide tables)
    numeric_names = [c for c, keep in zip(frame.columns, numeric) if keep]
    values = frame[numeric_names].to_numpy(dtype=float) if numeric_names else np.empty((len(frame), 0))
    finite = np.isfinite(values).all(axis=0)
    blocks, names, run, j = [], [], [], 0

    def close_run():
        if run:
            blocks.append(values[:, run[0]:run[-1] + 1])
            run.clear()

    for (col, dtype), is_numeric in zip(frame.dtypes.items(), numeric):
        if is_numeric:
            if not finite[j]:
                bad = ~np.isfinite(values[:, j])
                row = int(np.flatnonzero(bad)[0])
                raise DataError(f"data: feature column '{col}' has {int(bad.sum())} missing or infinite "
                                f"value(s) in {source}, first {values[row, j]} at data row {row + 1}; remove or "
                                f"impute them before running.")
            run.append(j)
            j += 1
            names.append(col)
            inputs.append(InputColumn(col, boolean=pd.api.types.is_bool_dtype(dtype)))
            continue
        close_run()
        series = frame[col]
        if series.isna().any():
            row = int(np.flatnonzero(series.isna().to_numpy())[0])
            raise DataError(f"data: text column '{col}' has a missing value at data row {row + 1} in {source}.")
        levels = sorted(pd.unique(series).tolist(), key=str)
        if len(levels) > MAX_CATEGORY_LEVELS:
            raise DataError(f"data: column '{col}' is not numeric and has {len(levels)} distinct values "
                            f"(e.g. {levels[0]!r}); at most {MAX_CATEGORY_LEVELS} levels are one-hot encoded. "
                            f"Convert it to numbers or drop it.")
        # One column per level except the first (it is the reference level).
        inputs.append(InputColumn(col, tuple(str(level) for level in levels)))
        for level in levels[1:]:
            blocks.append((series == level).to_numpy(dtype=float)[:, None])
            names.append(f"{col}={level}")
        notes.append(f"text column '{col}' one-hot encoded into {len(levels) - 1} column(s), "
                     f"reference level {levels[0]!r}")
    close_run()
    X = np.hstack(blocks)
    _check_spread(X, names, source, "data: feature column")
    constant = np.ptp(X, axis=0) == 0
    if constant.all():
        raise DataError(f"data: every feature column of {source} is constant; nothing can be learned.")
    if constant.any():
        dropped = [n for n, c in zip(names, constant) if c]
        notes.append(f"dropped {len(dropped)} constant column(s): {', '.join(dropped[:10])}"
                     + (" ..." if len(dropped) > 10 else ""))
        X = X[:, ~constant]
        names = [n for n, c in zip(names, constant) if not c]
    return X, names


def _bundled(name: str, task: str) -> Dataset:
    entry = BUNDLED[name]
    if entry.task != task:
        raise DataError(f"data.name: '{name}' is a {entry.task} dataset; use {entry.task} losses "
                        f"({', '.join(loss_names(entry.task))}).")
    return entry.load()


# ---------------------------------------------------------------- new rows for a stored model
def encode_rows(frame: pd.DataFrame, inputs, feature_names, source: str, unseen: str = "refuse") -> np.ndarray:
    """New rows encoded as the training rows were: the float matrix of `feature_names`. `inputs` are the
    training data's raw columns (InputColumn; empty: every feature name is a numeric column). Columns
    the model never used may be absent; extra columns are ignored. A text level not seen in training is
    refused, or with unseen="reference" encoded as the reference level (every indicator 0)."""
    inputs = tuple(inputs) or tuple(InputColumn(name) for name in feature_names)
    wanted = set(feature_names)
    needed = [c for c in inputs if (c.name in wanted if c.levels is None else
                                    any(f"{c.name}={level}" in wanted for level in c.levels[1:]))]
    frame = frame.rename(columns=str)
    missing = [c.name for c in needed if c.name not in frame.columns]
    if missing:
        raise DataError(f"{source}: the model needs column(s) {', '.join(repr(m) for m in missing)}, which are "
                        f"missing; it reads {', '.join(repr(c.name) for c in needed)} (other columns are ignored).")
    columns = {}
    for c in needed:
        series = frame[c.name]
        if c.levels is None:
            values = pd.to_numeric(series, errors="coerce") if not pd.api.types.is_bool_dtype(series) else series
            values = np.asarray(values, dtype=float)
            bad = ~np.isfinite(values)
            if bad.any():
                row = int(np.flatnonzero(bad)[0])
                raise DataError(f"{source}: column '{c.name}' was numeric in the training data, but data row {row + 1} holds "
                                f"{series.iloc[row]!r}; only finite numbers are allowed there.")
            columns[c.name] = values
            continue
        text = series.astype(str).to_numpy()
        unknown = ~np.isin(text, c.levels) | series.isna().to_numpy()
        if unknown.any() and unseen != "reference":
            row = int(np.flatnonzero(unknown)[0])
            raise DataError(f"{source}: column '{c.name}' holds {series.iloc[row]!r} at data row {row + 1}, a value not seen "
                            f"in the training data; allowed are {', '.join(repr(v) for v in c.levels)} (or pass "
                            f"--unseen reference to treat unseen values as the reference level {c.levels[0]!r}).")
        for level in c.levels[1:]:
            columns[f"{c.name}={level}"] = (text == level).astype(float)
    return np.column_stack([columns[name] for name in feature_names]) if len(frame) else \
        np.zeros((0, len(feature_names)))
