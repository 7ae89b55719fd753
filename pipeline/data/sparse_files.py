"""Sparse inputs: a matrix written by `scipy.sparse.save_npz` with its feature names and target in two
text files (`data.kind: npz`), and a CSV whose cells are mostly zeros, kept as a scipy CSC matrix.

Nothing here densifies the matrix: checks run on the stored entries, constant columns are found from
column maxima and minima.
"""
from __future__ import annotations

import dataclasses
import pathlib
import zipfile

import numpy as np
import scipy.sparse as sp

from ..losses import CLASSIFICATION, loss_names
from ..matrices import column_ranges, density, stored_bytes
from .dataset import DataError, Dataset, first_repeat
from .lazy import pd
from .task import infer_task

# A table whose share of zero cells is at least this is kept as a sparse (CSC) matrix. A rule of thumb:
# a stored entry costs 12 bytes (value and row index) against 8 for a dense cell, and sparse products
# pay off well before that break-even, near 90 % zeros.
SPARSE_ZERO_SHARE = 0.9
NPZ_KEYS = ("format", "shape", "data", "indices", "indptr")
NPZ_FORMATS = ("csr", "csc")


def _path(setting: str, value: str, base_dir) -> pathlib.Path:
    path = pathlib.Path(value)
    path = path if path.is_absolute() else pathlib.Path(base_dir) / path
    if path.is_dir():
        raise DataError(f"{setting}: '{path}' is a folder; give the path of a file.")
    if not path.is_file():
        raise DataError(f"{setting}: file '{path}' not found. Give a path relative to the config file's folder "
                        f"or an absolute path.")
    return path


def _lines(setting: str, path: pathlib.Path) -> list[str]:
    try:
        text = path.read_text(encoding="utf-8")
    except (UnicodeDecodeError, OSError) as exc:
        raise DataError(f"{setting}: cannot read '{path}' as UTF-8 text ({exc}); give a text file with one "
                        f"entry per line.") from None
    lines = [line.strip() for line in text.splitlines()]
    while lines and lines[-1] == "":
        lines.pop()
    return lines


def read_npz_matrix(path: pathlib.Path) -> sp.csc_matrix:
    """The CSC matrix of a `scipy.sparse.save_npz` file (CSR or CSC), its keys and entries checked."""
    if not zipfile.is_zipfile(path):
        raise DataError(f"data.path: cannot read '{path}' as a .npz file (it is not a zip archive, which .npz files "
                        f"are); write it with scipy.sparse.save_npz(path, matrix).")
    try:
        with np.load(path, allow_pickle=False) as stored:
            keys = set(stored.files)
            missing = [k for k in NPZ_KEYS if k not in keys]
            if missing:
                raise DataError(f"data.path: '{path}' holds the arrays {', '.join(sorted(keys)) or 'none'}, not a "
                                f"sparse matrix written by scipy.sparse.save_npz (it needs {', '.join(NPZ_KEYS)}; "
                                f"missing: {', '.join(missing)}). Write it with scipy.sparse.save_npz(path, matrix) "
                                f"from a CSR or CSC matrix.")
            kind = str(stored["format"].item().decode() if stored["format"].dtype.kind == "S"
                       else stored["format"].item())
            if kind not in NPZ_FORMATS:
                raise DataError(f"data.path: '{path}' holds a sparse matrix in {kind!r} format; allowed are "
                                f"{' and '.join(NPZ_FORMATS)}. Convert it with matrix.tocsc() before save_npz.")
            shape = tuple(int(s) for s in stored["shape"])
            parts = (stored["data"], stored["indices"], stored["indptr"])
            make = sp.csr_matrix if kind == "csr" else sp.csc_matrix
            matrix = make(parts, shape=shape)
            matrix.check_format(full_check=True)
    except DataError:
        raise
    except (zipfile.BadZipFile, OSError, EOFError) as exc:
        raise DataError(f"data.path: cannot read '{path}' as a .npz file ({exc}); write it with "
                        f"scipy.sparse.save_npz(path, matrix).") from None
    except (ValueError, TypeError, IndexError) as exc:
        raise DataError(f"data.path: '{path}' is not a consistent sparse matrix ({exc}); write it with "
                        f"scipy.sparse.save_npz(path, matrix).") from None
    if not np.issubdtype(matrix.dtype, np.number) or np.issubdtype(matrix.dtype, np.complexfloating):
        raise DataError(f"data.path: '{path}' stores {matrix.dtype} entries; allowed are real numbers.")
    matrix = sp.csc_matrix(matrix, dtype=float)
    bad = ~np.isfinite(matrix.data)
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        col = int(np.searchsorted(matrix.indptr, k, side="right") - 1)
        row = int(matrix.indices[k])
        raise DataError(f"data.path: '{path}' has {int(bad.sum())} missing or infinite stored value(s), first "
                        f"{matrix.data[k]} at row {row + 1}, column {col + 1}; remove or impute them before "
                        f"running.")
    if min(shape) == 0:
        raise DataError(f"data.path: '{path}' holds a {shape[0]} × {shape[1]} matrix; rows and columns are needed.")
    matrix.sum_duplicates()
    matrix.eliminate_zeros()
    return matrix


def read_target(path: pathlib.Path, n_rows: int, target: str, task: str) -> tuple["pd.Series", list[str]]:
    """The target file's values (numbers where every line is one, else text labels) and the task notes."""
    lines = _lines("data.target_file", path)
    if len(lines) != n_rows:
        raise DataError(f"data.target_file: '{path}' has {len(lines)} line(s) but the matrix has {n_rows} rows; "
                        f"give one target value per row, in row order.")
    raw = pd.Series([np.nan if line == "" else line for line in lines], name=target, dtype=object)
    numbers = pd.to_numeric(raw, errors="coerce")
    series = numbers if numbers.notna().sum() == raw.notna().sum() else raw
    series.name = target
    return series, []


def load_npz(source, base_dir, task: str, check_target) -> Dataset:
    """A `data.kind: npz` source as a Dataset with a CSC feature matrix. `check_target` is the loaders'
    target check (raw series, name, task, source) → (y, class labels)."""
    path = _path("data.path", source.path, base_dir)
    matrix = read_npz_matrix(path)
    n, p = matrix.shape
    names_path = _path("data.feature_names", source.feature_names, base_dir)
    names = _lines("data.feature_names", names_path)
    if len(names) != p:
        raise DataError(f"data.feature_names: '{names_path}' has {len(names)} name(s) but the matrix in '{path}' "
                        f"has {p} columns; give one name per column, in column order.")
    _check_names(names, names_path)
    series, notes = read_target(_path("data.target_file", source.target_file, base_dir), n, source.target, task)
    if source.task == "auto":
        inferred, reason = infer_task(series)
        if inferred != task and pd.api.types.is_numeric_dtype(series):
            raise DataError(
                f"data.task: with data.task auto, {reason}, so it reads as a {inferred} target, but the losses "
                f"listed are {task} losses. Set data.task: {task} in the config to treat it as {task}, or list "
                f"{inferred} losses ({', '.join(loss_names(inferred))}).")
        if inferred == CLASSIFICATION and inferred == task:
            notes.append(f"data.task auto: {reason}, so it is treated as class labels (classification)")
    y, labels = check_target(series, source.target, task, str(path))
    matrix, names, dropped = _drop_constant(matrix, names, str(path))
    notes += dropped
    notes.append(f"'{path.name}' read as a sparse matrix of {n} rows × {p} columns with "
                 f"{density(matrix) * 100:.3g} % nonzero entries, kept sparse ({stored_bytes(matrix) / 2**20:,.1f} MiB "
                 f"stored instead of {n * p * 8 / 2**20:,.0f} MiB dense)")
    return Dataset(X=matrix, y=y, feature_names=tuple(names), target_name=source.target, task=task,
                   source=str(path), class_labels=labels, notes=tuple(notes))


def _check_names(names: list[str], path: pathlib.Path) -> None:
    empty = [i for i, name in enumerate(names) if name == ""]
    if empty:
        raise DataError(f"data.feature_names: line {empty[0] + 1} of '{path}' is empty; every column needs a name.")
    repeat = first_repeat(names)
    if repeat:
        name, first, second = repeat
        raise DataError(f"data.feature_names: '{path}' names '{name}' twice (lines {first + 1} and "
                        f"{second + 1}); every column needs its own name.")


def _drop_constant(matrix, names, source: str):
    with np.errstate(over="ignore", invalid="ignore"):
        squares = np.asarray(matrix.multiply(matrix).mean(axis=0)).ravel()
    if not np.isfinite(squares).all():
        j = int(np.flatnonzero(~np.isfinite(squares))[0])
        raise DataError(f"data: column '{names[j]}' of {source} has values whose spread overflows double precision; "
                        f"rescale it (e.g. to other units) first.")
    constant = column_ranges(matrix) == 0
    if constant.all():
        raise DataError(f"data: every feature column of {source} is constant; nothing can be learned.")
    if not constant.any():
        return matrix, names, []
    dropped = [name for name, c in zip(names, constant) if c]
    note = (f"dropped {len(dropped)} constant column(s): {', '.join(dropped[:10])}"
            + (" ..." if len(dropped) > 10 else ""))
    keep = np.flatnonzero(~constant)
    return matrix[:, keep], [names[j] for j in keep], [note]


def sparse_if_mostly_zero(ds: Dataset) -> Dataset:
    """A table read densely whose cells are at least SPARSE_ZERO_SHARE zeros continues as a CSC matrix."""
    if sp.issparse(ds.X) or ds.X.size == 0:
        return ds
    share = 1.0 - density(ds.X)
    if share < SPARSE_ZERO_SHARE:
        return ds
    X = sp.csc_matrix(ds.X)
    note = (f"{share * 100:.3g} % of the feature cells are zero (at least {SPARSE_ZERO_SHARE * 100:g} %, a rule of "
            f"thumb): the table is kept as a sparse matrix from here on ({stored_bytes(X) / 2**20:,.2f} MiB stored "
            f"instead of {ds.X.nbytes / 2**20:,.2f} MiB dense)")
    return dataclasses.replace(ds, X=X, notes=ds.notes + (note,))
