"""Content-addressed cache of finished fit tasks, so an interrupted run loses no finished work.

An entry's key is a SHA-256 over everything that decides the task's result: the config
sections that reach the fit (data, split, features, the task's family settings, CV folds,
seed), the data hash, the task id and its row/λ arrays, and the package version. The value
is one ``.npz`` file holding the result's arrays (a mostly-zero one as the positions and values of
its nonzero entries, `matrices.PackedZeros`) plus its other fields as JSON text; it is
read back with ``allow_pickle=False``, so no cache file is ever unpickled. Each entry is
written to a temporary name and renamed into place, so a kill mid-write leaves no torn entry.

An entry also carries the key it was stored under and a SHA-256 digest of its content. On reading,
an entry whose key or digest does not match, whose fields have the wrong type, or whose arrays do not
fit the task (one row per λ, the task's own id) is dropped, refitted and reported in a `note:`.
"""
from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import pathlib
import shutil
import tempfile
import zipfile
from importlib import metadata
from typing import Any, Callable

import numpy as np

from .matrices import PackedZeros, from_parts, is_sparse, pack_zeros, to_parts
from .models.families import KEYS

CACHE_FORMAT = 3      # 3: mostly-zero arrays stored packed (positions and values)
_META = "__meta__"
_POSITIONS, _VALUES = "__positions", "__values"     # a packed array's parts (suffixes of its field name)
_CHECK = "__check__"


def package_version() -> str:
    """Release number plus a digest of the package's source, so changed code never reuses old fits."""
    try:
        release = metadata.version("penduel")
    except metadata.PackageNotFoundError:
        release = "unknown"
    h = hashlib.sha256()
    root = pathlib.Path(__file__).resolve().parent
    for path in sorted(root.rglob("*.py")):
        h.update(path.relative_to(root).as_posix().encode())
        h.update(path.read_bytes())
    return f"{release}+{h.hexdigest()[:12]}"


def _digest_arrays(h, *arrays) -> None:
    for a in arrays:
        a = np.ascontiguousarray(a)
        h.update(f"{a.dtype.str}{a.shape}".encode())
        h.update(a.tobytes())


def run_prefix(spec, data_hash: str) -> dict[str, str]:
    """Per-family key prefixes: settings shared by every task of one family in this run."""
    resolved = spec.resolved()
    common = {"format": CACHE_FORMAT, "version": package_version(), "data_hash": data_hash,
              "seed": resolved["seed"], "data": resolved["data"], "split": resolved["split"],
              "features": resolved["features"], "cv_folds": resolved["selection"]["cv_folds"]}
    return {family: json.dumps({**common, "family": resolved["families"][family]}, sort_keys=True)
            for family in KEYS}


def task_key(prefix: str, task) -> str:
    h = hashlib.sha256(prefix.encode())
    h.update(json.dumps([task.task_id, task.loss_name, list(task.loss_params)], sort_keys=True).encode())
    _digest_arrays(h, task.train_idx, task.eval_idx, task.lambdas)
    return h.hexdigest()


# ---------------------------------------------------------------- encoding without pickle
def encode(value) -> dict[str, np.ndarray]:
    """A dataclass of arrays, strings, numbers, tuples and None as a dict of plain arrays."""
    arrays, meta = {}, {}
    for f in dataclasses.fields(value):
        v = getattr(value, f.name)
        if is_sparse(v):   # a sparse matrix (basis rows of sparse inputs) as its plain parts
            arrays.update(to_parts(f.name, v))
            meta[f.name] = {"sparse": True}
        elif isinstance(v, np.ndarray):
            if v.dtype == object:
                raise TypeError(f"field {f.name} is an object array; it cannot be stored without pickle")
            packed = pack_zeros(v)   # a resample's (L, p) sparse weights: a few kB instead of ~1 MB
            if isinstance(packed, PackedZeros):
                arrays[f"{f.name}{_POSITIONS}"], arrays[f"{f.name}{_VALUES}"] = packed.positions, packed.values
                meta[f.name] = {"packed": list(packed.shape)}
            else:
                arrays[f.name] = v
        elif isinstance(v, tuple):
            meta[f.name] = {"tuple": list(v)}
        else:
            meta[f.name] = {"plain": v}
    arrays[_META] = np.frombuffer(json.dumps(meta).encode(), dtype=np.uint8)
    return arrays


def _type_ok(annotation: str, value) -> bool:
    """Does a decoded value match its field's annotation (a string under postponed annotations)?"""
    kinds = [k.strip() for k in str(annotation).split("|")]
    checks = {"None": value is None, "str": isinstance(value, str), "bool": isinstance(value, bool),
              "int": isinstance(value, int) and not isinstance(value, bool),
              "float": isinstance(value, (int, float)) and not isinstance(value, bool),
              "np.ndarray": isinstance(value, np.ndarray) or is_sparse(value), "dict": isinstance(value, dict)}
    for kind in kinds:
        if kind.startswith("tuple") and isinstance(value, tuple):
            return True
        if checks.get(kind, False):
            return True
    return not any(k in checks or k.startswith("tuple") for k in kinds)   # an annotation we do not read


def decode(cls, arrays) -> Any:
    meta = json.loads(bytes(arrays[_META]).decode())
    values = {}
    for f in dataclasses.fields(cls):
        if f.name in arrays:
            values[f.name] = arrays[f.name]
        elif meta.get(f.name, {}).get("sparse"):
            values[f.name] = from_parts(f.name, arrays)
        elif "packed" in meta.get(f.name, {}):
            values[f.name] = PackedZeros(tuple(int(d) for d in meta[f.name]["packed"]),
                                         arrays[f"{f.name}{_POSITIONS}"], arrays[f"{f.name}{_VALUES}"]).unpacked()
        else:
            m = meta[f.name]
            values[f.name] = tuple(m["tuple"]) if "tuple" in m else m["plain"]
        if not _type_ok(f.type, values[f.name]):
            raise TypeError(f"field {f.name} holds {type(values[f.name]).__name__}, not {f.type}")
    return cls(**values)


def content_digest(arrays: dict) -> str:
    h = hashlib.sha256()
    for name in sorted(n for n in arrays if n != _CHECK):
        h.update(name.encode())
        _digest_arrays(h, arrays[name])
    return h.hexdigest()


def fits_task(value, task) -> str | None:
    """Why a result cannot belong to `task`, or None: the fields it shares with the task must be equal, and
    every array has one row per λ of the task (but a field marked `per_lambda: False`)."""
    for f in dataclasses.fields(value):
        v = getattr(value, f.name)
        if hasattr(task, f.name) and isinstance(v, str) and v != getattr(task, f.name):
            return f"its {f.name} is {v!r}, not {getattr(task, f.name)!r}"
        if isinstance(v, np.ndarray) and f.metadata.get("per_lambda", True) and \
                (v.ndim == 0 or v.shape[0] != len(task.lambdas)):
            return f"its {f.name} has shape {v.shape}, not one row per λ ({len(task.lambdas)})"
        if isinstance(v, tuple) and f.name == "status" and len(v) != len(task.lambdas):
            return f"its status has {len(v)} entries, not {len(task.lambdas)}"
    return None


class TaskCache:
    """Finished task results under `directory`, one file per key."""

    def __init__(self, directory: str | os.PathLike, result_type: type):
        self.directory = pathlib.Path(directory)
        self.result_type = result_type
        self.dropped: list[str] = []      # why entries were dropped in this process, for a note

    def path(self, key: str) -> pathlib.Path:
        return self.directory / key[:2] / f"{key}.npz"

    def drop(self, key: str, why: str) -> None:
        path = self.path(key)
        if path.is_dir() and not path.is_symlink():
            shutil.rmtree(path, ignore_errors=True)
        else:
            path.unlink(missing_ok=True)
        self.dropped.append(why)

    def get(self, key: str, task=None):
        """The stored result, or None when absent or when it fails verification (then it is dropped)."""
        path = self.path(key)
        if not path.exists() and not path.is_symlink():
            return None
        try:
            with np.load(path, allow_pickle=False) as data:
                arrays = {k: data[k] for k in data.files}
            check = json.loads(bytes(arrays[_CHECK]).decode())
            if check.get("key") != key:
                raise ValueError("it was stored under another key (copied from another entry)")
            if check.get("digest") != content_digest(arrays):
                raise ValueError("its content does not match its digest (edited)")
            value = decode(self.result_type, {k: v for k, v in arrays.items() if k != _CHECK})
            why = None if task is None else fits_task(value, task)
            if why:
                raise ValueError(why)
            return value
        except FileNotFoundError:
            return None
        except (OSError, ValueError, KeyError, TypeError, AttributeError, EOFError, zipfile.BadZipFile) as exc:
            self.drop(key, str(exc).split(chr(10))[0][:200] or type(exc).__name__)   # then fit again
            return None

    def drop_note(self) -> tuple[str, ...]:
        if not self.dropped:
            return ()
        reasons = "; ".join(dict.fromkeys(self.dropped))
        return (f"dropped {len(self.dropped)} cache entr{'y' if len(self.dropped) == 1 else 'ies'} of "
                f"'{self.directory}' that failed verification and fitted again ({reasons[:300]})",)

    def put(self, key: str, value) -> None:
        path = self.path(key)
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".tmp-", suffix=".npz")
        try:
            arrays = encode(value)
            check = {"key": key, "digest": content_digest(arrays)}
            arrays[_CHECK] = np.frombuffer(json.dumps(check).encode(), dtype=np.uint8)
            with os.fdopen(fd, "wb") as fh:
                np.savez(fh, **arrays)
            os.replace(tmp, path)
        except BaseException:
            pathlib.Path(tmp).unlink(missing_ok=True)
            raise


def task_keys(spec, data_hash: str, tasks) -> list[str]:
    prefixes = run_prefix(spec, data_hash)
    return [task_key(prefixes[t.family], t) for t in tasks]


def cache_for(spec, result_type: type, base_dir: str | os.PathLike = ".") -> TaskCache | None:
    """The cache folder of the config, relative to the config file's folder (`base_dir`)."""
    folder = pathlib.Path(spec.cache.directory).expanduser()
    return TaskCache(pathlib.Path(base_dir) / folder, result_type) if spec.cache.enabled else None


def run_cached(run_tasks: Callable, fn: Callable, tasks: list, keys: list[str], cache: TaskCache | None,
               **options) -> tuple[list, int]:
    """Results of fn over tasks in task order, reusing cached ones; also the number of fits avoided."""
    if cache is None:
        return run_tasks(fn, tasks, **options), 0
    found = [cache.get(k, t) for k, t in zip(keys, tasks)]
    todo = [i for i, r in enumerate(found) if r is None]
    # each result is stored here, in this process, as soon as it arrives (an interrupted run keeps it); workers,
    # possibly on other machines, never write to the cache folder
    fresh = run_tasks(fn, [tasks[i] for i in todo], on_result=lambda k, result: cache.put(keys[todo[k]], result),
                      **options) if todo else []
    for i, r in zip(todo, fresh):
        found[i] = r
    return found, len(tasks) - len(todo)
