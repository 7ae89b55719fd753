"""Fuzzing: generated configs and small data frames through `validate` and `run`.

Property: the command never lets an exception escape; it either succeeds (exit 0) or answers with one
paragraph starting "penduel: " and exit 2. Seeds are fixed (derandomize=True), so every run of the
suite tries the same examples: 40 configs through validate, 12 chaotic data frames and configs and 6
well-formed experiments through run in the fast suite; 400, 120 and 60 under @pytest.mark.slow.
"""
from __future__ import annotations

import io
import itertools
import re
from contextlib import redirect_stderr, redirect_stdout

import numpy as np
import pandas as pd
import pytest
import yaml
from hypothesis import HealthCheck, event, given, settings, strategies as st

from pipeline.cli import main

BASE = {
    "name": "fuzz",
    "data": {"kind": "csv", "path": "data.csv", "target": "y"},
    "losses": ["squared"],
    "families": {"l1": {"path": {"points": 3}}, "l2": {"path": {"points": 3}}},
    "selection": {"cv_folds": 2},
    "stability": {"enabled": False},
    "cache": {"enabled": False},
}

# Values of every shape a hand-written file can hold: good ones, bad ones, wrong types.
ANY_VALUE = st.one_of(
    st.none(), st.booleans(), st.integers(-3, 12), st.sampled_from([0, 1, 2, 5, 10**9, -(10**9)]),
    st.floats(allow_nan=True, allow_infinity=True), st.sampled_from([0.0, 0.5, 1e-12, 0.99, 1.0, 2.0]),
    st.text(max_size=8), st.sampled_from(["squared", "huber", "logistic", "hinge", "rbf", "polynomial", "median",
                                          "auto", "local", "dask", "one_standard_error", "least_error", "one_se", "identity", "random_fourier"]),
    st.lists(st.sampled_from(["squared", "absolute", "huber", "quantile", "logistic", "hinge", "squard"]),
             max_size=3),
    st.dictionaries(st.sampled_from(["kind", "name", "degree", "x"]), st.integers(0, 3), max_size=2),
)

# Settings a fuzzed config may change (path, values). The run fuzz keeps to cheap settings.
CHEAP_PATHS = [
    ("seed",), ("losses",), ("split", "test_fraction"), ("selection", "cv_folds"), ("selection", "rule"),
    ("families", "l1", "path", "points"), ("families", "l1", "path", "smallest_share"),
    ("families", "l1", "enabled"), ("families", "l1", "l1_share"), ("families", "l2", "path", "points"), ("families", "l2", "kernel"), ("families", "l2", "enabled"),
    ("data", "target"), ("features", "maps"), ("features", "memory_budget_mib"), ("description",), ("name",),
]
ALL_PATHS = CHEAP_PATHS + [
    ("data", "kind"), ("data", "path"), ("data",), ("execution", "backend"), ("execution", "n_jobs"),
    ("families", "l1", "solver"), ("families", "l1", "tol"), ("stability", "n_resamples"), ("unknown_key",),
    ("families", "l3"), ("tracking",), ("cache", "enabled"), ("selection", "repeats"),
]
FEATURE_MAPS = st.lists(st.one_of(
    st.just({"kind": "identity"}), st.builds(lambda d: {"kind": "polynomial", "degree": d}, st.integers(1, 3)),
    st.builds(lambda n, b: {"kind": "random_fourier", "n_components": n, "bandwidth": b},
              st.integers(-1, 12), st.one_of(st.just("median"), st.floats(-1, 3)))), max_size=3)


def _set(config: dict, path: tuple, value) -> dict:
    node = config
    for key in path[:-1]:
        if not isinstance(node.get(key), dict):
            node[key] = {}
        node = node[key]
    node[path[-1]] = value
    return config


def configs(paths):
    @st.composite
    def build(draw):
        config = yaml.safe_load(yaml.safe_dump(BASE))   # a deep copy
        for path in draw(st.lists(st.sampled_from(paths), max_size=4, unique=True)):
            value = draw(FEATURE_MAPS) if path == ("features", "maps") else draw(ANY_VALUE)
            _set(config, path, value)
        return config
    return build()


COLUMN_KINDS = ["normal", "integer", "text", "bool", "constant", "with_nan", "with_inf", "huge"]


@st.composite
def frames(draw):
    n = draw(st.integers(0, 30))
    seed = draw(st.integers(0, 2**16))
    rng = np.random.default_rng(seed)
    columns = {}
    for j, kind in enumerate(draw(st.lists(st.sampled_from(COLUMN_KINDS), min_size=0, max_size=4))):
        values = rng.standard_normal(n)
        if kind == "integer":
            values = rng.integers(0, 4, n)
        elif kind == "text":
            values = rng.choice(["red", "green", "blue"], n)
        elif kind == "bool":
            values = rng.random(n) < 0.5
        elif kind == "constant":
            values = np.full(n, 3.0)
        elif kind in ("with_nan", "with_inf", "huge") and n:
            values[rng.integers(n)] = {"with_nan": np.nan, "with_inf": np.inf, "huge": 1e300}[kind]
        columns[f"c{j}"] = values
    target = draw(st.sampled_from(["numeric", "two_labels", "one_label", "three_labels", "with_nan", "absent"]))
    if target != "absent":
        y = {"numeric": rng.standard_normal(n), "two_labels": rng.choice(["no", "yes"], n),
             "one_label": np.full(n, "yes"), "three_labels": rng.choice(["a", "b", "c"], n),
             "with_nan": np.where(rng.random(n) < 0.2, np.nan, rng.standard_normal(n))}[target]
        columns["y"] = y
    return pd.DataFrame(columns)


# Well-formed experiments with varied settings, so the fuzz also reaches fitting, selection and the report.
GOOD_SETTINGS = {
    ("seed",): st.integers(0, 2**31),
    ("split", "test_fraction"): st.floats(0.2, 0.4),
    ("selection", "cv_folds"): st.integers(2, 4),
    ("selection", "rule"): st.sampled_from(["least_error", "one_standard_error"]),
    ("families", "l1", "path", "points"): st.integers(2, 5),
    ("families", "l1", "path", "smallest_share"): st.floats(1e-3, 0.5),
    ("families", "l1", "l1_share"): st.floats(0.2, 1.0),
    ("families", "l2", "path", "points"): st.integers(2, 5),
    ("families", "l2", "kernel"): st.sampled_from(["linear", "rbf", "laplacian", "matern32", "polynomial"]),
    ("features", "maps"): st.lists(st.sampled_from([{"kind": "identity"}, {"kind": "polynomial", "degree": 2},
                                                    {"kind": "random_fourier", "n_components": 8}]),
                                   min_size=1, max_size=2, unique_by=lambda m: m["kind"]),
}


@st.composite
def good_examples(draw):
    config = yaml.safe_load(yaml.safe_dump(BASE))
    classification = draw(st.booleans())
    pool = ["logistic", "hinge", "squared_hinge"] if classification else ["squared", "absolute", "huber", "quantile"]
    config["losses"] = draw(st.lists(st.sampled_from(pool), min_size=1, max_size=2, unique=True))
    for path in draw(st.lists(st.sampled_from(sorted(GOOD_SETTINGS)), max_size=3, unique=True)):
        _set(config, path, draw(GOOD_SETTINGS[path]))
    n = draw(st.integers(24, 40))
    rng = np.random.default_rng(draw(st.integers(0, 2**16)))
    frame = pd.DataFrame({f"x{j}": rng.standard_normal(n) for j in range(draw(st.integers(1, 4)))})
    if draw(st.booleans()):
        frame["soil"] = rng.choice(["clay", "sand", "loam"], n)
    if draw(st.booleans()):
        frame["batch"] = 1.0
    signal = frame["x0"].to_numpy() + 0.5 * rng.standard_normal(n)
    frame["y"] = np.where(signal > np.median(signal), "yes", "no") if classification else signal
    return config, frame


def _answered_clearly(code, stderr: str) -> None:
    assert code in (0, 2), stderr
    event(f"exit {code}")   # shown by --hypothesis-show-statistics
    if code == 2:
        assert "Traceback" not in stderr
        messages = [b for b in re.split(r"\n(?=penduel: )", stderr.strip()) if not b.startswith("penduel: running")]
        assert len(messages) == 1 and messages[0].startswith("penduel: ") and "\n\n" not in messages[0], stderr


def _call(args) -> tuple[int, str]:
    err = io.StringIO()
    with redirect_stderr(err), redirect_stdout(io.StringIO()):
        code = main([str(a) for a in args])
    return code, err.getvalue()


@pytest.fixture(scope="module")
def workdir(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz"), itertools.count()


def _validate_examples(workdir, config):
    folder, counter = workdir
    path = folder / f"c{next(counter)}.yaml"
    path.write_text(yaml.safe_dump(config, allow_unicode=True), encoding="utf-8")
    _answered_clearly(*_call(["validate", path]))


def _run_examples(workdir, config, frame, monkeypatch):
    folder, counter = workdir
    case = folder / f"r{next(counter)}"
    case.mkdir()
    frame.to_csv(case / "data.csv", index=False)
    (case / "experiment.yaml").write_text(yaml.safe_dump(config, allow_unicode=True), encoding="utf-8")
    monkeypatch.chdir(case)
    _answered_clearly(*_call(["run", case / "experiment.yaml", "--quiet",
                              "--tracking-uri", f"sqlite:///{folder / 'store.db'}"]))


QUIET = dict(deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                     HealthCheck.too_slow])


@settings(max_examples=40, **QUIET)
@given(config=configs(ALL_PATHS))
def test_fuzzed_configs_through_validate(workdir, config):
    _validate_examples(workdir, config)


@settings(max_examples=12, **QUIET)
@given(config=configs(CHEAP_PATHS), frame=frames())
def test_fuzzed_data_and_configs_through_run(workdir, config, frame, monkeypatch):
    _run_examples(workdir, config, frame, monkeypatch)


@pytest.mark.slow   # ~13 s of full runs; make test-all
@settings(max_examples=6, **QUIET)
@given(example=good_examples())
def test_fuzzed_good_experiments_run_through(workdir, example, monkeypatch):
    _run_examples(workdir, *example, monkeypatch)


@pytest.mark.slow
@settings(max_examples=60, **QUIET)
@given(example=good_examples())
def test_many_fuzzed_good_experiments_run_through(workdir, example, monkeypatch):
    _run_examples(workdir, *example, monkeypatch)


@pytest.mark.slow
@settings(max_examples=400, **QUIET)
@given(config=configs(ALL_PATHS))
def test_many_fuzzed_configs_through_validate(workdir, config):
    _validate_examples(workdir, config)


@pytest.mark.slow
@settings(max_examples=120, **QUIET)
@given(config=configs(CHEAP_PATHS), frame=frames())
def test_many_fuzzed_data_and_configs_through_run(workdir, config, frame, monkeypatch):
    _run_examples(workdir, config, frame, monkeypatch)
