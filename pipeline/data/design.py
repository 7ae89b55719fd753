"""The split section's design columns: read out of the table (they are never features), checked, coded."""
from __future__ import annotations

import pathlib

import numpy as np
from .lazy import pd   # pandas loads when a table is read

from .dataset import DataError, RowDesign

# Values of a split.holdout column that mark test rows / training rows (compared case-insensitively).
TEST_MARKS = ("1", "true", "yes", "test", "holdout")
TRAIN_MARKS = ("0", "false", "no", "train")


def _column(frame: pd.DataFrame, setting: str, column: str, source: str, target: str) -> pd.Series:
    if column == target:
        raise DataError(f"split.{setting}: column '{column}' is the target; name another column.")
    if column not in frame.columns:
        shown = ", ".join(repr(c) for c in frame.columns[:10]) + (" ..." if frame.shape[1] > 10 else "")
        raise DataError(f"split.{setting}: column '{column}' is not in {source} (columns: {shown}).")
    values = frame[column]
    if values.isna().any():
        row = int(np.flatnonzero(values.isna().to_numpy())[0])
        raise DataError(f"split.{setting}: column '{column}' has {int(values.isna().sum())} missing value(s) in "
                        f"{source}, first at data row {row}; every row needs a value.")
    return values


def _order_keys(values: pd.Series, source: str) -> np.ndarray:
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        return values.to_numpy(dtype=float)
    try:
        stamps = pd.to_datetime(values, errors="raise")
    except (ValueError, TypeError):
        raise DataError(f"split.order: column '{values.name}' of {source} holds {values.iloc[0]!r}, which is "
                        f"neither a number nor a date; the order column must be numbers or dates.") from None
    return stamps.to_numpy(dtype="datetime64[ns]").astype(np.int64).astype(float)


def _holdout_mask(values: pd.Series, source: str) -> np.ndarray:
    text = values.astype(str).str.strip().str.lower()
    text = text.where(~text.isin(["1.0", "0.0"]), text.str[0])
    test, train = text.isin(TEST_MARKS).to_numpy(), text.isin(TRAIN_MARKS).to_numpy()
    bad = ~(test | train)
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raise DataError(f"split.holdout: column '{values.name}' of {source} has value {values.iloc[row]!r} at data "
                        f"row {row}; allowed are {', '.join(TEST_MARKS)} (test rows) and {', '.join(TRAIN_MARKS)} "
                        f"(training rows).")
    if test.all() or not test.any():
        raise DataError(f"split.holdout: column '{values.name}' of {source} marks "
                        f"{'every' if test.all() else 'no'} row as a test row; both test and training rows are "
                        f"needed.")
    return test


def attach_test_file(frame: pd.DataFrame, split, base_dir, read, source: str) -> tuple[pd.DataFrame, np.ndarray | None]:
    """The training table with the rows of split.test_file appended; the mask of those rows."""
    if split is None or split.test_file is None:
        return frame, None
    path = pathlib.Path(split.test_file)
    if not path.is_absolute():
        path = pathlib.Path(base_dir) / path
    kind = "parquet" if path.suffix.lower() in (".parquet", ".pq") else "csv"
    try:
        test = read(path, kind)
    except DataError as exc:
        raise DataError(str(exc).replace("data.path", "split.test_file", 1)) from None
    test.columns = [str(c) for c in test.columns]
    missing = [c for c in frame.columns if c not in test.columns]
    extra = [c for c in test.columns if c not in frame.columns]
    if missing or extra:
        raise DataError(f"split.test_file: '{path}' must have the columns of {source}; "
                        + (f"missing: {', '.join(missing[:10])}. " if missing else "")
                        + (f"not in the training file: {', '.join(extra[:10])}." if extra else ""))
    joined = pd.concat([frame, test[frame.columns]], ignore_index=True)
    return joined, np.r_[np.zeros(len(frame), bool), np.ones(len(test), bool)]


def take_design(frame: pd.DataFrame, split, target: str, source: str,
                holdout: np.ndarray | None) -> tuple[pd.DataFrame, RowDesign | None]:
    """The frame without its design columns, and the RowDesign read from them."""
    if split is None:
        return frame, None
    groups = order = None
    names = []
    used = []
    if split.groups is not None:
        values = _column(frame, "groups", split.groups, source, target)
        groups = pd.factorize(values.astype(str))[0].astype(np.int64)
        names.append(f"groups from column '{split.groups}'")
        used.append(split.groups)
    if split.order is not None:
        values = _column(frame, "order", split.order, source, target)
        order = _order_keys(values, source)
        names.append(f"order from column '{split.order}'")
        used.append(split.order)
    if split.holdout is not None:
        holdout = _holdout_mask(_column(frame, "holdout", split.holdout, source, target), source)
        names.append(f"fixed test rows marked in column '{split.holdout}'")
        used.append(split.holdout)
    elif holdout is not None:
        names.append(f"fixed test rows from '{split.test_file}'")
    if not names:
        return frame, None
    return frame.drop(columns=list(dict.fromkeys(used))), RowDesign(groups=groups, order=order, holdout=holdout,
                                                                   names=tuple(names))
