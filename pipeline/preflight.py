"""Checks made before any fit and before a tracking run is opened: the places an execution writes to and
talks to (store, scheduler, report and cache folders), and settings that are degenerate for this data.

Each failure is a `DataError` of one paragraph naming the setting; `penduel validate` and `penduel run` both
call these, so a mistake never leaves a FAILED run behind.
"""
from __future__ import annotations

import os
import pathlib
import socket
import tempfile
import urllib.parse

import numpy as np

from .data import DataError
from .matrices import MIB, column_ranges, dense, dense_mib, density, is_sparse, stored_bytes

CONNECT_TIMEOUT = 3.0        # seconds to wait for a store or scheduler to answer
MIN_TEST_ROWS = 5            # fewer held-out rows give degenerate bootstrap intervals (common practice)
FEW_TEST_ROWS = 20           # below this the intervals are flagged as rough (common practice)
STORE_SCHEMES = {"sqlite": 1433, "postgresql": 5432, "mysql": 3306, "mssql": 1433, "http": 80, "https": 443}


def anchored(path: str, base_dir: pathlib.Path) -> pathlib.Path:
    """A folder or file setting of the config, relative to the config file's folder."""
    p = pathlib.Path(path).expanduser()
    return p if p.is_absolute() else pathlib.Path(os.path.normpath(pathlib.Path(base_dir) / p))


def anchored_uri(uri: str, base_dir: pathlib.Path) -> str:
    """A relative SQLite store path (sqlite:///mlflow.db) resolved against the config file's folder."""
    prefix = "sqlite:///"
    if uri.startswith(prefix) and not uri[len(prefix):].startswith("/") and uri[len(prefix):] != ":memory:":
        return prefix + str(anchored(uri[len(prefix):], base_dir))
    return uri


def _writable_folder(folder: pathlib.Path, setting: str, what: str) -> None:
    """The folder exists or can be made, is a folder, and a file can be written in it."""
    if folder.exists() and not folder.is_dir():
        raise DataError(f"{setting}: '{folder}' is a file, not a folder; give a folder where {what} can be written "
                        f"(it is created when missing).")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        with tempfile.NamedTemporaryFile(dir=folder, prefix=".penduel-probe-"):
            pass
    except OSError as exc:
        raise DataError(f"{setting}: cannot write {what} in '{folder}' ({exc.strerror or exc}); give a folder you "
                        f"can write to.") from None


def _reachable(host: str, port: int, setting: str, what: str) -> None:
    try:
        with socket.create_connection((host, port), timeout=CONNECT_TIMEOUT):
            return
    except OSError as exc:
        raise DataError(f"{setting}: {what} at {host}:{port} does not answer within {CONNECT_TIMEOUT:g} s "
                        f"({exc.strerror or exc}); start it, or check the host name and port.") from None


def check_store(uri: str, setting: str = "tracking.uri") -> None:
    """A store URI penduel can use: a known scheme, a writable SQLite file, a server that answers."""
    parsed = urllib.parse.urlparse(uri)
    scheme = parsed.scheme.split("+")[0]
    if scheme not in STORE_SCHEMES and not (scheme == "" and uri.startswith(("/", "."))):
        raise DataError(f"{setting}: '{uri[:200]}' is not a tracking store penduel can use; allowed: "
                        f"sqlite:///FILE (default sqlite:///mlflow.db), postgresql://, mysql:// or mssql:// "
                        f"database URLs, or http(s)://HOST:PORT of a tracking server.")
    if scheme == "sqlite":
        path = uri[len("sqlite:///"):]
        if path in ("", ":memory:"):
            return
        file = pathlib.Path(path)
        if file.is_dir():
            raise DataError(f"{setting}: '{file}' is a folder; name the SQLite file of the store "
                            f"(e.g. sqlite:///{file / 'mlflow.db'}).")
        _writable_folder(file.parent, setting, "the SQLite store")
        if file.exists() and not os.access(file, os.R_OK | os.W_OK):
            raise DataError(f"{setting}: the SQLite store '{file}' exists but cannot be read and written.")
        return
    if scheme in ("", "file"):
        return
    if not parsed.hostname:
        raise DataError(f"{setting}: '{uri[:200]}' names no host; allowed: {scheme}://HOST[:PORT]/...")
    _reachable(parsed.hostname, parsed.port or STORE_SCHEMES[scheme], setting, "the tracking store")


def check_scheduler(address: str | None) -> None:
    if not address:
        return
    parsed = urllib.parse.urlparse(address if "://" in address else f"tcp://{address}")
    if not parsed.hostname:
        raise DataError(f"execution.scheduler_address: '{address[:200]}' names no host; allowed: "
                        f"tcp://HOST:PORT of a running Dask scheduler, or no address for a local cluster.")
    _reachable(parsed.hostname, parsed.port or 8786, "execution.scheduler_address", "the Dask scheduler")


def check_places(spec, base_dir: pathlib.Path, uri: str) -> None:
    """Everything a run writes to or talks to, before any fit or tracking run."""
    check_store(uri)
    _writable_folder(anchored(spec.report.directory, base_dir), "report.directory", "reports")
    if spec.cache.enabled:
        _writable_folder(anchored(spec.cache.directory, base_dir), "cache.directory", "finished fits")
    if spec.execution.backend == "dask":
        check_scheduler(spec.execution.scheduler_address)


# ---------------------------------------------------------------- settings degenerate for this data
def check_split(spec, dataset, train_rows, test_rows) -> tuple:
    """Refuse a target constant on the training rows and too few test rows; drop features constant on the
    training rows. Returns (dataset, notes)."""
    import dataclasses

    notes = []
    if len(test_rows) < MIN_TEST_ROWS:
        raise DataError(f"split.test_fraction: {spec.split.test_fraction:g} of {dataset.n_samples} rows holds out "
                        f"{len(test_rows)} test row(s); a held-out error and its interval need at least "
                        f"{MIN_TEST_ROWS}. Raise split.test_fraction or use more rows.")
    if len(test_rows) < FEW_TEST_ROWS:
        notes.append(f"only {len(test_rows)} test rows: the held-out intervals are rough")
    if spec.verdict.weighted_metrics and dataset.n_classes > 2:
        raise DataError(f"verdict.weighted_metrics: the target has {dataset.n_classes} classes, and weighted held-out "
                        f"metrics are available for regression and two classes only; set verdict.weighted_metrics "
                        f"to false (the fits still use the row weights).")
    y = dataset.y[train_rows]
    if np.ptp(y) == 0:
        raise DataError(f"data.target: column '{dataset.target_name}' has the same value {y[0]:g} on all "
                        f"{len(train_rows)} training rows; there is nothing to learn. Use more varied data.")
    constant = column_ranges(dataset.X[train_rows]) == 0
    if constant.all():
        raise DataError(f"data: every feature column is constant on the {len(train_rows)} training rows; "
                        f"nothing can be learned.")
    if constant.any():
        dropped = [n for n, c in zip(dataset.feature_names, constant) if c]
        notes.append(f"dropped {len(dropped)} column(s) constant on the training rows: {', '.join(dropped[:10])}"
                     + (" ..." if len(dropped) > 10 else ""))
        dataset = dataclasses.replace(dataset, X=dataset.X[:, ~constant], feature_names=tuple(
            n for n, c in zip(dataset.feature_names, constant) if not c))
    return dataset, tuple(notes)


def check_resamples(spec, n_train: int) -> None:
    st = spec.stability
    if st.enabled and st.scheme == "subsample" and int(np.floor(st.fraction * n_train)) < 2:
        raise DataError(f"stability.fraction: {st.fraction:g} of {n_train} training rows leaves "
                        f"{int(np.floor(st.fraction * n_train))} row(s) per subsample; a fit needs at least 2. "
                        f"Use a larger fraction (0.5 is the usual choice).")


def clip_centres(spec, min_rows: int) -> tuple:
    """Feature maps whose width is a number of training rows (`n_centres`) get at most as many as the smallest
    split has, so every split builds the same features. Returns (spec, notes)."""
    maps, notes = [], []
    for i, m in enumerate(spec.features.maps):
        if "n_centres" in type(m).model_fields and (m.n_centres is None or m.n_centres > min_rows):
            notes.append(f"features.maps[{i + 1}].n_centres: "
                         f"{'every training row' if m.n_centres is None else m.n_centres} clipped to {min_rows}, "
                         f"the training rows of the smallest split, so every split builds the same features")
            m = m.model_copy(update={"n_centres": min_rows})
        maps.append(m)
    if not notes:
        return spec, ()
    return spec.model_copy(update={"features": spec.features.model_copy(update={"maps": tuple(maps)})}), tuple(notes)


# ---------------------------------------------------------------- sparse inputs
def feature_mib(X, n_train: int, width: int) -> float:
    """Memory (MiB) of the training rows' feature matrix Z, its raw copy and the scaler's work space: for a
    matrix that stays sparse its stored entries (values, row indices, column pointers), else n·width·8."""
    if is_sparse(X):
        return 3 * stored_bytes(X) * n_train / max(X.shape[0], 1) / MIB
    return 3 * dense_mib(n_train, width)


def sparse_or_dense(spec, dataset, n_train: int, families) -> tuple:
    """A sparse feature matrix stays sparse when every feature map and every enabled family (`families`)
    takes sparse rows. Otherwise it is densified once, with a note, when the dense matrix fits in
    features.memory_budget_mib, and refused naming what needs dense rows when it does not.
    Returns (dataset, notes)."""
    import dataclasses

    from .features import get_map, output_width

    if not is_sparse(dataset.X):
        return dataset, ()
    needs = [f"features.maps[{i + 1}] ({m.kind}: it reads dense rows)" for i, m in enumerate(spec.features.maps)
             if not get_map(m.kind).sparse_input]
    for f in families:
        why = f.needs_dense(f.for_training_rows(f.options(getattr(spec.families, f.key)), n_train))
        if why:
            needs.append(f"families.{f.key} ({why})")
    if not needs:
        return dataset, ()
    n, p = dataset.X.shape
    width = sum(output_width(m, p, n_train) for m in spec.features.maps)
    mib = dense_mib(n, p) + 3 * dense_mib(n_train, width)
    budget = spec.features.memory_budget_mib
    shape = f"{n:,} × {p:,} sparse matrix ({density(dataset.X) * 100:.3g} % nonzero)"
    if mib > budget:
        raise DataError(f"data: the {shape} would have to be densified for {'; '.join(needs)}: about {mib:,.0f} MiB "
                        f"with the features built from it, over features.memory_budget_mib = {budget}. Keep it "
                        f"sparse with the identity map only and families.l2.kernel: linear (or families.l2 "
                        f"disabled), or raise the budget.")
    note = (f"the {shape} was densified ({dense_mib(n, p):,.1f} MiB, within features.memory_budget_mib = "
            f"{budget}) because {'; '.join(needs)}")
    return dataclasses.replace(dataset, X=dense(dataset.X)), (note,)
