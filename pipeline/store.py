"""A tracking store that survives a kill during its creation, and artifact tables safe to open in a spreadsheet.

A new SQLite store gets its schema under a temporary name beside the final one and is renamed into place
when complete, so a run killed during the very first creation leaves no half-made store. A store found
half-made (by an older version, or a copy cut short) that holds no runs is moved aside and created again.
Callers hold `tracking.store_lock` around `ensure_store`.
"""
from __future__ import annotations

import os
import pathlib
import sqlite3
import sys
import time

import pandas as pd

from .data import DataError

FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def _sqlite_path(uri: str) -> pathlib.Path | None:
    prefix = "sqlite:///"
    if not uri.startswith(prefix) or uri[len(prefix):] in ("", ":memory:"):
        return None
    return pathlib.Path(uri[len(prefix):])


def _state(path: pathlib.Path) -> tuple[str, int]:
    """('ok' | 'half', number of runs) of an existing SQLite store."""
    con = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=30)
    try:
        tables = {r[0] for r in con.execute("select name from sqlite_master where type = 'table'")}
        runs = con.execute("select count(*) from runs").fetchone()[0] if "runs" in tables else 0
        version = con.execute("select count(*) from alembic_version").fetchone()[0] \
            if "alembic_version" in tables else 0
    finally:
        con.close()
    half = version == 0 or any(t.startswith("_alembic_tmp_") for t in tables)
    return ("half" if half else "ok"), runs


def _create(path: pathlib.Path) -> None:
    from mlflow.tracking import MlflowClient

    tmp = path.with_name(f".{path.name}.creating-{os.getpid()}")
    tmp.unlink(missing_ok=True)
    MlflowClient(tracking_uri=f"sqlite:///{tmp}").search_experiments()   # runs every schema migration
    os.replace(tmp, path)


def _remove_stale(path: pathlib.Path) -> None:
    """Temporary stores of creations that were killed (their process is gone)."""
    for tmp in path.parent.glob(f".{path.name}.creating-*"):
        pid = tmp.name.rsplit("-", 1)[-1]
        try:
            os.kill(int(pid), 0)
        except (ValueError, ProcessLookupError):
            tmp.unlink(missing_ok=True)
        except PermissionError:
            pass


def ensure_store(uri: str) -> None:
    """Create a new SQLite store atomically; repair one left half-made; leave other stores alone."""
    path = _sqlite_path(uri)
    if path is None:
        return
    _remove_stale(path)
    if path.exists() and path.stat().st_size > 0:
        try:
            state, runs = _state(path)
        except sqlite3.DatabaseError as exc:
            raise DataError(f"tracking.uri: '{path}' is not a usable SQLite store ({exc}); move it away or name "
                            f"another file.") from None
        if state == "ok":
            return
        if runs:
            raise DataError(f"tracking.uri: the SQLite store '{path}' holds {runs} run(s) but its schema is "
                            f"half-made (an interrupted upgrade); restore it from a copy, or name another file.")
        aside = path.with_name(f"{path.name}.broken-{time.strftime('%Y%m%d-%H%M%S')}")
        os.replace(path, aside)
        print(f"penduel: note: the SQLite store '{path}' was half-made (an interrupted first creation) and held "
              f"no runs; moved to '{aside.name}' and created again.", file=sys.stderr)
    _create(path)


def _number(text: str) -> bool:
    try:
        float(text)
        return True
    except ValueError:
        return False


def artifact_location(uri: str) -> str | None:
    """Artifacts of a SQLite store live beside it (FOLDER/mlruns), wherever the command was started."""
    path = _sqlite_path(uri)
    return None if path is None else (path.resolve().parent / "mlruns").as_uri()


def spreadsheet_safe(frame: pd.DataFrame) -> pd.DataFrame:
    """Text cells that a spreadsheet would run as a formula (=, +, -, @ first) get a leading apostrophe."""
    out = frame.copy()
    for col in out.columns:
        if out[col].dtype == object or pd.api.types.is_string_dtype(out[col]):
            out[col] = [("'" + v) if isinstance(v, str) and v.startswith(FORMULA_START) and not _number(v) else v
                        for v in out[col]]
    return out
